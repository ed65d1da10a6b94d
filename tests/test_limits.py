"""Policy limits: every limit at within, watch and breach on a small constructed pack, the
beta mix with cash, the config rules, and what the demo pack shows.

Reference values come from outside the tool: statsmodels OLS for betas and residuals,
numpy for standard deviations, and the constructed weights themselves.
"""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd
import pypdf
import pytest
import statsmodels.api as sm
from hypothesis import given
from hypothesis import strategies as st

from reporter.analytics.pack import analyse
from reporter.config import LimitsSection, load_settings
from reporter.errors import InputError
from reporter.limits import BREACH, WATCH, WITHIN, classify, evaluate_limits
from reporter.validate import validate_pack

WEIGHTS = np.array([0.30, 0.20, 0.15, 0.15, 0.10, 0.10])
SECTORS = ["Alpha", "Alpha", "Beta", "Beta", "Gamma", "Gamma"]
N = 36

PACK = """\
[pack]
title = "Constructed"
organisation = "Test"
period_end = 2023-12-31
[inputs]
holdings = "holdings.csv"
returns = "returns.csv"
market = "market.csv"
risk_free = "risk_free.csv"
[analysis]
window = 36
min_obs = 24
{extra}
"""


def write_pack(folder, extra: str = "") -> None:
    """Six holdings, three sectors, 36 months of returns from a one-factor model."""
    rng = np.random.default_rng(7)
    dates = pd.date_range(end="2023-12-31", periods=N, freq="ME").strftime("%Y-%m-%d")
    rf = np.full(N, 0.002)
    mkt = rf + 0.006 + 0.04 * rng.standard_normal(N)
    betas = np.array([0.6, 0.9, 1.1, 1.3, 0.8, 1.5])
    rets = rf[:, None] + betas * (mkt - rf)[:, None] + 0.02 * rng.standard_normal((N, 6))
    ids = [f"C{i}" for i in range(6)]
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "pack.toml").write_text(PACK.format(extra=extra))
    pd.DataFrame({"security_id": ids, "name": [f"Holding {i}" for i in range(6)],
                  "sector": SECTORS, "weight": WEIGHTS}).to_csv(folder / "holdings.csv",
                                                                 index=False)
    pd.DataFrame({"date": np.repeat(dates, 6), "security_id": ids * N,
                  "return": rets.ravel()}).to_csv(folder / "returns.csv", index=False)
    pd.DataFrame({"date": dates, "return": mkt}).to_csv(folder / "market.csv", index=False)
    pd.DataFrame({"date": dates, "rate": rf}).to_csv(folder / "risk_free.csv", index=False)


@pytest.fixture(scope="module")
def constructed(tmp_path_factory):
    folder = tmp_path_factory.mktemp("limits") / "pack"
    write_pack(folder)
    settings = load_settings(folder)
    inputs = validate_pack(settings)
    res = analyse(inputs, settings)
    # reference figures computed here, outside the tool
    r = pd.read_csv(folder / "returns.csv").pivot(index="date", columns="security_id",
                                                  values="return").to_numpy()
    m = pd.read_csv(folder / "market.csv")["return"].to_numpy()
    f = pd.read_csv(folder / "risk_free.csv")["rate"].to_numpy()
    rp = r @ WEIGHTS
    X = sm.add_constant(m - f)
    port = sm.OLS(rp - f, X).fit()                      # statsmodels OLS
    fits = [sm.OLS(r[:, j] - f, X).fit() for j in range(6)]
    b = np.array([x.params[1] for x in fits])
    s2 = np.array([x.ssr / (N - 2) for x in fits])      # sigma^2 = SSR / (n - 2)
    sys_var = (WEIGHTS @ b) ** 2 * np.var(m - f, ddof=1)
    idio = np.sum(WEIGHTS**2 * s2)
    ref = {
        "beta": port.params[1],
        "max_holding_weight": 0.30,
        "min_effective_n": 1 / np.sum(WEIGHTS**2),     # inverse Herfindahl
        "min_holdings": 6.0,
        "max_tracking_error_ann": np.std(rp - m, ddof=1) * np.sqrt(12),
        # 1 - R^2 of the portfolio's own regression (statsmodels OLS)
        "max_idiosyncratic_share": 1 - port.rsquared,
        # the single-index split (Sharpe 1963), kept beside it
        "idiosyncratic_share_if_uncorrelated": idio / (sys_var + idio),
        "mean_excess": np.mean(rp - f),
        "market_excess": m - f, "portfolio_excess": rp - f,
    }
    return res, ref


# limit key, kind, key of the reference value
SCALAR_LIMITS = [
    ("beta_min", "min", "beta"),
    ("beta_max", "max", "beta"),
    ("max_holding_weight", "max", "max_holding_weight"),
    ("min_effective_n", "min", "min_effective_n"),
    ("max_tracking_error_ann", "max", "max_tracking_error_ann"),
    ("max_idiosyncratic_share", "max", "max_idiosyncratic_share"),
]


def threshold_for(kind: str, ref: float, status: str) -> float:
    """A limit that puts ``ref`` in the given zone with the default 10% watch margin."""
    if kind == "max":
        return {WITHIN: ref / 0.8, WATCH: ref / 0.95, BREACH: ref * 0.95}[status]
    return {WITHIN: ref / 1.2, WATCH: ref / 1.05, BREACH: ref * 1.05}[status]


@pytest.mark.parametrize("status", [WITHIN, WATCH, BREACH])
@pytest.mark.parametrize("key,kind,ref_key", SCALAR_LIMITS)
def test_each_limit_at_each_status(constructed, key, kind, ref_key, status):
    res, ref = constructed
    threshold = threshold_for(kind, ref[ref_key], status)
    if key == "max_holding_weight" or key == "max_idiosyncratic_share":
        threshold = min(threshold, 1.0)
    report = evaluate_limits(LimitsSection(**{key: threshold}), res)
    (check,) = report.checks
    assert check.limit == key and check.kind == kind
    np.testing.assert_allclose(check.value, ref[ref_key], rtol=1e-9)
    assert check.threshold == pytest.approx(threshold)
    assert check.status == status
    assert [c.limit for c in report.exceptions] == ([] if status == WITHIN else [key])


def test_specific_share_counts_correlated_residuals(constructed):
    # the limit checks 1 - R^2; the diagonal model's figure is kept for comparison
    res, ref = constructed
    p = res.portfolio_summary()
    np.testing.assert_allclose(p["idiosyncratic_share_if_uncorrelated"],
                               ref["idiosyncratic_share_if_uncorrelated"], rtol=1e-9)
    assert p["systematic_share"] + p["idiosyncratic_share"] == pytest.approx(1.0, abs=1e-15)


@pytest.mark.parametrize("limit,status", [(5, WITHIN), (6, WATCH), (7, BREACH)])
def test_min_holdings(constructed, limit, status):
    res, _ = constructed
    # 6 holdings: a minimum of 5 is met with room (watch band 5 to 5.5), 6 is met exactly
    # (at the limit: watch), 7 is not met
    (check,) = evaluate_limits(LimitsSection(min_holdings=limit), res).checks
    assert (check.value, check.status) == (6.0, status)


def test_holding_limit_names_the_holdings(constructed):
    res, _ = constructed
    # weights 0.30, 0.20, 0.15, 0.15, 0.10, 0.10 against a 0.21 maximum (watch from 0.189)
    (check,) = evaluate_limits(LimitsSection(max_holding_weight=0.21), res).checks
    assert check.status == BREACH
    assert [(h["security_id"], h["status"]) for h in check.holdings] == [
        ("C0", BREACH), ("C1", WATCH)]


@pytest.mark.parametrize("limit,status,flagged", [
    (0.60, WITHIN, []),
    (0.52, WATCH, [("Alpha", WATCH)]),       # Alpha 0.50, watch from 0.468
    (0.45, BREACH, [("Alpha", BREACH)]),
    (0.31, BREACH, [("Alpha", BREACH), ("Beta", WATCH)]),  # Beta 0.30, watch from 0.279
])
def test_sector_limit_one_number(constructed, limit, status, flagged):
    res, _ = constructed
    (check,) = evaluate_limits(LimitsSection(max_sector_weight=limit), res).checks
    assert check.value == pytest.approx(0.50) and check.status == status
    assert [(s["sector"], s["status"]) for s in check.sectors] == flagged


def test_sector_limit_table(constructed):
    res, _ = constructed
    table = {"Gamma": 0.19, "Beta": 0.40, "*": 0.55, "Delta": 0.1}
    report = evaluate_limits(LimitsSection(max_sector_weight=table), res)
    got = {c.scope: (round(c.value, 12), c.status) for c in report.checks}
    # Gamma 0.20 > 0.19; Beta 0.30 well inside 0.40; Alpha (the only other sector) 0.50,
    # watch from 0.495; Delta holds nothing
    assert got == {"Gamma": (0.20, BREACH), "Beta": (0.30, WITHIN), "*": (0.50, WATCH),
                   "Delta": (0.0, WITHIN)}
    assert any("'Delta'" in n for n in report.notes)
    assert report.sector_status()["Alpha"] == {"status": WATCH, "threshold": 0.55}


def test_watch_margin_changes_the_band(constructed):
    res, ref = constructed
    limit = ref["beta"] / 0.85          # beta is 85% of the limit: within at 10%, watch at 20%
    assert evaluate_limits(LimitsSection(beta_max=limit), res).checks[0].status == WITHIN
    assert evaluate_limits(LimitsSection(beta_max=limit, watch_margin=0.2),
                           res).checks[0].status == WATCH


def test_classify_edges():
    # common practice, no source: the limit itself is allowed (watch), beyond it is a breach
    got = classify(np.array([0.5, 0.9, 1.0, 1.0000001, np.nan]), 1.0, "max", 0.1)
    assert list(got) == [WITHIN, WATCH, WATCH, BREACH, WITHIN]
    got = classify(np.array([2.0, 1.1, 1.0, 0.99]), 1.0, "min", 0.1)
    assert list(got) == [WITHIN, WATCH, WATCH, BREACH]


@given(st.floats(-10, 10), st.floats(-10, 10), st.floats(-5, 5), st.floats(0, 0.99))
def test_classify_is_monotone(a, b, limit, margin):
    # a larger value is never better against a maximum, never worse against a minimum
    # (common practice, no source)
    lo, hi = sorted([a, b])
    rank = {WITHIN: 0, WATCH: 1, BREACH: 2}
    s_lo, s_hi = classify(np.array([lo, hi]), limit, "max", margin)
    assert rank[s_lo] <= rank[s_hi]
    s_lo, s_hi = classify(np.array([lo, hi]), limit, "min", margin)
    assert rank[s_lo] >= rank[s_hi]


@pytest.mark.parametrize("band", [(0.5, 0.8), (1.5, 2.0)])
def test_beta_target_reaches_the_midpoint(constructed, band):
    res, ref = constructed
    report = evaluate_limits(LimitsSection(beta_min=band[0], beta_max=band[1]), res)
    bt = report.beta_target
    assert bt is not None and bt.target == pytest.approx(sum(band) / 2)
    # a share c in cash scales the excess return by (1 - c); refit with statsmodels OLS
    mixed = (1 - bt.cash_share) * ref["portfolio_excess"]
    fit = sm.OLS(mixed, sm.add_constant(ref["market_excess"])).fit()
    assert fit.params[1] == pytest.approx(bt.target, rel=1e-9)
    assert bt.mean_excess == pytest.approx(mixed.mean(), rel=1e-9)
    assert bt.mean_excess_ann == pytest.approx(12 * mixed.mean(), rel=1e-9)
    # above the band: move some into cash; below it: borrow
    assert (bt.cash_share > 0) == (ref["beta"] > band[1])


def test_no_beta_target_inside_the_band(constructed):
    res, ref = constructed
    report = evaluate_limits(LimitsSection(beta_min=ref["beta"] - 0.5,
                                           beta_max=ref["beta"] + 0.5), res)
    assert report.beta_target is None


@pytest.mark.parametrize("extra,line", [
    ("[limits]\nbeta_min = 1.2\nbeta_max = 0.8",
     "pack.toml:limits.beta_min: beta_min (1.2) is above beta_max (0.8)"),
    ("[limits]\nmax_holding_weight = 1.5",
     "pack.toml:limits.max_holding_weight: Input should be less than or equal to 1 (got 1.5)"),
    ("[limits]\nmax_sector_weight = { Energy = 2.0 }",
     "pack.toml:limits.max_sector_weight.Energy: Input should be less than or equal to 1 "
     "(got 2.0)"),
    ("[limits]\nbeta_limit = 1.0", "pack.toml:limits.beta_limit: unknown key"),
])
def test_limits_config_errors(tmp_path, extra, line):
    write_pack(tmp_path / "p", extra)
    with pytest.raises(InputError) as exc:
        load_settings(tmp_path / "p")
    assert [str(p) for p in exc.value.problems] == [line]


# --- the demo pack (built once per session) -------------------------------------------

def test_demo_limits_json(demo_build):
    data = json.loads((demo_build / "results/limits.json").read_text())
    p = json.loads((demo_build / "results/portfolio.json").read_text())
    rows = {(r["limit"], r["scope"]): r for r in data["limits"]}
    for r in data["limits"]:
        assert set(r) >= {"limit", "value", "threshold", "status", "holdings", "sectors"}
        assert r["status"] in (WITHIN, WATCH, BREACH)
    assert rows[("beta_max", None)]["value"] == pytest.approx(p["beta_regression"])
    assert rows[("min_effective_n", None)]["value"] == pytest.approx(p["effective_n"])
    statuses = [r["status"] for r in data["limits"]]
    assert BREACH in statuses or WATCH in statuses
    assert data["counts"] == {s: statuses.count(s) for s in (WITHIN, WATCH, BREACH)}


def test_demo_summary_opens_with_exceptions(demo_build):
    reader = pypdf.PdfReader(demo_build / "pack.pdf")
    pages = (pg.extract_text() for pg in reader.pages)     # read only up to the summary
    # the summary's first two pages
    summary = next(t for t in pages if "Policy limits: exceptions" in t) + next(pages)
    flat = re.sub(r"\s+", " ", summary)
    # the exceptions table comes before the headline figures, with words and symbols
    assert flat.index("Policy limits: exceptions") < flat.index("Portfolio beta 1.")
    assert "\u2716 breach" in flat and "\u25c6 watch" in flat
    assert "Illustration, not a recommendation" in flat
    html = (demo_build / "pack.html").read_text(encoding="utf-8")
    # the holding on watch is marked in the appendix; the sector on watch in the chart
    data = json.loads((demo_build / "results/limits.json").read_text())
    held = [h for r in data["limits"] for h in r["holdings"]]
    assert held
    appendix = html[html.index('id="holdings"'):]
    for h in held:
        row = re.search(rf"<tr><td>{h['security_id']}</td>.*?</tr>", appendix).group(0)
        assert f'title="{h["status"]}"' in row
    sectors = [s for r in data["limits"] for s in r["sectors"]]
    chart = html[html.index("Sector weights"):html.index("Systematic and specific risk")]
    for s in sectors:
        mark = {"breach": "\u2716 breach", "watch": "\u25c6 watch"}[s["status"]]
        # the value at the bar's end, the status in words and a symbol beside the limit tick
        assert f">{s['value']:.1%}</text>" in chart and f">{mark} (max " in chart


def test_a_limit_value_never_prints_like_its_threshold(demo_build):
    """A value that differs from its threshold gets more decimals until the two print apart:
    the demo's beta (1.051 against a maximum of 1.05, a breach) must not read "1.05 against
    at most 1.05"."""
    data = json.loads((demo_build / "results/limits.json").read_text())
    beta = next(r for r in data["limits"] if r["limit"] == "beta_max")
    assert beta["value"] != beta["threshold"]
    assert f"{beta['value']:.2f}" == f"{beta['threshold']:.2f}"      # the case in question
    text = re.sub(r"\s+", " ", (demo_build / "pack.html").read_text(encoding="utf-8"))
    want = f"{beta['value']:.3f} against at most {beta['threshold']:.3f}"
    assert want in text
    assert f"{beta['value']:.2f} against at most {beta['threshold']:.2f}" not in text
