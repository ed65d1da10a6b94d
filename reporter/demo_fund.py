"""Generate the invented multi-mandate demo scheme in ``inputs/demo-fund`` (seeded; committed).

Everything here is fiction: the organisation, its managers, the securities and their
returns. Four mandates, each with a benchmark of its own, share one holdings file with a
``mandate`` column and market values; a few securities are held by two mandates. Returns
follow a one-factor model per mandate (each benchmark loads on a common world factor).

Run: ``python -m reporter.demo_fund inputs/demo-fund``
"""

from __future__ import annotations

import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20261201
N_MONTHS = 96
PERIOD_END = "2026-11-30"
SYLLABLES = ["Aber", "Bryn", "Carn", "Dol", "Eskin", "Fell", "Garth", "Hest", "Ivel", "Keld",
             "Lunt", "Merr", "Nant", "Oxen", "Pen", "Rhos", "Skell", "Tal", "Uld", "Wray"]
ENDINGS = ["gate", "holme", "side", "thwaite", "worth", "by", "ton", "ley"]
KINDS = {"Industrials": "Works", "Financials": "Assurance", "Health Care": "Biolabs",
         "Consumer Staples": "Provisions", "Utilities": "Grid", "Technology": "Circuits",
         "Materials": "Quarries", "Real Estate": "Estates"}


@dataclass(frozen=True)
class MandatePlan:
    """An invented mandate: its name, benchmark file, size and how its securities behave."""

    name: str
    code: str                 # security id prefix
    benchmark: str | None     # file name, or None for the fund's market proxy
    n: int
    strategic: float
    rng: tuple[float, float]
    world_loading: float      # the benchmark's loading on the world factor
    own_vol: float            # the benchmark's own monthly volatility
    beta_mean: float          # securities' betas to the mandate benchmark
    idio: float               # securities' monthly residual volatility
    value: float              # current market value (GBP)


PLANS = (
    MandatePlan("Domestic equity", "DE", "benchmark_domestic.csv", 32, 0.35, (0.30, 0.40),
                1.0, 0.020, 1.05, 0.060, 372_000_000),
    MandatePlan("Overseas equity", "OE", "benchmark_overseas.csv", 40, 0.30, (0.25, 0.35),
                1.1, 0.018, 1.00, 0.055, 331_000_000),
    MandatePlan("Low-volatility equity", "LV", "benchmark_lowvol.csv", 26, 0.20,
                (0.17, 0.23), 0.7, 0.012, 0.75, 0.040, 188_000_000),
    MandatePlan("Bond-proxy equity", "BP", None, 20, 0.15, (0.13, 0.17), 1.0, 0.0,
                0.60, 0.035, 109_000_000),
)
# (mandate holding a second position, its plan index, the plan index of the first holder,
# how many): the low-volatility and bond-proxy managers hold some domestic names too
SHARED = ((2, 0, 5), (3, 0, 2), (3, 2, 2))

PACK_TOML = """\
# An invented fund for the demo: every organisation, manager and security here is fictional.
[pack]
name = "ravensgill-mutual"
title = "Investment Committee Pack: Total Fund and Mandates"
organisation = "Ravensgill Mutual Staff Retirement Fund"
period_end = 2026-11-30
frequency = "monthly"
currency = "GBP"

[inputs]
holdings = "holdings.csv"        # one file: a mandate column names each holding's mandate
returns = "returns.csv"
# the fund's broad market proxy; the bond-proxy mandate's benchmark
market = { path = "market.csv", name = "Broad market index" }
risk_free = "risk_free.csv"

[analysis]
window = 60
min_obs = 24

[fund]
benchmark = "policy"             # the mandates' benchmarks at their strategic weights

[limits]
max_holding_weight = 0.05
min_effective_n = 40

[[mandates]]
name = "Domestic equity"
manager = "Harrowmere Asset Managers"
benchmark = { path = "benchmark_domestic.csv", name = "Domestic equity index" }
portfolio_returns = "manager_domestic.csv"    # the manager's own returns, net and gross
strategic_weight = 0.35
range = [0.30, 0.40]
[mandates.limits]
beta_min = 0.9
beta_max = 1.1
max_tracking_error_ann = 0.04

[[mandates]]
name = "Overseas equity"
manager = "Calloway Brook Investors"
benchmark = { path = "benchmark_overseas.csv", name = "Overseas equity index" }
portfolio_returns = "manager_overseas.csv"
strategic_weight = 0.30
range = [0.25, 0.35]
[mandates.limits]
max_holding_weight = 0.06

[[mandates]]
name = "Low-volatility equity"
manager = "Tennick Lane Partners"
benchmark = { path = "benchmark_lowvol.csv", name = "Minimum-volatility index" }
portfolio_returns = "manager_lowvol.csv"
strategic_weight = 0.20
range = [0.17, 0.23]
[mandates.limits]
beta_max = 0.9

[[mandates]]
name = "Bond-proxy equity"
manager = "Harrowmere Asset Managers"
strategic_weight = 0.15
range = [0.13, 0.17]
"""


def _names(rng: np.random.Generator, n: int, sector: list[str], used: set[str]) -> list[str]:
    out = []
    while len(out) < n:
        base = rng.choice(SYLLABLES) + rng.choice(ENDINGS)
        name = f"{base} {KINDS[sector[len(out)]]}"
        if name not in used:
            used.add(name)
            out.append(name)
    return out


def generate(folder: Path, seed: int = SEED) -> None:
    """Write pack.toml and the data files of the invented fund into ``folder``."""
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    dates = pd.date_range(end=PERIOD_END, periods=N_MONTHS, freq="ME").strftime("%Y-%m-%d")
    world = rng.normal(0.006, 0.042, N_MONTHS)
    rf = np.clip(0.0020 + np.cumsum(rng.normal(0, 0.00008, N_MONTHS)), 0.0002, 0.0045)
    pd.DataFrame({"date": dates, "return": np.round(world, 6)}).to_csv(
        folder / "market.csv", index=False)
    pd.DataFrame({"date": dates, "rate": np.round(rf, 6)}).to_csv(
        folder / "risk_free.csv", index=False)
    sectors = list(KINDS)
    used: set[str] = set()
    holdings, returns = [], {}
    first_ids: list[list[str]] = []
    backcasts = []
    for plan in PLANS:
        bench = plan.world_loading * world + rng.normal(0.0005, plan.own_vol or 1e-12, N_MONTHS)
        if plan.benchmark is None:
            bench = world
        else:
            pd.DataFrame({"date": dates, "return": np.round(bench, 6)}).to_csv(
                folder / plan.benchmark, index=False)
        sec = [sectors[i % len(sectors)] for i in rng.permutation(plan.n)]
        names = _names(rng, plan.n, sec, used)
        ids = [f"{plan.code}{i + 101:03d}" for i in range(plan.n)]
        betas = np.clip(rng.normal(plan.beta_mean, 0.2, plan.n), 0.2, 1.8)
        alpha = rng.normal(0.0, 0.002, plan.n)
        r = alpha + np.outer(bench, betas) + rng.normal(0, plan.idio, (N_MONTHS, plan.n))
        # a late listing in each mandate, and one suspension
        r[: N_MONTHS - 30, plan.n - 1] = np.nan
        r[40:43, plan.n - 2] = np.nan
        for j, sid in enumerate(ids):
            returns[sid] = np.round(r[:, j], 6)
        mv = rng.lognormal(0.0, 0.7, plan.n)
        mv = np.round(mv / mv.sum() * plan.value, -3)
        holdings += [{"mandate": plan.name, "security_id": ids[j], "name": names[j],
                      "sector": sec[j], "market_value": mv[j]} for j in range(plan.n)]
        first_ids.append(ids)
        backcasts.append((plan, r, mv))
    for holder, source, count in SHARED:     # a second position in another mandate's names
        plan = PLANS[holder]
        for sid in first_ids[source][:count]:
            row = next(h for h in holdings if h["security_id"] == sid)
            holdings.append({**row, "mandate": plan.name,
                             "market_value": float(np.round(plan.value * 0.03, -3))})
    # each mandate's market values now add to a little more than planned: fine for a demo
    pd.DataFrame(holdings).to_csv(folder / "holdings.csv", index=False)
    pd.DataFrame({"date": dates, **returns}).to_csv(folder / "returns.csv", index=False)
    _manager_returns(folder, dates, backcasts, seed)
    (folder / "pack.toml").write_text(PACK_TOML, encoding="utf-8")


# each manager's annual fee (invented), for the mandates that report their own returns
MANAGER_FEES = {"benchmark_domestic.csv": 0.0030, "benchmark_overseas.csv": 0.0045,
                "benchmark_lowvol.csv": 0.0035}


def _manager_returns(folder: Path, dates, backcasts, seed: int) -> None:
    """``manager_<x>.csv`` for each mandate with a benchmark file: the manager's reported
    returns, gross of fees (today's holdings' returns at today's weights plus trading the
    back-cast cannot see) and net (less a twelfth of the annual fee each month)."""
    rng = np.random.default_rng(seed + 1)      # its own stream: the other files unchanged
    for plan, r, mv in backcasts:
        if plan.benchmark not in MANAGER_FEES:
            continue
        present = np.isfinite(r)
        w = np.where(present, mv[None, :], 0.0)
        gross = (np.where(present, r, 0.0) @ mv) / w.sum(axis=1)
        gross = gross + rng.normal(0.0, 0.0025, len(gross))
        net = gross - MANAGER_FEES[plan.benchmark] / 12
        pd.DataFrame({"date": dates, "return": np.round(net, 6),
                      "gross_return": np.round(gross, 6)}).to_csv(
            folder / plan.benchmark.replace("benchmark_", "manager_"), index=False)


if __name__ == "__main__":
    generate(Path(sys.argv[1] if len(sys.argv) > 1 else "inputs/demo-fund"))
