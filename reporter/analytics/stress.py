"""Forward-looking risk: market shocks through beta, historical scenarios replayed on
today's holdings, value at risk and expected shortfall, and a backtest (pure; no I/O).

- A market shock s moves the portfolio by beta x s (its regression beta over the window);
  excess over the risk-free rate and alpha are ignored over a shock. The range shown is
  s x the ends of beta's confidence interval, and specific risk adds +/- z sigma_eps (one
  period's residual volatility, z the two-sided normal quantile at ``[analysis] confidence``).
  A beta estimated in normal times tends to understate losses in a crash, as correlations
  rise in falls: common practice, no source.
- A scenario compounds each holding's returns over its window with today's weights held
  fixed (buy and hold from the window's start): R_p = sum_i w_i (prod_t (1 + r_it) - 1). A
  holding without a return in every period of the window stands in as beta_i x the market's
  compounded move (the portfolio's beta when its own was not fitted), and is flagged by weight.
- Value at risk and expected shortfall: :mod:`reporter.analytics.var`; the backtest:
  :mod:`reporter.analytics.backtest`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from reporter.analytics.backtest import Backtest, backtest_var
from reporter.analytics.returns import Window, period_keys, portfolio_returns
from reporter.analytics.var import RiskFigure, default_block_length, value_at_risk
from reporter.csvsafe import csv_text
from reporter.errors import InputError, Problem
from reporter.stress_config import StressSection

THREE_MONTHS = {"monthly": 3, "weekly": 13, "daily": 63}   # periods in a rolling quarter
UNITS = {"monthly": "months", "weekly": "weeks", "daily": "days"}
N_WORST = 5
TOP_HOLDINGS = 10
FEW_TAIL_PERIODS = 5   # warn when fewer periods than this are expected beyond the VaR
GAP_NOTE = ("Cash earns the risk-free rate in every period (beta 0), and a holding with a "
            "proxy moves with its proxy's history; holdings excluded for want of any return "
            "are left out of every figure here, as elsewhere in the pack.")
CSV_COLUMNS = ["table", "name", "method", "level", "horizon", "start", "end", "value",
               "low", "high", "market", "benchmark", "proxied_weight", "n_periods"]


@dataclass(frozen=True)
class StressResults:
    """The chapter's figures. ``shocks`` and ``scenarios`` are lists of dicts (see
    :meth:`as_json`); ``figures`` every VaR and ES."""

    shocks: list[dict]
    figures: list[RiskFigure]
    backtest: Backtest
    scenarios: list[dict]
    z_specific: float
    confidence: float
    draws: int
    block_length: float
    seed: int
    portfolio_value: float | None      # sum of market values, when the holdings give them
    few_periods: list[str]             # warnings on estimates resting on few periods
    unit: str = "periods"              # "months", "weeks" or "days": the backtest's reading

    def figure(self, measure: str, method: str, level: float, horizon: str) -> float:
        """One VaR or ES value (NaN when it was not computed)."""
        for f in self.figures:
            if (f.measure, f.method, f.horizon) == (measure, method, horizon) and abs(
                    f.level - level) < 1e-12:
                return f.value
        return float("nan")

    def as_json(self) -> dict:
        """The content of ``results/risk_scenarios.json``."""
        return {
            "shocks": self.shocks,
            "var": [f.as_json() for f in self.figures if f.measure == "var"],
            "es": [f.as_json() for f in self.figures if f.measure == "es"],
            "backtest": self.backtest.as_json() | {"reading": self.backtest.reading(self.unit)},
            "scenarios": self.scenarios,
            "z_specific": self.z_specific, "interval_confidence": self.confidence,
            "bootstrap": {"method": "stationary (Politis and Romano 1994)",
                          "draws": self.draws, "mean_block_length": self.block_length,
                          "seed": self.seed},
            "portfolio_value": self.portfolio_value,
            "warnings": self.few_periods,
            "notes": [GAP_NOTE, "Year figures are the period figures x sqrt(periods per "
                      "year): an approximation that assumes independent periods.",
                      "A shock's move is beta x shock: excess over the risk-free rate and "
                      "alpha are ignored over a shock."],
        }

    def csv_text(self) -> str:
        """``results/risk_scenarios.csv``: one row per figure (:data:`CSV_COLUMNS`)."""
        rows = [{"table": "shock", "name": f"market {s['shock']:+.0%}", "market": s["shock"],
                 "value": s["portfolio"],
                 "low": s["portfolio_low"], "high": s["portfolio_high"]} for s in self.shocks]
        rows += [{"table": f.measure, "method": f.method, "level": f.level,
                  "horizon": f.horizon, "value": f.value, "low": f.ci_low, "high": f.ci_high,
                  "n_periods": f.n_periods} for f in self.figures]
        rows += [{"table": "scenario", "name": s["name"], "method": s["kind"],
                  "start": s["start"], "end": s["end"], "value": s["portfolio"],
                  "market": s["market"], "benchmark": s["benchmark"],
                  "proxied_weight": s["proxied_weight"], "n_periods": s["n_periods"]}
                 for s in self.scenarios]
        # a scenario's name comes from pack.toml: csv_text keeps it from starting a formula
        return csv_text(pd.DataFrame(rows, columns=CSV_COLUMNS))


def market_shocks(shocks: tuple[float, ...], beta: float, beta_ci: tuple[float, float],
                  resid_vol: float, securities: pd.DataFrame, z: float,
                  portfolio_value: float | None) -> list[dict]:
    """Each shock's move for the portfolio and its ten largest holdings (see the module's
    docstring). ``securities`` has ``security_id, name, weight, beta, beta_ci_low,
    beta_ci_high, residual_vol`` and optionally ``market_value``."""
    top = securities.sort_values(["weight", "security_id"], ascending=[False, True],
                                 kind="stable").head(TOP_HOLDINGS)
    b, lo_b, hi_b = (top[c].to_numpy(dtype=float) for c in ("beta", "beta_ci_low",
                                                               "beta_ci_high"))
    spread = z * top["residual_vol"].to_numpy(dtype=float)
    mv = (top["market_value"].to_numpy(dtype=float) if "market_value" in top
          else np.full(len(top), np.nan))
    out = []
    for s in shocks:
        ends = sorted((s * beta_ci[0], s * beta_ci[1]))
        move = beta * s
        h_lo, h_hi = np.fmin(s * lo_b, s * hi_b), np.fmax(s * lo_b, s * hi_b)
        h_move = b * s
        out.append({
            "shock": s, "portfolio": move, "portfolio_low": ends[0], "portfolio_high": ends[1],
            "specific_spread": z * resid_vol,
            "portfolio_low_with_specific": ends[0] - z * resid_vol,
            "portfolio_high_with_specific": ends[1] + z * resid_vol,
            "money": None if portfolio_value is None else move * portfolio_value,
            "money_low": None if portfolio_value is None else ends[0] * portfolio_value,
            "money_high": None if portfolio_value is None else ends[1] * portfolio_value,
            "holdings": [{
                "security_id": str(sid), "name": str(name), "weight": float(w),
                "beta": float(bi), "move": float(m), "move_low": float(lo), "move_high": float(hi),
                "specific_spread": float(sp),
                "money": float(m * v) if np.isfinite(v) else None,
            } for sid, name, w, bi, m, lo, hi, sp, v in zip(
                top["security_id"], top["name"], top["weight"], b, h_move, h_lo, h_hi, spread,
                mv, strict=True)],
        })
    return out


def _compound(r: np.ndarray) -> np.ndarray:
    return np.prod(1.0 + r, axis=0) - 1.0


def worst_windows(market: np.ndarray, length: int, count: int) -> list[tuple[int, int]]:
    """The ``count`` worst non-overlapping windows of ``length`` periods by the market's
    compounded return, worst first, as (first, last) positions. Compounding over every window
    is one cumulative sum of log(1 + r); windows holding a missing return are skipped."""
    m = np.asarray(market, dtype=float)
    if len(m) < length:
        return []
    logs = np.log1p(np.where(np.isfinite(m), m, 0.0))
    c = np.concatenate([[0.0], np.cumsum(logs)])
    gaps = np.concatenate([[0], np.cumsum(~np.isfinite(m))])
    total = c[length:] - c[:-length]
    total[(gaps[length:] - gaps[:-length]) > 0] = np.inf
    taken = np.zeros(len(m), dtype=bool)
    out: list[tuple[int, int]] = []
    for s in np.argsort(total, kind="stable"):    # stops after ``count`` windows
        if len(out) == count or not np.isfinite(total[s]):
            break
        if not taken[s:s + length].any():
            taken[s:s + length] = True
            out.append((int(s), int(s + length - 1)))
    return out


def replay(hist: Window, weights: np.ndarray, betas: np.ndarray, beta_portfolio: float,
           benchmark: np.ndarray | None, first: int, last: int) -> dict:
    """One window of the history replayed on today's weights (see the module's docstring)."""
    r = hist.returns[first:last + 1]
    market = float(_compound(hist.market[first:last + 1]))
    full = np.isfinite(r).all(axis=0)
    b = np.where(np.isfinite(betas), betas, beta_portfolio)
    moves = np.where(full, _compound(np.where(full, r, 0.0)), b * market)
    bench = np.nan
    if benchmark is not None and np.isfinite(benchmark[first:last + 1]).all():
        bench = float(_compound(benchmark[first:last + 1]))
    return {"start": str(hist.dates[first]), "end": str(hist.dates[last]),
            "n_periods": last - first + 1, "portfolio": float(weights @ moves),
            "market": market, "benchmark": bench,
            "proxied_weight": float(weights[~full].sum()), "n_proxied": int((~full).sum())}


def scenario_windows(cfg: StressSection, dates: np.ndarray, frequency: str,
                     fname: str = "pack.toml") -> list[tuple[str, int, int]]:
    """Each named scenario as (name, first, last) positions in ``dates``: the periods whose
    period key lies from the start's to the end's. Raises :class:`InputError` with a
    ``pack.toml:stress.scenarios.N.start`` (or ``.end``) line for each window outside the
    history or holding no period."""
    keys = period_keys(dates, frequency)
    problems, out = [], []
    for i, sc in enumerate(cfg.scenarios):
        k0, k1 = period_keys(np.array([np.datetime64(sc.start, "D"),
                                       np.datetime64(sc.end, "D")]), frequency)
        where = f"{fname}:stress.scenarios.{i}"
        if not len(keys):
            continue
        if k0 < keys[0]:
            problems.append(Problem(f"{where}.start", f"the scenario {sc.name!r} starts "
                                    f"{sc.start}, before the history's first period "
                                    f"({dates[0]})"))
        if k1 > keys[-1]:
            problems.append(Problem(f"{where}.end", f"the scenario {sc.name!r} ends {sc.end}, "
                                    f"after the history's last period ({dates[-1]})"))
        idx = np.flatnonzero((keys >= k0) & (keys <= k1))
        if k0 >= keys[0] and k1 <= keys[-1]:
            if not len(idx):
                problems.append(Problem(f"{where}.start", f"the scenario {sc.name!r} holds "
                                        "no period of the history"))
            else:
                out.append((sc.name, int(idx[0]), int(idx[-1])))
    if problems:
        raise InputError(problems)
    return out


def stress_analysis(cfg: StressSection, *, frequency: str, periods_per_year: int,
                    confidence: float, seed: int, win: Window, hist: Window,
                    weights: np.ndarray, securities: pd.DataFrame, beta: float,
                    beta_ci: tuple[float, float], resid_vol: float, model_sd: float,
                    benchmark: np.ndarray | None) -> StressResults:
    """Every figure of the "Stress and scenarios" chapter. ``win`` is the estimation window,
    ``hist`` the whole history to ``period_end``; ``securities`` the pack's per-holding
    table; ``beta``, ``beta_ci`` and ``resid_vol`` the portfolio's regression figures;
    ``model_sd`` its volatility from the pack's covariance; ``benchmark`` the benchmark's
    returns over ``hist`` (or None). Raises :class:`InputError` for a named scenario outside
    the history."""
    named = scenario_windows(cfg, hist.dates, frequency)
    z = float(stats.norm.ppf(0.5 + confidence / 2))
    value = (float(securities["market_value"].sum()) if "market_value" in securities
             else None)
    shocks = market_shocks(cfg.shocks, beta, beta_ci, resid_vol, securities, z, value)

    r_win = portfolio_returns(win.returns, weights)
    n = int(np.isfinite(r_win).sum())
    block = cfg.block_length or default_block_length(n)
    figures = value_at_risk(r_win, tuple(cfg.levels), periods_per_year, model_sd,
                            cfg.bootstrap_draws, block, seed, confidence)
    few = [f"{lv:.0%} estimates rest on {n} periods, so only about {n * (1 - lv):.1f} "
           "lie beyond them: treat them as rough" for lv in cfg.levels
           if n * (1 - lv) < FEW_TAIL_PERIODS]

    r_hist = portfolio_returns(hist.returns, weights)
    test = backtest_var(hist.dates, r_hist, cfg.backtest_window or win.n_periods,
                        cfg.backtest_level)

    betas = securities["beta"].to_numpy(dtype=float)
    scenarios = []
    auto = [("worst period", f, f, "Worst market period")
            for f, _ in worst_windows(hist.market, 1, N_WORST)]
    auto += [("worst three months", f, e, "Worst three months")
             for f, e in worst_windows(hist.market, THREE_MONTHS[frequency], N_WORST)]
    for kind, f, e, label in auto:
        row = replay(hist, weights, betas, beta, benchmark, f, e)
        scenarios.append({"name": f"{label} {row['end'] if f == e else row['start']}",
                          "kind": kind} | row)
    for name, f, e in named:
        scenarios.append({"name": name, "kind": "named"}
                         | replay(hist, weights, betas, beta, benchmark, f, e))
    return StressResults(shocks=shocks, figures=figures, backtest=test, scenarios=scenarios,
                         z_specific=z, confidence=confidence, draws=cfg.bootstrap_draws,
                         block_length=float(block), seed=seed, portfolio_value=value,
                         few_periods=few, unit=UNITS[frequency])
