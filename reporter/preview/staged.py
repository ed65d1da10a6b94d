"""The preview's staged rebuild: redo only the stages that a change in the pack folder touches.

A full build runs settings, read, validate, analyse, charts, context and render. Of these,
only the last two depend on the commentary (``commentary/*.md`` and the images it embeds)
and on the user templates. So the preview keeps the last :class:`~reporter.build.Assembled`
pack, keyed by the sha256 of ``pack.toml``, of every data file it names
(:func:`reporter.build.input_hashes`) and of ``actions.csv`` (the action log is read with the
data, so an edit to it is assembled again; and a re-render's input fingerprint is then the
build's, which counts it):

- the key is unchanged (a commentary or template edit, or a file touched but not changed):
  the commentary is read again, the context is rebuilt from the cached one with the new
  commentary and fingerprint, and the HTML is rendered with the cached chart SVGs (and the
  templates compiled once, kept in memory). Nothing is re-estimated;
- the key changed (a data file or ``pack.toml``): everything is assembled again. When that
  fails (a broken CSV edit), the cache keeps the last good pack and its key, so undoing the
  edit re-renders from the cache.

A fund pack spreads its commentary over its parts, so any change to one is assembled again.

Bad input never escapes: :meth:`StagedPack.refresh` returns an error page that lists every
problem, one line each, and the cache keeps the last good analysis. Nothing is written.
"""

from __future__ import annotations

import dataclasses
import threading
from dataclasses import dataclass
from html import escape
from pathlib import Path

from reporter.actions import FILE as ACTIONS_FILE
from reporter.archive.verify import file_sha256
from reporter.build import Assembled, assemble, build_time, fingerprint, input_hashes
from reporter.commentary import read_commentary
from reporter.config import load_settings
from reporter.errors import InputError
from reporter.render.html import MemoryBytecodeCache, render_html

MAX_LINES = 200


@dataclass(frozen=True)
class Page:
    """One rendering of the pack: its HTML (the pack, or the error page) and how it came."""

    html: str
    ok: bool
    problems: tuple[str, ...] = ()
    stages: str = ""            # "full" (assembled again), "render" (commentary/templates)


class StagedPack:
    """The pack in ``pack`` (a folder or its pack.toml), rebuilt on demand with a cache.

    ``assemblies`` counts the full assemblies (read, validate, analyse, chart) and
    ``renders`` the re-renders from the cache; the tests and the benchmark read them."""

    def __init__(self, pack: Path | str) -> None:
        self.pack = Path(pack)
        self.assemblies = 0
        self.renders = 0
        self._key: str | None = None
        self._cached: Assembled | None = None
        self._lock = threading.Lock()
        self._compiled = MemoryBytecodeCache()

    @property
    def pack_dir(self) -> Path:
        """The folder to watch: the pack folder, or the folder of the pack.toml given."""
        return (self.pack if self.pack.is_dir() else self.pack.parent).resolve()

    def refresh(self) -> Page:
        """The pack's HTML as the files are now, redoing only what changed (see the module
        doc); on bad input, the error page. Never raises but for an interrupt."""
        with self._lock:
            try:
                return self._refresh()
            except InputError as exc:
                return error_page(self.pack_dir, [str(p) for p in exc.problems])
            except Exception as exc:  # noqa: BLE001 - a preview must keep serving
                return error_page(self.pack_dir, [f"internal error: {type(exc).__name__}: "
                                                  f"{exc}"])

    def _refresh(self) -> Page:
        settings = load_settings(self.pack)
        hashes = input_hashes(settings)
        actions = settings.pack_dir / ACTIONS_FILE
        if actions.is_file():          # as the build's fingerprint counts it (actions_stage)
            hashes[ACTIONS_FILE] = file_sha256(actions)
        key = fingerprint(hashes)
        if self._cached is not None and key == self._key and not settings.is_fund:
            html = self._rerender(settings, hashes)
            self.renders += 1
            return Page(html, True, stages="render")
        a = assemble(settings, at=build_time())     # on bad input the cache is kept
        self.assemblies += 1
        self._cached, self._key = a, key
        html = a.html(for_print=False) if settings.is_fund else render_html(
            a.context, a.svgs, for_print=False, user_templates=settings.templates_dir,
            bytecode_cache=self._compiled)
        return Page(html, True, stages="full")

    def _rerender(self, settings, hashes: dict[str, str]) -> str:
        """The cached pack with the commentary as it is now: context and HTML only."""
        a = self._cached
        commentary = read_commentary(settings.pack_dir)
        hashes = hashes | commentary.hashes
        ctx = dataclasses.replace(a.context, commentary=dict(commentary.by_section),
                                  fingerprint=fingerprint(hashes))
        fresh = dataclasses.replace(a, settings=settings, context=ctx, hashes=hashes,
                                    commentary=commentary)
        return render_html(fresh.context, fresh.svgs, for_print=False,
                           user_templates=settings.templates_dir, bytecode_cache=self._compiled)


def error_page(pack_dir: Path, lines: list[str]) -> Page:
    """A page listing each problem on its own line (every string escaped)."""
    shown = lines[:MAX_LINES]
    more = len(lines) - len(shown)
    items = "\n".join(f"<li><code>{escape(line)}</code></li>" for line in shown)
    if more:
        items += f"\n<li>... and {more} more problems</li>"
    html = ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<title>Preview: the pack cannot be built</title>"
            "<style>body{font-family:sans-serif;margin:2em;max-width:60em}"
            "code{white-space:pre-wrap}li{margin:.3em 0}</style></head><body>"
            f"<h1>The pack cannot be built</h1><p>{len(lines)} problem(s) in "
            f"<code>{escape(str(pack_dir))}</code>. Fix the files and this page reloads "
            "itself; the last good analysis is kept meanwhile.</p>"
            f"<ul class=\"problems\">\n{items}\n</ul></body></html>\n")
    return Page(html, False, problems=tuple(lines))
