"""Stress and scenarios: VaR and ES, the stationary bootstrap, the VaR backtest and its
coverage tests, scenario replays, the [stress] settings and the chapter in the demo pack.

Each check names its outside reference beside it."""

from __future__ import annotations

import json
import math
import re
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, stats

from reporter.analytics.backtest import backtest_var, christoffersen_ind_lr, kupiec_lr
from reporter.analytics.pack import analyse
from reporter.analytics.stress import worst_windows
from reporter.analytics.var import (
    cornish_fisher_tail_mean,
    risk_measures,
    stationary_bootstrap_indices,
    tail_reach,
    value_at_risk,
)
from reporter.cli import main
from reporter.config import load_settings
from reporter.limits import BREACH, WATCH, WITHIN, classify, evaluate_limits
from reporter.validate import validate_pack
from tests.conftest import assert_check_refuses
from tests.test_pipeline_french import INDUSTRIES, write_french_pack

DEMO = Path(__file__).resolve().parents[1] / "inputs" / "demo"


@pytest.fixture(scope="module")
def fat_tailed():
    rng = np.random.default_rng(11)
    return 0.004 + 0.03 * rng.standard_t(4, size=500) + 0.01 * rng.standard_normal(500)


@pytest.mark.parametrize("level", [0.95, 0.99])
def test_historical_var_es_match_numpy(fat_tailed, level):
    r = fat_tailed
    (var, es) = risk_measures(r, level)["historical"]
    # reference: numpy.quantile with method="linear" (Hyndman-Fan definition 7)
    q = np.quantile(r, 1 - level, method="linear")
    assert var[0] == pytest.approx(-q, rel=1e-12)
    # reference: ES as the mean of the returns at or below that quantile (no ties here)
    assert es[0] == pytest.approx(-r[r <= q].mean(), rel=1e-12)


@pytest.mark.parametrize("level", [0.95, 0.99])
def test_normal_var_es_match_scipy(fat_tailed, level):
    r, sd = fat_tailed, 0.027
    var, es = risk_measures(r, level, model_sd=sd)["normal"]
    a = 1 - level
    # reference: scipy.stats.norm quantile; ES of a normal = mu - sd phi(z_a) / a, negated
    assert var[0] == pytest.approx(-stats.norm.ppf(a, loc=r.mean(), scale=sd), rel=1e-12)
    tail_mean = integrate.quad(lambda x: x * stats.norm.pdf(x, r.mean(), sd), -np.inf,
                               stats.norm.ppf(a, r.mean(), sd))[0] / a
    assert es[0] == pytest.approx(-tail_mean, rel=1e-8)


@pytest.mark.parametrize("level", [0.95, 0.99])
def test_cornish_fisher_matches_published_expansion(fat_tailed, level):
    r = fat_tailed
    var, es = risk_measures(r, level)["cornish_fisher"]
    # reference: scipy.stats skewness and excess kurtosis (biased moment ratios)
    s, k = stats.skew(r), stats.kurtosis(r, fisher=True)
    mu, sd = r.mean(), r.std(ddof=1)

    def zcf(z):
        # Cornish-Fisher expansion as in Zangari (1996), recalled from memory:
        # z + (z^2-1)S/6 + (z^3-3z)K/24 - (2z^3-5z)S^2/36
        return z + (z * z - 1) * s / 6 + (z ** 3 - 3 * z) * k / 24 \
            - (2 * z ** 3 - 5 * z) * s * s / 36

    a = 1 - level
    assert var[0] == pytest.approx(-(mu + zcf(stats.norm.ppf(a)) * sd), rel=1e-12)
    # reference: scipy.integrate.quad of the Cornish-Fisher quantile over the tail
    tail = integrate.quad(lambda u: zcf(stats.norm.ppf(u)), 0, a, limit=200)[0] / a
    assert es[0] == pytest.approx(-(mu + tail * sd), rel=1e-6)
    # with no skew or excess kurtosis the tail mean is the normal one, -phi(z_a)/a
    assert cornish_fisher_tail_mean(a, 0.0, 0.0) == pytest.approx(
        -stats.norm.pdf(stats.norm.ppf(a)) / a, rel=1e-12)


def test_bootstrap_indices_match_arch_for_one_draw():
    from arch.bootstrap import StationaryBootstrap

    # reference: arch.bootstrap.StationaryBootstrap (same seed, same mean block length):
    # one draw takes the generator's integers and then its uniforms, as ours does
    for n, block, seed in ((50, 4.0, 7), (300, 12.0, 20261130), (31, 1.0, 3)):
        bs = StationaryBootstrap(block, np.arange(float(n)), seed=seed)
        for _ in bs.bootstrap(1):
            pass
        ours = stationary_bootstrap_indices(n, 1, block, np.random.default_rng(seed))[0]
        assert np.array_equal(np.asarray(bs.index), ours)


def test_bootstrap_many_draws_agree_with_arch_in_distribution():
    from arch.bootstrap import StationaryBootstrap

    # many draws: the streams differ (ours takes all draws' integers first), so compare the
    # bootstrap standard error of the mean of an autocorrelated series with arch's
    rng = np.random.default_rng(5)
    e = rng.standard_normal(400)
    x = np.convolve(e, [1.0, 0.7, 0.4], mode="same")
    idx = stationary_bootstrap_indices(len(x), 4000, 8.0, np.random.default_rng(1))
    ours = x[idx].mean(axis=1).std()
    ref = StationaryBootstrap(8.0, x, seed=2).apply(np.mean, 4000).std()
    assert ours == pytest.approx(ref, rel=0.08)
    # mean block length: new blocks start with probability 1/8 (Politis and Romano 1994)
    breaks = (np.diff(idx, axis=1) != 1) & (np.diff(idx, axis=1) != 1 - len(x))
    assert breaks.mean() == pytest.approx(1 / 8, abs=0.01)


def test_value_at_risk_sorts_only_the_tail_yet_matches_every_row_sorted_whole(fat_tailed):
    """value_at_risk sorts each bootstrap row only up to the widest level's tail; every
    historical figure and interval must be those of the rows sorted whole (risk_measures on
    the same resamples, each sorted by numpy.sort), exactly."""
    r, draws, seed = fat_tailed, 200, 5
    figs = value_at_risk(r, (0.975, 0.95), 12, r.std(ddof=1), draws, 3.0, seed, 0.90)
    idx = stationary_bootstrap_indices(len(r), draws, 3.0, np.random.default_rng(seed))
    rows = np.vstack([r, r[idx]])
    for level in (0.975, 0.95):
        var, es = risk_measures(rows, level)["historical"]
        for measure, values in (("var", var), ("es", es)):
            f = next(f for f in figs if (f.measure, f.method, f.level, f.horizon)
                     == (measure, "historical", level, "period"))
            lo, hi = np.nanquantile(values[1:], (0.05, 0.95))
            assert (f.value, f.ci_low, f.ci_high) == (values[0], lo, hi), (measure, level)
    # numpy's partition may leave more sorted than asked (it did on AVX-512 here), so the
    # reach itself is checked: the order statistic above numpy's linear quantile (Hyndman and
    # Fan's definition 7: position (n - 1) a) at the widest tail, in any order of levels
    for n, levels in ((500, (0.975, 0.95)), (500, (0.95, 0.99)), (241, (0.99,)),
                      (2520, (0.9, 0.99, 0.95)), (3, (0.5,))):
        widest = max((n - 1) * (1 - lv) for lv in levels)
        assert tail_reach(n, levels) == min(n - 1, math.floor(widest) + 1), (n, levels)


def test_bootstrap_interval_coverage_on_normal_returns():
    # statistical check: on i.i.d. normal returns the normal VaR's 90% interval should hold
    # the true VaR (scipy.stats.norm) in about 90% of samples
    rng = np.random.default_rng(21)
    truth = -stats.norm.ppf(0.05, 0.005, 0.04)
    hits = 0
    reps = 150
    for k in range(reps):
        r = rng.normal(0.005, 0.04, 240)
        figs = value_at_risk(r, (0.95,), 12, r.std(ddof=1), 300, 1.0, k, 0.90)
        f = next(f for f in figs if (f.measure, f.method, f.horizon) == ("var", "normal",
                                                                        "period"))
        hits += f.ci_low <= truth <= f.ci_high
    # binomial(150, 0.9): 3 sd is about 11 samples
    assert abs(hits / reps - 0.90) < 0.08


def test_kupiec_and_christoffersen_from_published_formulas():
    hits = np.zeros(60, dtype=bool)
    hits[[3, 4, 10, 11, 12, 30, 41, 42, 55]] = True        # 9 in 60, some in clusters
    n, x, p = 60, 9, 0.05
    # Kupiec (1995): LR = -2 ln[(1-p)^(n-x) p^x] + 2 ln[(1-x/n)^(n-x) (x/n)^x]
    ref = -2 * ((n - x) * math.log(1 - p) + x * math.log(p)) + 2 * (
        (n - x) * math.log(1 - x / n) + x * math.log(x / n))
    assert kupiec_lr(n, x, p) == pytest.approx(ref, rel=1e-12)
    # the plain reading: 9 in 60 where 3 expected is more than chance allows
    assert stats.chi2.sf(ref, 1) < 0.05
    # Christoffersen (1998): transition counts of the hit sequence
    prev, nxt = hits[:-1], hits[1:]
    n00 = np.sum(~prev & ~nxt)
    n01 = np.sum(~prev & nxt)
    n10 = np.sum(prev & ~nxt)
    n11 = np.sum(prev & nxt)
    pi0, pi1, pi = n01 / (n00 + n01), n11 / (n10 + n11), (n01 + n11) / (n - 1)
    ref_ind = -2 * ((n00 + n10) * math.log(1 - pi) + (n01 + n11) * math.log(pi)) + 2 * (
        n00 * math.log(1 - pi0) + n01 * math.log(pi0) + n10 * math.log(1 - pi1)
        + n11 * math.log(pi1))
    assert christoffersen_ind_lr(hits) == pytest.approx(ref_ind, rel=1e-12)


def test_kupiec_acceptance_regions_textbook():
    # worked example recalled from memory: the 95% non-rejection regions of Kupiec's test
    # tabulated in Jorion, "Value at Risk" (after Kupiec 1995): p = 1%: T = 510 -> 1 < N < 11,
    # T = 1000 -> 4 < N < 17; p = 5%, T = 255 -> 6 < N < 21; p = 1%, T = 255 -> N < 7 (the
    # table gives no lower bound there; the LR itself rejects N = 0, LR = 5.1)
    crit = stats.chi2.ppf(0.95, 1)
    for n, p, lo, hi in ((510, 0.01, 2, 10), (1000, 0.01, 5, 16), (255, 0.05, 7, 20)):
        ok = [x for x in range(n // 4) if kupiec_lr(n, x, p) < crit]
        assert (min(ok), max(ok)) == (lo, hi)
    assert kupiec_lr(255, 6, 0.01) < crit < kupiec_lr(255, 7, 0.01)


def test_backtest_matches_a_window_by_window_loop(fat_tailed):
    r = fat_tailed.copy()
    r[:7] = np.nan                     # leading gap: only the finite run at the end is used
    dates = np.arange(len(r)).astype("datetime64[D]")
    bt = backtest_var(dates, r, 120, 0.95)
    ok = r[7:]
    # reference: a plain loop over windows with numpy.quantile (linear interpolation)
    var = np.array([-np.quantile(ok[t - 120:t], 0.05) for t in range(120, len(ok))])
    hits = ok[120:] < -var
    assert np.allclose(bt.var, var, rtol=0, atol=1e-15)
    assert bt.n == len(ok) - 120 and bt.exceedances == int(hits.sum())
    assert bt.expected == pytest.approx(0.05 * bt.n)
    assert bt.kupiec_p == pytest.approx(stats.chi2.sf(kupiec_lr(bt.n, bt.exceedances, 0.05), 1))
    assert bt.christoffersen_cc_lr == pytest.approx(bt.kupiec_lr + bt.christoffersen_ind_lr)
    assert bt.christoffersen_cc_p == pytest.approx(stats.chi2.sf(bt.christoffersen_cc_lr, 2))
    assert str(bt.dates[0]) == str(dates[127])


def test_worst_windows_against_pandas_rolling(fat_tailed):
    m = fat_tailed[:200]
    got = worst_windows(m, 3, 5)
    # reference: pandas rolling product of (1 + r), then the worst non-overlapping windows
    comp = (pd.Series(1 + m).rolling(3).apply(np.prod, raw=True) - 1).to_numpy()[2:]
    order = np.argsort(comp, kind="stable")
    taken, ref = set(), []
    for s in order:
        if len(ref) == 5:
            break
        if not taken & {s, s + 1, s + 2}:
            taken |= {s, s + 1, s + 2}
            ref.append((s, s + 2))
    assert got == ref


@pytest.fixture(scope="module")
def french_2008(tmp_path_factory, french):
    folder = tmp_path_factory.mktemp("french2008")
    n = len(french)
    months = pd.to_datetime(french["dates"])
    gap = np.flatnonzero((months >= "2008-08-01") & (months <= "2008-10-01"))
    df = write_french_pack(folder, french, 60, {"Telcm": slice(int(gap[0]), int(gap[-1]) + 1)})
    weights = np.arange(1, 13, dtype=float)
    weights /= weights.sum()
    pd.DataFrame({"security_id": INDUSTRIES, "name": INDUSTRIES, "sector": "Industry",
                  "weight": weights}).to_csv(folder / "holdings.csv", index=False)
    with open(folder / "pack.toml", "a") as fh:
        fh.write('[stress]\nmarket_shocks = [-0.25]\n[[stress.scenarios]]\n'
                 'name = "Autumn 2008"\nstart = 2008-09-01\nend = 2008-11-30\n')
    settings = load_settings(folder)
    assert n > 100
    return df, weights, settings, analyse(validate_pack(settings), settings)


def test_french_2008_replayed_with_fixed_weights(french_2008):
    df, w, _, res = french_2008
    s = next(x for x in res.stress.scenarios if x["name"] == "Autumn 2008")
    assert (s["start"], s["end"], s["n_periods"]) == ("2008-09-30", "2008-11-30", 3)
    # reference: hand computation on the Ken French industry data (linearmodels bundle):
    # buy and hold from the window's start with today's weights, Telcm (no returns in
    # Sep-Oct 2008) standing in as its beta x the market's compounded move
    rows = df[(df["date"] >= "2008-09-30") & (df["date"] <= "2008-11-30")]
    market = np.prod(1 + rows["MktRF"] + rows["RF"]) - 1
    beta = res.securities.set_index("security_id").loc["Telcm", "beta"]
    moves = [beta * market if sid == "Telcm" else np.prod(1 + rows[sid]) - 1
             for sid in INDUSTRIES]
    assert s["market"] == pytest.approx(market, rel=1e-12)
    assert s["portfolio"] == pytest.approx(float(np.dot(w, moves)), rel=1e-12)
    assert s["proxied_weight"] == pytest.approx(w[INDUSTRIES.index("Telcm")])
    assert s["n_proxied"] == 1
    # the shocks: defaults and the one named, beta x shock with beta's interval
    sh = {x["shock"]: x for x in res.stress.shocks}
    assert sorted(sh) == [-0.30, -0.25, -0.20, -0.10]
    f = res.portfolio_fit
    assert sh[-0.25]["portfolio"] == pytest.approx(-0.25 * f.beta)
    assert sh[-0.25]["portfolio_low"] == pytest.approx(-0.25 * f.beta_ci[1])
    assert sh[-0.25]["specific_spread"] == pytest.approx(
        stats.norm.ppf(0.975) * f.residual_vol)


def test_demo_results_file_keys_and_figures(demo_build):
    data = json.loads((demo_build / "results/risk_scenarios.json").read_text())
    assert {"shocks", "var", "es", "backtest", "scenarios"} <= set(data)
    assert set(data["shocks"][0]) >= {"shock", "portfolio", "portfolio_low", "portfolio_high"}
    for key in ("var", "es"):
        assert len(data[key]) == 3 * 2 * 2
        for v in data[key]:
            assert set(v) >= {"method", "level", "horizon", "value", "ci_low", "ci_high",
                              "n_periods"}
            assert v["method"] in ("historical", "normal", "cornish_fisher")
            assert v["ci_low"] <= v["value"] <= v["ci_high"] and v["value"] > 0
    assert set(data["backtest"]) >= {
        "level", "n", "exceedances", "expected", "kupiec_lr", "kupiec_p",
        "christoffersen_ind_lr", "christoffersen_ind_p", "christoffersen_cc_lr",
        "christoffersen_cc_p"}
    assert data["backtest"]["n"] == 60        # 120 months of history, a 60-month window
    kinds = [s["kind"] for s in data["scenarios"]]
    assert kinds.count("worst period") == 5 and kinds.count("worst three months") == 5
    named = next(s for s in data["scenarios"] if s["kind"] == "named")
    assert set(named) >= {"name", "kind", "start", "end", "portfolio", "market", "benchmark",
                          "proxied_weight"}
    # the market's compounded move, recomputed from the demo's market file
    m = pd.read_csv(DEMO / "market.csv")
    q1 = m[(m["date"] >= "2020-01-01") & (m["date"] <= "2020-03-31")]["return"]
    assert named["market"] == pytest.approx(np.prod(1 + q1) - 1, rel=1e-12)
    assert any("Cash earns the risk-free rate" in n for n in data["notes"])
    # year = period x sqrt(12)
    per = {(v["method"], v["level"], v["horizon"]): v["value"] for v in data["var"]}
    assert per[("normal", 0.99, "year")] == pytest.approx(per[("normal", 0.99, "period")]
                                                         * math.sqrt(12))
    csv = pd.read_csv(demo_build / "results/risk_scenarios.csv")
    assert len(csv[csv["table"] == "var"]) == 12 and len(csv[csv["table"] == "scenario"]) == 11
    html = (demo_build / "pack.html").read_text(encoding="utf-8")
    chapter = html[html.index('id="stress"'):html.index('id="holdings"')]
    assert "understate losses in a crash" in chapter
    assert data["backtest"]["reading"] in re.sub(r"\s+", " ", chapter)
    assert "First quarter 2020" in chapter and "Cash earns the risk-free rate" in chapter


def test_stress_limit_breach(french_2008):
    from reporter.config import LimitsSection

    res = french_2008[3]

    var = res.stress.figure("var", "historical", 0.95, "year")
    cfg = LimitsSection(max_stress_loss=0.05, stress_shock=-0.30, max_var_95_ann=var * 1.05)
    rep = evaluate_limits(cfg, res)
    c = {x.limit: x for x in rep.checks}
    assert c["max_stress_loss"].value == pytest.approx(0.30 * res.portfolio_fit.beta)
    assert c["max_stress_loss"].status == BREACH
    # VaR within 10% of its maximum: on watch, as classify gives for every other limit
    assert c["max_var_95_ann"].value == pytest.approx(var)
    assert c["max_var_95_ann"].status == WATCH == classify(var, var * 1.05, "max", 0.10)[0]
    assert [x.limit for x in rep.exceptions] == ["max_stress_loss", "max_var_95_ann"]
    rep = evaluate_limits(LimitsSection(max_var_95_ann=var * 2), res)
    assert rep.checks[0].status == WITHIN


@pytest.mark.parametrize("extra, line", [
    ('[stress]\nmarket_shocks = ["a lot"]\n', "pack.toml:stress.market_shocks"),
    ("[stress]\nmarket_shocks = [-1.0]\n", "pack.toml:stress.market_shocks"),
    ("[stress]\nlevels = [0.95, 1.0]\n", "pack.toml:stress.levels"),
    ("[stress]\nbacktest_level = 0.5\n", "pack.toml:stress.backtest_level"),
    ("[limits]\nstress_shock = -1.5\n", "pack.toml:limits.stress_shock"),
    ('[[stress.scenarios]]\nname = "x"\nstart = 1999-01-01\nend = 2000-01-31\n',
     "pack.toml:stress.scenarios.0.start"),
    ('[[stress.scenarios]]\nname = "ok"\nstart = 2020-01-01\nend = 2020-02-28\n'
     '[[stress.scenarios]]\nname = "y"\nstart = 2026-01-01\nend = 2027-01-31\n',
     "pack.toml:stress.scenarios.1.end"),
])
def test_bad_stress_settings_exit_2(tmp_path, capsys, extra, line):
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    text = (pack / "pack.toml").read_text()
    text = text[:text.index("[[stress.scenarios]]")]       # the demo's own scenario out
    if extra.startswith("[limits]"):
        text = text.replace("[limits]\n", extra)
        extra = ""
    (pack / "pack.toml").write_text(text + extra)
    out = tmp_path / "out"
    assert main(["build", str(pack), "--out", str(out), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert line in err and "Traceback" not in err
    assert not out.exists()


@pytest.mark.parametrize("demo, first", [("demo", "2016-12-31"), ("demo-fund", "2018-12-31")])
@pytest.mark.parametrize("dates, line", [
    ("start = 1900-01-01\nend = 2020-03-31\n",
     "pack.toml:stress.scenarios.0.start: the scenario 'Hostile' starts 1900-01-01, before "
     "the history's first period ({first})"),
    ("start = 2026-01-01\nend = 2099-12-31\n",
     "pack.toml:stress.scenarios.0.end: the scenario 'Hostile' ends 2099-12-31, after the "
     "history's last period (2026-11-30)"),
])
def test_scenario_outside_the_history_fails_check(tmp_path, capsys, demo, first, dates, line):
    """`reporter check` finds a named scenario outside the history, as the build does (it
    passed check and failed only the build's stress stage). ``first`` is the first row of
    the demo's market.csv."""
    pack = tmp_path / "pack"
    shutil.copytree(DEMO.parent / demo, pack)
    assert (pack / "market.csv").read_text().splitlines()[1].startswith(first)
    text = (pack / "pack.toml").read_text()
    if "[[stress.scenarios]]" in text:
        text = text[:text.index("[[stress.scenarios]]")]
    (pack / "pack.toml").write_text(text + '[[stress.scenarios]]\nname = "Hostile"\n' + dates)
    assert_check_refuses(capsys, pack, line.format(first=first))
