"""The benchmark code keeps working: the Small workload through it, end to end. (Benchmarks
are not timed tests; this only checks that what the benchmark measures and reports is whole
and consistent.)"""

from __future__ import annotations

import sys

import pytest

from tests.conftest import REPO

sys.path.insert(0, str(REPO / "benchmarks"))
import bench_pack  # noqa: E402
from workloads import write_scheme  # noqa: E402


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    folder = write_scheme(tmp_path_factory.mktemp("bench") / "small", *bench_pack.WORKLOADS[
        "small"], seed=7, label="S")
    return bench_pack.run_stages(folder)


def test_small_workload_measures_every_stage_and_floor(small):
    assert list(small["stages"]) == bench_pack.STAGES
    assert all(v > 0 for v in small["stages"].values())
    assert sorted(small["floors"]) == ["analytics", "pdf", "read"]
    # 50 holdings x the 60-month window, as float64
    assert (small["n_holdings"], small["n_periods"]) == (50, 60)
    assert small["matrix_bytes"] == 50 * 60 * 8
    assert small["pages"] >= 10 and small["peak_rss"] > 100e6


def test_report_ratios_are_the_measured_ones(small):
    batch = {"n_schemes": 2, "small_whole": 2.0,
             "per_scheme": {"pool 1": 3.0, "pool 2": 1.6, "dask 1": 3.2, "dask 2": 3.3}}
    text = bench_pack.table({"small": small}, batch)
    s, f = small["stages"], small["floors"]
    assert f"| pdf | {s['pdf']:.2f} | {f['pdf']:.2f} s | {s['pdf'] / f['pdf']:.2f} |" in text
    total = sum(s.values())
    assert f"whole build {total:.2f} s = {total / sum(f.values()):.2f} x" in text
    assert "| pool | 2 | 1.60 | 0.80 |" in text and "Machine:" in text
    assert "pool: one worker 3.00 s a scheme = 1.50 x the Small" in text
    assert "falls with workers up to 2" in text and "dask: one worker 3.20 s" in text
    assert "does not fall with workers" in text


def test_unknown_workload_names_are_refused():
    # "Large" (capitalised) used to run nothing at all, silently
    assert bench_pack.workload_problems("small,large,batch") == ""
    msg = bench_pack.workload_problems("Large,small")
    assert msg.startswith("unknown workload(s) 'Large'") and "choose from small, large" in msg
