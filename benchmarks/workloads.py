"""Invented, seeded benchmark workloads: pack folders of any size (fictional ids and names).

Returns follow a single-index model with sector shocks; a few holdings list late, so the
regressions meet the gaps that month-end data have.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pacsv

SECTORS = ["Industrials", "Financials", "Health Care", "Staples", "Discretionary", "Energy",
           "Utilities", "Technology", "Materials", "Telecoms"]
PACK_TOML = """\
[pack]
title = "Benchmark pack {label}"
organisation = "Invented Benchmark Trust {label}"
period_end = {period_end}
frequency = "{frequency}"

[inputs]
holdings = "holdings.csv"
returns = "returns.csv"
market = "market.csv"
risk_free = "risk_free.csv"

[analysis]
window = {window}
min_obs = {min_obs}
"""


def write_scheme(folder: Path, n_holdings: int, n_periods: int, frequency: str = "monthly",
                 seed: int = 1, label: str = "", window: int | None = None,
                 late_share: float = 0.05) -> Path:
    """Write a pack folder with ``n_holdings`` holdings over ``n_periods`` periods, of which
    a share ``late_share`` list part-way through the first half."""
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    end = "2026-11-30"
    dates = (pd.bdate_range(end=end, periods=n_periods) if frequency == "daily"
             else pd.date_range(end=end, periods=n_periods, freq="ME"))
    iso = dates.strftime("%Y-%m-%d").to_numpy()
    scale = {"daily": 1 / 21, "weekly": 1 / 4.3, "monthly": 1.0}[frequency]
    rf = np.full(n_periods, 0.003 * scale)
    mkt_excess = rng.normal(0.005 * scale, 0.042 * np.sqrt(scale), n_periods)
    sector = rng.integers(0, len(SECTORS), n_holdings)
    shocks = rng.normal(0, 0.018 * np.sqrt(scale), (n_periods, len(SECTORS)))
    beta = rng.uniform(0.3, 1.8, n_holdings)
    idio = rng.uniform(0.02, 0.075, n_holdings) * np.sqrt(scale)
    rets = (rf[:, None] + beta * mkt_excess[:, None] + 0.8 * shocks[:, sector]
            + rng.normal(0, 1, (n_periods, n_holdings)) * idio).round(6)
    start = np.zeros(n_holdings, dtype=int)
    late = rng.random(n_holdings) < late_share                 # listed part-way through
    start[late] = rng.integers(0, n_periods // 2, late.sum())
    present = np.arange(n_periods)[:, None] >= start[None, :]
    ids = np.array([f"{label or 'BX'}{i:05d}" for i in range(n_holdings)])
    t_idx, h_idx = np.nonzero(present)
    pacsv.write_csv(pa.table({"date": iso[t_idx], "security_id": ids[h_idx],
                              "return": rets[t_idx, h_idx]}), folder / "returns.csv")
    pd.DataFrame({"date": iso, "return": (rf + mkt_excess).round(6)}).to_csv(
        folder / "market.csv", index=False)
    pd.DataFrame({"date": iso, "rate": rf.round(6)}).to_csv(folder / "risk_free.csv",
                                                            index=False)
    mv = np.exp(rng.normal(0, 0.9, n_holdings))
    w = np.round(mv / mv.sum(), 8)
    w[np.argmax(w)] += round(1.0 - w.sum(), 8)
    pd.DataFrame({"security_id": ids, "name": [f"Holding {i}" for i in ids],
                  "sector": np.array(SECTORS)[sector], "weight": w}).to_csv(
        folder / "holdings.csv", index=False, float_format="%.8f")
    window = window or min(n_periods, {"daily": 756, "weekly": 260, "monthly": 60}[frequency])
    (folder / "pack.toml").write_text(PACK_TOML.format(
        label=label, period_end=end, frequency=frequency, window=window,
        min_obs=min(24, window)))
    return folder
