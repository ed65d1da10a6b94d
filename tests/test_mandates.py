"""A fund of several mandates: identities that must hold, each mandate against its own
benchmark, a security held twice counted once, a mandate equal to a single-portfolio build of
itself, validation of fund packs, and the demo fund's PDF (built once per session).

The small funds here are invented test inputs written by :func:`write_fund`; every expected
value is computed in the test from those files by another route (statsmodels OLS, pandas
group sums, or an identity of the method), never copied from the tool's output.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from reporter.analytics.pack import analyse
from reporter.cli import main
from reporter.config import TOTAL_FUND, load_settings
from reporter.fund_inputs import validate_fund
from reporter.pipeline.fund import FundAnalysis, analyse_fund
from reporter.validate import read_inputs, validate_pack
from tests.conftest import REPO, build_at_fixed_epoch, words_past_the_text_block

T, WINDOW = 48, 36


def write_fund(folder: Path, *, sizes=(8, 6, 5), shared: int = 0, own_benchmarks=False,
               fund_benchmark: str | None = None, market_values=True, seed=7,
               extra_toml: str = "") -> Path:
    """Write an invented fund pack: mandates A, B, C with ``sizes`` holdings in one holdings
    file (``mandate`` column); the first ``shared`` securities of A are also held by B.
    Every security has a full history. With ``own_benchmarks`` each mandate has a benchmark
    file of its own, else all use the market proxy."""
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    dates = pd.date_range(end="2026-11-30", periods=T, freq="ME").strftime("%Y-%m-%d")
    market = rng.normal(0.006, 0.04, T)
    pd.DataFrame({"date": dates, "return": market}).to_csv(folder / "market.csv", index=False)
    pd.DataFrame({"date": dates, "rate": np.full(T, 0.002) + rng.normal(0, 1e-4, T)}).to_csv(
        folder / "risk_free.csv", index=False)
    rows, rets = [], {}
    names = "ABC"
    for k, n in enumerate(sizes):
        bench = market
        if own_benchmarks:
            bench = 0.8 * market + rng.normal(0.001, 0.015, T)
            pd.DataFrame({"date": dates, "return": bench}).to_csv(
                folder / f"bench_{names[k]}.csv", index=False)
        for j in range(n):
            sid = f"{names[k]}{j:02d}"
            rets[sid] = rng.normal(0.001, 0.002) + rng.uniform(0.5, 1.5) * bench \
                + rng.normal(0, 0.03, T)
            rows.append({"mandate": names[k], "security_id": sid, "name": f"Test {sid}",
                         "sector": ["S1", "S2", "S3"][j % 3],
                         "market_value": float(rng.uniform(1, 9)) * 1e6})
    for j in range(shared):
        rows.append({**rows[j], "mandate": "B", "market_value": 2.5e6 + j * 1e6})
    h = pd.DataFrame(rows)
    if not market_values:
        h["weight"] = h["market_value"] / h.groupby("mandate")["market_value"].transform("sum")
        h = h.drop(columns="market_value")
    h.to_csv(folder / "holdings.csv", index=False)
    pd.DataFrame({"date": dates, **rets}).to_csv(folder / "returns.csv", index=False)
    strategic = {"A": 0.5, "B": 0.3, "C": 0.2}
    mandates = "".join(
        f'\n[[mandates]]\nname = "{m}"\nstrategic_weight = {strategic[m]}\n'
        f"range = [{strategic[m] - 0.05:.2f}, {strategic[m] + 0.05:.2f}]\n"
        + (f'benchmark = "bench_{m}.csv"\n' if own_benchmarks else "")
        + ("" if market_values else f"weight = {strategic[m]}\n")
        for m in names[: len(sizes)])
    fund = f'\n[fund]\nbenchmark = "{fund_benchmark}"\n' if fund_benchmark else ""
    (folder / "pack.toml").write_text(
        '[pack]\ntitle = "Test fund"\norganisation = "Invented test fund"\n'
        'period_end = 2026-11-30\n\n[inputs]\nholdings = "holdings.csv"\n'
        'returns = "returns.csv"\nmarket = "market.csv"\nrisk_free = "risk_free.csv"\n\n'
        f"[analysis]\nwindow = {WINDOW}\nmin_obs = 24\n{extra_toml}{fund}{mandates}",
        encoding="utf-8")
    return folder


def _fund(folder: Path) -> FundAnalysis:
    """Validate and analyse a fund pack (no charts, no rendering)."""
    settings = load_settings(folder)
    return analyse_fund(validate_fund(settings, *read_inputs(settings)), settings)


def _mandate_weights(folder: Path) -> pd.Series:
    """v_m from the holdings file's market values, by pandas (the reference route)."""
    h = pd.read_csv(folder / "holdings.csv")
    mv = h.groupby("mandate", sort=False)["market_value"].sum()
    return mv / mv.sum()


# --- identities of a fund whose mandates partition the holdings --------------------------

def test_partition_betas_and_risk_contributions(tmp_path):
    folder = write_fund(tmp_path / "fund")
    a = _fund(folder)
    v = _mandate_weights(folder)
    parts = dict(zip(a.names, a.mandate_results, strict=True))
    assert np.allclose(a.weights, v[list(parts)].to_numpy(), atol=1e-15)
    # weighted beta sum_i W_i b_i = sum_m v_m sum_i w_mi b_i when the mandates partition the
    # holdings and share the market proxy (identity of the method)
    expect = sum(v[m] * r.beta_weighted for m, r in parts.items())
    assert abs(a.results.beta_weighted - expect) < 1e-12
    # OLS is linear in y: the fund's regression beta is the weight-average of the mandates'
    # (identity), and equals statsmodels OLS of the fund's excess return (reference library)
    expect = sum(v[m] * r.portfolio_fit.beta for m, r in parts.items())
    assert abs(a.results.portfolio_fit.beta - expect) < 1e-12
    win = a.results.window
    y = a.results.portfolio_series - win.risk_free
    ols = sm.OLS(y, sm.add_constant(win.market - win.risk_free)).fit()
    assert abs(a.results.portfolio_fit.beta - ols.params[1]) < 1e-12
    # Euler contributions by mandate add up to the fund's volatility sqrt(W'SW) (Euler's
    # theorem for a homogeneous function of degree 1) ...
    rc = a.risk
    assert abs(rc.vol_contribution.sum() - rc.volatility) < 1e-12
    assert abs(rc.te_contribution.sum() - rc.tracking_error) < 1e-12
    assert abs(rc.volatility - a.results.risk.volatility) < 1e-15
    # ... and, in a partition, each is the sum of its holdings' contributions in the fund
    hold = a.results.risk_table[a.results.risk_table["level"] == "holding"]
    by_holding = hold.groupby(hold["security_id"].str[0])["vol_contribution"].sum()
    assert np.allclose(rc.vol_contribution, by_holding[["A", "B", "C"]].to_numpy(),
                       rtol=0, atol=1e-15)
    # mandates.csv carries the same figures, the total fund last
    t = a.table
    assert list(t["mandate"]) == ["A", "B", "C", TOTAL_FUND]
    assert abs(t["vol_contribution"].iloc[:3].sum() - t["vol_contribution"].iloc[3]) < 1e-12
    assert abs(t["vol_share"].iloc[:3].sum() - 1.0) < 1e-12


def test_declared_weights_when_no_market_values(tmp_path):
    folder = write_fund(tmp_path / "fund", market_values=False)
    a = _fund(folder)
    assert a.inputs.weight_source == "declared weights"
    assert list(a.weights) == [0.5, 0.3, 0.2]
    h = pd.read_csv(folder / "holdings.csv")
    # W_i = v_m w_mi for a partition (the README's rule), by pandas
    expect = h["weight"] * h["mandate"].map({"A": 0.5, "B": 0.3, "C": 0.2})
    got = a.inputs.total.holdings.frame.set_index("security_id")["weight"]
    assert np.allclose(got[h["security_id"]].to_numpy(), expect.to_numpy(), atol=1e-15)


def test_one_holdings_file_per_mandate_gives_the_same_figures(tmp_path):
    folder = write_fund(tmp_path / "fund", shared=2, fund_benchmark="policy",
                        own_benchmarks=True)
    h = pd.read_csv(folder / "holdings.csv")
    toml = folder / "pack.toml"
    text = toml.read_text(encoding="utf-8").replace('holdings = "holdings.csv"\n', "")
    for m in "ABC":
        h[h["mandate"] == m].drop(columns="mandate").to_csv(folder / f"h_{m}.csv", index=False)
        text = text.replace(f'name = "{m}"\n', f'name = "{m}"\nholdings = "h_{m}.csv"\n')
    split = tmp_path / "split"
    split.mkdir()
    for f in folder.iterdir():
        (split / f.name).write_bytes(f.read_bytes())
    (split / "pack.toml").write_text(text, encoding="utf-8")
    (split / "holdings.csv").unlink()
    one, per = _fund(folder), _fund(split)
    for key, frame in one.result_tables().items():
        pd.testing.assert_frame_equal(frame, per.result_tables()[key], check_exact=True)
    pd.testing.assert_frame_equal(one.table, per.table, check_exact=True)


# --- each mandate against its own benchmark ---------------------------------------------

def test_each_mandate_against_its_own_benchmark_and_the_policy_mix(tmp_path):
    folder = write_fund(tmp_path / "fund", own_benchmarks=True, fund_benchmark="policy")
    a = _fund(folder)
    h = pd.read_csv(folder / "holdings.csv")
    r = pd.read_csv(folder / "returns.csv", index_col="date")
    rf = pd.read_csv(folder / "risk_free.csv", index_col="date")["rate"].iloc[-WINDOW:]
    r = r.iloc[-WINDOW:]
    benches = {}
    for m, mres in zip(a.names, a.mandate_results, strict=True):
        rows = h[h["mandate"] == m]
        w = rows["market_value"] / rows["market_value"].sum()
        port = r[rows["security_id"]].to_numpy() @ w.to_numpy()
        b = pd.read_csv(folder / f"bench_{m}.csv", index_col="date")["return"].iloc[-WINDOW:]
        benches[m] = b.to_numpy()
        # statsmodels OLS of the mandate's excess return on its benchmark's (reference)
        ols = sm.OLS(port - rf.to_numpy(), sm.add_constant(b.to_numpy() - rf.to_numpy())).fit()
        s = mres.portfolio_summary()
        assert abs(s["beta_regression"] - ols.params[1]) < 1e-10, m
        assert abs(s["alpha"] - ols.params[0]) < 1e-12, m
        # tracking error sd(r_p - r_b) x sqrt(12), information ratio mean / sd x sqrt(12)
        active = port - b.to_numpy()
        assert abs(s["tracking_error_ann"] - active.std(ddof=1) * np.sqrt(12)) < 1e-12, m
        assert abs(s["information_ratio_ann"]
                   - active.mean() / active.std(ddof=1) * np.sqrt(12)) < 1e-10, m
    # the policy mix: sum_m s_m r_(m,t), rebalanced every period, is the fund's benchmark
    mix = 0.5 * benches["A"] + 0.3 * benches["B"] + 0.2 * benches["C"]
    assert np.allclose(a.results.window.market, mix, rtol=0, atol=1e-15)
    ols = sm.OLS(a.results.portfolio_series - rf.to_numpy(),
                 sm.add_constant(mix - rf.to_numpy())).fit()
    assert abs(a.results.portfolio_fit.beta - ols.params[1]) < 1e-10


# --- a security held by two mandates --------------------------------------------------------

def test_security_in_two_mandates_is_counted_once(tmp_path):
    folder = write_fund(tmp_path / "fund", shared=2)
    a = _fund(folder)
    h = pd.read_csv(folder / "holdings.csv")
    total = a.inputs.total.holdings.frame
    assert len(total) == h["security_id"].nunique() == len(h) - 2
    assert total["security_id"].is_unique
    # its weight in the fund: the sum of its market values over all the fund's (pandas)
    expect = h.groupby("security_id")["market_value"].sum() / h["market_value"].sum()
    got = total.set_index("security_id")["weight"]
    assert np.allclose(got[expect.index].to_numpy(), expect.to_numpy(), rtol=0, atol=1e-15)
    assert abs(got.sum() - 1.0) < 1e-12
    # the overlap tables name the two shared securities, at that combined weight
    ov = a.overlap.set_index("security_id")
    assert sorted(ov.index) == ["A00", "A01"]
    assert np.allclose(ov["combined_weight"], expect[ov.index], rtol=0, atol=1e-15)
    assert (ov["mandates"] == "A; B").all()
    pairs = a.pairs.set_index(["mandate_a", "mandate_b"])
    assert pairs.loc[("A", "B"), "n_common"] == 2
    assert pairs.loc[("A", "C"), "n_common"] == 0
    # the mandates' Euler contributions still add up to the fund's volatility
    assert abs(a.risk.vol_contribution.sum() - a.risk.volatility) < 1e-12
    # one row per security for the total fund in securities.csv, each mandate's own rows after
    sec = a.result_tables()["securities"]
    assert sec[sec["mandate"] == TOTAL_FUND]["security_id"].is_unique
    assert (sec["mandate"] == "B").sum() == 6 + 2


# --- a mandate equals a single-portfolio pack of itself ------------------------------------

def test_each_mandate_equals_a_single_portfolio_build_of_it(tmp_path):
    folder = write_fund(tmp_path / "fund", own_benchmarks=True, shared=2,
                        fund_benchmark="policy")
    fund = _fund(folder)
    h = pd.read_csv(folder / "holdings.csv")
    for name, got in zip(fund.names, fund.mandate_results, strict=True):
        single = tmp_path / f"single-{name}"
        single.mkdir()
        for f in ("returns.csv", "risk_free.csv"):
            (single / f).write_bytes((folder / f).read_bytes())
        (single / "market.csv").write_bytes((folder / f"bench_{name}.csv").read_bytes())
        h[h["mandate"] == name].drop(columns="mandate").to_csv(single / "holdings.csv",
                                                                    index=False)
        (single / "pack.toml").write_text(
            '[pack]\ntitle = "One mandate"\norganisation = "Invented test fund"\n'
            'period_end = 2026-11-30\n\n[inputs]\nholdings = "holdings.csv"\n'
            'returns = "returns.csv"\nmarket = "market.csv"\nrisk_free = "risk_free.csv"\n\n'
            f"[analysis]\nwindow = {WINDOW}\nmin_obs = 24\n", encoding="utf-8")
        settings = load_settings(single)
        alone = analyse(validate_pack(settings), settings)
        pd.testing.assert_frame_equal(got.securities, alone.securities, check_exact=True)
        pd.testing.assert_frame_equal(got.risk_table, alone.risk_table, check_exact=True)
        pd.testing.assert_frame_equal(got.period_table, alone.period_table, check_exact=True)
        pd.testing.assert_frame_equal(got.rolling_table, alone.rolling_table,
                                      check_exact=True)
        a, b = got.portfolio_summary(), alone.portfolio_summary()
        assert a.keys() == b.keys()
        for k in a:
            assert a[k] == b[k] or (a[k] != a[k] and b[k] != b[k]), (name, k)


def test_check_summarises_a_fund(tmp_path, capsys):
    folder = write_fund(tmp_path / "fund", shared=2)
    assert main(["check", str(folder)]) == 0
    out = capsys.readouterr().out
    h = pd.read_csv(folder / "holdings.csv")
    v = _mandate_weights(folder)
    assert f"fund: {h['security_id'].nunique()} securities in {len(h)} positions, 3 mandate(s)" \
        in out
    for m in "ABC":
        n = (h["mandate"] == m).sum()
        assert f"mandate '{m}': {n} holdings, weight {v[m]:.1%}" in out


def test_summary_commentary_once_on_the_fund_overview(tmp_path):
    from reporter.build import assemble

    folder = write_fund(tmp_path / "fund")
    (folder / "commentary").mkdir()
    (folder / "commentary" / "summary.md").write_text(
        "---\nauthor: Test Author\ndate: 2026-12-01\n---\nAn invented note on the fund.\n",
        encoding="utf-8")
    html = assemble(load_settings(folder)).html()
    assert html.count("An invented note on the fund.") == 1
    start = html.index('<section class="chapter" id="summary">')
    assert start < html.index("An invented note on the fund.") < html.index('id="fund-risk"')


def test_fund_compared_with_its_earlier_build(tmp_path):
    """[compare] in a fund compares the total fund with the earlier build's total fund."""
    from reporter.build import assemble, pack_files
    from reporter.writer import commit

    prev = write_fund(tmp_path / "prev", shared=2)
    toml = prev / "pack.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace("period_end = 2026-11-30",
                                                             "period_end = 2026-10-31"),
                    encoding="utf-8")
    a = assemble(load_settings(prev))
    commit(pack_files(a, "<!DOCTYPE html>", b"%PDF-1.7 test"), tmp_path / "prev-build")
    cur = write_fund(tmp_path / "cur", shared=2,
                     extra_toml='\n[compare]\nprevious = "../prev-build"\n')
    h = pd.read_csv(cur / "holdings.csv")
    h[h["security_id"] != "C04"].to_csv(cur / "holdings.csv", index=False)   # C04 sold
    a = assemble(load_settings(cur))
    before = pd.read_csv(tmp_path / "prev-build" / "results" / "securities.csv")
    before = before[before["mandate"] == TOTAL_FUND].set_index("security_id")
    port = json.loads((tmp_path / "prev-build" / "results" / "portfolio.json").read_text(
        encoding="utf-8"))
    ch = a.changes
    assert ch is not None and ch.previous_period_end == "2026-10-31"
    assert ch.new_holdings == []
    assert [r["security_id"] for r in ch.removed_holdings] == ["C04"]
    assert ch.removed_holdings[0]["weight_before"] == pytest.approx(
        before.loc["C04", "weight"], rel=1e-9)
    assert ch.beta.before == pytest.approx(port["beta_regression"], rel=1e-9)
    assert ch.beta.now == a.results.portfolio_fit.beta
    html = a.html()
    assert 'id="total-fund-changes"' in html and 'href="#total-fund-changes"' in html
    files = pack_files(a, html, b"%PDF-1.7 test")
    doc = json.loads(files["results/changes.json"])
    assert doc["previous"]["period_end"] == "2026-10-31"
    assert [r["security_id"] for r in doc["removed_holdings"]] == ["C04"]
    # each mandate against its own figures in the earlier build
    prev_m = json.loads((tmp_path / "prev-build" / "results" / "mandate_portfolio.json")
                        .read_text(encoding="utf-8"))
    allrows = pd.read_csv(tmp_path / "prev-build" / "results" / "securities.csv")
    per = json.loads(files["results/mandate_changes.json"])
    for part in a.parts:
        c = part.context.changes
        assert c.beta.before == pytest.approx(prev_m[part.name]["beta_regression"], rel=1e-9)
        assert c.beta.now == part.results.portfolio_fit.beta
        assert per[part.name]["beta"]["now"] == pytest.approx(c.beta.now, rel=1e-12)
        removed = [r["security_id"] for r in c.removed_holdings]
        assert removed == (["C04"] if part.name == "C" else [])
        assert c.new_holdings == []
    rows = allrows[allrows["mandate"] == "C"].set_index("security_id")
    c = a.parts[2].context.changes
    assert c.removed_holdings[0]["weight_before"] == pytest.approx(rows.loc["C04", "weight"],
                                                                   rel=1e-9)
    assert f'id="{a.parts[2].slug}-changes"' in html


# --- bad fund packs -------------------------------------------------------------------------

def _run(pack: Path, out: Path, capsys) -> tuple[int, str]:
    code = main(["build", str(pack), "--out", str(out), "--quiet"])
    return code, capsys.readouterr().err


def test_fund_settings_problems_are_reported_at_once(tmp_path, capsys):
    folder = write_fund(tmp_path / "fund")
    toml = folder / "pack.toml"
    text = toml.read_text(encoding="utf-8")
    text = text.replace("strategic_weight = 0.2", "strategic_weight = 0.25")   # sum 1.05
    text = text.replace('name = "C"', 'name = "a"\nholdings = "holdings.csv"')
    text = text.replace("range = [0.25, 0.35]", "range = [0.31, 0.35]")       # B: 0.3 outside
    text += '\n[[mandates]]\nname = "Total fund"\nstrategic_weight = 0.0\ncolour = 1\n'
    toml.write_text(text, encoding="utf-8")
    code, err = _run(folder, tmp_path / "out", capsys)
    assert code == 2
    assert not (tmp_path / "out").exists()
    assert "Traceback" not in err
    for expected in (
        "pack.toml:mandates.3.colour: unknown key",
    ):
        assert expected in err
    text = text.replace("colour = 1\n", "")
    toml.write_text(text, encoding="utf-8")
    code, err = _run(folder, tmp_path / "out", capsys)
    assert code == 2 and not (tmp_path / "out").exists()
    for expected in (
        "pack.toml:inputs.holdings: give the holdings either in one file",
        "pack.toml:mandates.1.range: the range [0.31, 0.35] does not contain the strategic "
        "weight 0.3",
        "pack.toml:mandates.2.name: mandate name 'a' is used twice (first at mandates.0)",
        "pack.toml:mandates.3.name: 'Total fund' is reserved",
        "pack.toml:mandates: the strategic weights sum to 1.05, not 1",
    ):
        assert expected in err, expected


def test_fund_data_problems_are_reported_at_once(tmp_path, capsys):
    folder = write_fund(tmp_path / "fund", own_benchmarks=True)
    h = pd.read_csv(folder / "holdings.csv")
    h.loc[3, "mandate"] = "D"                            # an undeclared mandate (CSV line 5)
    h.loc[h["mandate"] == "C", "mandate"] = "c"          # C loses every row
    h.to_csv(folder / "holdings.csv", index=False)
    b = pd.read_csv(folder / "bench_B.csv")
    b.iloc[:-3].to_csv(folder / "bench_B.csv", index=False)   # ends before period_end
    code, err = _run(folder, tmp_path / "out", capsys)
    assert code == 2 and not (tmp_path / "out").exists()
    assert "Traceback" not in err
    for expected in (
        "holdings.csv:5:mandate: mandate 'D' is not declared in pack.toml",
        "pack.toml:mandates.2.name: no holding in holdings.csv has the mandate 'C'",
        "pack.toml:pack.period_end: period_end 2026-11-30 is after the last date in "
        "bench_B.csv",
    ):
        assert expected in err, expected
    assert len(re.findall(r"mandate 'c' is not declared", err)) >= 5


def test_fund_weights_problems(tmp_path, capsys):
    folder = write_fund(tmp_path / "fund", market_values=False)
    h = pd.read_csv(folder / "holdings.csv")
    h.loc[0, "weight"] += 0.1                             # mandate A's weights sum to 1.1
    h.to_csv(folder / "holdings.csv", index=False)
    toml = folder / "pack.toml"
    toml.write_text(re.sub(r"(?m)^weight = 0.2$", "weight = 0.3",
                           toml.read_text(encoding="utf-8")), encoding="utf-8")
    code, err = _run(folder, tmp_path / "out", capsys)
    assert code == 2 and not (tmp_path / "out").exists()
    assert "holdings.csv:weight: weights sum to 1.1, not 1" in err
    assert "(mandate 'A')" in err
    assert "pack.toml:mandates: the declared mandate weights sum to 1.1, not 1" in err


def test_fund_table_without_mandates_is_refused(tmp_path, capsys):
    folder = write_fund(tmp_path / "fund")
    toml = folder / "pack.toml"
    text = toml.read_text(encoding="utf-8")
    toml.write_text(text[: text.index("[[mandates]]")] + '[fund]\nbenchmark = "policy"\n',
                    encoding="utf-8")
    code, err = _run(folder, tmp_path / "out", capsys)
    assert code == 2
    assert "pack.toml:fund: a [fund] table needs [[mandates]]" in err



def _per_mandate_files(folder: Path) -> None:
    """Split the fund's holdings file into one file per mandate, h_A.csv, h_B.csv, ..."""
    h = pd.read_csv(folder / "holdings.csv", dtype=str)
    toml = folder / "pack.toml"
    text = toml.read_text(encoding="utf-8").replace('holdings = "holdings.csv"\n', "")
    for m in h["mandate"].unique():
        h[h["mandate"] == m].drop(columns="mandate").to_csv(folder / f"h_{m}.csv", index=False)
        text = text.replace(f'name = "{m}"\n', f'name = "{m}"\nholdings = "h_{m}.csv"\n')
    toml.write_text(text, encoding="utf-8")
    (folder / "holdings.csv").unlink()


@pytest.mark.parametrize("files", ["one", "per mandate"])
def test_an_id_differing_from_another_mandates_only_by_case_is_named_at_its_row(tmp_path,
                                                                                  files):
    # the total fund held 'A00' and 'a00' as two securities with one warning, "holding a00
    # has no return history", that named no row; with one file per mandate that warning
    # was an internal error (KeyError: 'holdings')
    folder = write_fund(tmp_path / "fund")
    h = pd.read_csv(folder / "holdings.csv", dtype=str)
    b = int(np.flatnonzero(h["mandate"] == "B")[0])
    r = pd.read_csv(folder / "returns.csv", dtype=str)
    r.drop(columns=h.loc[b, "security_id"]).to_csv(folder / "returns.csv", index=False)
    h.loc[b, "security_id"] = "a00"
    h.to_csv(folder / "holdings.csv", index=False)
    a_at, b_at = ("holdings.csv", "holdings.csv:10") if files == "one" else ("h_A.csv",
                                                                               "h_B.csv:2")
    assert b == 8 and h.loc[0, "security_id"] == "A00"       # CSV lines 10 and 2
    if files != "one":
        _per_mandate_files(folder)
    settings = load_settings(folder)
    fin = validate_fund(settings, *read_inputs(settings))
    assert [str(p) for p in fin.warnings] == [
        f"{b_at}:security_id: warning: security id 'a00' (mandate 'B') differs from 'A00' "
        f"({a_at} row 2, mandate 'A') only by case: the total fund holds them as two "
        "securities; give one security one id",
        f"{b_at}:security_id: warning: holding a00 has no return history in returns.csv; "
        "give a proxy column (a security id, market or benchmark) to stand in for it, else "
        "it is left out of every return figure"]

def test_a_fund_sector_limit_named_in_another_case_is_refused(tmp_path, capsys):
    # a mandate's (or the total fund's) "utilities = 0.10" was applied to no holding, a
    # weight of 0 shown as within, while Utilities itself was judged only under "*"; the
    # single portfolio's check had not been run for a fund
    import shutil

    pack = tmp_path / "fund"
    shutil.copytree(REPO / "inputs" / "demo-fund", pack)
    text = (pack / "pack.toml").read_text()
    text = text.replace("[limits]\n", '[limits]\nmax_sector_weight = { Utilties = 0.2, '
                        '"*" = 0.5 }\n', 1)
    text = text.replace("beta_min = 0.9\n", 'beta_min = 0.9\nmax_sector_weight = { utilities '
                        '= 0.10, "*" = 0.4 }\n', 1)
    (pack / "pack.toml").write_text(text)
    assert main(["check", str(pack)]) == 2
    err = capsys.readouterr().err.splitlines()
    assert ("pack.toml:mandates.0.limits.max_sector_weight.utilities: no holding's sector is "
            "'utilities', but 'Utilities' is (sector names must match exactly); write it as "
            "the holdings file does") in err
    assert ("pack.toml:limits.max_sector_weight.Utilties: warning: no holding belongs to the "
            "sector 'Utilties', so its limit applies to a weight of 0; check the name against "
            "the holdings file's sectors") in err


# --- the demo fund: generator and PDF -------------------------------------------------------

DEMO_FUND = REPO / "inputs" / "demo-fund"


def test_demo_fund_files_are_the_generators(tmp_path):
    from reporter.demo_fund import generate

    generate(tmp_path / "gen")
    for f in sorted(DEMO_FUND.iterdir()):
        assert (tmp_path / "gen" / f.name).read_bytes() == f.read_bytes(), f.name


@pytest.fixture(scope="session")
def demo_fund_build(tmp_path_factory) -> Path:
    """The demo fund built once with a fixed SOURCE_DATE_EPOCH."""
    out = tmp_path_factory.mktemp("demo-fund") / "pack"
    assert build_at_fixed_epoch(DEMO_FUND, out) == 0
    return out


@pytest.mark.skipif(shutil.which("pdftotext") is None, reason="poppler-utils not installed")
def test_demo_fund_words_stay_inside_the_text_block(demo_fund_build):
    # the mandate weights table's status tags ("within range") ran 22-35 points into the
    # right margin; its headings and tags may now wrap
    for pdf in ("pack.pdf", "pack-trustees.pdf"):
        assert words_past_the_text_block(demo_fund_build / pdf) == [], pdf


def _outline(pdf: Path) -> list[tuple[int, str, int]]:
    """(depth, title, 1-based page) of every PDF bookmark, in order."""
    import pypdf

    reader = pypdf.PdfReader(str(pdf))
    out: list[tuple[int, str, int]] = []

    def walk(items, depth):
        for x in items:
            if isinstance(x, list):
                walk(x, depth + 1)
            else:
                out.append((depth, x.title, reader.get_destination_page_number(x) + 1))
    walk(reader.outline, 0)
    return out


def _page_text(pdf: Path, page: int) -> str:
    return subprocess.run(["pdftotext", "-layout", "-f", str(page), "-l", str(page), str(pdf),
                           "-"], check=True, capture_output=True, text=True).stdout


def test_demo_fund_pdf(demo_fund_build):
    pdf = demo_fund_build / "pack.pdf"
    res = demo_fund_build / "results"
    table = pd.read_csv(res / "mandates.csv")
    names = list(table["mandate"].iloc[:-1])
    assert names == ["Domestic equity", "Overseas equity", "Low-volatility equity",
                     "Bond-proxy equity"]
    # the mandates' weights are their market values' share (pandas, from the input file)
    v = _mandate_weights(DEMO_FUND)
    assert np.allclose(table["weight"].iloc[:-1], v[names].to_numpy(), rtol=0, atol=1e-9)
    inside = (table["range_low"] <= table["weight"]) & (table["weight"] <= table["range_high"])
    assert list(table["range_status"].iloc[:-1]) == [
        "within range" if x else "outside range" for x in inside.iloc[:-1]]
    assert abs(table["vol_contribution"].iloc[:-1].sum() - table["vol_contribution"].iloc[-1]) \
        < 1e-9
    # bookmarks: the fund's pages, then the total fund and each mandate with its chapters
    outline = _outline(pdf)
    level2 = [t for d, t, _ in outline if d == 1]
    for title in ("Fund overview", "Risk and overlap between mandates", TOTAL_FUND, *names):
        assert title in level2, title
    chapters = ["Summary", "Returns and ratios", "Market risk", "Beta estimates",
                "Security market line", "Diversification", "Stress and scenarios",
                "Holdings appendix", "Statistical tests"]
    for name in (TOTAL_FUND, *names):
        k = next(i for i, (d, t, _) in enumerate(outline) if d == 1 and t == name)
        below = []
        for d, t, _ in outline[k + 1:]:
            if d <= 1:
                break
            if d == 2:
                below.append(t)
        assert below == chapters, name
    pages = {t: p for d, t, p in outline if d == 1}
    # the contents page links to them: its page numbers are the bookmarks' pages
    # (the contents list each part's chapters, and run onto a second page)
    contents = _page_text(pdf, 2) + _page_text(pdf, 3)
    for name in ("Fund overview", *names):
        assert re.search(re.escape(name) + r" ?\.{3,} ?" + str(pages[name]) + r"\b", contents), \
            name
    # the fund overview shows every mandate with its status in words (the status may wrap
    # onto the row's next lines: the row runs to the next mandate's line)
    lines = _page_text(pdf, pages["Fund overview"]).splitlines()
    starts = [next(i for i, x in enumerate(lines) if x.strip().startswith(n)) for n in names]
    for name, status, start, end in zip(names, table["range_status"].iloc[:-1], starts,
                                        [*starts[1:], starts[-1] + 4], strict=True):
        row = " ".join(lines[start:end]).split()
        assert all(word in row for word in status.split()), name
    # a mandate's part: its title page names its benchmark and weight; footers name it
    first = pages["Low-volatility equity"]
    title = " ".join(_page_text(pdf, first).split())
    assert "Managed by Tennick Lane Partners" in title
    assert "measured against its benchmark (Minimum-volatility index)" in title
    assert "Low-volatility equity" in _page_text(pdf, first + 1).splitlines()[-1] + \
        _page_text(pdf, first + 1)[-300:]
    # the cautions stay on the pack
    text = subprocess.run(["pdftotext", str(pdf), "-"], check=True, capture_output=True,
                          text=True).stdout
    for spec in load_settings(DEMO_FUND).inputs.values():    # names, never input file names
        assert spec.display not in text, spec.display
    for phrase in ("not investment advice", "Past performance is not a reliable guide",
                   "appointed investment adviser", "is not comparable with another"):
        assert phrase in re.sub(r"\s+", " ", text), phrase


def test_demo_fund_results_files(demo_fund_build):
    res = demo_fund_build / "results"
    sec = pd.read_csv(res / "securities.csv", dtype={"security_id": str})
    h = pd.read_csv(DEMO_FUND / "holdings.csv")
    assert sec.columns[0] == "mandate"
    counts = sec["mandate"].value_counts()
    assert counts[TOTAL_FUND] == h["security_id"].nunique()
    for name, n in h["mandate"].value_counts().items():
        assert counts[name] == n
    for f in ("risk_contributions.csv", "period_returns.csv", "rolling_beta.csv"):
        df = pd.read_csv(res / f)
        assert df.columns[0] == "mandate"
        assert set(df["mandate"]) == {TOTAL_FUND, *h["mandate"].unique()}
    port = json.loads((res / "portfolio.json").read_text(encoding="utf-8"))
    total = sec[sec["mandate"] == TOTAL_FUND]
    assert port["n_holdings"] == len(total)
    ov = pd.read_csv(res / "overlap.csv")
    shared = h.groupby("security_id")["mandate"].nunique()
    assert sorted(ov["security_id"]) == sorted(shared.index[shared > 1])
    limits = json.loads((res / "mandate_limits.json").read_text(encoding="utf-8"))
    assert sorted(limits) == ["Domestic equity", "Low-volatility equity", "Overseas equity"]


def test_demo_fund_signs_off(demo_fund_build, tmp_path):
    """Sign-off re-renders the fund from its inputs and must reproduce pack.html byte for
    byte (the build is deterministic), then archives it."""
    archive = tmp_path / "archive"
    assert main(["sign-off", str(demo_fund_build), "--archive", str(archive), "--quiet",
                 "--by", "A Trustee"]) == 0
    assert list(archive.glob("2026-11-30/ravensgill-mutual-2026-11-30.pdf"))
    # the trustees' site shows the total fund: each security once, one rolling-beta series
    site = tmp_path / "site"
    assert main(["site", "--archive", str(archive), "--out", str(site), "--quiet"]) == 0
    page = (site / "packs" / "ravensgill-mutual-2026-11-30" / "index.html").read_text(
        encoding="utf-8")
    holdings = page[page.index('id="holdings-caption"'):]
    holdings = holdings[: holdings.index("</table>")]
    h = pd.read_csv(DEMO_FUND / "holdings.csv")
    assert holdings.count('<td class="holding"') == h["security_id"].nunique()
    roll = pd.read_csv(demo_fund_build / "results" / "rolling_beta.csv")
    n_windows = ((roll["mandate"] == TOTAL_FUND) & (roll["series"] == "PORTFOLIO")).sum()
    rolling = page[page.index('id="rolling-caption"'):]
    rolling = rolling[: rolling.index("</table>")]
    assert rolling.count("<tr><td data-value=") == n_windows


def test_a_mandate_name_holding_a_line_break_is_one_error(tmp_path, capsys):
    # it had been accepted, and every holdings row of that mandate was then refused as
    # "not declared", the name shown with its line break escaped
    import shutil

    pack = tmp_path / "fund"
    shutil.copytree(REPO / "inputs" / "demo-fund", pack)
    toml = pack / "pack.toml"
    toml.write_text(toml.read_text().replace('name = "Domestic equity"',
                                             'name = "Domestic\\nequity"', 1))
    assert main(["check", str(pack)]) == 2
    err = capsys.readouterr().err.splitlines()
    assert err[0] == ("pack.toml:mandates.0.name: mandate name 'Domestic\\nequity' holds a "
                      "control character; write it on one line")
    assert len(err) == 2          # and the summary: no row of the holdings is blamed for it


def test_a_reversed_rebalancing_range_is_named_as_such(tmp_path, capsys):
    # [0.40, 0.30] was reported as "does not contain the strategic weight"
    import shutil

    pack = tmp_path / "fund"
    shutil.copytree(REPO / "inputs" / "demo-fund", pack)
    toml = pack / "pack.toml"
    toml.write_text(toml.read_text().replace("range = [0.30, 0.40]", "range = [0.40, 0.30]", 1))
    assert main(["check", str(pack)]) == 2
    assert capsys.readouterr().err.splitlines()[0] == (
        "pack.toml:mandates.0.range: the range [0.4, 0.3] is reversed: write the low end first")
