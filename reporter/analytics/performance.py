"""Period returns, calendar-year returns, growth of one unit and the performance ratios.

All returns are per-period decimals. Sources: Sharpe (1966) for the Sharpe ratio and
Lo (2002), "The Statistics of Sharpe Ratios", for its standard error and the
serial-correlation adjustment of its annualisation; Treynor (1965); Jensen (1968);
Treynor and Black (1973) for the appraisal ratio alpha / sigma_e; Modigliani and
Modigliani (1997) for M-squared; Sortino and Price (1994) for downside deviation and the
Sortino ratio. Periods under one year are reported cumulative and periods of a year or more
are annualised geometrically, as the GIPS standards require (no annualising under a year).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import numpy as np
import pandas as pd

from reporter.analytics.market_model import newey_west_lags
from reporter.analytics.returns import period_keys

# trailing periods: (key, label, months back; 0 = year to date, None = whole history)
TRAILING = (
    ("1m", "Month", 1), ("3m", "Three months", 3), ("ytd", "Year to date", 0),
    ("1y", "One year", 12), ("3y", "Three years", 36), ("5y", "Five years", 60),
    ("all", "Whole history", None),
)
PERIOD_RETURN_COLUMNS = ["kind", "period", "label", "start", "end", "n_periods", "basis",
                         "portfolio", "market", "difference", "benchmark",
                         "benchmark_difference"]


def _months_back(d: dt.date, months: int) -> dt.date:
    """The same day ``months`` calendar months before ``d`` (clipped to the month's end)."""
    y, m = divmod(d.year * 12 + d.month - 1 - months, 12)
    m += 1
    last = (dt.date(y + (m == 12), m % 12 + 1, 1) - dt.timedelta(days=1)).day
    return dt.date(y, m, min(d.day, last))


def compound(r: np.ndarray) -> float:
    """Cumulative return prod(1 + r) - 1 of per-period decimals (NaN if any is missing)."""
    r = np.asarray(r, dtype=float)
    return float(np.prod(1.0 + r) - 1.0) if len(r) else float("nan")


def annualised_geometric(cumulative: float, n_periods: int, periods_per_year: int) -> float:
    """Geometric annual rate (1 + R)^(P / n) - 1 of a cumulative return R over n periods."""
    return float((1.0 + cumulative) ** (periods_per_year / n_periods) - 1.0)


def period_returns(dates: np.ndarray, portfolio: np.ndarray, market: np.ndarray,
                   period_end: dt.date, frequency: str, periods_per_year: int,
                   benchmark: np.ndarray | None = None) -> pd.DataFrame:
    """Trailing-period and calendar-year returns of the portfolio and the market proxy.

    ``dates`` are the market's period dates up to ``period_end`` (ascending), ``portfolio`` and
    ``market`` the per-period decimal returns on them; the history starts at the portfolio's
    first return. Trailing periods are calendar periods of ``period_end``: the year to date
    holds the periods dated in ``period_end``'s calendar year, as the calendar-year rows count
    them; a trailing period of k months holds the periods (months, ISO weeks or days) after
    the one containing ``period_end`` less k months (one year of weekly data is 52 or 53
    weeks). A trailing period is reported only when the history covers all of it. Under a
    year the return is cumulative
    (``basis = "cumulative"``); at a year or more it is annualised geometrically,
    (1 + R)^(P/n) - 1 (``basis = "annualised"``), as GIPS requires.
    ``difference`` is portfolio minus market (arithmetic). Calendar years are
    cumulative; a part year is labelled as such. Columns: :data:`PERIOD_RETURN_COLUMNS`.
    """
    # the history starts at the portfolio's first return (periods before it are not held)
    finite = np.flatnonzero(np.isfinite(np.asarray(portfolio, dtype=float)))
    start = int(finite[0]) if len(finite) else len(portfolio)
    d = np.asarray(dates, dtype="datetime64[D]")[start:]
    portfolio, market = np.asarray(portfolio)[start:], np.asarray(market)[start:]
    if benchmark is not None:
        benchmark = np.asarray(benchmark)[start:]
    if len(d) == 0:
        return pd.DataFrame([], columns=PERIOD_RETURN_COLUMNS)
    keys = period_keys(d, frequency)
    # how far (in period keys) a first or last period may sit from a boundary and still cover it
    slack = {"monthly": 1, "weekly": 1, "daily": 5}[frequency]
    end_slack = {"monthly": 0, "weekly": 1, "daily": 4}[frequency]
    rows = []

    def row(kind, key, label, idx, annualise):
        n = len(idx)
        p, m = compound(portfolio[idx]), compound(market[idx])
        b = compound(benchmark[idx]) if benchmark is not None else float("nan")
        if annualise:
            p = annualised_geometric(p, n, periods_per_year)
            m = annualised_geometric(m, n, periods_per_year)
            b = annualised_geometric(b, n, periods_per_year)
        rows.append({"kind": kind, "period": key, "label": label, "start": str(d[idx[0]]),
                     "end": str(d[idx[-1]]), "n_periods": n,
                     "basis": "annualised" if annualise else "cumulative",
                     "portfolio": p, "market": m, "difference": p - m,
                     "benchmark": b, "benchmark_difference": p - b})

    for key, label, months in TRAILING:
        if months is None:
            idx = np.arange(len(d))
            years = len(d) / periods_per_year
        else:
            start = (dt.date(period_end.year, 1, 1) - dt.timedelta(days=1) if months == 0
                     else _months_back(period_end, months))
            skey = period_keys(np.array([np.datetime64(start, "D")]), frequency)[0]
            if keys[0] > skey + slack:
                continue            # the history does not cover the whole period
            # the year to date is the periods dated in period_end's year, as the calendar
            # rows count them (a week ending 2 January is in the new year even though its
            # ISO week began in December); k months: the periods after the boundary's period
            idx = np.flatnonzero(d.astype("datetime64[Y]").astype(int) + 1970
                                 == period_end.year if months == 0 else keys > skey)
            years = months / 12
        if len(idx) == 0 or not np.isfinite(portfolio[idx]).all():
            continue
        row("trailing", key, label, idx, annualise=years >= 1.0 - 1e-9)
    years = d.astype("datetime64[Y]").astype(int) + 1970
    for y in np.unique(years):
        idx = np.flatnonzero(years == y)
        if not np.isfinite(portfolio[idx]).all():
            continue
        dec31 = np.array([np.datetime64(f"{y - 1}-12-31", "D"), np.datetime64(f"{y}-12-31",
                                                                              "D")])
        k0, k1 = period_keys(dec31, frequency)
        full_start = keys[idx[0]] <= k0 + slack
        full_end = keys[idx[-1]] >= k1 - end_slack
        label = str(y) if full_start and full_end else (
            f"{y} (to date)" if full_start else f"{y} (part year)")
        row("calendar", str(y), label, idx, annualise=False)
    return pd.DataFrame(rows, columns=PERIOD_RETURN_COLUMNS)


def growth_of_one(returns: np.ndarray) -> np.ndarray:
    """Value of one unit invested at the start: cumprod(1 + r). A missing return counts as 0."""
    return np.cumprod(1.0 + np.nan_to_num(np.asarray(returns, dtype=float)))


@dataclass(frozen=True)
class Drawdown:
    """Largest peak-to-trough fall of the growth of one unit (a negative decimal)."""

    max_drawdown: float
    peak: int           # index of the peak period (-1: the start, before the first period)
    trough: int         # index of the trough period
    recovery: int       # first index at or above the peak after the trough; -1 if not yet


def max_drawdown(returns: np.ndarray) -> Drawdown:
    """Maximum drawdown min_t (V_t / max_{s<=t} V_s - 1) of V = growth of one unit, with the
    starting value 1 counted as a peak (common practice, no source)."""
    v = np.concatenate([[1.0], growth_of_one(returns)])
    peaks = np.maximum.accumulate(v)
    dd = v / peaks - 1.0
    t = int(np.argmin(dd))
    p = int(np.argmax(v[: t + 1]))
    after = np.flatnonzero(v[t:] >= v[p])
    rec = int(after[0] + t) - 1 if len(after) and dd[t] < 0 else -1
    return Drawdown(max_drawdown=float(dd[t]), peak=p - 1, trough=t - 1, recovery=rec)


def autocorrelations(x: np.ndarray, lags: int) -> np.ndarray:
    """Sample autocorrelations rho_1..rho_lags with the usual full-sample denominator
    sum (x - mean)^2 (as statsmodels ``acf`` with ``adjusted=False``)."""
    x = np.asarray(x, dtype=float)
    if not np.ptp(x) > 0:      # a constant series (its deviations only rounding): undefined
        return np.full(lags, np.nan)
    e = x - np.mean(x)
    denom = float(e @ e)
    return np.array([float(e[k:] @ e[:-k]) / denom for k in range(1, lags + 1)])


def lo_scale(rho: np.ndarray, q: int) -> float:
    """Lo's (2002, eq. 17) scale eta(q) = q / sqrt(q + 2 sum_{k=1}^{q-1} (q - k) rho_k) that
    turns a per-period Sharpe ratio into a q-period one; sqrt(q) when returns are
    uncorrelated. With q - 1 *sample* autocorrelations this is biased upward in short
    samples (their noise adds up); :func:`lo_scale_ar1` is the stable form the pack uses."""
    k = np.arange(1, q)
    inner = q + 2.0 * float(np.sum((q - k) * np.asarray(rho)[: q - 1]))
    return float(q / np.sqrt(inner)) if inner > 0 else float("nan")


def lo_scale_ar1(rho1: float, q: int) -> float:
    """Lo's (2002) eta(q) for returns that follow an AR(1) with first autocorrelation
    ``rho1``: rho_k = rho1^k in eq. 17, which sums in closed form to
    q / sqrt(q + 2 rho/(1 - rho) (q - (1 - rho^q)/(1 - rho))). One estimated parameter
    instead of q - 1, so the scale stays near sqrt(q) for independent returns at any q.
    ``rho1`` is clipped to [-0.99, 0.99]."""
    r = float(np.clip(rho1, -0.99, 0.99)) if np.isfinite(rho1) else float("nan")
    if not np.isfinite(r):
        return float("nan")
    if r == 0.0:
        return float(np.sqrt(q))
    inner = q + 2.0 * r / (1.0 - r) * (q - (1.0 - r**q) / (1.0 - r))
    return float(q / np.sqrt(inner)) if inner > 0 else float("nan")


def sharpe_se_gmm(excess: np.ndarray, lags: int) -> float:
    """Standard error of a per-period Sharpe ratio when returns need not be independent
    (Lo 2002, section 3.2, the GMM case): SR = mu/sigma with the moments
    psi_t = (r_t - mu, (r_t - mu)^2 - sigma^2), whose long-run covariance S is estimated by
    Newey and West (1987) with Bartlett weights 1 - j/(lags + 1); then
    var(SR) = g' S g / T with g = (1/sigma, -mu/(2 sigma^3)). Under iid normal returns
    g' S g = 1 + SR^2/2, the iid formula (Lo 2002, eq. 9)."""
    r = np.asarray(excess, dtype=float)
    r = r[np.isfinite(r)]
    T = len(r)
    if T < 3:
        return float("nan")
    mu = float(r.mean())
    e = r - mu
    var = float(e @ e / T)
    psi = np.column_stack([e, e * e - var])
    S = psi.T @ psi / T
    for j in range(1, min(int(lags), T - 1) + 1):
        g = psi[j:].T @ psi[:-j] / T
        S += (1.0 - j / (lags + 1.0)) * (g + g.T)
    sd = np.sqrt(var)
    grad = np.array([1.0 / sd, -mu / (2.0 * sd**3)])
    v = float(grad @ S @ grad)
    return float(np.sqrt(v / T)) if v > 0 else float("nan")


def sharpe_se_iid(sharpe: float, n: int) -> float:
    """Standard error of a per-period Sharpe ratio under independent, identically distributed
    returns, sqrt((1 + SR^2 / 2) / n) (Lo 2002, eq. 9)."""
    return float(np.sqrt((1.0 + 0.5 * sharpe**2) / n))


@dataclass(frozen=True)
class PerformanceRatios:
    """The portfolio's performance figures over the window, per period unless ``_ann``.

    ``mar`` is the minimum acceptable return per period used by the downside figures.
    """

    n_obs: int
    sharpe: float
    sharpe_se: float                 # iid (Lo 2002, eq. 9)
    sharpe_se_hac: float             # non-iid: Lo's GMM form, Newey-West moments
    sharpe_ann_lo: float             # eta(P) x sharpe (Lo 2002, AR(1) case)
    sharpe_ann_lo_se: float          # eta(P) x sharpe_se_hac: eta treated as known
    lo_scale: float                  # eta(P); sqrt(P) for uncorrelated returns
    sharpe_hac_lags: int             # Newey-West lags behind sharpe_se_hac
    first_autocorrelation: float     # rho_1 of the excess returns
    appraisal_ratio: float           # alpha / residual volatility
    m2: float                        # mean r_f + sharpe x sd(r_m - r_f)
    m2_excess: float                 # m2 - mean r_m
    max_drawdown: float
    drawdown_peak: str               # dates ("" when none)
    drawdown_trough: str
    drawdown_recovery: str           # "" when not yet recovered
    downside_deviation: float        # sqrt(mean(min(r - MAR, 0)^2))
    sortino: float                   # mean(r - MAR) / downside deviation
    mar: float                       # mean minimum acceptable return per period
    mar_source: str                  # "risk-free rate" or "fixed annual rate"
    return_arithmetic_ann: float     # mean(r) x P
    return_geometric_ann: float      # prod(1 + r)^(P/n) - 1
    market_return_arithmetic_ann: float
    market_return_geometric_ann: float
    market_max_drawdown: float
    # against the optional benchmark (NaN without one): mean and sd of r_p - r_b, their ratio
    benchmark_active_return: float = float("nan")
    benchmark_tracking_error: float = float("nan")
    benchmark_information_ratio: float = float("nan")
    benchmark_return_arithmetic_ann: float = float("nan")
    benchmark_return_geometric_ann: float = float("nan")


def performance(dates: np.ndarray, port: np.ndarray, market: np.ndarray,
                risk_free: np.ndarray, alpha: float, residual_vol: float,
                periods_per_year: int, mar: float | None = None,
                benchmark: np.ndarray | None = None,
                hac_lags: int | None = None) -> PerformanceRatios:
    """The ratios of :class:`PerformanceRatios` from aligned per-period series over the window.

    ``mar`` is a fixed annual minimum acceptable return (decimal), applied per period as the
    geometric rate (1 + mar)^(1/P) - 1, which compounds to it over a year; None uses the
    risk-free rate of each period. Periods where the portfolio has no return are left out.
    Sharpe ratio = mean(r_p - r_f) / sd(r_p - r_f), ddof = 1.
    """
    P = periods_per_year
    ok = np.isfinite(port)
    d, p, m, f = np.asarray(dates)[ok], port[ok], market[ok], risk_free[ok]
    n = len(p)
    ex = p - f
    sr = float(ex.mean() / np.std(ex, ddof=1))
    se = sharpe_se_iid(sr, n)
    rho = autocorrelations(ex, 1) if n > 2 else np.array([np.nan])
    eta = lo_scale_ar1(float(rho[0]), P)
    lags = int(newey_west_lags(n)) if hac_lags is None else int(hac_lags)
    se_hac = sharpe_se_gmm(ex, lags)
    m_ex = m - f
    m2 = float(f.mean() + sr * np.std(m_ex, ddof=1))
    floor = f if mar is None else np.full(n, (1.0 + mar) ** (1.0 / P) - 1.0)
    shortfall = np.minimum(p - floor, 0.0)
    dd_dev = float(np.sqrt(np.mean(shortfall**2)))
    dd = max_drawdown(p)
    dm = max_drawdown(m)
    bench = {}
    if benchmark is not None:
        b = np.asarray(benchmark, dtype=float)[ok]
        act = p - b
        te = float(np.std(act, ddof=1))
        bench = dict(benchmark_active_return=float(act.mean()), benchmark_tracking_error=te,
                     benchmark_information_ratio=float(act.mean() / te) if te > 0 else
                     float("nan"), benchmark_return_arithmetic_ann=float(b.mean() * P),
                     benchmark_return_geometric_ann=annualised_geometric(compound(b), n, P))

    def when(i: int) -> str:
        return str(d[i]) if 0 <= i < n else ""

    return PerformanceRatios(
        n_obs=n, sharpe=sr, sharpe_se=se, sharpe_se_hac=se_hac, sharpe_ann_lo=eta * sr,
        sharpe_ann_lo_se=eta * se_hac, lo_scale=eta, sharpe_hac_lags=lags,
        first_autocorrelation=float(rho[0]),
        appraisal_ratio=float(alpha / residual_vol) if residual_vol > 0 else float("nan"),
        m2=m2, m2_excess=m2 - float(m.mean()),
        max_drawdown=dd.max_drawdown, drawdown_peak=when(dd.peak) if dd.peak >= 0 else (
            "start" if dd.max_drawdown < 0 else ""),
        drawdown_trough=when(dd.trough) if dd.max_drawdown < 0 else "",
        drawdown_recovery=when(dd.recovery),
        downside_deviation=dd_dev,
        sortino=float((p - floor).mean() / dd_dev) if dd_dev > 0 else float("nan"),
        mar=float(floor.mean()), mar_source="risk-free rate" if mar is None else
        "fixed annual rate",
        return_arithmetic_ann=float(p.mean() * P),
        return_geometric_ann=annualised_geometric(compound(p), n, P),
        market_return_arithmetic_ann=float(m.mean() * P),
        market_return_geometric_ann=annualised_geometric(compound(m), n, P),
        market_max_drawdown=dm.max_drawdown,
        **bench,
    )


def holding_ratios(excess: np.ndarray, alpha: np.ndarray,
                   residual_vol: np.ndarray) -> dict[str, np.ndarray]:
    """Per-holding Sharpe ratio mean/sd of excess returns (ddof = 1, each holding's own
    periods), the standard error of its mean excess return sd/sqrt(n), and the appraisal
    ratio alpha / sigma_e; vectorised over the columns of ``excess`` (T x N, NaN = missing)."""
    mask = np.isfinite(excess)
    n = mask.sum(axis=0).astype(float)
    holed = np.flatnonzero(n < excess.shape[0])
    missing = ~mask[:, holed]
    del mask
    x = np.array(excess, dtype=float)          # one T x N buffer; zeros where missing
    sub = x[:, holed]
    sub[missing] = 0.0
    x[:, holed] = sub
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = x.sum(axis=0) / n
        np.subtract(excess, mean, out=x)
        sub = x[:, holed]
        sub[missing] = 0.0
        x[:, holed] = sub
        np.multiply(x, x, out=x)
        var = x.sum(axis=0) / (n - 1)
        sd = np.sqrt(var)
        return {"sharpe": mean / sd, "mean_excess_se": sd / np.sqrt(n),
                "appraisal_ratio": alpha / residual_vol}
