"""Assertions on the demo pack, built once per session (see conftest.demo_build)."""

from __future__ import annotations

import json
import re
import shutil

import numpy as np
import pandas as pd
import pypdf
import pytest

from reporter.analytics.pack import SECURITY_COLUMNS
from tests.conftest import DEMO, GOLDEN, text_past_the_right_edge, words_past_the_text_block

REQUIRED = ["security_id", "name", "sector", "weight", "n_obs", "alpha", "alpha_se", "alpha_t",
            "beta", "beta_se", "beta_t", "r_squared", "residual_vol", "mean_excess_return",
            "sml_expected_excess", "sml_residual", "treynor"]
SECTION_TITLES = ["Contents", "Summary", "Returns and ratios", "Market risk", "Beta estimates",
                  "Security market line", "Diversification", "Holdings appendix", "Methodology",
                  "Cautions"]


@pytest.fixture(scope="module")
def pdf_text(demo_build) -> list[str]:
    reader = pypdf.PdfReader(demo_build / "pack.pdf")
    return [page.extract_text() for page in reader.pages]


@pytest.fixture(scope="module")
def html(demo_build) -> str:
    return (demo_build / "pack.html").read_text(encoding="utf-8")


def test_outputs_exist(demo_build):
    for rel in ("pack.html", "pack.pdf", "results/securities.csv", "results/portfolio.json",
                "results/manifest.json"):
        assert (demo_build / rel).stat().st_size > 0, rel


def test_securities_csv_columns_and_rows(demo_build):
    sec = pd.read_csv(demo_build / "results/securities.csv")
    assert list(sec.columns[: len(SECURITY_COLUMNS)]) == SECURITY_COLUMNS
    assert set(REQUIRED) <= set(sec.columns)
    holdings = pd.read_csv(DEMO / "holdings.csv")
    assert sorted(sec["security_id"]) == sorted(holdings["security_id"])
    # annualised columns are the per-period ones times 12 (monthly)
    np.testing.assert_allclose(sec["alpha_ann"], sec["alpha"] * 12, rtol=1e-9)
    # the holding listed 14 months ago is below min_obs = 24: counted, not fitted
    short = sec[sec["n_obs"] < 24]
    assert len(short) == 1 and short["beta"].isna().all() and short["n_obs"].iloc[0] == 14


def test_portfolio_json_keys(demo_build):
    p = json.loads((demo_build / "results/portfolio.json").read_text())
    for key in ("beta_weighted", "beta_regression", "alpha", "r_squared", "tracking_error",
                "sharpe", "treynor", "information_ratio", "n_holdings", "effective_n",
                "systematic_share", "window_start", "window_end", "n_obs",
                "mean_market_premium", "mean_risk_free"):
        assert key in p, key
    assert p["window_start"] == "2021-12-31" and p["window_end"] == "2026-11-30"
    # 60 equities and the 3% cash line
    assert p["n_obs"] == 60 and p["n_holdings"] == 61 and p["n_cash"] == 1
    mv = pd.read_csv(DEMO / "holdings.csv")["market_value"].to_numpy()
    w = mv / mv.sum()
    np.testing.assert_allclose(p["effective_n"], 1 / np.sum(w**2), rtol=1e-12)
    assert p["total_value"] == pytest.approx(mv.sum(), rel=1e-12)
    assert p["beta_ci_low"] < p["beta_regression"] < p["beta_ci_high"]


def test_every_t_statistic_matches_the_standard_error_beside_it(demo_build):
    # t = estimate / se for every pair, in both files; the unqualified pair is under the
    # pack's errors (HAC by default), and the explicit _ols and _hac pairs name theirs
    # (definition of the t-statistic; no outside figure needed)
    sec = pd.read_csv(demo_build / "results/securities.csv")
    p = json.loads((demo_build / "results/portfolio.json").read_text())
    assert p["errors"] == "hac"
    fitted = sec[sec["status"] == "fitted"]
    for est in ("alpha", "beta"):
        for tag in ("", "_ols", "_hac"):
            np.testing.assert_allclose(fitted[f"{est}_t{tag}"],
                                       fitted[est] / fitted[f"{est}_se{tag}"], rtol=1e-9)
            want = p["beta_regression" if est == "beta" else "alpha"] / p[f"{est}_se{tag}"]
            assert p[f"{est}_t{tag}"] == pytest.approx(want, rel=1e-12), (est, tag)
        np.testing.assert_allclose(fitted[f"{est}_se"], fitted[f"{est}_se_hac"], rtol=1e-12)
        assert p[f"{est}_se"] == p[f"{est}_se_hac"]
        assert not np.allclose(fitted[f"{est}_se_ols"], fitted[f"{est}_se_hac"])
    # alpha_p: two-sided, Student's t with n - 2 df under the same errors (scipy)
    from scipy import stats

    np.testing.assert_allclose(
        fitted["alpha_p"], 2 * stats.t.sf(np.abs(fitted["alpha_t"]), fitted["n_obs"] - 2),
        rtol=0, atol=1e-9)                      # the file holds 10 decimal places
    # the SML counts: flagged = p below 1 - confidence; by chance = n x (1 - confidence)
    assert p["sml_n_flagged"] == int((fitted["alpha_p"] < 0.05).sum()) == int(
        fitted["sml_position"].isin(["above the line", "below the line"]).sum())
    assert p["sml_n_expected_by_chance"] == pytest.approx(0.05 * len(fitted))
    assert p["sml_n_flagged_fdr"] <= p["sml_n_flagged"]


def _compare_csv(got: pd.DataFrame, want: pd.DataFrame) -> None:
    assert list(got.columns) == list(want.columns)
    for col in want.columns:
        if want[col].dtype.kind in "fi":
            np.testing.assert_allclose(got[col], want[col], rtol=1e-9, atol=1e-15, err_msg=col)
        else:
            assert got[col].fillna("").tolist() == want[col].fillna("").tolist(), col


def test_golden_results(demo_build):
    # regenerate with `make golden` after an intended change in the figures
    _compare_csv(pd.read_csv(demo_build / "results/securities.csv"),
                 pd.read_csv(GOLDEN / "securities.csv"))
    got = json.loads((demo_build / "results/portfolio.json").read_text())
    want = json.loads((GOLDEN / "portfolio.json").read_text())
    assert got.keys() == want.keys()
    for k, v in want.items():
        if isinstance(v, float):
            np.testing.assert_allclose(got[k], v, rtol=1e-9, err_msg=k)
        else:
            assert got[k] == v, k


def test_html_is_self_contained(html):
    # no network URL of any kind: no scripts, fonts, images or styles from elsewhere
    assert not re.search(r"(?i)\b(?:https?:)?//[a-z0-9.-]+\.[a-z]{2,}", html.replace(
        "http://www.w3.org/2000/svg", "").replace("http://www.w3.org/1999/xlink", ""))
    assert "<script" not in html.lower()
    assert html.count("<svg") == 12    # seven, the stress chapter's two, the factor
    #                                    loadings and attribution charts, and the allocation
    assert "<style>" in html


def test_pdf_has_every_section_and_caution(pdf_text):
    text = "\n".join(pdf_text)
    for title in SECTION_TITLES:
        assert title in text, title
    flat = re.sub(r"\s+", " ", text)
    for phrase in ("statistical estimate", "Past performance is not a reliable guide",
                   "not investment advice", "appointed investment adviser",
                   "regulation that applies to them locally", "depend on the estimation window"):
        assert phrase in flat, phrase


def test_pdf_layout(demo_build, pdf_text):
    reader = pypdf.PdfReader(demo_build / "pack.pdf")
    box = reader.pages[0].mediabox
    # A4 is 595 x 842 points
    assert round(float(box.width)) == 595 and round(float(box.height)) == 842
    n = len(pdf_text)
    assert f"Page 2 of {n}" in pdf_text[1] and f"Page {n} of {n}" in pdf_text[-1]
    # running header (title and period) on every page but the cover
    assert all("Period ending 30 November 2026" in t for t in pdf_text[1:])
    # the holdings appendix spans pages and repeats its column headers on each
    appendix = [t for t in pdf_text if "TVX0" in t and re.search(r"Alpha\s+\(ann\.\)", t)]
    assert len(appendix) >= 2
    # the contents page lists page numbers that point at the right pages
    contents = pdf_text[1]
    m = re.search(r"Cautions\s*\.*\s*(\d+)", contents)
    assert m and "Cautions" in pdf_text[int(m.group(1)) - 1]


def test_cover_fingerprint_matches_manifest(demo_build, pdf_text):
    manifest = json.loads((demo_build / "results/manifest.json").read_text())
    fp = manifest["input_fingerprint"]
    assert re.fullmatch(r"[0-9a-f]{64}", fp)
    assert fp[:16] in pdf_text[0]
    import hashlib

    assert manifest["input_sha256"]["returns"] == hashlib.sha256(
        (DEMO / "returns.csv").read_bytes()).hexdigest()


def test_beta_columns_and_rolling_file(demo_build):
    sec = pd.read_csv(demo_build / "results/securities.csv")
    fitted = sec[sec["status"] == "fitted"]
    for col in ("beta_se_hac", "alpha_se_hac", "beta_blume", "beta_vasicek", "beta_up",
                "beta_down", "beta_dimson", "beta_scholes_williams"):
        assert fitted[col].notna().all(), col
    np.testing.assert_allclose(fitted["beta_blume"], 0.33 + 0.67 * fitted["beta"], rtol=1e-9)
    # intervals in the pack use Newey-West errors by default (t with n-2 df at 95%)
    from scipy import stats

    t = stats.t.ppf(0.975, fitted["n_obs"] - 2)
    np.testing.assert_allclose(fitted["beta_ci_high"] - fitted["beta"],
                               t * fitted["beta_se_hac"], rtol=1e-8)
    assert (fitted["beta_differs_from_1"] == ((fitted["beta_ci_low"] > 1)
                                              | (fitted["beta_ci_high"] < 1))).all()
    roll = pd.read_csv(demo_build / "results/rolling_beta.csv")
    assert list(roll.columns) == ["date", "series", "beta", "beta_se", "beta_ci_low",
                                  "beta_ci_high"]
    port = roll[roll["series"] == "PORTFOLIO"]
    # 120 months of history and a 36-month window: 85 complete windows
    assert len(port) == 85 and port["date"].iloc[-1] == "2026-11-30"
    # the holding suspended for five months has no value in windows that span the gap
    gapped = roll[roll["series"] == "TVX042"]
    assert 0 < len(gapped) < 85


def test_period_returns_file(demo_build):
    t = pd.read_csv(demo_build / "results/period_returns.csv")
    assert list(t.columns) == ["kind", "period", "label", "start", "end", "n_periods", "basis",
                               "portfolio", "market", "difference", "benchmark",
                               "benchmark_difference"]
    assert t["benchmark"].isna().all()          # the demo names no benchmark
    trailing = t[t["kind"] == "trailing"].set_index("period")
    assert list(trailing.index) == ["1m", "3m", "ytd", "1y", "3y", "5y", "all"]
    # GIPS: cumulative under a year, annualised at a year or more
    assert (trailing["basis"] == np.where(trailing["n_periods"] >= 12, "annualised",
                                          "cumulative")).all()
    # the market proxy's month is its last return in market.csv; its year to date the
    # compounded 2026 returns (arithmetic by hand from the input file)
    mkt = pd.read_csv(DEMO / "market.csv")
    assert trailing.loc["1m", "market"] == pytest.approx(mkt["return"].iloc[-1], rel=1e-9)
    ytd = mkt[mkt["date"].str.startswith("2026")]["return"]
    assert trailing.loc["ytd", "market"] == pytest.approx(np.prod(1 + ytd) - 1, rel=1e-9)
    five = mkt["return"].iloc[-60:]
    assert trailing.loc["5y", "market"] == pytest.approx(np.prod(1 + five) ** (12 / 60) - 1,
                                                         rel=1e-9)
    np.testing.assert_allclose(t["difference"], t["portfolio"] - t["market"], atol=1e-12)
    cal = t[t["kind"] == "calendar"]
    assert cal["label"].iloc[-1] == "2026 (to date)"
    p = json.loads((demo_build / "results/portfolio.json").read_text())
    # the five-year period is the 60-month window: its geometric rate is the ratio table's
    assert trailing.loc["5y", "portfolio"] == pytest.approx(p["return_geometric_ann"], rel=1e-9)
    for key in ("sharpe_se", "sharpe_ann_lo", "appraisal_ratio", "m2", "max_drawdown",
                "downside_deviation", "sortino", "mar", "return_arithmetic_ann"):
        assert key in p and p[key] is not None, key


def test_risk_contributions_file(demo_build):
    t = pd.read_csv(demo_build / "results/risk_contributions.csv")
    p = json.loads((demo_build / "results/portfolio.json").read_text())
    h, g = t[t["level"] == "holding"], t[t["level"] == "sector"]
    total = t[t["level"] == "total"].iloc[0]
    assert len(h) == 61 and len(g) == len(set(h["sector"]))
    # Euler contributions add up to the totals, by holding and by sector (the file keeps
    # 10 significant figures)
    for col in ("vol_contribution", "te_contribution"):
        assert h[col].sum() == pytest.approx(total[col], rel=1e-8)
        assert g[col].sum() == pytest.approx(total[col], rel=1e-8)
    assert h["vol_share"].sum() == pytest.approx(1.0, rel=1e-8)
    assert total["vol_contribution"] == pytest.approx(p["model_volatility"], rel=1e-9)
    assert total["te_contribution"] == pytest.approx(p["model_tracking_error"], rel=1e-9)
    # the default: shrinkage toward constant correlation (Ledoit and Wolf 2004), and the
    # model's figures over the realised ones of the same window
    assert p["covariance_method"] == "constant_correlation"
    assert 0 < p["covariance_shrinkage"] < 1
    assert p["model_to_realised_volatility"] == pytest.approx(
        p["model_volatility"] / p["volatility"], rel=1e-12)
    assert p["model_to_realised_tracking_error"] == pytest.approx(
        p["model_tracking_error"] / p["tracking_error"], rel=1e-12)
    assert p["diversification_ratio"] > 1
    assert -1 < p["average_correlation"] < 1
    assert list(h["vol_contribution"]) == sorted(h["vol_contribution"], reverse=True)


def test_line_tests_in_results_and_pack(demo_build, pdf_text):
    p = json.loads((demo_build / "results/portfolio.json").read_text())
    sec = pd.read_csv(demo_build / "results/securities.csv")
    fitted = sec[sec["status"] == "fitted"]
    assert p["sml_cs_n_assets"] == len(fitted) and p["sml_fm_n_periods"] == 60
    # both tests set the slope against the window's realised premium
    assert p["sml_cs_premium"] == pytest.approx(p["mean_market_premium"], rel=1e-12)
    assert p["sml_fm_premium"] == pytest.approx(p["mean_market_premium"], rel=1e-12)
    # the cross-section is the OLS of the file's own columns (scipy.stats.linregress)
    from scipy import stats

    ref = stats.linregress(fitted["beta"], fitted["mean_excess_return"])
    assert p["sml_cs_slope"] == pytest.approx(ref.slope, rel=1e-8)
    assert p["sml_cs_slope_se"] == pytest.approx(ref.stderr, rel=1e-8)
    # GRS: 60 periods; holdings with a complete window (the late listings and the
    # suspended holding drop out) and the sector portfolios
    assert p["grs_holdings_applies"] and p["grs_holdings_df_den"] == 60 - p[
        "grs_holdings_n_assets"] - 1
    assert p["grs_sectors_applies"] and p["grs_sectors_n_assets"] == 10
    assert 0 <= p["grs_sectors_p_value"] <= 1
    text = re.sub(r"\s+", " ", "\n".join(pdf_text))
    assert "Testing the line itself" in text and "Gibbons" in text


def test_the_page_declares_it_runs_and_fetches_nothing(html):
    """pack.html carries a Content-Security-Policy (W3C CSP 3) that a browser enforces when
    the file is opened: no script, no fetch, no form, no <base>; only its own inline styles
    and data: images (the charts)."""
    import re

    policies = re.findall(r'<meta http-equiv="Content-Security-Policy" content="([^"]*)">', html)
    assert len(policies) == 1
    directives = {d.split()[0]: d.split()[1:] for d in policies[0].split("; ")}
    assert directives == {"default-src": ["'none'"], "img-src": ["data:"],
                          "style-src": ["'unsafe-inline'"], "base-uri": ["'none'"],
                          "form-action": ["'none'"]}
    assert "<script" not in html and not re.search(r"\son[a-z]+\s*=", html)
    assert not re.search(r"""<img[^>]*\ssrc=["'](?!data:)""", html)


def test_no_text_is_set_past_the_page_edge(demo_build):
    # the holdings appendix's twelve columns did not fit A4 with every name on one line, and
    # its last column (the security market line reading) was set past the right edge
    for pdf in ("pack.pdf", "pack-trustees.pdf"):
        assert text_past_the_right_edge(demo_build / pdf) == [], pdf


@pytest.mark.skipif(shutil.which("pdftotext") is None, reason="poppler-utils not installed")
def test_no_word_runs_into_the_right_margin(demo_build):
    # the risk contributors' table ran 23 points into the right margin, and the holdings
    # appendix 33: their figure headings may now wrap ("Contribution to / volatility"); the
    # appendix's last heading, SML, still reaches 5 points in (inside the slack of 6)
    for pdf in ("pack.pdf", "pack-trustees.pdf"):
        assert words_past_the_text_block(demo_build / pdf) == [], pdf
