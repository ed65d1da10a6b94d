"""The benchmark code keeps working: the Small workload through it, end to end. (Benchmarks
are not timed tests; this only checks that what the benchmark measures and reports is whole
and consistent.)"""

from __future__ import annotations

import sys
from pathlib import Path

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
    # the RSS sampled in each stage: every stage seen, none above the process's peak
    assert set(bench_pack.STAGES) <= set(small["stage_rss"])
    # (VmHWM and statm are read from the kernel's approximate per-CPU RSS counters: a sample
    # was seen 0.2 MB above the high-water mark read after it, so a page allowance of 1 MiB)
    assert all(0 < small["stage_rss"][st] <= small["peak_rss"] + 2**20
               for st in bench_pack.STAGES)


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


def test_memory_baseline_and_targets_are_reported_as_ratios(small):
    base = bench_pack.baseline()        # a fresh process: the tool imported, engine started
    assert 50e6 < base < 2e9
    r = {**small, "peak_rss": base + 3 * small["matrix_bytes"]}
    lines = bench_pack.target_lines("small", r, base)
    memory = next(line for line in lines if line.startswith("peak RSS"))
    assert "+ 3.0 x the float64 return matrix" in memory
    assert memory.endswith("target at most 6 (met)")
    # WeasyPrint alone on the chart-free print HTML, in a fresh process, above the baseline
    assert small["pdf_floor_rss"] > 50e6
    own = small["pdf_floor_rss"] - base
    assert f"the baseline + {own / 1e6:.0f} MB" in next(
        line for line in lines if line.startswith("WeasyPrint alone"))
    s, f = small["stages"], small["floors"]
    charts = next(line for line in lines if line.startswith("charts"))
    alone = small["pdf_with_charts"]
    assert alone > 0
    assert f"add {(s['charts'] + alone - f['pdf']) / f['pdf']:+.0%}" in charts
    assert "target at most +50%" in charts
    in_build = next(line for line in lines if line.startswith("in the build"))
    assert f"together are {(s['charts'] + s['pdf'] - f['pdf']) / f['pdf']:+.0%}" in in_build
    # Large has a target on the whole build; a missed one says so
    slow = {**r, "stages": {**s, "analytics": 100 * sum(f.values())}}
    whole = bench_pack.target_lines("large", slow, base)[0]
    assert whole.endswith("target at most 2.0 (missed)")
    # XL: the 4 GB ceiling, as a share of it
    xl = bench_pack.target_lines("xl", {**r, "peak_rss": 3e9}, base)
    assert "peak RSS 3.00 GB = 0.75 x the ceiling of 4 GB; target at most 1.00 (met)" in xl
    text = bench_pack.table({"small": small}, None, (0.5, 0.7), base)
    assert f"peaks at {base / 1e6:.0f} MB" in text and "0.5 at the start and 0.7" in text


def test_several_runs_show_the_median_one_and_list_every_run(small):
    """Of three runs, the table shows the one whose whole-build ratio is the median, and a
    last line gives each run's ratios against its own floors (a noisy run alone can meet
    or miss a target)."""
    base = 300e6
    f = small["floors"]
    runs = [{**small, "stages": {**small["stages"], "analytics": k * sum(f.values())},
             "peak_rss": base + m * small["matrix_bytes"]}
            for k, m in ((5, 4.0), (1, 2.0), (9, 7.0))]
    shown = bench_pack.median_run(runs, base)
    assert shown["stages"]["analytics"] == runs[0]["stages"]["analytics"]
    wholes = sorted(bench_pack.ratios(r, base)["whole"] for r in runs)
    assert bench_pack.ratios(shown, base)["whole"] == wholes[1]
    assert wholes[0] < wholes[1] < wholes[2]
    last = bench_pack.target_lines("small", shown, base)[-1]
    assert last.startswith("the 3 runs (the table shows the median one)")
    assert "above the baseline 4.0, 2.0, 7.0 x the matrix" in last
    each = ", ".join(format(bench_pack.ratios(r, base)["whole"], ".2f") for r in runs)
    assert f"whole build {each} x" in last
    assert "runs" not in bench_pack.median_run(runs[:1], base)     # one run: no such line
    assert bench_pack.RUNS["large"] == 3 and bench_pack.RUNS["xl"] == 1


def test_the_scheme_is_written_once_by_a_process_that_is_not_measured(monkeypatch, tmp_path):
    """The workload's data is made by a process of its own (its peak, 574 MB for Large, was
    counted in the build's peak when the measuring process made it), once for every run;
    each run is a fresh process reading that folder."""
    calls = []

    class Done:
        stdout = '{"run": 1}\n'

    def run(cmd, **kwargs):
        calls.append(cmd[2:])
        if cmd[2] == "--make":
            bench_pack.make_workload(cmd[3], Path(cmd[4]))
            assert (Path(cmd[4]) / "pack.toml").is_file()
        return Done()

    monkeypatch.setattr(bench_pack.subprocess, "run", run)
    got = bench_pack.single("small", runs=3)
    assert got == [{"run": 1}] * 3
    assert [c[0] for c in calls] == ["--make", "--child", "--child", "--child"]
    assert len({c[2] for c in calls}) == 1              # one folder, made once
    assert not Path(calls[0][2]).exists()               # and removed afterwards


def test_quick_mode_skips_xl_only():
    assert bench_pack.WORKLOADS["xl"][:2] == (10_000, 2_520)
    assert bench_pack.QUICK_SKIPS == ("xl",)
    assert bench_pack.workload_problems("small,large,xl,batch") == ""


def test_peak_rss_is_this_process_own_not_its_parents():
    # Linux carries getrusage's ru_maxrss across exec from the process that started this
    # one: a fresh process started by the build (to measure WeasyPrint alone) reported the
    # build's peak as its own. peak_rss() reads VmHWM, this process's own high-water mark.
    code = f"""
import resource, subprocess, sys
big = bytearray(400 * 2**20)
big[::4096] = b"x" * len(big[::4096])            # touched: resident
child = ("import resource, sys; sys.path.insert(0, {str(REPO / 'benchmarks')!r}); "
         "import bench_pack; print(bench_pack.peak_rss(), "
         "resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024)")
print(subprocess.run([sys.executable, "-c", child], capture_output=True, text=True,
                     check=True).stdout)
"""
    import subprocess

    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.split()
    own, inherited = int(out[0]), int(out[1])
    assert inherited > 400 * 2**20          # the trap: the parent's 400 MB
    assert own < 200 * 2**20                 # a bare interpreter with the benchmark imported


def test_memory_accounts_reports_every_stage(tmp_path, capsys):
    import memory_accounts

    folder = write_scheme(tmp_path / "tiny", 12, 36, "monthly", seed=3, label="T")
    assert memory_accounts.main([str(folder)]) == 0
    lines = capsys.readouterr().out.splitlines()
    tags = [" ".join(line.split()[:2]) for line in lines]
    for stage in ("read", "validate", "analyse", "chart", "html", "pdf", "write"):
        assert f"start {stage}" in tags and f"end {stage}" in tags
    # the resident pages split by kind of mapping, and Python's arenas with their use
    parts = memory_accounts.resident()
    assert parts["file"] > 0 and parts["anon"] > 0
    arenas, in_use = memory_accounts.python_arenas()
    assert 0 < in_use <= arenas
    assert memory_accounts.main([str(tmp_path / "missing")]) == 2
