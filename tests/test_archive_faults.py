"""Sign-offs that race each other or are killed leave a consistent archive, and what a kill
can leave behind is named by verify and put aside by repair without losing anything."""

from __future__ import annotations

import hashlib
import os
import queue
import signal
import sqlite3
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

from reporter.archive.ledger import connect_for_writing
from reporter.cli import main
from reporter.writer import OutputSet, place_in_archive
from tests.conftest import REPO


def sign_off_process(build: Path, archive: Path, signer: str, quiet: bool = True):
    argv = [sys.executable, "-m", "reporter", "sign-off", str(build), "--archive", str(archive),
            "--by", signer]
    return subprocess.Popen(argv + (["--quiet"] if quiet else []), cwd=REPO, text=True,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)


def entry_count(archive: Path) -> int:
    con = sqlite3.connect(archive / "ledger.sqlite")
    try:
        return con.execute("SELECT count(*) FROM entries").fetchone()[0]
    finally:
        con.close()


def archived_files(archive: Path) -> list[str]:
    return sorted(p.relative_to(archive).as_posix() for p in archive.rglob("*")
                  if p.is_file() and not p.name.startswith("ledger.sqlite"))


def test_two_sign_offs_at_once_exactly_one_succeeds(demo_build, tmp_path, capsys):
    archive = tmp_path / "archive"
    procs = [sign_off_process(demo_build, archive, name) for name in ("First Signer",
                                                                      "Second Signer")]
    results = [(p.wait(timeout=300), *p.communicate()) for p in procs]
    codes = sorted(r[0] for r in results)
    assert codes == [0, 1], results
    loser = next(r for r in results if r[0] == 1)
    assert ("already signed off" in loser[2]
            or "another sign-off was recorded" in loser[2]), loser[2]
    assert "Traceback" not in loser[2]
    assert entry_count(archive) == 1
    assert sorted(f for f in archived_files(archive) if f.endswith(".pdf")) == [
        "2026-11-30/tarnbrook-valley-2026-11-30-trustees.pdf",
        "2026-11-30/tarnbrook-valley-2026-11-30.pdf"]      # one sign-off: both editions
    assert main(["verify", "--archive", str(archive)]) == 0
    assert "archive intact: 1 entries" in capsys.readouterr().out


@pytest.mark.parametrize("after_stage", ["re-render", "pdf"])
def test_killed_sign_off_leaves_no_entry_without_file_or_file_without_entry(
        demo_build, tmp_path, capsys, after_stage):
    """Kill -9 as soon as a stage has finished (after 'pdf' the process is placing files and
    writing the entry, a few milliseconds, so the kill lands before, during or after)."""
    archive = tmp_path / "archive"
    proc = sign_off_process(demo_build, archive, "Killed Signer", quiet=False)
    lines: queue.Queue[str] = queue.Queue()
    threading.Thread(target=lambda: [lines.put(ln.strip()) for ln in proc.stderr],
                     daemon=True).start()
    deadline = time.monotonic() + 120
    seen = []
    while proc.poll() is None and time.monotonic() < deadline:
        try:
            seen.append(lines.get(timeout=0.01))
        except queue.Empty:
            continue
        if seen[-1].startswith(f"reporter: {after_stage} done"):
            os.kill(proc.pid, signal.SIGKILL)
            break
    proc.wait(timeout=60)
    assert any(ln.startswith(f"reporter: {after_stage} done") for ln in seen), seen

    if not (archive / "ledger.sqlite").exists():
        # killed before the archive was opened: nothing at all was written
        assert not archive.exists() or archived_files(archive) == []
        return
    code = main(["verify", "--archive", str(archive)])
    out = capsys.readouterr().out
    if entry_count(archive) == 1:
        assert code == 0, out          # the entry was committed with every file in place
        return
    # no entry: any file placed before the kill is named, and repair sets it aside
    assert code in (0, 1), out
    if code == 1:
        assert all(": unrecorded:" in ln for ln in out.splitlines()[:-1]), out
    assert main(["repair", "--archive", str(archive)]) == 0
    capsys.readouterr()
    assert main(["verify", "--archive", str(archive)]) == 0
    assert archived_files(archive) == [] or all(
        f.startswith("quarantine/") for f in archived_files(archive))


def test_files_placed_without_their_entry_are_named_and_quarantined(tmp_path, capsys):
    """The state a kill between placing the files and committing the entry leaves."""
    archive = tmp_path / "archive"
    archive.mkdir()
    connect_for_writing(archive).close()          # an archive with an empty ledger
    files = OutputSet()
    files.add("2026-10-31/x-2026-10-31.pdf", b"%PDF-1.7 placed, never recorded")
    files.add("2026-10-31/x-2026-10-31/pack.html", b"<!DOCTYPE html><p>draft</p>")
    place_in_archive(files, archive)
    # and a staging folder left by a sign-off process that no longer exists
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True).stdout.strip()
    staging = archive / ".staging" / f"{dead}-0000abcd"
    (staging / "2026-10-31").mkdir(parents=True)
    (staging / "2026-10-31" / "y.pdf").write_bytes(b"half-staged")

    assert main(["verify", "--archive", str(archive)]) == 1
    out = capsys.readouterr().out
    assert "2026-10-31/x-2026-10-31.pdf: unrecorded" in out
    assert "2026-10-31/x-2026-10-31/pack.html: unrecorded" in out
    assert f"note: .staging/{dead}-0000abcd: left by an interrupted sign-off" in out

    before = {hashlib.sha256(b"%PDF-1.7 placed, never recorded").hexdigest(),
              hashlib.sha256(b"<!DOCTYPE html><p>draft</p>").hexdigest(),
              hashlib.sha256(b"half-staged").hexdigest()}
    assert main(["repair", "--archive", str(archive)]) == 0
    out = capsys.readouterr().out
    assert out.count("moved ") == 3
    kept = {hashlib.sha256(p.read_bytes()).hexdigest()
            for p in (archive / "quarantine").rglob("*") if p.is_file()}
    assert kept == before                   # nothing lost
    assert not (archive / "2026-10-31").exists() and not staging.exists()
    assert main(["verify", "--archive", str(archive)]) == 0


def test_a_file_name_with_a_line_break_is_one_line_in_verify_and_repair(tmp_path, capsys):
    # a name holding a line break split its finding in two: the second half read as a
    # line of its own ("b.pdf: unrecorded: ..."), naming a file that does not exist
    archive = tmp_path / "archive"
    archive.mkdir()
    connect_for_writing(archive).close()          # an archive with an empty ledger
    (archive / "2026-10-31").mkdir()
    (archive / "2026-10-31" / "a\nb.pdf").write_bytes(b"placed, never recorded")
    (archive / "2026-10-31" / "tab\there\x1b[2J.pdf").write_bytes(b"also never recorded")
    assert main(["verify", "--archive", str(archive)]) == 1
    out = capsys.readouterr().out.splitlines()
    assert out == [
        "'2026-10-31/a\\nb.pdf': unrecorded: in the archive but no ledger entry records it "
        "('reporter repair' moves it to quarantine)",
        "'2026-10-31/tab\\there\\x1b[2J.pdf': unrecorded: in the archive but no ledger "
        "entry records it ('reporter repair' moves it to quarantine)",
        "archive NOT intact: 2 problem(s)"]
    assert main(["repair", "--archive", str(archive)]) == 0
    out = capsys.readouterr().out.splitlines()
    assert len(out) == 2 and all(ln.startswith("moved '2026-10-31/") for ln in out), out
    assert "a\\nb.pdf' -> 'quarantine/" in out[0] and out[0].endswith("a\\nb.pdf'")


def test_archived_file_is_never_overwritten(tmp_path):
    from reporter.errors import OutputError

    archive = tmp_path / "archive"
    first = OutputSet()
    first.add("2026-10-31/x.pdf", b"signed")
    place_in_archive(first, archive)
    again = OutputSet()
    again.add("2026-10-31/x.pdf", b"something else")
    with pytest.raises(OutputError, match="never overwritten"):
        place_in_archive(again, archive)
    assert (archive / "2026-10-31/x.pdf").read_bytes() == b"signed"
    # and a build may not write into an archive
    (archive / "ledger.sqlite").write_bytes(b"")
    assert main(["build", str(REPO / "inputs/demo"), "--out", str(archive / "x"),
                 "--quiet"]) == 2


def test_a_second_repair_in_the_same_second_takes_its_own_quarantine_folder(tmp_path):
    # two repairs within one second named the same quarantine/<stamp>/ folder, and the
    # second refused to overwrite the first's file (safe, but the stray file stayed put)
    from reporter.archive.verify import _free_stamp

    stamp = "20261204T065944Z"
    assert _free_stamp(tmp_path, stamp) == stamp
    (tmp_path / "quarantine" / stamp).mkdir(parents=True)
    assert _free_stamp(tmp_path, stamp) == f"{stamp}-2"
    (tmp_path / "quarantine" / f"{stamp}-2").mkdir()
    assert _free_stamp(tmp_path, stamp) == f"{stamp}-3"


def test_an_archive_path_with_a_line_break_is_one_line(tmp_path, capsys):
    folder = tmp_path / "bad\narch"
    folder.mkdir()
    assert main(["verify", "--archive", str(folder)]) == 2
    err = capsys.readouterr().err
    assert len(err.splitlines()) == 1 and "bad\\narch" in err
