"""A fund's own pages see the same template names as a single portfolio's pack: a user's
fund.html.j2 that extends pack.html.j2 and keeps its chapters renders (it once failed on a
name only render_html set), and one that fetches is refused."""

from __future__ import annotations

import shutil

import pytest

from reporter.build import assemble
from reporter.config import load_settings
from reporter.errors import InputError
from tests.conftest import REPO

COVER = '{% extends "pack.html.j2" %}\n{% block cover %}<p>OUR COVER</p>{% endblock %}\n'


@pytest.fixture(scope="module")
def fund_with_templates(tmp_path_factory):
    folder = tmp_path_factory.mktemp("fund") / "fund"
    shutil.copytree(REPO / "inputs" / "demo-fund", folder)
    (folder / "templates").mkdir()
    with (folder / "pack.toml").open("a", encoding="utf-8") as f:
        f.write('\n[render]\ntemplates = "templates"\n')
    return folder


def test_a_user_fund_template_keeping_the_pack_chapters_renders(fund_with_templates):
    (fund_with_templates / "templates" / "fund.html.j2").write_text(COVER, encoding="utf-8")
    a = assemble(load_settings(fund_with_templates))
    for for_print in (False, True):
        html = a.html(for_print=for_print)
        assert "OUR COVER" in html
        assert "circles: within estimation error" in html      # the pack's SML caption


def test_a_user_fund_template_that_fetches_is_refused(fund_with_templates):
    (fund_with_templates / "templates" / "fund.html.j2").write_text(
        COVER.replace("<p>OUR COVER</p>", '<img src="https://evil.example/x.png" alt="">'),
        encoding="utf-8")
    a = assemble(load_settings(fund_with_templates))
    with pytest.raises(InputError, match="refused remote reference"):
        a.html(for_print=True)
