"""Trailing-window OLS betas of every holding, from running sums."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reporter.analytics.market_model import Prepared, centred_inputs


@dataclass(frozen=True)
class RollingBetas:
    """Trailing-window OLS betas: ``beta`` and ``beta_se`` are T x N, NaN where the window
    ending at that period is incomplete for the holding (a gap breaks the window)."""

    window: int
    beta: np.ndarray
    beta_se: np.ndarray


@dataclass(frozen=True)
class HoldingsRolling:
    """The holdings' trailing-window betas, made a block of holdings at a time when asked
    for (:meth:`block`) instead of held: as T x N betas and errors they are 80 MB at 2,000
    daily holdings over ten years, held from the analysis until their file is written.
    What is held is what they are made from: the returns (the window's own array when the
    history is the window, so nothing new), the risk-free rate and the market's premium.
    Every step of :func:`rolling_betas` is column by column (elementwise, or sums down the
    rows), so a block's figures are bitwise those of the whole matrix."""

    window: int
    returns: np.ndarray          # T x N holdings' returns (not excess), NaN where missing
    risk_free: np.ndarray        # T
    market_excess: np.ndarray    # T

    @property
    def n_series(self) -> int:
        return self.returns.shape[1]

    def block(self, cols: np.ndarray) -> RollingBetas:
        """The rolling betas of the holdings at positions ``cols``."""
        y = self.returns[:, cols] - self.risk_free[:, None]
        return rolling_betas(y, self.market_excess, self.window)

    def released(self) -> HoldingsRolling:
        """The same with no returns held (a build once the rolling file is written)."""
        return HoldingsRolling(self.window, np.empty((len(self.risk_free), 0)),
                               self.risk_free, self.market_excess)


def trailing_sum(a: np.ndarray, window: int) -> np.ndarray:
    """Sum of the last ``window`` rows at every row (rows before the first full window hold
    partial sums). A running sum, row by row: each step is one vectorised add across all
    columns, which is faster than ``cumsum`` along axis 0 of a C-ordered array."""
    if a.ndim == 2 and a.shape[1] == 1 and a.shape[0]:
        # one column: the same additions in order on Python floats (IEEE doubles, so the
        # same roundings), without a numpy call per row
        col = a[:, 0].tolist()
        sums = [col[0]] * len(col)
        for t in range(1, len(col)):
            v = sums[t - 1] + col[t]
            if t >= window:
                v -= col[t - window]
            sums[t] = v
        return np.array(sums, dtype=a.dtype)[:, None]
    out = np.empty_like(a)
    out[0] = a[0]
    for t in range(1, a.shape[0]):
        np.add(out[t - 1], a[t], out=out[t])
        if t >= window:
            np.subtract(out[t], a[t - window], out=out[t])
    return out


def rolling_betas(y: np.ndarray, x: np.ndarray, window: int,
                  prep: Prepared | None = None) -> RollingBetas:
    """OLS beta (and its OLS standard error) of each column of y on x over every trailing
    window of ``window`` periods, from running sums (no refit per window). A window is
    used only if the holding has a return in every one of its periods, so the market's sums
    over a complete window are the same for every holding and come from one 1-D pass."""
    W = window
    if prep is not None:
        y0, m, xc, x_ok = prep.y0, prep.m, prep.xc, prep.x_ok
        holed = np.flatnonzero(prep.n_obs < m.shape[0])
        m = m[:, holed]
    else:       # as Prepared.of, without its T x N float mask: only the holed columns' count
        y0, xc, x_ok, mask, _ = centred_inputs(y, x)
        holed = np.flatnonzero(~mask.all(axis=0))
        m = mask[:, holed].astype(float)
        del mask
    # window completeness: only holdings with a missing period anywhere need counting
    incomplete = np.zeros(y0.shape, dtype=bool)
    if len(holed):
        incomplete[:, holed] = np.abs(trailing_sum(m, W) - W) > 0.5
    del m
    sy = trailing_sum(y0, W)
    tmp = np.multiply(y0, xc[:, None])
    sxy = trailing_sum(tmp, W)
    np.multiply(y0, y0, out=tmp)
    del y0, prep                # (the caller's prepared matrices, if given, stay the caller's)
    syy = trailing_sum(tmp, W)
    xw = np.where(x_ok, xc, 0.0)
    sx = trailing_sum(xw[:, None], W)[:, 0]
    sxx = trailing_sum((xw * xw)[:, None], W)[:, 0]
    with np.errstate(invalid="ignore", divide="ignore"):
        cxx = (sxx - sx * sx / W)[:, None]
        np.multiply(sy, sy, out=tmp)
        tmp /= W
        syy -= tmp                                   # syy now holds the centred cyy
        sy *= (sx / W)[:, None]
        sxy -= sy                                    # sxy now holds the centred cxy
        beta = np.divide(sxy, cxx, out=sy)
        np.multiply(beta, sxy, out=tmp)
        syy -= tmp                                   # residual sum of squares
        np.maximum(syy, 0.0, out=syy)
        syy /= (W - 2)
        syy /= cxx
        se = np.sqrt(syy, out=syy)
    incomplete[: W - 1] = True
    beta[incomplete] = np.nan
    se[incomplete] = np.nan
    return RollingBetas(window=window, beta=beta, beta_se=se)
