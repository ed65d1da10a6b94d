"""The PDF renderer's URL fetcher: files inside the pack folder and the packaged templates
are served; anything else (network, other files, ``..`` escapes) stops the build with a clear
error, and no network connection is ever attempted."""

from __future__ import annotations

import io
import shutil
import socket

import pypdf
import pytest
from PIL import Image

from reporter.cli import main
from reporter.errors import InputError
from reporter.render.environment import default_templates_dir
from reporter.render.pdf import render_pdf
from tests.conftest import DEMO


@pytest.fixture()
def no_network(monkeypatch):
    """Fail the test if anything tries to open a network connection."""
    def refuse(*args, **kwargs):
        raise AssertionError("a network connection was attempted")
    monkeypatch.setattr(socket.socket, "connect", refuse)
    monkeypatch.setattr(socket, "create_connection", refuse)


def png_bytes() -> bytes:
    buf = io.BytesIO()
    Image.new("RGB", (8, 8), (40, 110, 110)).save(buf, format="PNG")
    return buf.getvalue()


def n_images(pdf: bytes) -> int:
    reader = pypdf.PdfReader(io.BytesIO(pdf))
    return sum(len(page.images) for page in reader.pages)


@pytest.mark.parametrize("markup,url", [
    ('<img src="https://example.org/logo.png">', "https://example.org/logo.png"),
    ('<link rel="stylesheet" href="http://example.org/a.css">', "http://example.org/a.css"),
    ('<img src="file:///etc/passwd">', "file:///etc/passwd"),
    ('<style>@font-face { font-family: X; src: url(ftp://example.org/x.woff) }'
     ' p { font-family: X }</style><p>x</p>', "ftp://example.org/x.woff"),
])
def test_foreign_urls_are_refused(tmp_path, no_network, markup, url):
    with pytest.raises(InputError) as exc:
        render_pdf(f"<html><body>{markup}<p>text</p></body></html>", base_dir=tmp_path,
                   allowed=(tmp_path,))
    (problem,) = exc.value.problems
    assert problem.where == "pack.pdf"
    assert problem.message.startswith(f"refused to fetch {url!r}")


def test_relative_path_leaving_the_pack_is_refused(tmp_path, no_network):
    pack = tmp_path / "pack"
    pack.mkdir()
    (tmp_path / "outside.png").write_bytes(png_bytes())
    with pytest.raises(InputError) as exc:
        render_pdf('<img src="../outside.png">', base_dir=pack, allowed=(pack,))
    assert "outside.png" in exc.value.problems[0].message


def test_files_inside_the_pack_and_templates_are_served(tmp_path, no_network):
    (tmp_path / "img").mkdir()
    (tmp_path / "img" / "logo.png").write_bytes(png_bytes())
    css = (default_templates_dir() / "pack.css").as_uri()
    pdf = render_pdf(f'<link rel="stylesheet" href="{css}"><p>x</p><img src="img/logo.png">',
                     base_dir=tmp_path, allowed=(tmp_path,))
    assert n_images(pdf) == 1
    # inline data is no fetch
    assert render_pdf("<p>x</p>").startswith(b"%PDF")


def test_build_with_a_remote_resource_in_its_template_fails_clearly(tmp_path, no_network,
                                                                    capsys):
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    (pack / "my_templates").mkdir()
    (pack / "my_templates" / "pack.html.j2").write_text(
        '{% extends "default/pack.html.j2" %}\n{% block cover %}{{ super() }}'
        '<img src="https://cdn.example.net/crest.png" alt="crest">{% endblock %}\n')
    with open(pack / "pack.toml", "a") as fh:
        fh.write('\n[render]\ntemplates = "my_templates"\n')
    out = tmp_path / "out"
    code = main(["build", str(pack), "--out", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2
    # the rendered HTML is checked before the PDF is drawn (reporter.render.safety); the
    # fetcher above stays as the second line for anything that reaches WeasyPrint
    assert "templates/pack.html.j2: refused remote reference " \
        "'https://cdn.example.net/crest.png'" in err
    assert "Traceback" not in err and "nothing was written" in err
    assert not out.exists()
