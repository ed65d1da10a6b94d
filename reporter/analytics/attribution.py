"""Return attribution by sector against the benchmark (Brinson and Fachler 1985), linked
over the window with Carino's (1999) logarithmic coefficients.

Per period t and sector s, with portfolio and benchmark sector weights w_p, w_b (each summing
to 1), sector returns r_p, r_b and the benchmark's total return B_t = sum_s w_b r_b:

    allocation   A = (w_p - w_b)(r_b - B_t)
    selection    S = w_b (r_p - r_b)
    interaction  I = (w_p - w_b)(r_p - r_b)

so that sum_s (A + S + I) = R_t - B_t, the period's arithmetic active return.

Sectors on one side only: a sector the portfolio holds and the benchmark does not is
compared with the benchmark's total return (r_b = B_t, so its allocation effect is zero and
its whole contribution w_p (r_p - B_t) is interaction); a benchmark sector the portfolio does
not hold takes r_p = r_b (its selection and interaction are zero; allocation -w_b (r_b - B_t)).

Linking (Carino 1999): k_t = [ln(1+R_t) - ln(1+B_t)] / (R_t - B_t) (1/(1+R_t) when equal) and
k the same for the window's compounded returns R, B; each effect is summed over periods as
sum_t E_t k_t / k. The linked effects add up exactly to R - B, the difference of the
compounded returns (the arithmetic active return over the window). Pure functions, no I/O.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

ATTRIBUTION_COLUMNS = ["sector", "side", "portfolio_weight", "benchmark_weight",
                       "portfolio_return", "benchmark_return", "allocation", "selection",
                       "interaction", "total"]


@dataclass(frozen=True)
class SectorBenchmark:
    """The benchmark by sector: ``weights`` and ``returns`` are T x S on the window's periods
    (NaN where the benchmark has no such sector in a period)."""

    sectors: tuple[str, ...]
    weights: np.ndarray
    returns: np.ndarray


@dataclass(frozen=True)
class Attribution:
    """Brinson-Fachler effects (T x S per period; S linked over the window)."""

    sectors: tuple[str, ...]
    side: tuple[str, ...]            # "both" | "portfolio only" | "benchmark only"
    portfolio_weight: np.ndarray     # T x S, as used (0 where absent)
    benchmark_weight: np.ndarray
    portfolio_return: np.ndarray     # T x S, as used (filled by the rules above)
    benchmark_return: np.ndarray
    allocation: np.ndarray
    selection: np.ndarray
    interaction: np.ndarray
    portfolio_total: np.ndarray      # R_t
    benchmark_total: np.ndarray      # B_t
    coefficients: np.ndarray         # k_t / k
    linked_allocation: np.ndarray    # S
    linked_selection: np.ndarray
    linked_interaction: np.ndarray
    portfolio_compound: float        # R = prod(1 + R_t) - 1
    benchmark_compound: float
    weights_source: str              # "current weights" | "weights history file"

    @property
    def active_return(self) -> float:
        """R - B over the window: what the linked effects add up to."""
        return self.portfolio_compound - self.benchmark_compound

    def table(self) -> pd.DataFrame:
        """One row per sector (:data:`ATTRIBUTION_COLUMNS`; weights and returns are the
        window's averages and compounded returns as used), largest total effect first."""
        def compound(r):
            return np.prod(1.0 + r, axis=0) - 1.0
        df = pd.DataFrame({
            "sector": list(self.sectors), "side": list(self.side),
            "portfolio_weight": self.portfolio_weight.mean(axis=0),
            "benchmark_weight": self.benchmark_weight.mean(axis=0),
            "portfolio_return": compound(self.portfolio_return),
            "benchmark_return": compound(self.benchmark_return),
            "allocation": self.linked_allocation, "selection": self.linked_selection,
            "interaction": self.linked_interaction,
        })
        df["total"] = df["allocation"] + df["selection"] + df["interaction"]
        order = np.lexsort((df["sector"].to_numpy(), -np.abs(df["total"].to_numpy())))
        return df.iloc[order].reset_index(drop=True)[ATTRIBUTION_COLUMNS]


def brinson_fachler(wp: np.ndarray, wb: np.ndarray, rp: np.ndarray,
                    rb: np.ndarray) -> tuple[np.ndarray, ...]:
    """Per-period effects (allocation, selection, interaction), each T x S, and the filled
    returns (rp, rb) and totals (R_t, B_t), from T x S weights and returns (NaN = the side
    has no such sector that period; its weight counts as 0). See the module docstring."""
    wp = np.nan_to_num(np.asarray(wp, float))
    wb = np.nan_to_num(np.asarray(wb, float))
    B = np.nansum(wb * np.nan_to_num(rb), axis=1)
    rb = np.where(np.isfinite(rb) & (wb > 0), rb, B[:, None])
    rp = np.where(np.isfinite(rp) & (wp > 0), rp, rb)
    R = (wp * rp).sum(axis=1)
    dw = wp - wb
    return dw * (rb - B[:, None]), wb * (rp - rb), dw * (rp - rb), rp, rb, R, B


def carino_coefficients(R: np.ndarray, B: np.ndarray) -> np.ndarray:
    """Carino (1999) linking coefficients k_t / k for per-period returns R_t, B_t:
    k_t = [ln(1+R_t) - ln(1+B_t)] / (R_t - B_t), or 1/(1+R_t) when R_t = B_t, and k the same
    for the compounded returns over all periods."""
    R, B = np.asarray(R, float), np.asarray(B, float)

    def k(a, b):
        a, b = np.asarray(a, float), np.asarray(b, float)
        same = np.isclose(a, b, rtol=0.0, atol=1e-15)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(same, 1.0 / (1.0 + a), (np.log1p(a) - np.log1p(b)) / (a - b))

    total = k(np.prod(1.0 + R) - 1.0, np.prod(1.0 + B) - 1.0)
    return k(R, B) / total


def sector_panel(returns: np.ndarray, weights: np.ndarray, sector_of: np.ndarray,
                 sectors: tuple[str, ...]) -> tuple[np.ndarray, np.ndarray]:
    """The portfolio's sector weights and returns per period (each T x S) from holdings'
    returns (T x N, NaN = none) and weights (N, today's, or T x N, each period's). A holding
    without a return in a period has its weight spread over those that have one, as for the
    portfolio's own return, so sum_s w_p r_p is the pack's portfolio return. NaN return
    where the portfolio has nothing in the sector that period."""
    r = np.asarray(returns, float)
    w = np.broadcast_to(np.asarray(weights, float), r.shape)
    present = np.isfinite(r)
    W = np.where(present, w, 0.0)
    G = (np.asarray(sector_of)[:, None] == np.asarray(sectors)[None, :]).astype(float)
    per_sector = W @ G
    total = per_sector.sum(axis=1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        wp = per_sector / total
        rp = (W * np.where(present, r, 0.0)) @ G / per_sector
    return np.nan_to_num(wp), np.where(per_sector != 0, rp, np.nan)


def attribute(returns: np.ndarray, weights: np.ndarray, sector_of: np.ndarray,
              bench: SectorBenchmark, weights_source: str = "current weights") -> Attribution:
    """Brinson-Fachler attribution of the portfolio (holdings' returns T x N, weights N or
    T x N, each holding's sector) against ``bench`` on the same T periods, linked by Carino.
    Periods where the portfolio has no return at all are left out."""
    held = tuple(sorted(set(np.asarray(sector_of).tolist())))
    sectors = tuple(sorted(set(held) | set(bench.sectors)))
    wp, rp = sector_panel(returns, weights, sector_of, sectors)
    pos = {s: i for i, s in enumerate(sectors)}
    idx = [pos[s] for s in bench.sectors]
    wb = np.zeros_like(wp)
    rb = np.full_like(wp, np.nan)
    wb[:, idx] = np.nan_to_num(bench.weights)
    rb[:, idx] = bench.returns
    keep = wp.sum(axis=1) > 0
    wp, rp, wb, rb = wp[keep], rp[keep], wb[keep], rb[keep]
    a, s, i, rp_f, rb_f, R, B = brinson_fachler(wp, wb, rp, rb)
    c = carino_coefficients(R, B)
    in_bench = (wb > 0).any(axis=0)
    in_port = (wp > 0).any(axis=0)
    side = tuple("both" if p and b else "portfolio only" if p else "benchmark only"
                 for p, b in zip(in_port, in_bench, strict=True))
    return Attribution(
        sectors=sectors, side=side, portfolio_weight=wp, benchmark_weight=wb,
        portfolio_return=rp_f, benchmark_return=rb_f, allocation=a, selection=s,
        interaction=i, portfolio_total=R, benchmark_total=B, coefficients=c,
        linked_allocation=c @ a, linked_selection=c @ s, linked_interaction=c @ i,
        portfolio_compound=float(np.prod(1.0 + R) - 1.0),
        benchmark_compound=float(np.prod(1.0 + B) - 1.0), weights_source=weights_source)
