"""``reporter preview PACK``: serve the pack's HTML on 127.0.0.1 and rebuild it on change.

The standard library's :class:`~http.server.ThreadingHTTPServer` serves three things, and
nothing else (every other path, ``/../../etc/passwd`` included, is a 404):

- ``/``: the pack's HTML (or the error page), with a small inline script added at serve time
  that polls ``/__version`` and reloads the page when it changes. The built ``pack.html``
  never holds it: the script exists only in this response;
- ``/__version``: the number of the current page, as text;
- a file inside the pack folder that the current page references by a relative path (a user
  template's image, say), looked up in a table made from the page, never from the request.

Every response carries a Content-Security-Policy that lets the page load only from its own
origin or ``data:`` URLs, and run only the reload script (by its sha256), so the page fetches
nothing from outside 127.0.0.1. A request whose ``Host`` is not the address served is refused
(DNS rebinding). A watchfiles thread watches the pack folder and rebuilds through
:class:`~reporter.preview.staged.StagedPack`. The preview writes no file.
"""

from __future__ import annotations

import base64
import errno
import hashlib
import re
import threading
from html.parser import HTMLParser
from http import HTTPStatus
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path, PurePosixPath
from urllib.parse import quote, unquote, urlsplit

import watchfiles

from reporter.errors import EXIT_BAD_INPUT, ReporterError
from reporter.preview.staged import Page, StagedPack

DEFAULT_HOST = "127.0.0.1"
DEFAULT_PORT = 8765
POLL_MS = 500
WATCH_TIMEOUT_MS = 400
_BODY_END = re.compile(r"</body\s*>", re.I)
_PAGE_CSP = re.compile(r"<meta\s+http-equiv=\"Content-Security-Policy\"[^>]*>\n?", re.I)
_REFERENCE_ATTRIBUTES = frozenset({"src", "href", "xlink:href", "poster", "data"})
_CONTENT_TYPES = {".png": "image/png", ".jpg": "image/jpeg", ".jpeg": "image/jpeg",
                  ".svg": "image/svg+xml", ".css": "text/css; charset=utf-8",
                  ".gif": "image/gif", ".webp": "image/webp"}


class PreviewError(ReporterError):
    """The preview cannot start (the port is taken, the address cannot be bound)."""

    exit_code = EXIT_BAD_INPUT


def reload_script(version: int) -> str:
    """The inline script of one served page: poll ``/__version`` (same origin) and reload
    when the number differs from ``version``."""
    script = ('(function(){var v="VERSION";function poll(){fetch("/__version",'
              '{cache:"no-store"}).then(function(r){return r.text()}).then(function(t){'
              'if(t.trim()!==v){location.reload()}else{setTimeout(poll,POLL)}})'
              '.catch(function(){setTimeout(poll,RETRY)})}setTimeout(poll,POLL)})();')
    return (script.replace("VERSION", str(int(version))).replace("RETRY", str(4 * POLL_MS))
            .replace("POLL", str(POLL_MS)))


def served_page(html: str, version: int) -> tuple[bytes, str]:
    """The page as served: ``html`` with the reload script before ``</body>``, and the
    Content-Security-Policy that allows that script and nothing from another origin."""
    script = reload_script(version)
    tag = f"<script>{script}</script>"
    html = _PAGE_CSP.sub("", html)      # the page's own policy allows no script: the header's does
    ends = list(_BODY_END.finditer(html))
    page = html[:ends[-1].start()] + tag + html[ends[-1].start():] if ends else html + tag
    digest = base64.b64encode(hashlib.sha256(script.encode()).digest()).decode()
    csp = ("default-src 'none'; img-src 'self' data:; style-src 'self' 'unsafe-inline'; "
           f"font-src 'self' data:; script-src 'sha256-{digest}'; connect-src 'self'; "
           "base-uri 'none'; form-action 'none'; frame-ancestors 'none'")
    return page.encode("utf-8"), csp


class _References(HTMLParser):
    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.found: set[str] = set()

    def handle_starttag(self, tag, attrs):
        for name, value in attrs:
            if value and (name in _REFERENCE_ATTRIBUTES or name in ("srcset", "imagesrcset")):
                parts = value.split(",") if "srcset" in name else [value]
                self.found.update(p.strip().split()[0] for p in parts if p.strip())

    handle_startendtag = handle_starttag


def referenced_files(html: str, pack_dir: Path) -> dict[str, Path]:
    """URL path -> file, for each relative reference of ``html`` to a file inside
    ``pack_dir`` (resolved, links followed, must stay inside); nothing else."""
    parser = _References()
    parser.feed(html)
    parser.close()
    root = pack_dir.resolve()
    out: dict[str, Path] = {}
    for ref in parser.found:
        parts = urlsplit(ref)
        if parts.scheme or parts.netloc or not parts.path or ref.startswith(("/", "\\")):
            continue
        rel = unquote(parts.path)
        if "\\" in rel or ".." in PurePosixPath(rel).parts:
            continue
        path = (root / rel).resolve()
        if path.is_relative_to(root) and path.is_file():
            out["/" + quote(PurePosixPath(rel).as_posix().lstrip("./"))] = path
    return out


class PreviewState:
    """The page being served, its version and the files it references: one tuple, swapped
    whole, so a request never sees one page's version with another's HTML."""

    def __init__(self, staged: StagedPack) -> None:
        self.staged = staged
        self.current: tuple[int, Page, dict[str, Path]] | None = None
        self.update()

    @property
    def version(self) -> int:
        return self.current[0]

    @property
    def page(self) -> Page:
        return self.current[1]

    def update(self) -> bool:
        """Rebuild; a new version only when the page changed. True when it did."""
        page = self.staged.refresh()
        if self.current is not None and page.html == self.current[1].html:
            return False
        files = referenced_files(page.html, self.staged.pack_dir) if page.ok else {}
        version = self.current[0] + 1 if self.current is not None else 1
        self.current = (version, page, files)
        return True


class _Handler(BaseHTTPRequestHandler):
    server_version = "reporter-preview"
    sys_version = ""
    server: _Server

    def do_GET(self) -> None:  # noqa: N802 - the standard library's name
        version, page, files = self.server.state.current
        if not self._host_allowed():
            return self._send(HTTPStatus.FORBIDDEN, b"wrong host\n", "text/plain")
        path = urlsplit(self.path).path
        if path == "/__version":
            return self._send(HTTPStatus.OK, str(version).encode(), "text/plain; charset=utf-8")
        if path in ("/", "/pack.html"):
            body, csp = served_page(page.html, version)
            return self._send(HTTPStatus.OK, body, "text/html; charset=utf-8", csp)
        target = files.get(path)
        if target is None or not target.is_file():
            return self._send(HTTPStatus.NOT_FOUND, b"not found\n", "text/plain")
        try:
            data = target.read_bytes()
        except OSError:
            return self._send(HTTPStatus.NOT_FOUND, b"not found\n", "text/plain")
        kind = _CONTENT_TYPES.get(target.suffix.lower(), "application/octet-stream")
        return self._send(HTTPStatus.OK, data, kind)

    def _host_allowed(self) -> bool:
        host = (self.headers.get("Host") or "").strip().lower()
        return host in self.server.allowed_hosts

    def _send(self, status: HTTPStatus, body: bytes, kind: str, csp: str | None = None) -> None:
        self.send_response(status)
        self.send_header("Content-Type", kind)
        self.send_header("Content-Length", str(len(body)))
        self.send_header("Cache-Control", "no-store")
        self.send_header("X-Content-Type-Options", "nosniff")
        self.send_header("Content-Security-Policy", csp or "default-src 'none'")
        self.end_headers()
        self.wfile.write(body)

    def log_message(self, format, *args) -> None:  # noqa: A002 - quiet: no log per request
        return


class _Server(ThreadingHTTPServer):
    daemon_threads = True
    state: PreviewState
    allowed_hosts: frozenset[str]


class Preview:
    """The preview server of one pack: build it, bind ``host:port`` (0: a free port), then
    :meth:`start` (threads, for tests) or :meth:`serve_forever` (the command); always
    :meth:`close`."""

    def __init__(self, pack: Path | str, host: str = DEFAULT_HOST,
                 port: int = DEFAULT_PORT, on_update=None) -> None:
        if not host.strip():        # "" binds every address of the machine
            raise PreviewError("--host is empty, which would listen on every address of this "
                               "machine; give 127.0.0.1 (the default), or an address on "
                               "purpose")
        try:                        # the address first: a taken port fails at once
            self.httpd = _Server((host, port), _Handler)
        except OSError as exc:
            hint = ("choose another --port" if exc.errno in (errno.EADDRINUSE, errno.EACCES)
                    else "give --host an address of this machine, such as 127.0.0.1")
            raise PreviewError(f"cannot listen on {host}:{port}: {exc.strerror or exc}; "
                               f"{hint}") from None
        try:
            self.staged = StagedPack(pack)
            self.state = PreviewState(self.staged)      # the first build
        except BaseException:
            self.httpd.server_close()
            raise
        self.on_update = on_update
        self.httpd.state = self.state
        self.host, self.port = host, self.httpd.server_address[1]
        self.httpd.allowed_hosts = frozenset(
            f"{h}:{self.port}" for h in {host.lower(), "127.0.0.1", "localhost"})
        self._stop = threading.Event()
        self.ready = threading.Event()     # the watch is in place
        self._threads: list[threading.Thread] = []

    @property
    def url(self) -> str:
        return f"http://{self.host}:{self.port}/"

    def watch(self) -> None:
        """Rebuild on every batch of changes in the pack folder, until :meth:`close`. The
        first (empty) batch comes once the watch is in place: it rebuilds too, so an edit
        made between the first build and then is not missed, and sets :attr:`ready`."""
        for changes in watchfiles.watch(self.staged.pack_dir, stop_event=self._stop,
                                        debounce=800, step=30, raise_interrupt=False,
                                        rust_timeout=WATCH_TIMEOUT_MS, yield_on_timeout=True):
            if not changes and self.ready.is_set():
                continue                    # a quiet interval: nothing to do
            try:
                changed = self.state.update()
            except Exception:  # noqa: BLE001 - refresh() reports bad input; keep watching
                changed = False
            self.ready.set()
            if self.on_update is not None:
                self.on_update(self.state.page, changed)

    def start(self) -> None:
        """Serve and watch on background threads."""
        for target in (self.httpd.serve_forever, self.watch):
            t = threading.Thread(target=target, daemon=True, name=f"preview-{target.__name__}")
            t.start()
            self._threads.append(t)

    def serve_forever(self) -> None:
        """Serve on this thread until Ctrl-C, watching on another; then close."""
        watcher = threading.Thread(target=self.watch, daemon=True, name="preview-watch")
        watcher.start()
        self._threads.append(watcher)
        try:
            self.httpd.serve_forever()
        except KeyboardInterrupt:
            pass
        finally:
            self.close()

    def close(self) -> None:
        """Stop watching and serving, and release the port."""
        self._stop.set()
        if any(t.name == "preview-serve_forever" for t in self._threads):
            self.httpd.shutdown()
        self.httpd.server_close()
        for t in self._threads:
            t.join(timeout=5)
        self._threads.clear()
