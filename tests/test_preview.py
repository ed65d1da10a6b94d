"""``reporter preview``: served HTML, staged rebuilds, error page, and what it may serve.

One preview server runs for the module, on a free port of 127.0.0.1, against a copy of the
demo pack that was built once into an output folder beforehand. Every wait is bounded and the
server is closed in a finally.
"""

from __future__ import annotations

import base64
import hashlib
import http.client
import os
import re
import select
import shutil
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

import reporter.pipeline.part as part_module
from reporter.cli import cli
from reporter.preview.server import Preview, referenced_files, served_page
from tests.conftest import DEMO, build_at_fixed_epoch

WAIT_S = 20
MARKER = "Preview check 4711: the committee noted the tracking error."
SUMMARY = Path("commentary") / "summary.md"


def _snapshot(folder: Path) -> dict[str, tuple[str, int]]:
    """sha256 and modification time of every file under ``folder``."""
    return {p.relative_to(folder).as_posix(): (hashlib.sha256(p.read_bytes()).hexdigest(),
                                               p.stat().st_mtime_ns)
            for p in sorted(folder.rglob("*")) if p.is_file()}


class Counter:
    """Wraps reporter.build.analyse and counts its calls."""

    def __init__(self, fn) -> None:
        self.fn, self.calls = fn, 0

    def __call__(self, *args, **kwargs):
        self.calls += 1
        return self.fn(*args, **kwargs)


@pytest.fixture(scope="module")
def env(tmp_path_factory):
    root = tmp_path_factory.mktemp("preview")
    pack = root / "pack"
    shutil.copytree(DEMO, pack)
    out = root / "out"
    assert build_at_fixed_epoch(pack, out) == 0          # an earlier build of this pack
    before_out, before_pack = _snapshot(out), set(_snapshot(pack))
    counter = Counter(part_module.analyse)
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(part_module, "analyse", counter)
        preview = Preview(pack, port=0)
        try:
            preview.start()
            assert preview.ready.wait(WAIT_S), "the watch did not start"
            yield {"preview": preview, "pack": pack, "out": out, "counter": counter,
                   "before_out": before_out, "before_pack": before_pack}
        finally:
            preview.close()


def _get(preview: Preview, path: str, host: str | None = None):
    conn = http.client.HTTPConnection("127.0.0.1", preview.port, timeout=10)
    try:
        conn.putrequest("GET", path, skip_host=True)
        conn.putheader("Host", host or f"127.0.0.1:{preview.port}")
        conn.endheaders()
        resp = conn.getresponse()
        return resp.status, dict(resp.getheaders()), resp.read()
    finally:
        conn.close()


def _wait_for(preview: Preview, predicate) -> str:
    """GET / until ``predicate(html)`` holds; at most WAIT_S seconds."""
    deadline = time.monotonic() + WAIT_S
    while True:
        status, _, body = _get(preview, "/")
        html = body.decode("utf-8")
        if status == 200 and predicate(html):
            return html
        if time.monotonic() > deadline:
            pytest.fail(f"the page did not change within {WAIT_S} s")
        time.sleep(0.1)


def test_the_watch_starting_is_no_new_version(env):
    # the first test of the module, before any edit: the watch's first (empty) batch
    # re-rendered with an input fingerprint that left out actions.csv, so the page "changed"
    # (version 2) and the command printed "rebuilt (HTML only)" right after it started
    preview = env["preview"]
    assert preview.state.version == 1
    assert preview.state.update() is False and preview.state.version == 1
    build = (env["out"] / "pack.html").read_text(encoding="utf-8")
    shown = re.findall(r'class="fingerprint[^"]*">([0-9a-f]+)<', preview.state.page.html)
    assert shown and set(shown) <= set(re.findall(r'class="fingerprint[^"]*">([0-9a-f]+)<',
                                                  build))


def test_serves_the_pack_html_with_the_reload_script_only(env):
    preview, out = env["preview"], env["out"]
    status, headers, body = _get(preview, "/")
    html = body.decode("utf-8")
    assert status == 200 and headers["Content-Type"] == "text/html; charset=utf-8"
    assert "Tarnbrook Valley Staff Pension Scheme" in html        # from pack.toml
    built = (out / "pack.html").read_text(encoding="utf-8")
    # the served page is the built page's body plus the script (same sections, same charts)
    assert built.count("<svg") == html.count("<svg") > 0
    assert "__version" not in built and "<script" not in built
    # the built page's own policy (no script at all) is dropped for the header's, which
    # allows the reload script alone
    assert 'http-equiv="Content-Security-Policy"' in built
    assert "Content-Security-Policy" not in html
    scripts = re.findall(r"<script>(.*?)</script>", html, re.S)
    assert len(scripts) == 1 and '"/__version"' in scripts[0]
    digest = base64.b64encode(hashlib.sha256(scripts[0].encode()).digest()).decode()
    csp = headers["Content-Security-Policy"]
    assert f"script-src 'sha256-{digest}'" in csp and "connect-src 'self'" in csp
    assert "default-src 'none'" in csp
    # nothing on the page is fetched from another origin
    assert not re.search(r"""(src|href)\s*=\s*["']?\s*(https?:)?//""", html.split("<body")[0])
    assert not re.search(r"""\ssrc\s*=\s*["']?\s*(https?:)?//""", html)
    status, _, version = _get(preview, "/__version")
    assert status == 200 and int(version) == preview.state.version


def test_binds_only_127_0_0_1_by_default(env):
    preview = env["preview"]
    assert preview.httpd.server_address[0] == "127.0.0.1"
    assert cli.commands["preview"].params[1].name == "port"
    assert {p.name: p.default for p in cli.commands["preview"].params}["host"] == "127.0.0.1"
    # another loopback address of this machine (all of 127/8 is loopback on Linux) is not
    # listened on: a socket bound to 0.0.0.0 would accept this connection
    with pytest.raises(ConnectionRefusedError):
        socket.create_connection(("127.0.0.2", preview.port), timeout=5).close()


def test_commentary_edit_rerenders_without_re_estimating(env):
    preview, pack, counter = env["preview"], env["pack"], env["counter"]
    calls, assemblies = counter.calls, preview.staged.assemblies
    renders, version = preview.staged.renders, preview.state.version
    path = pack / SUMMARY
    path.write_text(path.read_text(encoding="utf-8") + f"\n{MARKER}\n", encoding="utf-8")
    html = _wait_for(preview, lambda h: MARKER in h)
    assert html.count(MARKER) == 1
    assert counter.calls == calls                          # analyse() was not called
    assert preview.staged.assemblies == assemblies
    assert preview.staged.renders > renders
    assert preview.state.version > version
    # what was served is the rendered page plus the script, less the page's own policy
    # (the header's stands in for it), and nothing else
    script = re.search(r"<script>.*?</script>", html, re.S).group(0)
    policy = re.search(r'<meta http-equiv="Content-Security-Policy"[^>]*>\n',
                       preview.state.page.html).group(0)
    assert html.replace(script, "") == preview.state.page.html.replace(policy, "")


def test_broken_returns_edit_shows_the_problems_then_a_fix_restores(env):
    preview, pack, counter = env["preview"], env["pack"], env["counter"]
    returns = pack / "returns.csv"
    original = returns.read_bytes()
    lines = original.decode("utf-8").splitlines(keepends=True)
    header = lines[0].rstrip("\r\n").split(",")
    cells = lines[3].rstrip("\r\n").split(",")
    cells[-1] = "not-a-number"
    lines[3] = ",".join(cells) + "\n"
    calls = counter.calls
    try:
        returns.write_text("".join(lines), encoding="utf-8")
        page = _wait_for(preview, lambda h: "The pack cannot be built" in h)
        items = re.findall(r"<li><code>(.*?)</code></li>", page)
        assert items and any(i.startswith("returns.csv:") for i in items), items
        # the problem names the file, the line (4: the header is line 1) and the column of
        # the edited cell, and quotes the bad value (escaped on the page)
        assert any(i.startswith(f"returns.csv:4:{header[-1]}:") and
                   "&#x27;not-a-number&#x27;" in i for i in items), items
        assert not preview.state.page.ok
    finally:
        returns.write_bytes(original)
    html = _wait_for(preview, lambda h: "The pack cannot be built" not in h)
    assert MARKER in html and preview.state.page.ok
    # the data are as before, so the cached analysis served the page again
    assert counter.calls == calls
    assert preview.staged.renders >= 2


def test_path_traversal_and_unreferenced_files_are_refused(env):
    preview = env["preview"]
    for path in ("/../../etc/passwd", "/%2e%2e/%2e%2e/etc/passwd", "//etc/passwd",
                 "/..%2f..%2fetc%2fpasswd", "/pack.toml", "/returns.csv",
                 "/commentary/summary.md", "/commentary/../pack.toml", "/__version/../pack.toml"):
        status, _, body = _get(preview, path)
        assert status == 404, path
        assert b"root:" not in body and b"[pack]" not in body
    # another Host (a DNS-rebinding page) is refused
    status, _, _ = _get(preview, "/", host=f"attacker.example:{preview.port}")
    assert status == 403


def test_only_referenced_files_inside_the_pack_are_served(tmp_path):
    pack = tmp_path / "pack"
    (pack / "img").mkdir(parents=True)
    (pack / "img" / "logo.png").write_bytes(b"\x89PNG\r\n\x1a\n")
    (tmp_path / "secret.png").write_bytes(b"secret")
    os.symlink(tmp_path / "secret.png", pack / "link.png")
    html = ('<img src="img/logo.png"><img src="../secret.png"><img src="link.png">'
            '<img src="/etc/passwd"><img src="https://cdn.example/x.png">'
            '<img src="data:image/png;base64,AAAA"><a href="#summary">s</a>')
    assert referenced_files(html, pack) == {"/img/logo.png": (pack / "img" / "logo.png")
                                            .resolve()}


def test_served_page_puts_the_script_before_the_body_end():
    body, csp = served_page("<html><body><p>x</p></body></html>", 7)
    text = body.decode()
    assert text.startswith("<html><body><p>x</p><script>") and text.endswith("</body></html>")
    assert 'var v="7"' in text and "sha256-" in csp


def test_the_earlier_build_and_the_pack_folder_hold_nothing_new(env):
    # the last test of the module: after every edit above, and restored
    assert _snapshot(env["out"]) == env["before_out"]
    assert set(_snapshot(env["pack"])) == env["before_pack"]


def test_the_command_prints_its_address_and_stops_on_ctrl_c(tmp_path):
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    proc = subprocess.Popen([sys.executable, "-m", "reporter", "preview", str(pack),
                             "--port", "0"], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True)
    try:
        # the first build comes first (~10 s); the wait is bounded
        ready, _, _ = select.select([proc.stdout], [], [], 120)
        assert ready, "no address printed within 120 s"
        line = proc.stdout.readline()
        match = re.search(r"http://127\.0\.0\.1:(\d+)/", line)
        assert match, line
        port = int(match.group(1))
        conn = http.client.HTTPConnection("127.0.0.1", port, timeout=10)
        conn.request("GET", "/")
        resp = conn.getresponse()
        assert resp.status == 200 and b"Tarnbrook Valley" in resp.read()
        conn.close()
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=WAIT_S)
        assert proc.returncode == 0, err
        assert "preview stopped" in out and "Traceback" not in err
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=WAIT_S)


def test_a_taken_port_is_one_line_and_exit_2(tmp_path, capsys):
    from reporter.cli import main

    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen()
        port = taken.getsockname()[1]
        code = main(["preview", str(DEMO), "--port", str(port)])
    out, err = capsys.readouterr()
    assert code == 2
    lines = [ln for ln in err.strip().splitlines() if not ln.startswith("building ")]
    assert len(lines) == 1 and lines[0].startswith(f"reporter: cannot listen on 127.0.0.1:{port}")
    assert lines[0].endswith("; choose another --port")
    assert "Traceback" not in err and out == ""


def test_a_host_not_of_this_machine_names_the_host_not_the_port(capsys):
    from reporter.cli import main

    # 192.0.2.1 is in TEST-NET-1 (RFC 5737), an address no machine here has
    code = main(["preview", str(DEMO), "--host", "192.0.2.1", "--port", "0"])
    out, err = capsys.readouterr()
    lines = [ln for ln in err.strip().splitlines() if not ln.startswith("building ")]
    assert code == 2 and len(lines) == 1 and out == ""
    assert lines[0].startswith("reporter: cannot listen on 192.0.2.1:0: ")
    assert lines[0].endswith("; give --host an address of this machine, such as 127.0.0.1")


@pytest.mark.parametrize("host", ["", "  "])
def test_an_empty_host_is_refused_not_bound_to_every_address(capsys, host):
    from reporter.cli import main

    # the socket layer takes "" as every address of the machine (0.0.0.0): the unsigned
    # pack was served to the network, with no word of it
    code = main(["preview", str(DEMO), "--host", host, "--port", "0"])
    out, err = capsys.readouterr()
    lines = [ln for ln in err.strip().splitlines() if not ln.startswith("building ")]
    assert code == 2 and out == ""
    assert lines == ["reporter: --host is empty, which would listen on every address of this "
                     "machine; give 127.0.0.1 (the default), or an address on purpose"]
