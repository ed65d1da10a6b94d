"""Process settings the tool makes when it is imported."""

from __future__ import annotations

import os
import subprocess
import sys

CODE = "import os, reporter, numpy; print(os.environ['NUMPY_MADVISE_HUGEPAGE'])"


def _run(env: dict[str, str]) -> str:
    return subprocess.run([sys.executable, "-c", CODE], env=env, capture_output=True,
                          text=True, check=True).stdout.strip()


def test_numpy_huge_page_advice_is_off_unless_the_user_set_it():
    env = {k: v for k, v in os.environ.items() if k != "NUMPY_MADVISE_HUGEPAGE"}
    assert _run(env) == "0"
    assert _run({**env, "NUMPY_MADVISE_HUGEPAGE": "1"}) == "1"
