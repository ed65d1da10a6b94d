"""Benchmark: loading and validating a long returns CSV of 2,000 holdings x 2,520 daily periods
(5,040,000 rows, invented data) against ``pyarrow.csv.read_csv`` of the same file, in one run.

Run: ``python benchmarks/bench_inputs.py`` (writes its files to a temporary folder).
"""

from __future__ import annotations

# the tool's process settings (numpy's huge-page advice, OpenBLAS's idle threads; see
# reporter/__init__.py), made before numpy is first imported, as in a build
import reporter  # noqa: F401  # isort: skip

import platform
import tempfile
from pathlib import Path

import pyarrow as pa
import pyarrow.csv as pacsv
from timing import best_of, paired_ratios
from workloads import write_scheme

from reporter.config import load_settings
from reporter.validate import validate_pack

N_HOLDINGS, N_PERIODS = 2000, 2520


def write_pack(folder: Path) -> None:
    """The invented workload: every holding has every daily return (no late listings)."""
    write_scheme(folder, N_HOLDINGS, N_PERIODS, "daily", seed=3, label="BX", window=N_PERIODS,
                 late_share=0.0)


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        write_pack(folder)
        size = (folder / "returns.csv").stat().st_size / 1e6
        settings = load_settings(folder)
        t_floor = best_of(lambda: pacsv.read_csv(folder / "returns.csv"), 3)
        t_ours = best_of(lambda: validate_pack(settings), 3)
        r = paired_ratios(lambda: validate_pack(settings),
                          lambda: pacsv.read_csv(folder / "returns.csv"), 9)
    print(f"machine: {platform.machine()}, pyarrow {pa.__version__}")
    print(f"returns.csv: {N_HOLDINGS * N_PERIODS:,} rows, {size:.0f} MB; best of 3")
    print(f"floor pyarrow.csv.read_csv: {t_floor:6.2f} s")
    print(f"read + validate (all four files): {t_ours:6.2f} s  {t_ours / t_floor:4.2f} x floor "
          "(best of each)")
    print(f"{len(r)} alternating pairs: median {r[len(r) // 2]:.2f} x floor "
          f"(range {r[0]:.2f}-{r[-1]:.2f}; target <= 2)")


if __name__ == "__main__":
    main()
