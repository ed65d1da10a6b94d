"""Attacks on the promise that what the committee approved never changes unseen: forged
results, a sign-off onto a broken chain, a consistently rewritten chain caught by the heads
in the minutes, symlinks, paths outside the archive and files made writable.

Each attack runs against a copy of the session's signed archive. Hashes are recomputed
here with hashlib and the ledger is rewritten with plain sqlite3 (as an attacker would),
independently of the tool's ledger code. Every refusal is checked to leave the archive
exactly as it was: the same paths, modes, bytes and link targets.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import sqlite3
import stat
from pathlib import Path

import pytest

from tests.conftest import ledger_entries, run_cli

PERIOD = "2026-11-30"
FOLDER = f"{PERIOD}/tarnbrook-valley-{PERIOD}"
SECURITIES = f"{FOLDER}/results/securities.csv"


def snapshot(root: Path) -> dict[str, tuple]:
    """Every path under ``root`` with its mode and its bytes (or a link's target)."""
    out = {}
    for dirpath, dirnames, filenames in os.walk(root):
        for name in (*dirnames, *filenames):
            p = Path(dirpath) / name
            st = p.lstat()
            body = (os.readlink(p) if p.is_symlink() else
                    p.read_bytes() if stat.S_ISREG(st.st_mode) else None)
            out[p.relative_to(root).as_posix()] = (stat.S_IMODE(st.st_mode), body)
    return out


def rewrite_chain(archive: Path, seq: int, **changes) -> None:
    """Change columns of entry ``seq`` and recompute its hash and every later one, as an
    attacker with write access to the ledger would: sha256 of the canonical JSON of every
    other column, each entry's prev_hash the hash before it (the chain's published rule)."""
    con = sqlite3.connect(archive / "ledger.sqlite")
    con.row_factory = sqlite3.Row
    rows = [dict(r) for r in con.execute("SELECT * FROM entries ORDER BY seq")]
    prev = "0" * 64
    for row in rows:
        if row["seq"] == seq:
            row.update(changes)
        if row["seq"] >= seq:
            row["prev_hash"] = prev
            body = {k: v for k, v in row.items() if k != "entry_hash"}
            text = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
            row["entry_hash"] = hashlib.sha256(text.encode("utf-8")).hexdigest()
            con.execute("UPDATE entries SET signer = ?, files = ?, prev_hash = ?, "
                        "entry_hash = ? WHERE seq = ?", (row["signer"], row["files"],
                                                         row["prev_hash"], row["entry_hash"],
                                                         row["seq"]))
        prev = row["entry_hash"]
    con.commit()
    con.close()


@pytest.fixture
def archive_copy(signed_archive, tmp_path) -> Path:
    dest = tmp_path / "archive"
    shutil.copytree(signed_archive, dest, symlinks=True)
    return dest


@pytest.fixture(scope="module")
def heads(signed_archive) -> list[str]:
    """The heads printed at the two sign-offs (entries 1 and 2), as minuted."""
    return [e["entry_hash"] for e in ledger_entries(signed_archive)]


# --- sign-off signs only what it reproduces, into an intact archive ------------------------

def test_forged_results_with_updated_manifest_are_refused(archive_copy, demo_build, tmp_path,
                                                          capsys):
    build = tmp_path / "build"
    shutil.copytree(demo_build, build)
    csv = build / "results/securities.csv"
    lines = csv.read_text(encoding="utf-8").splitlines(keepends=True)
    header = lines[0].rstrip("\n").split(",")
    cells = lines[1].rstrip("\n").split(",")
    cells[header.index("beta")] = "0.42"                 # a forged beta for the first holding
    lines[1] = ",".join(cells) + "\n"
    csv.write_text("".join(lines), encoding="utf-8")
    manifest = build / "results/manifest.json"
    m = json.loads(manifest.read_text(encoding="utf-8"))
    m["output_sha256"]["results/securities.csv"] = hashlib.sha256(csv.read_bytes()).hexdigest()
    manifest.write_text(json.dumps(m, indent=2, sort_keys=True) + "\n", encoding="utf-8")
    before = snapshot(archive_copy)

    code, out, err = run_cli(capsys, "sign-off", build, "--archive", archive_copy, "--by", "A N",
                             "--supersedes", "--reason", "forged", "--quiet")
    assert code == 2, err
    named = [ln.split(": ", 1)[0] for ln in err.splitlines() if "does not reproduce" in ln]
    # the forged file, and the manifest whose hash was changed to match it
    assert named == [str(build / "results/manifest.json"), str(csv)]
    assert "signed off" not in out
    assert snapshot(archive_copy) == before


def test_edited_ledger_row_blocks_sign_off(archive_copy, demo_build, capsys):
    con = sqlite3.connect(archive_copy / "ledger.sqlite")
    con.execute("UPDATE entries SET minute_ref = 'IC-2026-11/99' WHERE seq = 1")
    con.commit()
    con.close()
    before = snapshot(archive_copy)
    code, out, err = run_cli(capsys, "sign-off", demo_build, "--archive", archive_copy,
                             "--by", "A N", "--supersedes", "--reason", "again", "--quiet")
    assert code == 1
    lines = err.splitlines()
    assert lines[0] == (f"{archive_copy}: ledger.sqlite entry 1: ledger-edited: its contents "
                        "do not give its recorded hash (a field was edited)")
    assert lines[-1].startswith(f"reporter: {archive_copy}: the archive fails verification "
                                "(1 problem(s)); nothing was signed")
    assert "ledger head" not in out
    assert snapshot(archive_copy) == before
    assert len(ledger_entries(archive_copy)) == 2


# --- the heads in the minutes anchor the chain ------------------------------------------------

def test_consistently_rewritten_chain_is_caught_by_the_minuted_head(archive_copy, heads,
                                                                    capsys):
    rewrite_chain(archive_copy, 1, signer="Someone Else")
    # the rewrite is consistent: the chain alone cannot tell
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy)
    assert code == 0 and "archive intact: 2 entries" in out
    before = snapshot(archive_copy)
    for head in heads:
        code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy, "--head", head)
        assert code == 1
        assert (f"head {head} (--head): NOT anchored: no entry has this hash: the ledger was "
                "rewritten after this head was minuted") in out
        assert "1 of 1 minuted head(s) NOT anchored" in out
    assert snapshot(archive_copy) == before


def test_rewrite_after_a_head_names_the_entry(archive_copy, heads, capsys):
    # entry 2 rewritten after entry 1's head was minuted: that head still holds
    rewrite_chain(archive_copy, 2, signer="Someone Else")
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy, "--head", heads[0])
    assert code == 0 and f"head {heads[0]} (--head): anchored at entry 1" in out
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy, "--head", heads[1])
    assert code == 1 and f"head {heads[1]} (--head): NOT anchored" in out
    # entry 1 rewritten, its hash recomputed but not entry 2's link: the link names it
    con = sqlite3.connect(archive_copy / "ledger.sqlite")
    new_first = con.execute("SELECT entry_hash FROM entries WHERE seq = 1").fetchone()[0]
    con.close()
    rewrite_chain(archive_copy, 1, signer="A Third Name")
    con = sqlite3.connect(archive_copy / "ledger.sqlite")
    con.execute("UPDATE entries SET prev_hash = ? WHERE seq = 2", (new_first,))
    con.commit()
    con.close()
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy, "--head", new_first)
    assert code == 1
    assert ("no entry has this hash, though entry 2 links to it as the entry before it: "
            "entry 1 was rewritten after this head was minuted") in out


def test_head_file_with_two_heads(archive_copy, heads, tmp_path, capsys):
    minutes = tmp_path / "minutes-heads.txt"
    minutes.write_text(f"# heads from the minutes\n\n{heads[0]}  # IC-2026-11/07\n"
                       f"   {heads[1].upper()}\n", encoding="utf-8")
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy, "--head-file", minutes)
    assert code == 0, out
    assert f"head {heads[0]} ({minutes}:3): anchored at entry 1" in out
    assert f"head {heads[1]} ({minutes}:4): anchored at entry 2" in out
    assert "all 2 minuted head(s) anchored" in out
    rewrite_chain(archive_copy, 2, signer="Someone Else")
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy, "--head-file", minutes)
    assert code == 1
    assert f"head {heads[0]} ({minutes}:3): anchored at entry 1" in out
    assert f"head {heads[1]} ({minutes}:4): NOT anchored: no entry has this hash" in out
    assert "1 of 2 minuted head(s) NOT anchored" in out


def test_bad_head_syntax_is_one_line_exit_2(archive_copy, heads, tmp_path, capsys):
    code, out, err = run_cli(capsys, "verify", "--archive", archive_copy, "--head", "abc123")
    assert code == 2 and out == ""
    assert err.splitlines() == ["reporter: --head: 'abc123' is not a ledger head (a sha256: 64 "
                                "hexadecimal characters)"]
    minutes = tmp_path / "heads.txt"
    minutes.write_text(f"{heads[0]}\n{heads[1][:-1]}g\n", encoding="utf-8")
    code, _, err = run_cli(capsys, "verify", "--archive", archive_copy, "--head-file", minutes)
    assert code == 2 and len(err.splitlines()) == 1
    assert err.startswith(f"reporter: {minutes}:2: ")
    minutes.write_text("# nothing minuted yet\n\n", encoding="utf-8")
    code, _, err = run_cli(capsys, "verify", "--archive", archive_copy, "--head-file", minutes)
    assert code == 2 and err == f"reporter: {minutes}: holds no ledger head (one sha256 a line " \
                                "expected)\n"
    code, _, err = run_cli(capsys, "verify", "--archive", archive_copy, "--head-file",
                           tmp_path / "none.txt")
    assert code == 2 and len(err.splitlines()) == 1 and "cannot be read" in err


# --- what verify refuses to trust ------------------------------------------------------------

def test_symlinked_archived_file_is_a_finding(archive_copy, tmp_path, capsys):
    # the same bytes, but in a writable copy outside the archive that could change any time
    outside = tmp_path / "outside-securities.csv"
    outside.write_bytes((archive_copy / SECURITIES).read_bytes())
    (archive_copy / SECURITIES).unlink()
    (archive_copy / SECURITIES).symlink_to(outside)
    before = snapshot(archive_copy)
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy)
    assert code == 1
    assert f"{SECURITIES}: symlink: is a symbolic link (to {str(outside)!r})" in out
    assert "archive intact" not in out
    # a whole folder linked elsewhere is one too, and nothing under it is read
    results = archive_copy / f"{PERIOD}/tarnbrook-valley-{PERIOD}-r2/results"
    moved = tmp_path / "results-elsewhere"
    shutil.move(results, moved)
    results.symlink_to(moved, target_is_directory=True)
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy)
    assert code == 1 and f"{PERIOD}/tarnbrook-valley-{PERIOD}-r2/results: symlink" in out
    assert snapshot(archive_copy)[SECURITIES] == before[SECURITIES]


@pytest.mark.parametrize("bad", ["../../etc/hostname", "/etc/hostname",
                                 "2026-11-30\\..\\..\\x", "2026-11-30/./x.csv"])
def test_entry_recording_a_path_outside_the_archive_is_refused(archive_copy, bad, capsys):
    entry = ledger_entries(archive_copy)[0]
    files = json.loads(entry["files"])
    files[bad] = hashlib.sha256(b"anything").hexdigest()
    # the entry and every later hash recomputed: only the path itself gives it away
    rewrite_chain(archive_copy, 1, files=json.dumps(files, sort_keys=True,
                                                    separators=(",", ":")))
    before = snapshot(archive_copy)
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy)
    assert code == 1
    finding = [ln for ln in out.splitlines() if ": outside: " in ln]
    assert len(finding) == 1
    assert finding[0].startswith(f"ledger.sqlite entry 1: outside: records the path {bad!r}")
    assert finding[0].endswith("it was not read")
    assert snapshot(archive_copy) == before


def test_writable_archived_file_is_reported(archive_copy, capsys):
    html = archive_copy / FOLDER / "pack.html"
    html.chmod(0o644)
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy)
    assert code == 1
    assert out.splitlines()[0] == (f"{FOLDER}/pack.html: writable: mode 0644 lets it be "
                                   "written; archived files are read-only (0444). Check it, "
                                   "then 'chmod a-w' it")
    assert "1 problem(s)" in out                 # the bytes are unchanged: only the mode
    html.chmod(0o444)
    code, out, _ = run_cli(capsys, "verify", "--archive", archive_copy)
    assert code == 0 and "archive intact" in out


def test_path_rules_accept_only_plain_relative_paths():
    from reporter.archive.verify import path_problem

    assert path_problem(f"{FOLDER}/results/securities.csv") is None
    for bad in ("", "a//b", "a/", "../x", "a/../b", "/abs", "a\\b", "a/\x00", ".", "./a"):
        assert path_problem(bad) is not None, bad
    assert path_problem(7) is not None
