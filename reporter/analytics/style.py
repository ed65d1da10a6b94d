"""Alpha before and after style, and attribution by sector: the optional figures computed
from ``[inputs] factors``, ``benchmark_sectors`` and ``weights_history`` on the pack's own
window (pure; no I/O). The build calls :func:`analyse_style` once after
:func:`reporter.analytics.pack.analyse`."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
import pandas as pd

from reporter.analytics.attribution import Attribution, SectorBenchmark, attribute
from reporter.analytics.beta_variants import SINGULAR_COND
from reporter.analytics.factors import (
    FactorFits,
    FactorGRS,
    fit_factor_model,
    grs_factor_test,
)
from reporter.analytics.market_model import Prepared
from reporter.analytics.results import PackResults
from reporter.analytics.returns import period_keys
from reporter.errors import InputError, Problem, place

SUFFIXES = ("", "_se", "_t", "_ci_low", "_ci_high")


@dataclass(frozen=True)
class FactorReturns:
    """The user's factor returns: ``values`` is D x K (decimals per period) on ``dates``."""

    names: tuple[str, ...]
    dates: np.ndarray               # datetime64[D], sorted, one per period
    values: np.ndarray


@dataclass(frozen=True)
class StyleInputs:
    """The optional style inputs, validated. ``benchmark_sectors`` has the columns ``key``
    (period key), ``sector``, ``weight``, ``return``; ``weights_history`` has ``key``,
    ``security_id``, ``weight``."""

    factors: FactorReturns | None = None
    benchmark_sectors: pd.DataFrame | None = None
    weights_history: pd.DataFrame | None = None

    @property
    def empty(self) -> bool:
        return self.factors is None and self.benchmark_sectors is None


@dataclass(frozen=True)
class StyleResults:
    """Factor-model fits of the holdings and the portfolio, their GRS test, and the
    attribution by sector (each None when its input was not given)."""

    periods_per_year: int
    holdings: FactorFits | None
    portfolio: FactorFits | None
    grs: FactorGRS | None
    factor_means: np.ndarray | None      # mean of each regressor over the portfolio's periods
    attribution: Attribution | None

    def columns(self, fits: FactorFits) -> dict[str, np.ndarray]:
        """The factor-model fields of ``securities.csv`` / ``portfolio.json`` for ``fits``."""
        P = self.periods_per_year
        lo, hi = fits.intervals()
        out: dict[str, np.ndarray] = {}
        labels = ["beta_factor_model"] + [f"{n}_loading" for n in fits.names]
        for j, label in enumerate(labels, start=1):
            for suffix, v in zip(SUFFIXES, (fits.coef, fits.se, fits.t, lo, hi), strict=True):
                out[label + suffix] = v[:, j]
        out |= {"alpha_factor": fits.coef[:, 0], "alpha_factor_ann": fits.coef[:, 0] * P,
                "alpha_factor_se": fits.se[:, 0], "alpha_factor_t": fits.t[:, 0],
                "alpha_factor_p": fits.p_values[:, 0], "r_squared_factor": fits.r_squared,
                "sml_position_factor": fits.positions()}
        return out

    def summary(self) -> dict:
        """The fields added to ``results/portfolio.json`` (none without a factors file)."""
        if self.portfolio is None or self.grs is None:
            return {}
        out = {k: (v[0] if isinstance(v[0], str) else float(v[0]))
               for k, v in self.columns(self.portfolio).items()}
        g = self.grs
        return out | {"grs_factor_f": g.f_stat, "grs_factor_p": g.p_value,
                      "grs_factor_applies": g.applies, "grs_factor_reason": g.reason}

    def alpha_explained(self, market_alpha: float, market_beta: float) -> dict:
        """How the market model's alpha splits against the factor model's on the same
        periods (exact for OLS with an intercept): alpha_m - alpha_f = (b_f - b_m) mean(x)
        + sum_k b_k mean(f_k). Per-period decimals; ``parts`` maps each tilt to its share."""
        c = self.portfolio.coef[0]
        mu = self.factor_means
        parts = {"market beta": (c[1] - market_beta) * mu[0]}
        parts |= {n: c[j + 2] * mu[j + 1] for j, n in enumerate(self.portfolio.names)}
        gap = market_alpha - c[0]
        return {"gap": gap, "parts": parts,
                "share": gap / market_alpha if market_alpha != 0 else float("nan")}


def _on_window(keys: np.ndarray, src_keys: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Rows of ``values`` (keyed by sorted ``src_keys``) on ``keys``; NaN where absent."""
    pos = np.clip(np.searchsorted(src_keys, keys), 0, max(len(src_keys) - 1, 0))
    hit = (src_keys[pos] == keys) if len(src_keys) else np.zeros(len(keys), bool)
    out = np.full((len(keys),) + values.shape[1:], np.nan)
    out[hit] = values[pos[hit]]
    return out


def _bench_on_window(frame: pd.DataFrame, keys: np.ndarray) -> SectorBenchmark:
    sectors = tuple(sorted(frame["sector"].unique()))
    wide_w = frame.pivot(index="key", columns="sector", values="weight").reindex(
        index=keys, columns=list(sectors))
    wide_r = frame.pivot(index="key", columns="sector", values="return").reindex(
        index=keys, columns=list(sectors))
    return SectorBenchmark(sectors, wide_w.to_numpy(float), wide_r.to_numpy(float))


def _weights_on_window(frame: pd.DataFrame, keys: np.ndarray, ids: tuple[str, ...]
                       ) -> np.ndarray:
    """T x N weights: each period takes the latest weights dated in or before it."""
    wide = frame.pivot_table(index="key", columns="security_id", values="weight",
                             aggfunc="sum").reindex(columns=list(ids)).fillna(0.0)
    hkeys = wide.index.to_numpy()
    pos = np.searchsorted(hkeys, keys, side="right") - 1
    return wide.to_numpy(float)[np.maximum(pos, 0)]


def _require_separable_factors(x: np.ndarray, F: np.ndarray, names: tuple[str, ...],
                               settings) -> None:
    """Every factor must carry something that the market's excess return ``x`` and the
    factors before it do not, over the window's periods where all of them have a value.
    Otherwise the design [1, x, F] is singular for every holding and the portfolio, and
    the factor model would leave every figure empty: bad input, named here instead. The
    test is the fitting's own (:data:`SINGULAR_COND` on X'X), applied as each factor is
    added, so the first factor that adds nothing is the one named."""
    rows = np.isfinite(x) & np.isfinite(F).all(axis=1)
    X = np.column_stack([np.ones(int(rows.sum())), x[rows], F[rows]])
    if len(X) and not float(np.linalg.cond(X[:, :2].T @ X[:, :2])) < SINGULAR_COND:
        return      # the market premium alone is constant: validation names that, not a factor
    for j, name in enumerate(names):
        part = X[:, :j + 3]
        cond = float(np.linalg.cond(part.T @ part)) if len(part) else np.inf
        if not cond < SINGULAR_COND:
            spec = settings.inputs.get("factors")
            before = " and the factors before it" if j else ""
            raise InputError([Problem(
                place(spec.display if spec is not None else "factors", None, name),
                f"factor {name!r} is a linear combination of the market proxy's excess "
                f"return{before} over the window's {len(part)} periods (the regression's "
                f"cross-product matrix has condition number {cond:.1e}), so the factor "
                "model cannot tell them apart and would leave every factor figure empty; "
                "remove the column or check its values")])


def factors_on_window(dates: np.ndarray, market_excess: np.ndarray, factors: FactorReturns,
                      settings) -> np.ndarray:
    """The factors' returns on the window's ``dates`` (T x K, NaN where absent), once
    :func:`_require_separable_factors` has found each of them separable from the market's
    excess return and the factors before it (else :class:`InputError`). The factor model's
    own first step, and what ``reporter check`` runs of it."""
    F = _on_window(period_keys(dates, settings.frequency),
                   period_keys(factors.dates, settings.frequency), factors.values)
    _require_separable_factors(market_excess, F, factors.names, settings)
    return F


def analyse_style(res: PackResults, holdings: pd.DataFrame, settings, style: StyleInputs
                  ) -> tuple[PackResults, StyleResults | None]:
    """The factor model (every holding and the portfolio, same periods and gap rules as the
    market model), its GRS test on the holdings with a complete window, and the attribution
    by sector. Returns the results with the factor fields added to ``securities`` (in
    holdings order), and the style results; (res, None) when no style input was given."""
    if style.empty:
        return res, None
    win, P = res.window, res.periods_per_year
    keys = period_keys(win.dates, settings.frequency)
    x, y = win.market_excess, win.excess_returns
    hold = port = grs = means = None
    if style.factors is not None:
        f = style.factors
        F = factors_on_window(win.dates, x, f, settings)
        prep = Prepared.of(y, x)
        args = (f.names, settings.min_obs, settings.errors, settings.hac_lags,
                settings.confidence)
        hold = fit_factor_model(y, x, F, *args, prep=prep)
        hold = dataclasses.replace(hold, fitted=hold.fitted & res.fits.fitted)
        port_ex = (res.portfolio_series - win.risk_free)[:, None]
        port = fit_factor_model(port_ex, x, F, *args)
        ok = np.isfinite(port_ex[:, 0]) & np.isfinite(F).all(axis=1)
        means = np.column_stack([x, F])[ok].mean(axis=0)
        complete = res.fits.fitted & np.isfinite(y).all(axis=0)
        grs = grs_factor_test(y[:, complete], np.column_stack([x, F]))
    attribution = None
    if style.benchmark_sectors is not None:
        bench = _bench_on_window(style.benchmark_sectors, keys)
        ids = tuple(holdings["security_id"])
        if style.weights_history is not None:
            w, source = _weights_on_window(style.weights_history, keys, ids), \
                "weights history file"
        else:
            w, source = holdings["weight"].to_numpy(float), "current weights"
        attribution = attribute(win.returns, w, holdings["sector"].to_numpy(), bench, source)
    out = StyleResults(P, hold, port, grs, means, attribution)
    if hold is not None:
        sec = res.securities.copy()
        keep = np.where(hold.fitted, 1.0, np.nan)
        for name, values in out.columns(hold).items():
            sec[name] = values if values.dtype == object else values * keep
        sec["sml_position_factor"] = np.where(hold.fitted, sec["sml_position_factor"], "")
        res = dataclasses.replace(res, securities=sec)
    return res, out
