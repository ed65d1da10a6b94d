"""User templates are untrusted: they run in Jinja's sandbox, cannot read a file outside their
folder through a link, cannot put a script, frame or remote reference into the pack, and a
template error names the template and line. Each case is a templates folder under
``tests/data/templates/<case>/``, used as ``[render] templates`` of a copy of the demo pack
and built with the command line (``reporter build``).

Every hostile case asserts exit 2 with one line naming the template, that no output folder,
staging folder or ``.reporter-build`` marker was made, that no process was started and that
no file outside the pack folder, the packaged templates and Python's own was opened (an audit
hook records every ``open`` and process start during the build)."""

from __future__ import annotations

import os
import shutil
import sys
from pathlib import Path

import jinja2
import numpy as np
import pytest

import reporter
from reporter.errors import InputError
from reporter.render.environment import default_templates_dir, make_environment
from reporter.render.safety import check_html, css_urls, srcset_urls, url_problem
from tests.conftest import DEMO, FIXED_EPOCH, run_cli

CASES = Path(__file__).resolve().parent / "data" / "templates"
SECRET = "root:x:0:0:secret-line-standing-for-etc-passwd"

# --- an audit hook: which files a build opens and whether it starts a process --------------
_RECORD: dict[str, list] = {}


def _audit(event: str, args) -> None:
    log = _RECORD.get("log")
    if log is None:
        return
    if event == "open" and isinstance(args[0], (str, bytes, os.PathLike)):
        log.append(("open", os.fsdecode(args[0])))
    elif event in ("subprocess.Popen", "os.system", "os.exec", "os.posix_spawn", "os.spawn",
                   "os.fork"):
        log.append(("process", repr(args)[:200]))


sys.addaudithook(_audit)      # permanent, but records only inside `recording`


class recording:
    def __enter__(self) -> list:
        _RECORD["log"] = []
        return _RECORD["log"]

    def __exit__(self, *exc) -> None:
        _RECORD["log"] = None


@pytest.fixture(scope="module", autouse=True)
def imported():
    """Import the build's modules before any recording: loading WeasyPrint's libraries and
    finding the C library for ``malloc_trim`` run ``ldconfig -p`` (ctypes' library lookup)
    once per process, which is no template's doing."""
    import reporter.build
    import reporter.render.pdf  # noqa: F401
    from reporter.memory import release_free_memory

    release_free_memory()


def pack_with_templates(tmp_path: Path, case: str) -> Path:
    """A copy of the demo pack whose ``[render] templates`` is a copy of the case folder."""
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    shutil.copytree(CASES / case, pack / "tpl")
    with open(pack / "pack.toml", "a", encoding="utf-8") as fh:
        fh.write('\n[render]\ntemplates = "tpl"\n')
    return pack


def build(capsys, monkeypatch, tmp_path: Path, pack: Path) -> tuple[int, str, str, list]:
    """``reporter build PACK --out tmp/out`` from a working folder ``tmp/cwd``: exit code,
    stdout, stderr and the audit log."""
    cwd = tmp_path / "cwd"
    cwd.mkdir()
    monkeypatch.chdir(cwd)
    monkeypatch.setenv("SOURCE_DATE_EPOCH", FIXED_EPOCH)
    with recording() as log:
        code, out, err = run_cli(capsys, "build", pack, "--out", tmp_path / "out", "--quiet")
    return code, out, err, list(log)


def assert_refused(tmp_path: Path, code: int, out: str, err: str, log: list) -> list[str]:
    """The checks every hostile case shares; returns the lines printed on stderr."""
    assert code == 2
    assert "Traceback" not in err and out == ""
    lines = err.strip().splitlines()
    assert lines[-1].startswith("reporter: ") and \
        lines[-1].endswith(" error(s) in the inputs; nothing was written")
    # nothing written: no output, no staging folder beside it, no marker anywhere
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cwd", "pack"]
    assert not list(tmp_path.rglob(".reporter-build"))
    assert list((tmp_path / "cwd").iterdir()) == []          # no payload ran in the cwd
    assert [e for e in log if e[0] == "process"] == []
    allowed = (str((tmp_path / "pack").resolve()), str(default_templates_dir().resolve()),
               str(Path(reporter.__file__).resolve().parent),      # the tool's own modules
               sys.prefix, sys.base_prefix, "/usr/", "/etc/fonts", "/proc/")
    outside = [p for kind, p in log if kind == "open"
               and not os.path.realpath(p).startswith(allowed)]
    assert outside == [], outside
    return lines


# --- the sandbox ---------------------------------------------------------------------------

def test_the_payload_runs_without_the_sandbox(tmp_path, monkeypatch):
    # what the sandbox stops: in a plain environment the template starts a process
    monkeypatch.chdir(tmp_path)
    src = (CASES / "cycler_globals" / "pack.html.j2").read_text().splitlines()[2]
    jinja2.Environment().from_string(src).render()
    assert (tmp_path / "pwned-cycler").exists()


@pytest.mark.parametrize("case", ["cycler_globals", "lipsum_globals"])
def test_globals_escape_is_refused(case, tmp_path, monkeypatch, capsys):
    pack = pack_with_templates(tmp_path, case)
    code, out, err, log = build(capsys, monkeypatch, tmp_path, pack)
    lines = assert_refused(tmp_path, code, out, err, log)
    assert lines[0].startswith("templates/pack.html.j2:3: refused by the sandbox: ")
    assert "__globals__" in lines[0] or "__init__" in lines[0]
    assert not (tmp_path / "cwd" / f"pwned-{case.split('_')[0]}").exists()


def test_numpy_and_path_attributes_are_out_of_reach(tmp_path):
    (tmp_path / "tpl").mkdir()
    env = make_environment(tmp_path / "tpl")
    target = tmp_path / "written.bin"
    for tpl, value in (("{{ x.tofile(p) }}", np.float64(1.5)),
                       ("{{ x.write_text('x') }}", target),
                       ("{{ x.read_text() }}", Path("/etc/hostname"))):
        with pytest.raises(InputError) as exc:
            env.from_string(tpl).render(x=value, p=str(target))
        assert "refused by the sandbox" in str(exc.value)
    assert not target.exists()
    # plain data is still reachable: dict methods and a date's strftime
    import datetime as dt
    assert env.from_string("{{ d.get('a') }} {{ t.strftime('%Y') }}").render(
        d={"a": 1}, t=dt.date(2026, 11, 30)) == "1 2026"
    # and an immutable sandbox: a template may not change the context's lists
    with pytest.raises(InputError):
        env.from_string("{{ xs.append(1) }}").render(xs=[])


def test_symlink_out_of_the_folder_is_not_read(tmp_path, monkeypatch, capsys):
    outside = tmp_path / "outside"
    outside.mkdir()
    secret = outside / "passwd"
    secret.write_text(SECRET + "\n")
    pack = pack_with_templates(tmp_path, "symlink_include")
    (pack / "tpl" / "passwd.txt").symlink_to(secret)
    code, out, err, log = build(capsys, monkeypatch, tmp_path, pack)
    shutil.rmtree(outside)            # the shared checks list tmp_path's children
    lines = assert_refused(tmp_path, code, out, err, log)
    assert lines[0] == ("templates/pack.html.j2:3: refused by the sandbox: 'passwd.txt' is a "
                        "link to a file outside the templates folder; refused")
    assert SECRET not in out + err
    assert not any(str(secret) == os.path.realpath(p) for kind, p in log if kind == "open")


def test_symlink_inside_the_folder_is_followed(tmp_path):
    # a link that stays in the folder is fine: the rule is the real path, not "no links"
    (tmp_path / "real.j2").write_text("inside {{ 1 + 1 }}")
    (tmp_path / "alias.j2").symlink_to(tmp_path / "real.j2")
    assert make_environment(tmp_path).get_template("alias.j2").render() == "inside 2"


# --- references and elements in the rendered HTML -------------------------------------------

@pytest.mark.parametrize("case, expected", [
    ("script_src", ["templates/pack.html.j2: refused <script> element (a pack may not run "
                    "code or embed another page)",
                    "templates/pack.html.j2: refused remote reference "
                    "'http://evil.example/beacon.js'"]),
    ("iframe", ["templates/pack.html.j2: refused <iframe> element (a pack may not run code "
                "or embed another page)"]),
    ("css_url", ["templates/pack.html.j2: refused remote reference 'http://evil.example/"
                 "pixel.png?pack=Investment%20Committee%20Pack%3A%20Listed%20Equity%20"
                 "Portfolio'"]),
    ("css_import", ["templates/pack.html.j2: refused remote reference "
                    "'https://evil.example/house.css'"]),
    ("srcset", ["templates/pack.html.j2: refused remote reference "
                "'https://evil.example/crest@2x.png'"]),
])
def test_refused_html(case, expected, tmp_path, monkeypatch, capsys):
    pack = pack_with_templates(tmp_path, case)
    code, out, err, log = build(capsys, monkeypatch, tmp_path, pack)
    lines = assert_refused(tmp_path, code, out, err, log)
    assert lines[:-1] == expected


# --- template errors ------------------------------------------------------------------------

def test_syntax_error_names_file_and_line(tmp_path, monkeypatch, capsys):
    pack = pack_with_templates(tmp_path, "syntax_error")
    code, out, err, log = build(capsys, monkeypatch, tmp_path, pack)
    lines = assert_refused(tmp_path, code, out, err, log)
    assert lines[0] == "templates/pack.html.j2:3: syntax error: Expected an expression, got " \
        "'end of statement block'"


def test_undefined_name_names_file_and_line(tmp_path, monkeypatch, capsys):
    pack = pack_with_templates(tmp_path, "undefined_name")
    code, out, err, log = build(capsys, monkeypatch, tmp_path, pack)
    lines = assert_refused(tmp_path, code, out, err, log)
    assert lines[0] == "templates/pack.html.j2:3: 'trustee_count' is undefined"


def test_missing_include_names_the_including_line(tmp_path):
    (tmp_path / "pack.html.j2").write_text("one\n{% include 'nowhere.j2' %}\n")
    with pytest.raises(InputError) as exc:
        make_environment(tmp_path).get_template("pack.html.j2").render()
    assert str(exc.value) == "templates/pack.html.j2:2: template 'nowhere.j2' not found"


# --- a good override still builds (one PDF build) ----------------------------------------------

def test_good_override_builds(tmp_path, monkeypatch, capsys):
    pack = pack_with_templates(tmp_path, "good_override")
    code, out, err, log = build(capsys, monkeypatch, tmp_path, pack)
    assert code == 0, err
    html = (tmp_path / "out" / "pack.html").read_text(encoding="utf-8")
    assert ('<p id="house-note">Prepared by the secretariat of Tarnbrook Valley Staff '
            "Pension Scheme.") in html
    assert '<a href="https://example.org/statement-of-investment-principles">' in html
    assert "Past performance is not a reliable guide" in html    # the default block kept
    assert (tmp_path / "out" / ".reporter-build").exists()
    assert (tmp_path / "out" / "pack.pdf").read_bytes().startswith(b"%PDF")
    assert [e for e in log if e[0] == "process"] == []


# --- the checker itself, on small pieces of HTML --------------------------------------------

def refused(html: str) -> list[str]:
    try:
        check_html(html, "t.j2")
    except InputError as exc:
        return [p.message for p in exc.problems]
    return []


def test_references_inside_the_pack_and_data_urls_pass():
    assert refused('<!DOCTYPE html><img src="logo.png" alt=""><img src="img/a%20b.png">'
                   '<img src="data:image/png;base64,AAAA"><a href="#summary">s</a>'
                   '<a href="results/securities.csv">csv</a><a href="mailto:ic@example.org">'
                   'm</a><svg><g clip-path="url(#clip1)"><use href="#mark"/></g></svg>'
                   '<p style="color: red; background: url(img/bg.png)">x</p>') == []


@pytest.mark.parametrize("html, message", [
    ('<img src="../outside.png">', "refused reference '../outside.png' outside the pack folder"),
    ('<img src="img/../../x.png">', "refused reference 'img/../../x.png' outside the pack "
                                    "folder"),
    ('<img src="/etc/x">', "refused reference '/etc/x' outside the pack folder"),
    ('<img src="%2e%2e/x">', "refused reference '%2e%2e/x' outside the pack folder"),
    ('<img src="..\\x">', "refused reference '..\\\\x' outside the pack folder"),
    ('<img src="file:///etc/passwd">', "refused remote reference 'file:///etc/passwd'"),
    ('<img src="//host/x.png">', "refused remote reference '//host/x.png'"),
    ('<img src=" HTTPS://h/x">', "refused remote reference ' HTTPS://h/x'"),
    ('<link rel="stylesheet" href="s.css?&#x2e;" ><link rel=stylesheet '
     'href="data:text/css,@import%20url(http://h/x)">',
     "refused remote reference 'data:text/css,@import%20url(http://h/x)'"),
    ('<object data="http://h/x"></object>', "refused <object> element (a pack may not run "
                                            "code or embed another page)"),
    ('<embed src="x.swf">', "refused <embed> element (a pack may not run code or embed "
                            "another page)"),
    ('<base href="http://h/">', "refused <base> element (a pack may not run code or embed "
                                "another page)"),
    ('<meta http-equiv="Refresh" content="0;url=http://h/">',
     'refused <meta http-equiv="refresh"> (a pack may not load another page)'),
    ('<p onmouseover="x()">', "refused event attribute 'onmouseover' on <p> (a pack may not "
                              "run code)"),
    ('<svg onload="x()"></svg>', "refused event attribute 'onload' on <svg> (a pack may not "
                                 "run code)"),
    ('<a href="jav&#x09;ascript:alert(1)">x</a>',
     "refused remote reference 'jav\\tascript:alert(1)'"),
    ('<a href="data:text/html,x">x</a>', "refused remote reference 'data:text/html,x'"),
    ('<p style="background:\\75 rl(http://h/x)">', "refused remote reference 'http://h/x'"),
    ('<style>p{background:image-set("http://h/a.png" 1x)}</style>',
     "refused remote reference 'http://h/a.png'"),
    ('<style>@import url(data:text/css,p{});</style>',
     "refused remote reference 'data:text/css,p{}'"),
    ('<svg><rect fill="url(http://h/g.svg#p)"/></svg>',
     "refused remote reference 'http://h/g.svg#p'"),
    ('<svg><image href="http://h/i.png"/></svg>', "refused remote reference 'http://h/i.png'"),
    ('<video poster="http://h/p.png"></video>', "refused remote reference 'http://h/p.png'"),
    # parser differentials: a browser ends "<!-->" at once, and reads a CDATA section in
    # HTML as a comment up to the first ">"; markup in an SVG <style> is markup to a browser
    ('<!--><img src=x onerror=alert(1)>-->', "refused HTML comment (comments are not passed "
                                             "through; use a Jinja {# comment #})"),
    ('<![CDATA[><img src=x onerror=alert(1)>]]>', "refused declaration <![CDATA[><img src=x "
                                                  "onerror=alert(1)>"),
    ('<svg><style><img src=x onerror=alert(1)></style></svg>',
     "refused markup inside a <style> element"),
])
def test_refused_pieces(html, message):
    assert message in refused(html)


def test_raw_scan_backs_up_the_parser():
    # however html.parser reads it, "<script" as markup in the output is refused
    assert refused("<title><script>x</script></title>")[0].startswith("refused <script>")


def test_url_helpers():
    # srcset: a data: URL holds commas; candidates are split after their descriptors
    assert srcset_urls("data:image/png;base64,AA,BB 1x, b.png 2x,c.png") == [
        "data:image/png;base64,AA,BB", "b.png", "c.png"]
    assert css_urls('@import "a.css" screen; p{src: url("f.woff")} q{x: url(g.png)}') == [
        ("a.css", True), ("f.woff", False), ("g.png", False)]
    assert url_problem("https://h/x", link=True) is None
    assert url_problem("https://h/x") == "refused remote reference 'https://h/x'"
    assert url_problem("C:/Windows/x") == "refused remote reference 'C:/Windows/x'"
