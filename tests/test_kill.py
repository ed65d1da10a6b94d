"""A killed build leaves the earlier output exactly as it was; archives and other folders
are never written into."""

from __future__ import annotations

import os
import queue
import shutil
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

from reporter.cli import main
from reporter.writer import ARCHIVE_MARKER, BUILD_MARKER, _host_tag
from tests.conftest import DEMO, FIXED_EPOCH, REPO

# The build prints "reporter: <stage> done" lines when not quiet. It is killed as soon as the
# charts are done (it is then rendering the PDF, the longest stage), or at the latest
# KILL_AFTER_S seconds after its first stage ended.
KILL_AFTER_S = 3.0


def tree(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def leftovers(out: Path) -> list[str]:
    return sorted(p.name for p in out.parent.iterdir()
                  if p.name.startswith(f".{out.name}.tmp-")
                  or p.name.startswith(f".{out.name}.old-"))


def test_killed_build_leaves_the_earlier_build(demo_build, tmp_path, capsys, monkeypatch):
    out = tmp_path / "pack"
    shutil.copytree(demo_build, out)
    before = tree(out)
    assert BUILD_MARKER in before and "pack.pdf" in before

    env = dict(os.environ, SOURCE_DATE_EPOCH=FIXED_EPOCH)
    proc = subprocess.Popen([sys.executable, "-m", "reporter", "build", str(DEMO), "--out",
                             str(out)], cwd=REPO, env=env, text=True,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    lines: queue.Queue[str] = queue.Queue()
    threading.Thread(target=lambda: [lines.put(ln.strip()) for ln in proc.stderr],
                     daemon=True).start()
    seen: list[str] = []
    first_stage_at = None
    deadline = time.monotonic() + 60
    while proc.poll() is None and time.monotonic() < deadline:
        try:
            seen.append(lines.get(timeout=0.02))
        except queue.Empty:
            pass
        if first_stage_at is None and any(ln.endswith(" done") for ln in seen):
            first_stage_at = time.monotonic()
        if any(ln.startswith("reporter: chart done") for ln in seen) or (
                first_stage_at is not None and time.monotonic() - first_stage_at > KILL_AFTER_S):
            break
    if proc.poll() is not None:
        pytest.fail(f"the build ended (code {proc.returncode}) before it was killed: {seen}")
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait(timeout=30)
    assert proc.returncode == -signal.SIGKILL
    # killed mid-way: after the inputs were read, before anything was written
    assert "reporter: read done" in " ".join(seen), seen
    assert not any(ln.startswith("reporter: write done") for ln in seen), seen

    assert tree(out) == before
    assert sorted(p.name for p in tmp_path.iterdir() if not p.name.startswith(".")) == ["pack"]

    # a build killed while writing leaves its temporary folder (named with its machine and
    # process id)
    # beside the output; the next build must clear it away
    stale = tmp_path / f".pack.tmp-{_host_tag()}-{proc.pid}-0123abcd"
    stale.mkdir(exist_ok=True)
    (stale / "pack.html").write_bytes(b"half written")

    monkeypatch.setenv("SOURCE_DATE_EPOCH", FIXED_EPOCH)
    code = main(["build", str(DEMO), "--out", str(out), "--quiet"])
    capsys.readouterr()
    assert code == 0
    assert leftovers(out) == []
    after = tree(out)
    assert BUILD_MARKER in after
    # same inputs and build date: the same figures as the earlier build
    assert after["results/securities.csv"] == before["results/securities.csv"]


def test_refuses_to_build_into_an_archive(tmp_path, capsys):
    archive = tmp_path / "archive"
    archive.mkdir()
    (archive / ARCHIVE_MARKER).write_bytes(b"SQLite format 3\x00 stand-in")
    (archive / "2026-10.pdf").write_bytes(b"%PDF signed pack")
    before = tree(archive)
    code = main(["build", str(DEMO), "--out", str(archive), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2
    assert "Traceback" not in err
    assert err.splitlines() == [f"reporter: {archive}: refusing to write into the archive at "
                                f"{archive}; signed packs are never overwritten"]
    assert tree(archive) == before
    assert leftovers(archive) == []

    inside = archive / "next"
    code = main(["build", str(DEMO), "--out", str(inside), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2
    assert err.splitlines() == [f"reporter: {inside}: refusing to write into the archive at "
                                f"{archive}; signed packs are never overwritten"]
    assert not inside.exists()
    assert tree(archive) == before


def test_refuses_a_folder_that_is_not_a_build(tmp_path, capsys):
    out = tmp_path / "documents"
    out.mkdir()
    (out / "minutes.txt").write_text("committee minutes\n", encoding="utf-8")
    before = tree(out)
    code = main(["build", str(DEMO), "--out", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2
    assert "Traceback" not in err
    assert err.splitlines() == [f"reporter: {out}: folder exists, is not empty and is not a "
                                "pack build; refusing to replace it (choose another --out); "
                                "in the way: minutes.txt"]
    assert tree(out) == before
    assert leftovers(out) == []
