"""Generate the invented demo scheme in ``inputs/demo`` (seeded; the output is committed).

Everything here is fiction: the organisation, the securities and their returns. The
returns follow a single-index model with sector shocks, betas spread over 0.3-1.8, a few
holdings with short or broken histories, and a slowly moving risk-free rate.

Run: ``python -m reporter.demo_data inputs/demo``
"""

from __future__ import annotations

import csv
import sys
from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20261130
N_MONTHS = 120
PERIOD_END = "2026-11-30"
SECTORS = ["Industrials", "Financials", "Health Care", "Consumer Staples",
           "Consumer Discretionary", "Energy", "Utilities", "Technology", "Materials",
           "Telecommunications"]
FIRST = ["Ash", "Bram", "Corr", "Dun", "Elm", "Fen", "Gort", "Hal", "Ings", "Kell", "Lang",
         "Mire", "Ness", "Orm", "Pell", "Quarn", "Rook", "Sand", "Thorn", "Ulls", "Vell",
         "Wold", "Yarr", "Brack", "Cald"]
TOTAL_VALUE = 248_500_000.0     # the scheme's listed equity portfolio, GBP (invented)
CASH_SHARE = 0.03
OVERSEAS = {2: ("USD", "United States"), 5: ("EUR", "Germany"), 7: ("EUR", "France")}
# the month's external flows, GBP: contributions in, benefits and transfers out (invented)
CASH_FLOWS = [["2026-11-07", "1850000.00"], ["2026-11-19", "-2640000.00"],
              ["2026-11-26", "415000.00"]]
SECOND = ["brook", "field", "moor", "wick", "stead", "holt", "dale", "mere", "ford", "combe"]
KIND = {"Industrials": "Engineering", "Financials": "Mutual", "Health Care": "Therapeutics",
        "Consumer Staples": "Foods", "Consumer Discretionary": "Leisure", "Energy": "Power",
        "Utilities": "Water", "Technology": "Systems", "Materials": "Minerals",
        "Telecommunications": "Networks"}

PACK_TOML = """\
# An invented scheme for the demo: every organisation and security here is fictional.
[pack]
name = "tarnbrook-valley"
title = "Investment Committee Pack: Listed Equity Portfolio"
organisation = "Tarnbrook Valley Staff Pension Scheme"
period_end = 2026-11-30
frequency = "monthly"
currency = "GBP"

[inputs]
holdings = "holdings.csv"
returns = "returns.csv"
market = "market.csv"
risk_free = "risk_free.csv"
factors = "factors.csv"
benchmark_sectors = "benchmark_sectors.csv"
cash_flows = "cash_flows.csv"

[analysis]
window = 60
min_obs = 24

# The scheme's policy limits for this mandate (invented).
[limits]
beta_min = 0.85
beta_max = 1.05
max_holding_weight = 0.08
max_sector_weight = { "*" = 0.15, Energy = 0.12 }
min_effective_n = 25
min_holdings = 40
max_tracking_error_ann = 0.05
max_idiosyncratic_share = 0.10
asset_class_ranges = { Equity = [0.93, 0.99], Cash = [0.01, 0.05] }

# A named window replayed on today's holdings in "Stress and scenarios" (besides the
# automatic worst periods); the dates must lie inside the returns history.
[[stress.scenarios]]
name = "First quarter 2020"
start = 2020-01-01
end = 2020-03-31
"""

# The investment officer's note for the summary page (invented, like everything here).
SUMMARY_COMMENTARY = """\
---
author: Morwenna Ashdale, Investment Officer
date: 2026-12-03
title: Officer's note for the December meeting
---
The portfolio's beta is **above the policy band**. The estimate is close to the upper
limit and its interval reaches back inside the band, so we propose to watch it for one
more quarter rather than act now. The cash mix shown above is for scale only.

Two items are on watch:

- the largest single holding is within a percentage point of its 8% cap after a strong
  quarter, and the manager has been asked not to add to it;
- the Energy sector sits just under its 12% maximum.

Four holdings sit off the security market line beyond estimation error. With 59 holdings
fitted, about three would do so by chance alone at the 95% level, so the committee is asked
not to read the chart as a league table.
"""


def generate(out: Path, n_holdings: int = 60) -> None:
    """Write pack.toml, holdings.csv, returns.csv, market.csv, risk_free.csv and
    cash_flows.csv into ``out``."""
    rng = np.random.default_rng(SEED)
    dates = pd.date_range(end=PERIOD_END, periods=N_MONTHS, freq="ME")
    t = np.arange(N_MONTHS)
    rf = np.clip(0.0002 + 0.0036 / (1 + np.exp(-(t - 75) / 6)) + rng.normal(0, 0.00005,
                                                                           N_MONTHS), 0, None)
    draws = rng.normal(0, 1, N_MONTHS)
    halves = np.array_split(np.arange(N_MONTHS), 2)
    for h in halves:  # each five-year half has a mean premium of 0.55% a month exactly
        draws[h] = (draws[h] - draws[h].mean()) / draws[h].std()
    mkt_excess = 0.0055 + 0.042 * draws
    market = rf + mkt_excess
    sector_of = [SECTORS[i % len(SECTORS)] for i in range(n_holdings)]
    rng.shuffle(sector_of)
    sector_shock = {}
    for s in SECTORS:
        shock = rng.normal(0, 0.018, N_MONTHS)
        sector_shock[s] = shock - shock.mean()
    beta = rng.uniform(0.3, 1.8, n_holdings)
    idio = rng.uniform(0.02, 0.075, n_holdings)
    alpha = np.where(rng.random(n_holdings) < 0.15, rng.normal(0, 0.006, n_holdings), 0.0)

    names, used = [], set()
    for i in range(n_holdings):
        while True:
            nm = f"{FIRST[rng.integers(len(FIRST))]}{SECOND[rng.integers(len(SECOND))]}"
            if nm not in used:
                used.add(nm)
                break
        names.append(f"{nm} {KIND[sector_of[i]]} plc")
    ids = [f"TVX{i + 1:03d}" for i in range(n_holdings)]

    rets = (rf[:, None] + alpha + beta * mkt_excess[:, None]
            + np.column_stack([sector_shock[s] for s in sector_of]) * 0.8
            + rng.normal(0, 1, (N_MONTHS, n_holdings)) * idio)
    rets = np.clip(rets, -0.95, None)
    present = np.ones_like(rets, dtype=bool)
    present[: N_MONTHS - 40, 5] = False      # listed 40 months ago
    present[: N_MONTHS - 30, 17] = False     # listed 30 months ago
    present[: N_MONTHS - 14, 33] = False     # listed 14 months ago: below min_obs
    present[N_MONTHS - 20: N_MONTHS - 15, 41] = False  # suspended for five months

    mv = np.exp(rng.normal(0, 0.9, n_holdings))
    w = np.round(mv / mv.sum(), 6)
    w[np.argmax(w)] += round(1.0 - w.sum(), 6)
    # market values in GBP: the equities hold 97% of the value and a cash deposit 3%
    value = np.round(w * (1 - CASH_SHARE) * TOTAL_VALUE, 2)
    where = [OVERSEAS.get(i % 9, ("GBP", "United Kingdom")) for i in range(n_holdings)]

    out.mkdir(parents=True, exist_ok=True)
    (out / "pack.toml").write_text(PACK_TOML, encoding="utf-8")
    (out / "commentary").mkdir(exist_ok=True)
    (out / "commentary" / "summary.md").write_text(SUMMARY_COMMENTARY, encoding="utf-8")
    _write(out / "holdings.csv",
           ["security_id", "name", "sector", "asset_class", "currency", "country",
            "market_value"],
           [[ids[i], names[i], sector_of[i], "Equity", *where[i], f"{value[i]:.2f}"]
            for i in range(n_holdings)]
           + [["CASH01", "Sterling deposit account", "Cash", "Cash", "GBP", "United Kingdom",
               f"{CASH_SHARE * TOTAL_VALUE:.2f}"]])
    _write(out / "cash_flows.csv", ["date", "amount"], CASH_FLOWS)
    iso = [d.strftime("%Y-%m-%d") for d in dates]
    _write(out / "market.csv", ["date", "return"],
           [[iso[k], f"{market[k]:.6f}"] for k in range(N_MONTHS)])
    _write(out / "risk_free.csv", ["date", "rate"], [[iso[k], f"{rf[k]:.6f}"]
                                                       for k in range(N_MONTHS)])
    _write(out / "returns.csv", ["date", "security_id", "return"],
           [[iso[k], ids[i], f"{rets[k, i]:.6f}"] for k in range(N_MONTHS)
            for i in range(n_holdings) if present[k, i]])
    style_files(out, iso, np.where(present, rets, np.nan), w, np.array(sector_of), beta,
                rf, mkt_excess, sector_shock)


def style_files(out: Path, iso: list[str], rets: np.ndarray, w: np.ndarray,
                sector_of: np.ndarray, beta: np.ndarray, rf: np.ndarray,
                mkt_excess: np.ndarray, sector_shock: dict) -> None:
    """Write factors.csv and benchmark_sectors.csv (invented). A second seeded generator,
    so the files above do not move. The size and value factors are long-short portfolios
    of the demo's own holdings (small minus large weights; four sectors minus three), so
    holdings load on them as they would on real ones; momentum is noise."""
    rng = np.random.default_rng(SEED + 1)
    T = len(iso)
    by_w = np.argsort(w)
    small, large = by_w[:20], by_w[-20:]
    size = (np.nanmean(rets[:, small], axis=1) - np.nanmean(rets[:, large], axis=1)
            + rng.normal(0.001, 0.006, T))
    cheap = np.isin(sector_of, ["Financials", "Energy", "Utilities", "Materials"])
    dear = np.isin(sector_of, ["Technology", "Health Care", "Consumer Discretionary"])
    value = (np.nanmean(rets[:, cheap], axis=1) - np.nanmean(rets[:, dear], axis=1)
             + rng.normal(0.005, 0.008, T))
    momentum = rng.normal(0.004, 0.03, T)
    _write(out / "factors.csv", ["date", "size", "value", "momentum"],
           [[iso[k], f"{size[k]:.6f}", f"{value[k]:.6f}", f"{momentum[k]:.6f}"]
            for k in range(T)])
    # the benchmark: every sector but Telecommunications, plus Real Estate, which the
    # portfolio does not hold; weights drift slowly around a blend of the portfolio's and
    # equal weights
    sectors = [s for s in SECTORS if s != "Telecommunications"] + ["Real Estate"]
    held = np.array([w[sector_of == s].sum() for s in sectors])
    base = 0.6 * held / held.sum() + 0.4 / len(sectors)
    drift = np.cumsum(rng.normal(0, 0.03, (T, len(sectors))), axis=0)
    weights = base * np.exp(drift - drift.mean(axis=0))
    weights = np.round(weights / weights.sum(axis=1, keepdims=True), 6)
    top = np.argmax(weights, axis=1)
    weights[np.arange(T), top] += np.round(1.0 - weights.sum(axis=1), 6)
    shock = dict(sector_shock) | {"Real Estate": rng.normal(0, 0.018, T)}
    sbeta = {s: float(beta[sector_of == s].mean()) if (sector_of == s).any() else 0.8
             for s in sectors}
    rows = []
    for k in range(T):
        for j, s in enumerate(sectors):
            r = rf[k] + sbeta[s] * mkt_excess[k] + 0.8 * shock[s][k] + rng.normal(0, 0.004)
            rows.append([iso[k], s, f"{weights[k, j]:.6f}", f"{r:.6f}"])
    _write(out / "benchmark_sectors.csv", ["date", "sector", "weight", "return"], rows)


def _write(path: Path, header: list[str], rows: list[list[str]]) -> None:
    with open(path, "w", newline="", encoding="utf-8") as fh:
        wr = csv.writer(fh, lineterminator="\n")
        wr.writerow(header)
        wr.writerows(rows)


if __name__ == "__main__":
    generate(Path(sys.argv[1] if len(sys.argv) > 1 else "inputs/demo"))
