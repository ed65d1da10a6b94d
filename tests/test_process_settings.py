"""Process settings the tool makes when it is imported."""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

CODE = "import os, reporter, numpy; print(os.environ[{name!r}])"


def _run(name: str, env: dict[str, str]) -> str:
    return subprocess.run([sys.executable, "-c", CODE.format(name=name)], env=env,
                          capture_output=True, text=True, check=True).stdout.strip()


@pytest.mark.parametrize(("name", "ours", "users"), [
    ("NUMPY_MADVISE_HUGEPAGE", "0", "1"),      # numpy's huge-page advice off
    ("OPENBLAS_THREAD_TIMEOUT", "4", "12"),    # OpenBLAS's idle threads sleep at once
])
def test_process_settings_hold_unless_the_user_set_them(name, ours, users):
    env = {k: v for k, v in os.environ.items() if k != name}
    assert _run(name, env) == ours
    assert _run(name, {**env, name: users}) == users
