"""Benchmark: loading and validating a long returns CSV of 2,000 holdings x 2,520 daily periods
(5,040,000 rows, invented data) against ``pyarrow.csv.read_csv`` of the same file, in one run.

Run: ``python benchmarks/bench_inputs.py`` (writes its files to a temporary folder).
"""

from __future__ import annotations

import platform
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pacsv
from timing import best_of, paired_ratios

from reporter.config import load_settings
from reporter.validate import validate_pack

N_HOLDINGS, N_PERIODS = 2000, 2520


def write_pack(folder: Path) -> None:
    rng = np.random.default_rng(3)
    dates = pd.bdate_range(end="2026-11-30", periods=N_PERIODS)
    iso = dates.strftime("%Y-%m-%d").to_numpy()
    ids = np.array([f"BX{i:05d}" for i in range(N_HOLDINGS)])
    market = rng.normal(0.0003, 0.011, N_PERIODS)
    rets = market[:, None] * rng.uniform(0.3, 1.8, N_HOLDINGS) + rng.normal(
        0, 0.015, (N_PERIODS, N_HOLDINGS))
    table = pa.table({"date": np.repeat(iso, N_HOLDINGS), "security_id": np.tile(ids, N_PERIODS),
                      "return": rets.ravel().round(6)})
    pacsv.write_csv(table, folder / "returns.csv")
    pd.DataFrame({"date": iso, "return": market.round(6)}).to_csv(folder / "market.csv",
                                                                  index=False)
    pd.DataFrame({"date": iso, "rate": 0.0001}).to_csv(folder / "risk_free.csv", index=False)
    w = np.full(N_HOLDINGS, 1 / N_HOLDINGS)
    pd.DataFrame({"security_id": ids, "name": ids, "sector": "Equity", "weight": w}).to_csv(
        folder / "holdings.csv", index=False)
    (folder / "pack.toml").write_text("""[pack]
title = "Load benchmark"
organisation = "Invented"
period_end = 2026-11-30
frequency = "daily"
[inputs]
holdings = "holdings.csv"
returns = "returns.csv"
market = "market.csv"
risk_free = "risk_free.csv"
[analysis]
window = 2520
min_obs = 24
""")


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
