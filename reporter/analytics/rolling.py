"""Trailing-window OLS betas of every holding, from running sums."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reporter.analytics.market_model import Prepared


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
        return rolling_betas(y, self.market_excess, self.window, consume=True)  # y is new

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


def _trailing_sum_in_place(a: np.ndarray, window: int) -> np.ndarray:
    """:func:`trailing_sum` built in ``a`` itself (the same additions in the same order, so
    the same roundings): the last ``window`` + 1 original rows are kept in a ring of rows."""
    if a.shape[1] == 1 or a.shape[0] < 2:
        a[:] = trailing_sum(a, window)
        return a
    ring = np.empty((window + 1, a.shape[1]))
    ring[0] = a[0]
    for t in range(1, a.shape[0]):
        ring[t % (window + 1)] = a[t]
        np.add(a[t - 1], a[t], out=a[t])
        if t >= window:
            np.subtract(a[t], ring[(t - window) % (window + 1)], out=a[t])
    return a


def _rows(n_rows: int, n_cols: int):
    step = max(1, (1 << 18) // max(n_cols, 1))
    for start in range(0, n_rows, step):
        yield slice(start, start + step)


def rolling_betas(y: np.ndarray, x: np.ndarray, window: int,
                  prep: Prepared | None = None, consume: bool = False) -> RollingBetas:
    """OLS beta (and its OLS standard error) of each column of y on x over every trailing
    window of ``window`` periods, from running sums (no refit per window). A window is
    used only if the holding has a return in every one of its periods, so the market's sums
    over a complete window are the same for every holding and come from one 1-D pass.

    ``consume``: ``y`` (a float T x N array the caller gives up) is zero-filled and summed in
    place. The running sums are built in place of their inputs, so that at most three T x N
    matrices are alive at once (two of them the results)."""
    W = window
    if prep is not None:
        y0 = prep.y0.copy()     # the caller's prepared matrices stay the caller's
        xc, x_ok, n_obs = prep.xc, prep.x_ok, prep.n_obs
        holed = np.flatnonzero(n_obs < prep.m.shape[0])
        m = prep.m[:, holed]
    else:       # as Prepared.of, without its T x N float mask: only the holed columns' count
        y = np.asarray(y, dtype=float)
        x = np.asarray(x, dtype=float)
        x_ok = np.isfinite(x)
        x_mean = float(x[x_ok].mean()) if x_ok.any() else 0.0
        xc = np.where(x_ok, x - x_mean, 0.0)
        mask = np.isfinite(y)
        mask &= x_ok[:, None]
        holed = np.flatnonzero(~mask.all(axis=0))
        m_bool = mask[:, holed]
        del mask
        y0 = y if consume and y.flags.c_contiguous and y.flags.writeable else y.copy()
        sub = y0[:, holed]                   # zeros where y or x is missing: where(mask, y, 0)
        sub[~m_bool] = 0.0
        y0[:, holed] = sub
        m = m_bool.astype(float)
        del m_bool, sub
    # window completeness: only holdings with a missing period anywhere need counting
    incomplete = np.zeros(y0.shape, dtype=bool)
    if len(holed):
        incomplete[:, holed] = np.abs(trailing_sum(m, W) - W) > 0.5
    del m
    sxy = _trailing_sum_in_place(np.multiply(y0, xc[:, None]), W)
    syy = _trailing_sum_in_place(np.multiply(y0, y0), W)
    sy = _trailing_sum_in_place(y0, W)
    del y0
    xw = np.where(x_ok, xc, 0.0)
    sx = trailing_sum(xw[:, None], W)[:, 0]
    sxx = trailing_sum((xw * xw)[:, None], W)[:, 0]
    with np.errstate(invalid="ignore", divide="ignore"):
        cxx = (sxx - sx * sx / W)[:, None]
        for r in _rows(*sy.shape):
            t = np.multiply(sy[r], sy[r])
            t /= W
            syy[r] -= t                              # syy now holds the centred cyy
        sy *= (sx / W)[:, None]
        sxy -= sy                                    # sxy now holds the centred cxy
        beta = np.divide(sxy, cxx, out=sy)
        for r in _rows(*sy.shape):
            syy[r] -= beta[r] * sxy[r]               # residual sum of squares
        del sxy
        np.maximum(syy, 0.0, out=syy)
        syy /= (W - 2)
        syy /= cxx
        se = np.sqrt(syy, out=syy)
    incomplete[: W - 1] = True
    beta[incomplete] = np.nan
    se[incomplete] = np.nan
    return RollingBetas(window=window, beta=beta, beta_se=se)
