"""The results files are written into the staging folder beside the output while the PDF is
rendered (a second thread), and the largest goes to disk as it is made. The build must still
be all-or-nothing: a failure in either thread leaves the earlier output exactly as it was and
no staging folder behind; a success gives the same files and hashes as the in-memory path."""

from __future__ import annotations

import hashlib
import json
import os
import shutil

import pytest

import reporter.build as build
import reporter.pipeline.results as results_module
from reporter.config import load_settings
from reporter.errors import OutputError, WriteFailed
from reporter.progress import Progress
from reporter.writer import BUILD_MARKER, OutputSet, commit, open_staging
from tests.conftest import DEMO


def tree(folder):
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def hidden(parent):
    return sorted(p.name for p in parent.iterdir() if p.name.startswith("."))


@pytest.fixture(scope="module")
def assembled():
    return build.assemble(load_settings(DEMO))


def test_written_file_goes_to_disk_hashed_and_is_swapped_in(tmp_path):
    out = tmp_path / "out"
    files = OutputSet(open_staging(out))
    payload = b"date,series,beta\n" + b"2026-01-30,X,1.0\n" * 50_000
    files.add_written("results/big.csv", lambda sink: [sink.write(payload[i:i + 4096])
                                                       for i in range(0, len(payload), 4096)])
    files.add("small.txt", "hello")
    # on disk in the staging folder already, and hashed on the way there
    assert (files.staging / "results/big.csv").read_bytes() == payload
    assert files.sha256("results/big.csv") == hashlib.sha256(payload).hexdigest()
    assert files.paths == ["results/big.csv", "small.txt"]
    commit(files, out)
    assert tree(out) == {BUILD_MARKER: tree(out)[BUILD_MARKER], "results/big.csv": payload,
                         "small.txt": b"hello"}
    assert hidden(tmp_path) == []                     # the staging folder became the output


def test_without_staging_a_written_file_is_kept_in_memory():
    files = OutputSet()
    files.add_written("a.csv", lambda sink: sink.write(b"x,y\n1,2\n"))
    assert bytes(files["a.csv"]) == b"x,y\n1,2\n"
    assert files.sha256("a.csv") == hashlib.sha256(b"x,y\n1,2\n").hexdigest()


def test_commit_refuses_a_staging_folder_of_another_target(tmp_path):
    files = OutputSet(open_staging(tmp_path / "one"))
    with pytest.raises(OutputError, match="not the staging folder"):
        commit(files, tmp_path / "two")


def test_staged_build_equals_the_in_memory_files(assembled, tmp_path):
    a = assembled
    out = tmp_path / "pack"
    files = build.finish_build(a, out, Progress(quiet=True))
    written = tree(out)
    memory = build.pack_files(a, a.html(for_print=False),      # the same PDF bytes
                              {edition: written[rel]
                               for edition, rel in build.EDITION_FILES.items()})
    for rel in memory.paths:
        assert written[rel] == bytes(memory[rel]), rel
    manifest = json.loads(written["results/manifest.json"])
    assert manifest["output_sha256"] == {
        rel: hashlib.sha256(written[rel]).hexdigest() for rel in files.paths
        if rel != "results/manifest.json"}
    assert hidden(tmp_path) == []


@pytest.mark.parametrize("where", ["pdf", "results"])
def test_a_failure_in_the_pdf_or_the_results_leaves_the_earlier_output(
        assembled, demo_build, tmp_path, monkeypatch, where):
    out = tmp_path / "pack"
    shutil.copytree(demo_build, out)
    before = tree(out)

    def boom(*args, **kwargs):
        raise RuntimeError(f"{where} failed")

    if where == "pdf":
        monkeypatch.setattr(build, "render_pdf", boom)
    else:
        monkeypatch.setattr(results_module, "write_rolling_csv", boom)
    with pytest.raises(RuntimeError, match=f"{where} failed"):
        build.finish_build(assembled, out, Progress(quiet=True))
    assert tree(out) == before
    assert hidden(tmp_path) == []                     # the staging folder was removed


def test_a_failure_stops_the_results_thread_and_nothing_is_left(assembled, demo_build, tmp_path,
                                                                monkeypatch):
    """The PDF fails while the results thread is still writing: the staging folder is removed
    at once, the thread stops at its next write (it does not write its remaining blocks), and
    it leaves nothing behind, not even once it has ended."""
    import threading
    import time

    out = tmp_path / "pack"
    shutil.copytree(demo_build, out)
    before = tree(out)
    blocks = []
    started = threading.Event()

    def slow_rolling(res, sink, widen=None):
        for _ in range(200):
            sink.write(b"2026-01-30,X,1.0,0.1,0.8,1.2\n" * 100)
            blocks.append(1)
            started.set()
            time.sleep(0.02)

    def failing_pdf(*args, **kwargs):
        started.wait(timeout=30)          # the thread is writing when the PDF fails
        raise RuntimeError("pdf failed")

    monkeypatch.setattr(results_module, "write_rolling_csv", slow_rolling)
    monkeypatch.setattr(build, "render_pdf", failing_pdf)
    with pytest.raises(RuntimeError, match="pdf failed"):
        build.finish_build(assembled, out, Progress(quiet=True))
    assert 1 <= len(blocks) < 200                   # stopped part-way, not run to the end
    assert tree(out) == before
    assert hidden(tmp_path) == []
    with pytest.raises(OutputError, match="abandoned"):
        files = OutputSet(open_staging(tmp_path / "other"))
        files.discard()
        files.add_written("late.csv", lambda sink: sink.write(b"x"))
    assert hidden(tmp_path) == []                   # a write after discard creates nothing


def test_without_an_atomic_exchange_a_failed_rename_puts_the_earlier_output_back(
        tmp_path, monkeypatch):
    """Where renameat2 is missing the swap is two renames; if the second fails, the earlier
    output is renamed back into place rather than left under a hidden name."""
    import os

    import reporter.writer as writer

    out = tmp_path / "out"
    first = OutputSet()
    first.add("a.txt", "earlier")
    commit(first, out)
    before = tree(out)
    real_rename = os.rename
    calls = []

    def rename(src, dst):
        calls.append((src, dst))
        if len(calls) == 2:                      # the staging folder onto the target
            raise OSError("simulated failure")
        return real_rename(src, dst)

    monkeypatch.setattr(writer, "_exchange", lambda a, b: False)
    monkeypatch.setattr(writer.os, "rename", rename)
    second = OutputSet()
    second.add("a.txt", "later")
    with pytest.raises(WriteFailed, match="simulated failure"):
        commit(second, out)
    monkeypatch.setattr(writer.os, "rename", real_rename)
    assert tree(out) == before
    assert hidden(tmp_path) == []


def _dead_pid() -> int:
    """A process id with no process behind it on this machine."""
    import subprocess
    import sys

    proc = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True)
    return int(proc.stdout)


def test_staging_folders_are_judged_by_process_id_only_on_their_own_machine(tmp_path,
                                                                            monkeypatch):
    """Workers of a cluster may build into one shared folder: a staging folder made on
    another machine is never cleared away on the strength of a process id, and one made here
    by a process that is gone is."""
    import reporter.writer as writer

    out = tmp_path / "pack"
    dead = _dead_pid()
    here = tmp_path / f".pack.tmp-{writer._host_tag()}-{dead}-0badf00d"
    there = tmp_path / f".pack.tmp-other_node.example-{dead}-0badf00d"
    old_form = tmp_path / f".pack.tmp-{dead}"
    for folder in (here, there, old_form):
        folder.mkdir()
        (folder / "pack.html").write_bytes(b"half written")
    staging = open_staging(out)
    assert staging.name.startswith(f".pack.tmp-{writer._host_tag()}-{os.getpid()}-")
    assert not here.exists() and not old_form.exists()
    assert (there / "pack.html").read_bytes() == b"half written"
    # the same process id on another machine (containers often share low ids) is not ours
    monkeypatch.setattr(writer.socket, "gethostname", lambda: "other-node.example")
    assert writer._host_tag() == "other_node.example"
    with pytest.raises(OutputError, match="not the staging folder"):
        commit(OutputSet(staging), out)
    monkeypatch.undo()
    files = OutputSet(staging)
    files.add("a.txt", "x")
    commit(files, out)
    assert (out / "a.txt").read_text() == "x"
    assert hidden(tmp_path) == [there.name]


def test_two_stagings_of_one_target_in_one_process_are_separate(tmp_path):
    first, second = open_staging(tmp_path / "pack"), open_staging(tmp_path / "pack")
    assert first != second and first.is_dir() and second.is_dir()


@pytest.mark.parametrize("pack", ["demo", "demo-fund"])
def test_a_releasing_build_writes_the_same_files_and_releases_its_arrays(tmp_path, pack):
    """finish_build(release=True), as a build runs it, drops the window's returns, the two
    covariance matrices and what the rolling betas are made from (every part of a fund),
    and writes byte for byte the files of a build that keeps them. (A fund's rolling table
    is one of the results files written after the PDF: releasing its returns with the
    single portfolio's, beside the PDF, once broke the fund's build.)"""
    import datetime as dt

    at = dt.datetime(2026, 11, 30, 12, 0, tzinfo=dt.UTC)
    trees = {}
    for release in (False, True):
        a = build.assemble(load_settings(DEMO.parent / pack), at=at)
        build.finish_build(a, tmp_path / str(release), Progress(quiet=True), release=release)
        trees[release] = tree(tmp_path / str(release))
        parts = (a.total, *a.parts) if pack == "demo-fund" else (a,)
        for res in (p.results for p in parts):
            sizes = (res.window.returns.size, res.covariance.matrix.size,
                     res.covariance_active.matrix.size, res.rolling.returns.size)
            if release:
                assert sizes == (0, 0, 0, 0)
                assert res.window.n_periods == len(res.window.dates) > 0  # the figures stay
            else:
                assert all(s > 0 for s in sizes)
    assert trees[True] == trees[False]
    assert "results/rolling_beta.csv" in trees[True]


@pytest.mark.parametrize("sig", ["SIGTERM", "SIGHUP"])
def test_a_build_ended_by_a_signal_leaves_no_staging_folder(tmp_path, sig):
    """``timeout`` or ``kill`` (SIGTERM), or a closed terminal (SIGHUP), during the PDF stage:
    Python's default was to die at once, and the build's staging folder beside --out stayed
    behind. Now the signal ends the command as Ctrl-C does: the staging folder is removed,
    --out is never made, one line says so, exit 1."""
    import signal
    import subprocess
    import sys
    import time

    out = tmp_path / "o"
    proc = subprocess.Popen([sys.executable, "-m", "reporter", "build", str(DEMO), "--out",
                             str(out)], stderr=subprocess.PIPE, text=True)
    seen = []
    for line in proc.stderr:                    # the PDF stage starts after "html done"
        seen.append(line)
        if line.startswith("reporter: html done"):
            break
    deadline = time.monotonic() + 20
    while not any(p.name.startswith(".o.tmp-") for p in tmp_path.iterdir()):
        assert time.monotonic() < deadline and proc.poll() is None, seen    # writing soon
        time.sleep(0.05)
    time.sleep(0.5)
    proc.send_signal(getattr(signal, sig))
    rest = proc.stderr.read()
    assert proc.wait(timeout=60) == 1, seen + [rest]
    assert "reporter: interrupted; nothing was written" in rest.splitlines(), rest
    assert "Traceback" not in rest
    assert list(tmp_path.iterdir()) == []
