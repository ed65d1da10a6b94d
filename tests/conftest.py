"""Shared fixtures. The demo pack is built once per test session (PDF rendering is slow)."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent
DEMO = REPO / "inputs" / "demo"
GOLDEN = Path(__file__).resolve().parent / "golden"
# 2026-11-30T00:00:00Z: the build date used for golden files and byte-identical checks.
FIXED_EPOCH = "1795996800"


@pytest.fixture(scope="session")
def demo_build(tmp_path_factory) -> Path:
    """The demo pack built once with a fixed SOURCE_DATE_EPOCH; returns the output folder."""
    from reporter.cli import main

    out = tmp_path_factory.mktemp("demo") / "pack"
    old = os.environ.get("SOURCE_DATE_EPOCH")
    os.environ["SOURCE_DATE_EPOCH"] = FIXED_EPOCH
    try:
        code = main(["build", str(DEMO), "--out", str(out), "--quiet"])
    finally:
        if old is None:
            os.environ.pop("SOURCE_DATE_EPOCH", None)
        else:
            os.environ["SOURCE_DATE_EPOCH"] = old
    assert code == 0
    return out


@pytest.fixture(scope="session")
def french():
    """Ken French Data Library monthly factors and industry portfolios, as bundled in
    linearmodels (an open dataset of real returns; used in tests only)."""
    from linearmodels.datasets import french as ff

    return ff.load()


SIGNER = {"by": "Ruth Okafor", "role": "Chair of the investment committee",
          "minute_ref": "IC-2026-11/07", "note": "Approved subject to the minuted comments"}


@pytest.fixture(scope="session")
def signed_archive(demo_build, tmp_path_factory) -> Path:
    """An archive holding the demo pack signed off (entry 1) and signed again with
    --supersedes (entry 2). Tests that alter it must work on a copy."""
    from reporter.cli import main

    archive = tmp_path_factory.mktemp("archive") / "archive"
    assert main(["sign-off", str(demo_build), "--archive", str(archive), "--quiet",
                 "--by", SIGNER["by"], "--role", SIGNER["role"],
                 "--minute-ref", SIGNER["minute_ref"], "--note", SIGNER["note"]]) == 0
    assert main(["sign-off", str(demo_build), "--archive", str(archive), "--quiet",
                 "--by", "Tomas Lindqvist", "--supersedes",
                 "--reason", "Minute reference corrected"]) == 0
    return archive
