"""The ex post security market line and the classic performance ratios.

Sources: Sharpe (1964) and Lintner (1965) for the CAPM line; Jensen (1968) for alpha;
Treynor (1965) and Sharpe (1966) for the ratios; the information ratio as in
Grinold and Kahn, *Active Portfolio Management*. All figures are per-period decimals.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reporter.analytics.regression import MarketModelFits, t_critical

ABOVE, BELOW, WITHIN = "above the line", "below the line", "within estimation error"


@dataclass(frozen=True)
class SecurityMarketLine:
    """The ex post line E[r_i - r_f] = beta_i x mean market premium, and each holding on it."""

    mean_risk_free: float
    mean_market_premium: float         # mean of r_m - r_f over the window
    expected_excess: np.ndarray        # beta_i x mean_market_premium
    residual: np.ndarray               # mean excess return - expected_excess
    treynor: np.ndarray                # mean excess return / beta_i
    position: np.ndarray               # ABOVE / BELOW / WITHIN (object array; "" if unfitted)


def security_market_line(fits: MarketModelFits, market_excess: np.ndarray,
                         risk_free: np.ndarray, confidence: float,
                         alpha_se: np.ndarray | None = None) -> SecurityMarketLine:
    """Place each holding against the ex post SML drawn from the window's mean premium.

    A holding is called above (below) the line only when its alpha's confidence interval
    lies wholly above (below) zero; otherwise it is within estimation error. ``alpha_se``
    (e.g. Newey-West) replaces the OLS errors in that test when given.
    """
    se = fits.alpha_se if alpha_se is None else alpha_se
    mrp = float(np.mean(market_excess))
    expected = fits.beta * mrp
    with np.errstate(invalid="ignore", divide="ignore"):
        residual = fits.mean_excess - expected
        treynor = fits.mean_excess / fits.beta
        tcrit = t_critical(confidence, np.maximum(fits.n_obs - 2, 1))
        lo = fits.alpha - tcrit * se
        hi = fits.alpha + tcrit * se
    position = np.where(~fits.fitted, "", np.where(lo > 0, ABOVE, np.where(hi < 0, BELOW,
                                                                           WITHIN)))
    return SecurityMarketLine(
        mean_risk_free=float(np.mean(risk_free)), mean_market_premium=mrp,
        expected_excess=expected, residual=residual, treynor=treynor,
        position=position.astype(object),
    )


@dataclass(frozen=True)
class Ratios:
    """Portfolio performance ratios against the market proxy (per period)."""

    mean_excess: float           # mean(r_p - r_f)
    volatility: float            # std(r_p), ddof=1
    sharpe: float                # mean(r_p - r_f) / std(r_p - r_f)
    treynor: float               # mean(r_p - r_f) / beta_p
    tracking_error: float        # std(r_p - r_m), ddof=1
    active_return: float         # mean(r_p - r_m)
    information_ratio: float     # active_return / tracking_error
    market_sharpe: float


def performance_ratios(port: np.ndarray, market: np.ndarray, risk_free: np.ndarray,
                       beta: float) -> Ratios:
    """Sharpe, Treynor, tracking error and information ratio from aligned per-period series."""
    ok = np.isfinite(port)
    p, m, f = port[ok], market[ok], risk_free[ok]
    ex = p - f
    active = p - m
    te = float(np.std(active, ddof=1))
    return Ratios(
        mean_excess=float(ex.mean()), volatility=float(np.std(p, ddof=1)),
        sharpe=float(ex.mean() / np.std(ex, ddof=1)), treynor=float(ex.mean() / beta),
        tracking_error=te, active_return=float(active.mean()),
        information_ratio=float(active.mean() / te) if te > 0 else float("nan"),
        market_sharpe=float((m - f).mean() / np.std(m - f, ddof=1)),
    )
