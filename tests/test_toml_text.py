"""pack.toml's text carries no invisible format characters (issue: a right-to-left override
in a title or a mandate name makes the page read other than its bytes)."""

from __future__ import annotations

import shutil

import pytest

from tests.conftest import DEMO, run_cli


@pytest.mark.parametrize("char", ["\u202e", "\u200b", "\u2066", "\ufeff"])
def test_format_character_in_pack_toml_is_an_error_naming_the_key(tmp_path, capsys, char):
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    toml = pack / "pack.toml"
    text = toml.read_text(encoding="utf-8")
    old = 'organisation = "Tarnbrook Valley Staff Pension Scheme"'
    assert old in text
    toml.write_text(text.replace(old, f'organisation = "Tarnbrook{char} Valley"'),
                    encoding="utf-8")
    code, out, err = run_cli(capsys, "check", pack)
    assert code == 2
    assert err.splitlines()[0] == (f"pack.toml:pack.organisation: invisible control character "
                                   f"U+{ord(char):04X}")


def test_ordinary_accents_and_symbols_are_fine():
    from reporter.invisible import format_characters, toml_problems

    assert format_characters("Caf\u00e9 \u00a3 \u2013 \u00e9") == []
    assert [str(p) for p in toml_problems(
        {"mandates": [{"name": "ok"}, {"name": "a\u202eb"}]}, "pack.toml")] == [
        "pack.toml:mandates.1.name: invisible control character U+202E"]


def test_a_control_character_in_a_key_is_an_error_naming_it_escaped():
    # a tab or line break in a [limits] sector key named no sector and was only a warning
    # ("no holding belongs to the sector 'a\tb'"); a line break in a value stays allowed
    from reporter.invisible import toml_problems

    raw = {"limits": {"max_sector_weight": {"a\tb": 0.1, "Fin\nancials": 0.1, "ok": 0.1}},
           "pack": {"title": "two\nlines"}}
    assert [str(p) for p in toml_problems(raw, "pack.toml")] == [
        "pack.toml:limits.max_sector_weight.a\tb: control character in a key: \\t",
        "pack.toml:limits.max_sector_weight.Fin\nancials: control character in a key: \\n"]
