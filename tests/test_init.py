"""`reporter init FOLDER`: a starter pack a newcomer can fill in, and `reporter check` on it
before it is filled in says what is missing, one line a file, without a traceback."""

from __future__ import annotations

import csv
import tomllib

from tests.conftest import DEMO, run_cli


def test_init_writes_a_commented_pack_toml_and_csv_headers_the_demo_uses(tmp_path, capsys):
    folder = tmp_path / "new-scheme"
    code, out, err = run_cli(capsys, "init", folder)
    assert code == 0 and not err
    names = sorted(p.name for p in folder.iterdir())
    assert names == ["holdings.csv", "market.csv", "pack.toml", "returns.csv", "risk_free.csv"]
    assert f"reporter check {folder}" in out
    toml_text = (folder / "pack.toml").read_text(encoding="utf-8")
    cfg = tomllib.loads(toml_text)
    assert cfg["pack"]["name"] == "new-scheme"
    assert cfg["inputs"] == {"holdings": "holdings.csv", "returns": "returns.csv",
                             "market": "market.csv", "risk_free": "risk_free.csv"}
    assert sum(line.lstrip().startswith("#") for line in toml_text.splitlines()) >= 10
    # each CSV is a header and nothing else, with the same columns as the demo's own file
    for name in ("holdings.csv", "returns.csv", "market.csv", "risk_free.csv"):
        rows = list(csv.reader((folder / name).open(encoding="utf-8")))
        with (DEMO / name).open(encoding="utf-8") as fh:
            demo_header = next(csv.reader(fh))
        assert rows == [demo_header], name


def test_check_on_a_fresh_init_names_every_empty_file(tmp_path, capsys):
    folder = tmp_path / "pack"
    assert run_cli(capsys, "init", folder)[0] == 0
    code, out, err = run_cli(capsys, "check", folder)
    assert code == 2
    assert "Traceback" not in err + out and "internal error" not in err
    lines = err.strip().splitlines()
    assert lines[-1] == "reporter: 4 error(s) in the inputs; nothing was written"
    named = sorted(line.split(":")[0].rsplit("/", 1)[-1] for line in lines[:-1])
    assert named == ["holdings.csv", "market.csv", "returns.csv", "risk_free.csv"]
    assert all("no holdings" in line or "no rows" in line for line in lines[:-1])


def test_init_refuses_a_folder_that_is_not_empty_and_touches_nothing(tmp_path, capsys):
    folder = tmp_path / "mine"
    folder.mkdir()
    (folder / "notes.txt").write_text("keep me", encoding="utf-8")
    code, out, err = run_cli(capsys, "init", folder)
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and "is not empty" in err
    assert [p.name for p in folder.iterdir()] == ["notes.txt"]
    assert (folder / "notes.txt").read_text(encoding="utf-8") == "keep me"
    # a file in the way, and an empty folder (accepted)
    code, _, err = run_cli(capsys, "init", folder / "notes.txt")
    assert code == 2 and "is a file" in err and err.count("\n") == 1
    empty = tmp_path / "empty"
    empty.mkdir()
    assert run_cli(capsys, "init", empty)[0] == 0
    assert (empty / "pack.toml").is_file()
    # no staging folder is left beside the targets
    assert sorted(p.name for p in tmp_path.iterdir()) == ["empty", "mine"]


def test_init_under_a_file_says_the_file_is_not_a_folder(tmp_path, capsys):
    notes = tmp_path / "notes.txt"
    notes.write_text("keep me", encoding="utf-8")
    for target in (notes / "mine", notes / "a" / "mine"):
        code, out, err = run_cli(capsys, "init", target)
        assert code == 2 and out == ""
        assert err.splitlines() == [f"reporter: {target}: {notes} is a file, not a folder"]
    code, _, err = run_cli(capsys, "init", tmp_path / "none" / "mine")
    assert err.splitlines() == [f"reporter: {tmp_path / 'none' / 'mine'}: the folder "
                                f"{tmp_path / 'none'} does not exist"]
    assert notes.read_text(encoding="utf-8") == "keep me"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes.txt"]
