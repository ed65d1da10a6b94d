"""Newey-West (1987) standard errors of the market-model fits, for every holding at once
(Bartlett kernel; lags over each holding's consecutive observations)."""

from __future__ import annotations

import numpy as np

from reporter.analytics.market_model import MarketModelFits, Prepared, newey_west_lags


def _compact(y: np.ndarray, x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Move each column's observed periods to the top, in order (zeros below).

    HAC lags then run over a holding's consecutive *observations*, as they do when a series
    with gaps is dropped to its observed rows and fitted on its own.
    """
    mask = np.isfinite(y) & np.isfinite(x)[:, None]
    order = np.argsort(~mask, axis=0, kind="stable")
    m = np.take_along_axis(mask, order, axis=0)
    yc = np.where(m, np.take_along_axis(np.where(mask, y, 0.0), order, axis=0), 0.0)
    xb = np.broadcast_to(np.where(np.isfinite(x), x, 0.0)[:, None], y.shape)
    xc = np.where(m, np.take_along_axis(xb, order, axis=0), 0.0)
    return yc, xc, m


HAC_BLOCK = 1 << 18      # elements of the residuals a column block holds (2 MiB: in cache)


def _hac_scores_sums(y0: np.ndarray, m: np.ndarray, xr: np.ndarray, alpha: np.ndarray,
                     beta: np.ndarray, L: np.ndarray) -> tuple[np.ndarray, ...]:
    """Bartlett-weighted long-run sums of the OLS scores (e, e x) for columns that share the
    regressor ``xr`` row by row (no interior gaps): S_aa, S_ab, S_bb, with the residuals
    e = (y0 - alpha - beta x) m. A block of columns at a time (HAC_BLOCK elements), each
    block's residuals and lag products made in two buffers that stay in the processor's
    cache: one elementwise product and one small matrix product per lag. (As whole T x N
    matrices these were two fresh 40 MB arrays at Large, and every lag a pass through
    memory.)"""
    T, N = y0.shape
    lags = int(L.max(initial=0))
    ones = np.ones_like(xr)
    first = np.stack([ones, xr, xr * xr])
    at_lag = [np.stack([ones[lag:], xr[lag:] * xr[:-lag], xr[:-lag], xr[lag:]])
              for lag in range(1, lags + 1)]
    s_aa, s_ab, s_bb = np.empty((3, N))
    step = max(1, min(N, HAC_BLOCK // max(T, 1)))
    e_buf, p_buf = np.empty((T, step)), np.empty((T, step))
    for start in range(0, N, step):
        cols = slice(start, min(start + step, N))
        k = cols.stop - cols.start
        e, buf = e_buf[:, :k], p_buf[:, :k]
        np.multiply.outer(xr, beta[cols], out=e)       # fitted values, then residuals
        e += alpha[cols]
        e *= m[:, cols]
        np.subtract(y0[:, cols], e, out=e)
        np.multiply(e, e, out=buf)
        aa, ab, bb = first @ buf
        for lag in range(1, lags + 1):
            w = np.where(lag <= L[cols], 1.0 - lag / (L[cols] + 1.0), 0.0)
            prod = np.multiply(e[lag:], e[:-lag], out=buf[: T - lag])
            la, lb, lab, lba = at_lag[lag - 1] @ prod
            aa = aa + 2 * w * la
            bb = bb + 2 * w * lb
            ab = ab + w * (lab + lba)
        s_aa[cols], s_ab[cols], s_bb[cols] = aa, ab, bb
    return s_aa, s_ab, s_bb


def _hac_scores_sums_compacted(e: np.ndarray, xc: np.ndarray, L: np.ndarray):
    """As :func:`_hac_scores_sums` for compacted columns whose regressor differs by column."""
    a, b = e, e * xc
    s_aa = np.einsum("ij,ij->j", a, a)
    s_ab = np.einsum("ij,ij->j", a, b)
    s_bb = np.einsum("ij,ij->j", b, b)
    for lag in range(1, int(L.max(initial=0)) + 1):
        w = np.where(lag <= L, 1.0 - lag / (L + 1.0), 0.0)
        s_aa = s_aa + 2 * w * np.einsum("ij,ij->j", a[lag:], a[:-lag])
        s_bb = s_bb + 2 * w * np.einsum("ij,ij->j", b[lag:], b[:-lag])
        s_ab = s_ab + w * (np.einsum("ij,ij->j", a[lag:], b[:-lag])
                           + np.einsum("ij,ij->j", b[lag:], a[:-lag]))
    return s_aa, s_ab, s_bb


def interior_gaps(mask: np.ndarray, n_obs: np.ndarray | None = None) -> np.ndarray:
    """Columns of a T x N mask with a missing value between their first and last observation.

    Only columns with fewer than T observations can have one, so only those are searched.
    """
    T = mask.shape[0]
    n = mask.sum(axis=0) if n_obs is None else np.asarray(n_obs)
    out = np.zeros(mask.shape[1], dtype=bool)
    part = np.flatnonzero((n > 0) & (n < T))
    if len(part):
        sub = mask[:, part]
        first = np.argmax(sub, axis=0)
        last = T - 1 - np.argmax(sub[::-1], axis=0)
        out[part] = n[part] < last - first + 1
    return out


def hac_standard_errors(y: np.ndarray, x: np.ndarray, fits: MarketModelFits,
                        lags: int | None = None,
                        prep: Prepared | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Newey-West (1987) standard errors of (alpha, beta) for every column at once.

    Bartlett kernel, weights 1 - l/(L+1); L from :func:`newey_west_lags` of each holding's own
    n_obs unless ``lags`` is given; small-sample factor n/(n-2). This is statsmodels
    ``OLS(...).fit(cov_type='HAC', cov_kwds={'maxlags': L, 'use_correction': True})`` on the
    holding's observed periods. Lags run over consecutive observations: a holding with a gap
    inside its history is compacted first, exactly as dropping its missing rows would do.
    Returns (alpha_se_hac, beta_se_hac), NaN where the holding is not fitted.
    """
    p = prep or Prepared.of(y, x)
    N = p.m.shape[1]
    xr = np.where(p.x_ok, p.xc + p.x_mean, 0.0)
    n = fits.n_obs.astype(float)        # counted on the same mask as ``p.m``
    L = np.full(N, lags) if lags is not None else newey_west_lags(n)
    alpha = np.nan_to_num(fits.alpha)
    beta = np.nan_to_num(fits.beta)
    s_aa, s_ab, s_bb = _hac_scores_sums(p.y0, p.m, xr, alpha, beta, L)   # zero where missing
    sx, sxx = np.stack([xr, xr * xr]) @ p.m
    gapped = np.flatnonzero(interior_gaps(p.m > 0, p.n_obs))
    if len(gapped):
        yg = np.where(p.m[:, gapped] > 0, p.y0[:, gapped], np.nan)
        ycomp, xcomp, mcomp = _compact(yg, np.where(p.x_ok, xr, np.nan))
        eg = np.where(mcomp, ycomp - alpha[gapped] - beta[gapped] * xcomp, 0.0)
        g_aa, g_ab, g_bb = _hac_scores_sums_compacted(eg, xcomp, L[gapped])
        s_aa[gapped], s_ab[gapped], s_bb[gapped] = g_aa, g_ab, g_bb
    with np.errstate(invalid="ignore", divide="ignore"):
        det = n * sxx - sx**2
        # inverse of X'X = [[n, sx], [sx, sxx]]
        i11, i12, i22 = sxx / det, -sx / det, n / det
        # sandwich (X'X)^-1 S (X'X)^-1, element by element
        v11 = i11 * (i11 * s_aa + i12 * s_ab) + i12 * (i11 * s_ab + i12 * s_bb)
        v22 = i12 * (i12 * s_aa + i22 * s_ab) + i22 * (i12 * s_ab + i22 * s_bb)
        corr = n / (n - 2)
        se_a, se_b = np.sqrt(v11 * corr), np.sqrt(v22 * corr)
    keep = np.where(fits.fitted, 1.0, np.nan)
    return se_a * keep, se_b * keep
