"""Period returns and performance ratios against outside references named beside each check."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest

from reporter.analytics.performance import (
    autocorrelations,
    lo_scale,
    lo_scale_ar1,
    max_drawdown,
    performance,
    period_returns,
    sharpe_se_gmm,
    sharpe_se_iid,
)
from reporter.analytics.regression import fit_portfolio
from reporter.analytics.sml import performance_ratios


def _with_moments(rng, mean_p, sd_p, mean_m, sd_m, corr, n=50):
    """Two series whose sample means, sds (ddof=1) and correlation are exactly as given."""
    z = rng.standard_normal((n, 2))
    z -= z.mean(axis=0)
    z1 = z[:, 0] / z[:, 0].std(ddof=1)
    z2 = z[:, 1] - (z[:, 1] @ z1) / (z1 @ z1) * z1
    z2 /= z2.std(ddof=1)
    m = mean_m + sd_m * z1
    p = mean_p + sd_p * (corr * z1 + np.sqrt(1 - corr**2) * z2)
    return p, m


def test_textbook_sharpe_treynor_jensen_m2():
    # Textbook comparison of a managed portfolio P with the market M (Bodie, Kane and Marcus,
    # *Investments*, performance-evaluation chapter; recalled from memory). Inputs, annual:
    # P: mean 35%, sd 42%, beta 1.2; M: mean 28%, sd 30%; risk-free 6%.
    # Textbook answers: Sharpe P 0.69, M 0.73; Treynor P 24.2%; Jensen alpha 2.6%;
    # M-squared (P levered to M's volatility, minus M) -1.3%.
    rf, beta = 0.06, 1.2
    corr = beta * 0.30 / 0.42          # cov = beta sd_m^2
    p, m = _with_moments(np.random.default_rng(3), 0.35, 0.42, 0.28, 0.30, corr)
    f = np.full_like(p, rf)
    fit = fit_portfolio(p - f, m - f, 0.95)
    q = performance(np.arange(len(p)), p, m, f, fit.alpha, fit.residual_vol, 1)
    r = performance_ratios(p, m, f, fit.beta)
    assert fit.beta == pytest.approx(1.2, abs=1e-12)
    assert q.sharpe == pytest.approx(0.69, abs=0.005)
    assert r.market_sharpe == pytest.approx(0.733, abs=0.001)
    assert r.treynor == pytest.approx(0.242, abs=0.0005)
    assert fit.alpha == pytest.approx(0.026, abs=1e-12)
    assert q.m2_excess == pytest.approx(-0.013, abs=0.0005)
    assert q.m2 == pytest.approx(0.2671, abs=0.0001)


def test_lo_scale_matches_the_ar1_closed_form():
    # Lo (2002), the AR(1) case: eta(q) = q [q + 2 rho/(1-rho) (q - (1 - rho^q)/(1 - rho))]^(-1/2)
    # (recalled from memory); with no autocorrelation eta(q) = sqrt(q).
    for rho in (-0.3, 0.0, 0.2, 0.5):
        for q in (12, 52):
            closed = q / np.sqrt(q + 2 * rho / (1 - rho) * (q - (1 - rho**q) / (1 - rho)))
            assert lo_scale(rho ** np.arange(1, q), q) == pytest.approx(closed, rel=1e-12)
    assert lo_scale(np.zeros(11), 12) == pytest.approx(np.sqrt(12), rel=1e-15)


def test_autocorrelations_match_statsmodels(french):
    # reference: statsmodels.tsa.stattools.acf (adjusted=False) on the French market factor
    from statsmodels.tsa.stattools import acf

    x = french["MktRF"].to_numpy()[:240]
    np.testing.assert_allclose(autocorrelations(x, 11), acf(x, nlags=11, fft=False)[1:],
                               rtol=1e-10)


def test_sharpe_standard_error_iid_by_simulation():
    # Lo (2002): for iid normal returns the sampling sd of the Sharpe ratio is
    # sqrt((1 + SR^2/2)/T). Checked by simulation (common practice, no source).
    rng = np.random.default_rng(11)
    T, sr = 120, 0.25
    x = rng.normal(sr, 1.0, (4000, T))
    est = x.mean(axis=1) / x.std(axis=1, ddof=1)
    assert est.std() == pytest.approx(sharpe_se_iid(sr, T), rel=0.05)


def test_max_drawdown_worked_example():
    # worked by hand (common practice, no source): values 1.1, 0.55, 0.66, 1.32 after the
    # returns below; the fall from 1.1 to 0.55 is -50%, recovered at the fourth period
    dd = max_drawdown(np.array([0.10, -0.50, 0.20, 1.00]))
    assert dd.max_drawdown == pytest.approx(-0.5, abs=1e-15)
    assert (dd.peak, dd.trough, dd.recovery) == (0, 1, 3)
    # a fall in the first period is measured from the starting value 1
    first = max_drawdown(np.array([-0.2, 0.1, 0.1]))
    assert first.max_drawdown == pytest.approx(-0.2) and first.peak == -1
    assert first.recovery == -1        # 0.8 x 1.1 x 1.1 = 0.968 < 1: not yet recovered


def test_downside_deviation_and_sortino_worked_example():
    # Sortino and Price (1994) definitions, worked by hand (common practice, no source):
    # shortfalls below MAR 0 are -1% and -4%: DD = sqrt((0.01^2 + 0.04^2) / 4)
    r = np.array([0.05, -0.01, 0.03, -0.04])
    zero = np.zeros(4)
    q = performance(np.arange(4), r, r, zero, 0.0, 1.0, 1, mar=0.0)
    assert q.downside_deviation == pytest.approx(np.sqrt((0.01**2 + 0.04**2) / 4), rel=1e-12)
    assert q.sortino == pytest.approx(0.0075 / np.sqrt(0.000425), rel=1e-12)
    # an annual MAR of 12% with monthly periods is the geometric rate 1.12^(1/12) - 1 a period
    # (about 0.949%, which compounds to 12% over a year; issue on defensible figures)
    q12 = performance(np.arange(4), r, r, zero, 0.0, 1.0, 12, mar=0.12)
    m = 1.12 ** (1 / 12) - 1
    assert q12.mar == pytest.approx(m, rel=1e-12) and (1 + q12.mar) ** 12 == pytest.approx(1.12)
    assert q12.downside_deviation == pytest.approx(
        np.sqrt(((m + 0.01) ** 2 + (m + 0.04) ** 2) / 4), rel=1e-12)


def _month_ends(first: str, n: int) -> np.ndarray:
    return (pd.date_range(first, periods=n, freq="ME").to_numpy().astype("datetime64[D]"))


def test_period_returns_cumulative_under_a_year_geometric_above():
    # GIPS: periods under a year are not annualised; a year or more is annualised
    # geometrically. With 1% every month (arithmetic by hand): 3 months = 1.01^3 - 1,
    # one year = 1.01^12 - 1 a year, three years annualised also 1.01^12 - 1.
    d = _month_ends("2022-01-31", 59)      # Jan 2022 .. Nov 2026
    port = np.full(59, 0.01)
    mkt = np.full(59, 0.005)
    t = period_returns(d, port, mkt, dt.date(2026, 11, 30), "monthly", 12).set_index("period")
    assert t.loc["3m", "basis"] == "cumulative" and t.loc["3m", "n_periods"] == 3
    assert t.loc["3m", "portfolio"] == pytest.approx(1.01**3 - 1, rel=1e-12)
    assert t.loc["ytd", "n_periods"] == 11 and t.loc["ytd", "basis"] == "cumulative"
    assert t.loc["1y", "basis"] == "annualised"
    assert t.loc["1y", "portfolio"] == pytest.approx(1.01**12 - 1, rel=1e-12)
    assert t.loc["3y", "portfolio"] == pytest.approx(1.01**12 - 1, rel=1e-12)
    assert t.loc["3y", "difference"] == pytest.approx(1.01**12 - 1.005**12, rel=1e-12)
    # five years need 60 months; 59 do not cover the period, so it is left out
    assert "5y" not in t.index
    whole = t.loc["all"]
    assert whole["n_periods"] == 59 and whole["portfolio"] == pytest.approx(1.01**12 - 1)
    cal = t[t["kind"] == "calendar"]
    assert list(cal["label"]) == ["2022", "2023", "2024", "2025", "2026 (to date)"]
    assert cal["portfolio"].iloc[0] == pytest.approx(1.01**12 - 1, rel=1e-12)


def test_period_returns_part_first_year_and_short_history():
    # a history of 7 months: no trailing period of a year, and the whole history is
    # cumulative, not annualised (GIPS)
    d = _month_ends("2026-05-31", 7)
    r = np.linspace(-0.02, 0.03, 7)
    t = period_returns(d, r, r, dt.date(2026, 11, 30), "monthly", 12).set_index("period")
    assert set(t[t["kind"] == "trailing"].index) == {"1m", "3m", "all"}
    assert t.loc["all", "basis"] == "cumulative"
    assert t.loc["all", "portfolio"] == pytest.approx(np.prod(1 + r) - 1, rel=1e-12)
    assert t[t["kind"] == "calendar"]["label"].tolist() == ["2026 (part year)"]


def test_period_returns_start_at_the_portfolios_first_return():
    # periods before the portfolio's first return are not part of its history: the whole
    # history and the first (part) year start there (arithmetic by hand, 1% a month)
    d = _month_ends("2023-01-31", 47)          # Jan 2023 .. Nov 2026
    port = np.full(47, 0.01)
    port[:5] = np.nan                           # first return in June 2023
    t = period_returns(d, port, np.zeros(47), dt.date(2026, 11, 30), "monthly", 12)
    t = t.set_index("period")
    assert t.loc["all", "start"] == "2023-06-30" and t.loc["all", "n_periods"] == 42
    assert t.loc["all", "portfolio"] == pytest.approx(1.01**12 - 1, rel=1e-12)
    assert t.loc["3y", "n_periods"] == 36
    assert t.loc["2023", "label"] == "2023 (part year)" and t.loc["2023", "n_periods"] == 7
    empty = period_returns(d, np.full(47, np.nan), np.zeros(47), dt.date(2026, 11, 30),
                           "monthly", 12)
    assert empty.empty


@pytest.mark.parametrize("year", [2025, 2026])
def test_weekly_year_to_date_keeps_the_first_week_of_the_year(year):
    # 31 December 2024 is a Tuesday and 31 December 2025 a Wednesday (calendar): the week
    # ending Friday 3 January 2025 / 2 January 2026 began in December, yet it is dated in the
    # new year, so the year to date holds it, as the calendar-year row does (by hand: every
    # Friday of the year up to period_end, 0.2% a week)
    d = pd.date_range(f"{year - 1}-01-03", f"{year}-11-28", freq="W-FRI").to_numpy().astype(
        "datetime64[D]")
    r = np.full(len(d), 0.002)
    end = pd.Timestamp(d[-1]).date()
    t = period_returns(d, r, r, end, "weekly", 52)
    trailing = t[t["kind"] == "trailing"].set_index("period")
    calendar = t[t["kind"] == "calendar"].set_index("period")
    n_ytd = int(np.sum(d >= np.datetime64(f"{year}-01-01")))
    first = str(d[d >= np.datetime64(f"{year}-01-01")][0])
    assert first in ("2025-01-03", "2026-01-02")
    assert trailing.loc["ytd", "n_periods"] == n_ytd == calendar.loc[str(year), "n_periods"]
    assert trailing.loc["ytd", "start"] == first
    assert trailing.loc["ytd", "portfolio"] == pytest.approx(1.002**n_ytd - 1, rel=1e-12)
    assert trailing.loc["ytd", "portfolio"] == calendar.loc[str(year), "portfolio"]
    # a trailing year of weekly data is the 52 ISO weeks after the one holding the boundary
    assert trailing.loc["1y", "n_periods"] == 52


def test_lo_scale_ar1_closed_form_and_iid_median():
    # Lo (2002), the AR(1) case: eta(q) = q [q + 2 rho/(1-rho) (q - (1 - rho^q)/(1 - rho))]^(-1/2)
    # (recalled from memory), the general eq. 17 with rho_k = rho^k
    for rho in (-0.3, 0.0, 0.2, 0.5):
        for q in (12, 52, 252):
            assert lo_scale_ar1(rho, q) == pytest.approx(lo_scale(rho ** np.arange(1, q), q),
                                                         rel=1e-12)
    assert lo_scale_ar1(0.2, 12) < np.sqrt(12) < lo_scale_ar1(-0.2, 12)


@pytest.mark.parametrize("freq,P,T", [("monthly", 12, 60), ("weekly", 52, 104),
                                      ("daily", 252, 252)])
def test_lo_scale_is_about_sqrt_q_for_independent_returns(freq, P, T):
    # simulation (seeded): for iid returns the true eta(q) is sqrt(q) (Lo 2002); the pack's
    # scale, through performance(), must have a median eta/sqrt(q) within 0.9-1.1 over 400
    # samples. The sum over q - 1 sample autocorrelations (eq. 17 as it stands) does not:
    # its median is far above 1 at weekly and daily frequencies (the 1.5 and 2.0).
    rng = np.random.default_rng(20261130)
    zero = np.zeros(T)
    dates = np.arange(T)
    got, naive = [], []
    for _ in range(400):
        r = rng.normal(0.0005, 0.01, T)
        got.append(performance(dates, r, r, zero, 0.0, 1.0, P).lo_scale / np.sqrt(P))
        rho = autocorrelations(r - r.mean(), min(P - 1, T - 2))
        naive.append(lo_scale(np.concatenate([rho, np.zeros(P - 1 - len(rho))]), P)
                     / np.sqrt(P))
    assert 0.9 <= np.median(got) <= 1.1
    if freq != "monthly":
        assert np.nanmedian(naive) > 1.2


def test_sharpe_se_gmm_matches_statsmodels_newey_west_and_iid():
    # Lo (2002), GMM case: var(SR) = g' S g / T, g = (1/sigma, -mu/(2 sigma^3)), S the
    # long-run covariance of (r - mu, (r - mu)^2 - sigma^2), here from statsmodels'
    # S_hac_simple (Newey-West, Bartlett weights; it returns the sum, so / T)
    from statsmodels.stats.sandwich_covariance import S_hac_simple

    rng = np.random.default_rng(7)
    e = rng.normal(size=301)
    r = 0.01 + 0.02 * (e[1:] + 0.5 * e[:-1])            # an MA(1): serially correlated
    T, mu = len(r), r.mean()
    var = np.mean((r - mu) ** 2)
    psi = np.column_stack([r - mu, (r - mu) ** 2 - var])
    S = S_hac_simple(psi, nlags=5) / T
    g = np.array([1 / np.sqrt(var), -mu / (2 * var**1.5)])
    assert sharpe_se_gmm(r, 5) == pytest.approx(np.sqrt(g @ S @ g / T), rel=1e-12)
    # with zero lags and normal returns it is close to the iid form sqrt((1 + SR^2/2)/T)
    x = rng.normal(0.01, 0.02, 5000)
    sr = x.mean() / x.std()
    assert sharpe_se_gmm(x, 0) == pytest.approx(sharpe_se_iid(sr, 5000), rel=0.05)
    # positive serial correlation makes the mean, and the ratio, less certain than iid says
    assert sharpe_se_gmm(r, 5) > 1.2 * sharpe_se_iid(mu / np.sqrt(var), T)
