"""Render HTML to PDF with WeasyPrint, serving only files inside the allowed folders.

WeasyPrint asks its URL fetcher for every stylesheet, image or font a document names. Ours
serves a ``file:`` URL only when the file lies inside one of the allowed folders (the pack
folder and the packaged templates) and inline ``data:`` URLs; every other request (http,
https, ftp, a file elsewhere, a path that climbs out with ``..``) stops the render with an
:class:`~reporter.errors.InputError` naming the URL. Nothing is ever fetched from a network.
"""

from __future__ import annotations

import gc
import mimetypes
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path
from urllib.parse import unquote, urlsplit
from urllib.request import url2pathname

from weasyprint import HTML, Attachment
from weasyprint.urls import FatalURLFetchingError, URLFetcher, URLFetcherResponse

from reporter.errors import InputError, Problem


class RefusedFetch(FatalURLFetchingError):
    """A fetch outside the allowed folders; stops the render (WeasyPrint does not catch it)."""

    def __init__(self, url: str) -> None:
        super().__init__(url)
        self.url = url


class PackFetcher(URLFetcher):
    """A URL fetcher that serves files inside ``roots`` and ``data:`` URLs, nothing else.

    Every refused URL is recorded in :attr:`refused` and raises :class:`RefusedFetch`.
    """

    def __init__(self, roots: Sequence[Path]) -> None:
        super().__init__(fail_on_errors=True, allowed_protocols=("data",))
        self.roots = tuple(Path(r).resolve() for r in roots)
        self.refused: list[str] = []
        self.served: list[Path] = []

    def local_path(self, url: str) -> Path | None:
        """The file a ``file:`` URL names when it lies inside an allowed folder, else None."""
        parts = urlsplit(url)
        if parts.scheme.lower() != "file" or parts.netloc not in ("", "localhost"):
            return None
        path = Path(url2pathname(unquote(parts.path))).resolve()
        if not any(path.is_relative_to(root) for root in self.roots) or not path.is_file():
            return None
        return path

    def fetch(self, url: str, headers=None) -> URLFetcherResponse:
        """Serve ``url`` if it is a ``data:`` URL or a file inside the allowed folders;
        otherwise record it and raise :class:`RefusedFetch`."""
        if urlsplit(url).scheme.lower() == "data":
            return super().fetch(url, headers)
        path = self.local_path(url)
        if path is None:
            self.refused.append(url)
            raise RefusedFetch(url)
        self.served.append(path)
        kind = mimetypes.guess_type(path.name)[0] or "application/octet-stream"
        return URLFetcherResponse(path.as_uri(), path.read_bytes(),
                                  headers={"Content-Type": kind})


@contextmanager
def held_objects_frozen() -> Iterator[None]:
    """Keep the objects that exist on entry out of Python's cyclic garbage collector until
    exit (``gc.freeze``), unless some are frozen already (then nothing is changed).

    WeasyPrint makes millions of objects, which set off many full collections, and each
    full collection walks every object the process holds: in a build, the analysis, the
    charts and the pages (about 210,000 objects for the Large workload), none of which can
    become garbage while the PDF renders. Frozen, they are not walked; what the render
    itself leaves behind is collected as before, and on exit the frozen objects return to
    the collector. Measured in one process holding the Large workload's assembled pack
    (timed by ``gc.callbacks``, mean of 3 alternating rounds): both editions' PDFs set off 3
    full collections, which took 0.69 s of CPU time, and 0.29 s frozen (about 7% of the
    chart-free PDFs). The PDFs are the same bytes.

    Garbage is collected first, so that what is frozen is only what is held: frozen
    garbage stays until exit. A build renders its editions one after another, and the
    first render's box trees (cycles, set free when it returns) were frozen with the
    rest for the whole of the second: Python's objects in use after the PDF stage were
    132 MB, and 104 MB with the collection (Large workload, benchmarks/memory_accounts.py);
    the build's peak RSS 670-680 MB against 656-666 MB (three builds each)."""
    if gc.get_freeze_count():
        yield
        return
    gc.collect()
    gc.freeze()
    try:
        yield
    finally:
        gc.unfreeze()


def render_pdf(html: str, *, base_dir: Path | None = None, allowed: Sequence[Path] = (),
               variant: str | None = None, attachments: Sequence[Attachment] = ()) -> bytes:
    """PDF bytes for an HTML string. Relative URLs resolve against ``base_dir`` (the pack
    folder); only files inside ``allowed`` (and ``data:`` URLs) may be used; any other
    request raises :class:`InputError`.

    Every PDF is tagged (WeasyPrint's ``pdf_tags``: a structure tree of headings, tables,
    figures with their ``alt`` text, in reading order) for assistive technology.
    ``variant`` is a WeasyPrint PDF variant such as ``"pdf/a-3a"`` (ISO 19005-3, level A);
    ``attachments`` are embedded files (PDF/A-3 allows any file type as an attachment).
    The objects the process holds are kept from the garbage collector while WeasyPrint
    works (:func:`held_objects_frozen`).
    """
    from reporter.render.environment import default_templates_dir

    roots = [default_templates_dir(), *allowed]
    fetcher = PackFetcher(roots)
    base_url = base_dir.resolve().as_uri() + "/" if base_dir is not None else None
    try:
        with held_objects_frozen():
            return HTML(string=html, base_url=base_url, url_fetcher=fetcher).write_pdf(
                pdf_variant=variant, pdf_tags=True, attachments=list(attachments) or None)
    except RefusedFetch as exc:
        where = ", ".join(str(r) for r in fetcher.roots)
        raise InputError([Problem(
            "pack.pdf", f"refused to fetch {exc.url!r}: a pack may use only files inside "
            f"the pack folder and the packaged templates ({where}); nothing is fetched from "
            "a network")]) from None
