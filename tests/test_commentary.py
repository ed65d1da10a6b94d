"""Commentary: the sanitiser refuses raw HTML, remote images, file: URLs, absolute and ../
paths, each with its file and line; good Markdown is rendered under its author and date.

The expected line numbers follow from how each text is written below (the front matter
takes lines 1-4), not from the tool's output.
"""

from __future__ import annotations

import base64
import hashlib
import io
import json
import re
import shutil

import pypdf
import pytest
from PIL import Image

from reporter.cli import main
from reporter.commentary import COMMENTARY_FILES, read_commentary, render_commentary
from reporter.context import SECTIONS
from reporter.errors import InputError
from tests.conftest import DEMO, assert_check_refuses

HEAD = "---\nauthor: A. Writer\ndate: 2026-12-01\n---\n"     # lines 1-4


def problems_of(text: str, tmp_path) -> list[str]:
    (tmp_path / "commentary").mkdir(exist_ok=True)
    with pytest.raises(InputError) as exc:
        render_commentary("summary", "commentary/summary.md", text, tmp_path / "commentary",
                          tmp_path)
    return [str(p) for p in exc.value.problems]


def png(path) -> bytes:
    buf = io.BytesIO()
    Image.new("RGB", (4, 4), (200, 120, 30)).save(buf, format="PNG")
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(buf.getvalue())
    return buf.getvalue()


@pytest.mark.parametrize("body,line,message", [
    # a script block: line 6 (line 5 is text)
    ("Some text.\n<script>alert('x')</script>\n", 6,
     "raw HTML is not allowed in commentary (found \"<script>alert('x')</script>\")"),
    # inline HTML on the second line of a paragraph
    ("First line\nthen <span onclick=\"x()\">this</span>\n", 6,
     "raw HTML is not allowed in commentary (found '<span onclick=\"x()\">')"),
    ("Logo:\n\n![crest](https://example.org/crest.png)\n", 7,
     "image 'https://example.org/crest.png' is not allowed: a remote image; images must be "
     "files inside the pack folder"),
    ("![x](//example.org/x.png)\n", 5,
     "image '//example.org/x.png' is not allowed: a remote image; images must be files "
     "inside the pack folder"),
    ("See ![p](file:///etc/passwd)\n", 5,
     "image 'file:///etc/passwd' is not allowed: a file: URL; give a path relative to this "
     "file"),
    ("See [the file](file:///etc/passwd)\n", 5,
     "link to 'file:///etc/passwd' is not allowed: a file: URL; links may go to https:, "
     "http: or mailto: addresses or #sections"),
    ("Up:\n\n\n![x](../secret.png)\n", 8,
     "image '../secret.png' is not allowed: a path with '..'; images must be inside the pack "
     "folder, below this file"),
    ("![x](/etc/hosts)\n", 5,
     "image '/etc/hosts' is not allowed: an absolute path; give a path relative to this "
     "file"),
    ("[run](javascript:alert(1))\n", 5,
     "link to 'javascript:alert(1)' is not allowed: a javascript: link; links may go to "
     "https:, http: or mailto: addresses or #sections"),
    # https: with no host: a browser may resolve it against the page's own address
    ("[note](https:javascript:alert(1))\n", 5,
     "link to 'https:javascript:alert(1)' is not allowed: a https: link with no host (write "
     "https://host/...); links may go to https:, http: or mailto: addresses or #sections"),
    ("![x](img/missing.png)\n", 5, "image 'img/missing.png' does not exist"),
])
def test_refused_with_its_line(tmp_path, body, line, message):
    assert problems_of(HEAD + body, tmp_path) == [f"commentary/summary.md:{line}: {message}"]


def test_every_problem_at_once(tmp_path):
    text = HEAD + "<div>\nx\n</div>\n\n![a](http://example.org/a.png) and ![b](../b.png)\n"
    got = problems_of(text, tmp_path)
    assert [g.split(": ")[0] for g in got] == ["commentary/summary.md:5"] + [
        "commentary/summary.md:9"] * 2


@pytest.mark.parametrize("head,line,message", [
    ("No front matter here\n", 1, "front matter is missing"),
    ("---\nauthor: A\n---\n", 1, "front matter needs 'date: YYYY-MM-DD'"),
    ("---\ndate: 2026-12-01\nauthor: ''\n---\n", 3, "front matter needs 'author: <name>'"),
    ("---\nauthor: A\ndate: 2026-12-01\nmood: calm\n---\n", 4,
     "unknown front matter key 'mood'"),
    ("---\nauthor: A\ndate: 1 December\n---\n", 3, "front matter needs 'date: YYYY-MM-DD'"),
])
def test_front_matter(tmp_path, head, line, message):
    (got,) = problems_of(head + "Text.\n", tmp_path)
    assert got.startswith(f"commentary/summary.md:{line}: {message}")


def test_good_markdown_is_rendered(tmp_path):
    data = png(tmp_path / "commentary" / "img" / "curve.png")
    text = HEAD + ("# A heading\n\nSome **bold** & 5 < 6, a [link](https://example.org/x) "
                   "and a [section](#sml).\n\n![Curve](img/curve.png)\n\n"
                   "| a | b |\n|---|---|\n| 1 | 2 |\n")
    c = render_commentary("summary", "commentary/summary.md", text, tmp_path / "commentary",
                          tmp_path)
    assert (c.author, c.date.isoformat()) == ("A. Writer", "2026-12-01")
    html = str(c.html)
    assert "<h4>A heading</h4>" in html and "<h1" not in html   # kept below the pack's h2
    assert "<strong>bold</strong> &amp; 5 &lt; 6" in html
    assert "<table>" in html
    src = re.search(r'<img src="data:image/png;base64,([^"]+)" alt="Curve"', html).group(1)
    assert base64.b64decode(src) == data
    assert 'href="https://example.org/x"' in html and 'href="#sml"' in html


def test_unknown_file_name_and_names_follow_sections(tmp_path):
    # every section but the cautions, and the decisions page
    assert set(COMMENTARY_FILES) == ({s.anchor for s in SECTIONS} - {"cautions"}) | {"decisions"}
    folder = tmp_path / "commentary"
    folder.mkdir()
    (folder / "overview.md").write_text(HEAD + "x\n")
    with pytest.raises(InputError) as exc:
        read_commentary(tmp_path)
    (p,) = exc.value.problems
    assert p.where == "commentary/overview.md" and "summary.md" in p.message


def test_demo_commentary_in_the_pack(demo_build):
    reader = pypdf.PdfReader(demo_build / "pack.pdf")
    pages = (re.sub(r"\s+", " ", pg.extract_text()) for pg in reader.pages)
    summary = next(t for t in pages if "Policy limits: exceptions" in t)   # stops there
    assert "Commentary by Morwenna Ashdale, Investment Officer, 3 December 2026" in summary
    assert summary.index("Policy limits: exceptions") < summary.index("Commentary by")
    html = (demo_build / "pack.html").read_text(encoding="utf-8")
    assert '<aside class="commentary"' in html and "<strong>above the policy band</strong>" in html
    # the commentary is part of the input fingerprint
    manifest = json.loads((demo_build / "results/manifest.json").read_text())
    assert manifest["input_sha256"]["commentary/summary.md"] == hashlib.sha256(
        (DEMO / "commentary/summary.md").read_bytes()).hexdigest()
    # every hashed input is named in input_files
    assert set(manifest["input_files"]) == set(manifest["input_sha256"]) - {"pack.toml"}


def test_bad_commentary_fails_the_build(tmp_path, capsys):
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    (pack / "commentary" / "sml.md").write_text(
        HEAD + "Fine text.\n\n<img src=\"https://example.org/t.gif\">\n")
    out = tmp_path / "out"
    assert main(["build", str(pack), "--out", str(out), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert ("commentary/sml.md:7: raw HTML is not allowed in commentary (found "
            "'<img src=\"https://example.org/t.gif\">')") in err
    assert "Traceback" not in err and not out.exists()


def test_front_matter_strings_are_escaped_and_orphan_changes_note_warns(tmp_path):
    from reporter.build import assemble
    from reporter.config import load_settings

    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    (pack / "commentary" / "beta.md").write_text(
        "---\nauthor: \"<b>Bold</b> & Co\"\ndate: 2026-12-01\n---\nOn beta.\n")
    (pack / "commentary" / "changes.md").write_text(HEAD + "Since then.\n")
    a = assemble(load_settings(pack))
    html = a.html()
    assert "Commentary by &lt;b&gt;Bold&lt;/b&gt; &amp; Co, 1 December 2026" in html
    assert "<b>Bold</b>" not in html
    # no [compare] table: the changes note cannot be shown, and the user is told
    assert [str(w) for w in a.compare_warnings] == [
        "commentary/changes.md: warning: not shown: there is no [compare] table in "
        "pack.toml, so the pack has no 'Since last pack' section"]
    assert 'id="changes"' not in html


def test_symlink_out_of_the_pack_is_refused(tmp_path):
    outside = tmp_path / "outside.png"
    png(outside)
    pack = tmp_path / "pack"
    (pack / "commentary" / "img").mkdir(parents=True)
    (pack / "commentary" / "img" / "link.png").symlink_to(outside)
    with pytest.raises(InputError) as exc:
        render_commentary("summary", "commentary/summary.md", HEAD + "![x](img/link.png)\n",
                          pack / "commentary", pack)
    assert [str(p) for p in exc.value.problems] == [
        "commentary/summary.md:5: image 'img/link.png' is not allowed: it leaves the pack "
        "folder"]


def test_invisible_characters_are_refused_with_their_line(tmp_path):
    text = ("---\nauthor: Ruth \u202eRELIAM\ndate: 2026-12-01\ntitle: Q\u2066\n---\n"
            "Fine.\nHidden\u200b space.\n")
    assert problems_of(text, tmp_path) == [
        "commentary/summary.md:2: invisible control character U+202E",
        "commentary/summary.md:4: invisible control character U+2066",
        "commentary/summary.md:7: invisible control character U+200B"]


def test_invisible_author_fails_check(tmp_path, capsys):
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    path = pack / "commentary" / "summary.md"
    text = path.read_text()
    assert text.startswith("---\nauthor: ")
    path.write_text(text.replace("author: ", "author: \u202e", 1))
    assert_check_refuses(capsys, pack, "commentary/summary.md:2: invisible control character "
                         "U+202E")


@pytest.mark.parametrize("head,line,message", [
    # values YAML reads as timestamps but Python cannot build: one line each, never a crash
    ("---\nauthor: A\ndate: 2026-02-30\n---\n", 3, "front matter needs 'date: YYYY-MM-DD'; "
     "'2026-02-30' is no real date or time (day is out of range for month)"),
    ("---\nauthor: A\ndate: 2026-02-30 10:00:00\n---\n", 3,
     "front matter needs 'date: YYYY-MM-DD'; '2026-02-30 10:00:00' is no real date"),
    ("---\nauthor: A\ndate: 2026-01-01T25:00:00\n---\n", 3,
     "front matter needs 'date: YYYY-MM-DD'; '2026-01-01T25:00:00' is no real date"),
    ("---\nauthor: A\ndate: 2026-01-01T10:00:00+99:00\n---\n", 3,
     "front matter needs 'date: YYYY-MM-DD'; '2026-01-01T10:00:00+99:00' is no real date"),
    ("---\nauthor: A\ndate: 0000-01-01\n---\n", 3,
     "front matter needs 'date: YYYY-MM-DD'; '0000-01-01' is no real date"),
    ("---\nauthor: A\ndate: 99999-01-01\n---\n", 3, "front matter needs 'date: YYYY-MM-DD'"),
    # explicit tags YAML cannot build, in any key
    ("---\nauthor: A\ndate: 2026-12-01\ntitle: !!int abc\n---\n", 4,
     "front matter is not valid YAML: 'abc' is not a valid int"),
    ("---\nauthor: !!bool maybe\ndate: 2026-12-01\n---\n", 2,
     "front matter is not valid YAML: 'maybe' is not a valid bool"),
    ("---\nauthor: A\ndate: !!timestamp soon\n---\n", 3,
     "front matter is not valid YAML: 'soon' is not a valid timestamp"),
    ("---\nauthor: A\ndate: " + "[" * 3000 + "\n---\n", 2,
     "front matter is nested too deeply"),
])
def test_front_matter_values_yaml_cannot_build(tmp_path, head, line, message):
    (got,) = problems_of(head + "Text.\n", tmp_path)
    assert got.startswith(f"commentary/summary.md:{line}: {message}")


def test_front_matter_title_shaped_like_a_bad_date_is_text(tmp_path):
    c = render_commentary("summary", "commentary/summary.md",
                          "---\nauthor: A\ndate: 2026-12-01\ntitle: 2026-02-30\n---\nText.\n",
                          tmp_path / "commentary", tmp_path)
    assert c.title == "2026-02-30"


def test_impossible_front_matter_date_is_an_input_error_in_check(tmp_path, capsys):
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    (pack / "commentary").mkdir(exist_ok=True)
    (pack / "commentary" / "summary.md").write_text(
        "---\nauthor: A\ndate: 2026-02-30\n---\nbody\n", encoding="utf-8")
    assert_check_refuses(capsys, pack, "commentary/summary.md:3: front matter needs 'date: "
                         "YYYY-MM-DD'; '2026-02-30' is no real date or time (day is out of "
                         "range for month)")


@pytest.mark.parametrize("head,line,message", [
    ("---\nauthor: A\nauthor: B\ndate: 2026-12-01\n---\n", 3,
     "front matter key 'author' is given twice (first on line 2); keep one"),
    ("---\ndate: 2026-12-01\nauthor: A\ntitle: T\ndate: 2026-12-02\n---\n", 5,
     "front matter key 'date' is given twice (first on line 2); keep one"),
])
def test_front_matter_key_given_twice_is_refused(tmp_path, head, line, message):
    (got,) = problems_of(head + "Text.\n", tmp_path)
    assert got == f"commentary/summary.md:{line}: {message}"
