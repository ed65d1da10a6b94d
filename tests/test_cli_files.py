"""Files named on the command line (a key, trusted roots, minuted heads, a file to verify
or countersign) must be regular files: a FIFO, a device or a folder is one line, exit 2,
and is never opened in a way that blocks or reads without end."""

from __future__ import annotations

import os
import resource
import subprocess
import sys
from pathlib import Path

import pytest

from reporter.errors import InputError
from tests.conftest import REPO, run_cli

TIMEOUT_S = 60
KIND = {"fifo": "a FIFO", "device": "a device", "folder": "a folder"}


def special(kind: str, tmp_path: Path) -> Path:
    if kind == "fifo":
        path = tmp_path / "fifo"
        os.mkfifo(path)
        return path
    if kind == "folder":
        path = tmp_path / "folder"
        path.mkdir()
        return path
    return Path("/dev/zero")


def _limit_memory() -> None:          # old code read /dev/zero without end
    resource.setrlimit(resource.RLIMIT_AS, (4 << 30, 4 << 30))


@pytest.mark.parametrize("kind", ["fifo", "device", "folder"])
def test_head_file_that_is_not_a_regular_file_is_refused(kind, tmp_path):
    path = special(kind, tmp_path)
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    proc = subprocess.run([sys.executable, "-m", "reporter", "verify", "--archive",
                           str(tmp_path / "arch"), "--head-file", str(path)],
                          capture_output=True, text=True, timeout=TIMEOUT_S, env=env,
                          preexec_fn=_limit_memory)
    assert proc.returncode == 2
    assert proc.stderr.splitlines() == [f"reporter: {path}: not a regular file "
                                        f"({KIND[kind]}); give a file"]


def test_oversized_head_file_is_refused(tmp_path, capsys):
    minutes = tmp_path / "minutes.txt"
    minutes.write_text("# padding\n" * 200_000)
    code, _, err = run_cli(capsys, "verify", "--archive", tmp_path / "arch", "--head-file",
                           minutes)
    assert code == 2
    assert err.splitlines() == [f"reporter: {minutes}: too large for a file of ledger heads"]


@pytest.mark.parametrize("kind", ["fifo", "device", "folder"])
def test_verify_file_that_is_not_a_regular_file_is_refused(kind, tmp_path, capsys):
    path = special(kind, tmp_path)
    code, out, err = run_cli(capsys, "verify", path, "--archive", tmp_path / "arch")
    assert code == 2 and out == ""
    assert len(err.splitlines()) == 1 and "not a regular file" in err


@pytest.mark.parametrize("kind", ["fifo", "device", "folder"])
def test_key_trust_and_countersigned_pdf_refuse_special_files(kind, tmp_path):
    from reporter.archive.countersign import countersign
    from reporter.archive.keys import load_signing_key, open_key
    from reporter.archive.signature import load_roots

    path = special(kind, tmp_path)
    for call in (lambda: open_key(path, None), lambda: load_signing_key(path, b"x"),
                 lambda: load_roots(path),
                 lambda: countersign(path, tmp_path / "arch", None, signer="A B")):
        with pytest.raises(InputError) as info:
            call()
        assert [p.message for p in info.value.problems] == [
            f"not a regular file ({KIND[kind]}); give a file"]


def test_trust_without_file_is_refused(tmp_path, capsys):
    roots = tmp_path / "roots.pem"
    roots.write_text("not used\n")
    code, out, err = run_cli(capsys, "verify", "--archive", tmp_path / "arch", "--trust", roots)
    assert code == 2 and out == ""
    assert err.splitlines() == ["reporter: --trust checks the digital signatures of FILE; give "
                                "it with FILE"]
