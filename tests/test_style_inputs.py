"""The optional style inputs (factors, benchmark sectors, weights history): bad input gives
one ``file:row:column`` line each, exit 2 and no output; good input reaches the figures.

Each case is the small invented pack of ``tests/data/make_bad_cases.py`` (30 month-ends
2024-01-31 .. 2026-06-30, window 24: 2024-07-31 .. 2026-06-30) with style files added, made
in a temporary folder. Row numbers are file lines (the header is line 1), worked out from
how each case is made.
"""

from __future__ import annotations

import numpy as np
import pytest

from reporter.build import assemble
from reporter.cli import main
from reporter.config import load_settings
from tests.data.make_bad_cases import base_pack, month_ends, write_pack

DATES = month_ends()
SECTORS = ("Industrials", "Consumer Staples", "Technology")


def style_pack(factors=True, sectors=True, history=False):
    """The base pack with a factors file (size, value: invented), a benchmark by sector
    and, optionally, a weights history."""
    p = base_pack()
    rng = np.random.default_rng(17)
    if factors:
        p.toml["inputs"]["factors"] = '"factors.csv"'
        p.tables["factors.csv"] = (["date", "size", "value"], [
            [d, f"{rng.normal(0.002, 0.02):.6f}", f"{rng.normal(0.003, 0.02):.6f}"]
            for d in DATES])
    if sectors:
        p.toml["inputs"]["benchmark_sectors"] = '"benchmark_sectors.csv"'
        rows = []
        for d in DATES:
            for s, w in zip(SECTORS + ("Utilities",), (0.4, 0.3, 0.2, 0.1), strict=True):
                rows.append([d, s, f"{w:.6f}", f"{rng.normal(0.005, 0.04):.6f}"])
        p.tables["benchmark_sectors.csv"] = (["date", "sector", "weight", "return"], rows)
    if history:
        p.toml["inputs"]["weights_history"] = '"weights_history.csv"'
        rows = [[DATES[k], sid, f"{w:.6f}"] for k in (6, 18)
                for sid, w in (("FWX01", 0.25), ("FWX02", 0.25), ("FWX03", 0.25),
                               ("FWX04", 0.25))]
        p.tables["weights_history.csv"] = (["date", "security_id", "weight"], rows)
    return p


def _bad(tmp_path, pack, capsys) -> list[str]:
    folder = tmp_path / "pack"
    write_pack(pack, folder)
    out = tmp_path / "out"
    code = main(["build", str(folder), "--out", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and "Traceback" not in err
    assert not out.exists()                      # nothing half-written
    assert err.splitlines()[-1].startswith("reporter: ")    # the closing count
    return [line for line in err.splitlines()[:-1] if line.strip()]


def test_factor_file_missing_a_window_period(tmp_path, capsys):
    p = style_pack()
    del p.rows("factors.csv")[10]          # 2024-11-30, in the window; line 12 then holds
    lines = _bad(tmp_path, p, capsys)      # 2024-12-31
    assert lines == ["factors.csv:12:date: the factors file misses the window's period of "
                     "2024-11-30 (missing before this row)"]


def test_constant_factor_column_is_named(tmp_path, capsys):
    p = style_pack()
    for row in p.rows("factors.csv"):
        row[2] = "0.004000"
    lines = _bad(tmp_path, p, capsys)
    # the first window row is 2024-07-31, the seventh data row: line 8
    assert lines == ["factors.csv:8:value: factor 'value' is constant over the window (0.004 "
                     "in every period), which makes the regression singular; remove the "
                     "column"]


def test_a_factor_that_repeats_another_is_named(tmp_path, capsys):
    """A factor that is a combination of the market and the factors before it would leave
    every factor figure empty (the design is singular for every holding): one line naming
    the file and the column, exit 2, nothing written."""
    p = style_pack()
    for row in p.rows("factors.csv"):
        row[2] = f"{2 * float(row[1]) - 0.001:.6f}"      # value = 2 size - 0.1%
    lines = _bad(tmp_path, p, capsys)
    assert len(lines) == 1
    assert lines[0].startswith("factors.csv:value: factor 'value' is a linear combination of "
                               "the market proxy's excess return and the factors before it "
                               "over the window's 24 periods")
    assert lines[0].endswith("remove the column or check its values")
    # reporter check runs the same test on the window's market, with the same line
    assert main(["check", str(tmp_path / "pack")]) == 2
    err = capsys.readouterr().err
    assert [line for line in err.splitlines()[:-1] if line.strip()] == lines


def test_factor_separability_uses_the_fitting_own_threshold():
    """The check names the first factor that adds nothing to the market and the factors
    before it, with the fitting's singularity bound (cond(X'X) >= 1e12, as masked_ols);
    a design it passes gets every coefficient from masked_ols."""
    from types import SimpleNamespace

    from reporter.analytics.beta_variants import SINGULAR_COND, masked_ols
    from reporter.analytics.style import _require_separable_factors
    from reporter.errors import InputError

    rng = np.random.default_rng(3)
    x = rng.normal(0.005, 0.04, 60)
    f1, f2 = rng.normal(0, 0.02, 60), rng.normal(0, 0.02, 60)
    settings = SimpleNamespace(inputs={})
    with pytest.raises(InputError) as err:       # the first factor is 1.5 x the market + c
        _require_separable_factors(x, np.column_stack([1.5 * x + 0.001, f1]), ("a", "b"),
                                   settings)
    text = str(err.value.problems[0])
    assert "factors:a: factor 'a' is a linear combination of the market proxy's excess " \
        "return over" in text
    F = np.column_stack([f1, f2])
    _require_separable_factors(x, F, ("a", "b"), settings)          # independent: passes
    y = (0.8 * x + 0.3 * f1 - 0.2 * f2)[:, None] + rng.normal(0, 0.01, (60, 4))
    coef, _, _ = masked_ols(y, np.column_stack([np.ones(60), x, F]), 24)
    assert np.isfinite(coef).all()
    # almost collinear, just inside the bound, passes; past it, named
    assert SINGULAR_COND == 1e12
    X = np.column_stack([np.ones(60), x, f1])
    near = f1 + 1e-3 * f2
    assert np.linalg.cond(np.column_stack([X, near]).T @ np.column_stack([X, near])) < 1e12
    _require_separable_factors(x, np.column_stack([f1, near]), ("a", "b"), settings)
    far = f1 + 1e-9 * f2
    with pytest.raises(InputError, match="factor 'b' is a linear combination of the market "
                       "proxy's excess return and the factors before it"):
        _require_separable_factors(x, np.column_stack([f1, far]), ("a", "b"), settings)


def test_check_reads_the_optional_files_as_the_build_does(tmp_path, capsys):
    """``reporter check`` checks the optional files too, with the build's own lines: it had
    read only the four tables and said "ok: the inputs pass every check" over a factors
    file the build then refused."""
    p = style_pack()
    folder = tmp_path / "pack"
    write_pack(p, folder)
    assert main(["check", str(folder)]) == 0
    out = capsys.readouterr().out
    assert "other inputs checked: factors.csv, benchmark_sectors.csv" in out
    assert out.rstrip().endswith("ok: the inputs pass every check")
    del p.rows("factors.csv")[10]          # as in test_factor_file_missing_a_window_period
    write_pack(p, folder)
    assert main(["check", str(folder)]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    lines = [line for line in err.splitlines()[:-1] if line.strip()]
    assert lines == ["factors.csv:12:date: the factors file misses the window's period of "
                     "2024-11-30 (missing before this row)"]
    assert lines == _bad(tmp_path, p, capsys)        # the build's own line


def test_benchmark_sector_weights_not_summing_to_one(tmp_path, capsys):
    p = style_pack()
    p.rows("benchmark_sectors.csv")[4 * 9 + 3][2] = "0.050000"   # 2024-10-31, Utilities
    lines = _bad(tmp_path, p, capsys)
    # that period's first row is data row 37: line 38
    assert lines == ["benchmark_sectors.csv:38:weight: the benchmark's sector weights for "
                     "2024-10-31 sum to 0.95, not 1 (tolerance 0.0001)"]


def test_weights_history_date_outside_the_window(tmp_path, capsys):
    p = style_pack(history=True)
    p.rows("weights_history.csv")[5][0] = DATES[2]        # 2024-03-31, before the window
    lines = _bad(tmp_path, p, capsys)
    assert lines == ["weights_history.csv:7:date: date 2024-03-31 is outside the window "
                     "(2024-07-31 to 2026-06-30)"]


def test_percent_factors_and_unknown_history_ids(tmp_path, capsys):
    p = style_pack(history=True)
    for row in p.rows("factors.csv"):
        row[1] = f"{float(row[1]) * 100:.4f}"
    p.rows("weights_history.csv")[2][1] = "NOPE1"
    lines = _bad(tmp_path, p, capsys)
    assert lines == [
        "factors.csv:2:size: values look like percentages; give decimals, e.g. 0.012 for 1.2%",
        "weights_history.csv:4:security_id: security id 'NOPE1' is not in the holdings file"]


@pytest.fixture(scope="module")
def assembled(tmp_path_factory):
    folder = tmp_path_factory.mktemp("style") / "pack"
    write_pack(style_pack(history=True), folder)
    return assemble(load_settings(folder))


def test_good_style_inputs_reach_the_figures(assembled):
    a = assembled
    st = a.style
    assert st.holdings.names == ("size", "value") and st.holdings.coef.shape == (4, 4)
    # the pipeline's factor fit of the portfolio is the regression of the pack's own
    # portfolio excess return on the window's market excess return and factors
    import statsmodels.api as sm

    win = a.results.window
    F = np.array([[float(v) for v in r[1:]] for r in
                  style_pack().rows("factors.csv")])[-24:]
    X = sm.add_constant(np.column_stack([win.market_excess, F]))
    y = a.results.portfolio_series - win.risk_free
    ref = sm.OLS(y, X).fit()               # reference: statsmodels OLS
    np.testing.assert_allclose(st.portfolio.coef[0], ref.params, rtol=1e-8)
    summary = a.results.portfolio_summary()
    json_fields = st.summary()
    assert not set(json_fields) & set(summary)
    assert json_fields["value_loading"] == pytest.approx(ref.params[3], rel=1e-8)
    # the attribution uses the weights history: equal weights, so its portfolio return is
    # the equal-weighted mean of the holdings' returns
    att = st.attribution
    assert att.weights_source == "weights history file"
    np.testing.assert_allclose(att.portfolio_total, np.nanmean(win.returns, axis=1),
                               rtol=1e-12)
    sides = dict(zip(att.sectors, att.side, strict=True))
    assert sides["Utilities"] == "benchmark only"
    assert a.context.attribution["benchmark_only"] == ["Utilities"]
    assert [s.anchor for s in a.context.sections].count("style") == 1


def test_without_style_files_nothing_changes(tmp_path):
    folder = tmp_path / "pack"
    write_pack(style_pack(factors=False, sectors=False), folder)
    a = assemble(load_settings(folder))
    assert a.style is None and a.context.style is None and a.context.attribution is None
    assert "style" not in [s.anchor for s in a.context.sections]
    assert not any(c.endswith("_loading") for c in a.results.securities.columns)


def test_a_fund_refuses_the_style_inputs(tmp_path):
    import shutil

    from reporter.errors import InputError
    from tests.conftest import REPO

    folder = tmp_path / "fund"
    shutil.copytree(REPO / "inputs" / "demo-fund", folder)
    shutil.copy(REPO / "inputs" / "demo" / "factors.csv", folder / "factors.csv")
    toml = (folder / "pack.toml").read_text(encoding="utf-8")
    (folder / "pack.toml").write_text(toml.replace(
        'risk_free = "risk_free.csv"', 'risk_free = "risk_free.csv"\nfactors = "factors.csv"', 1),
        encoding="utf-8")
    with pytest.raises(InputError) as err:
        load_settings(folder)
    assert [str(p) for p in err.value.problems] == [
        "pack.toml:inputs.factors: not used in a fund with mandates yet: give it in a "
        "single-portfolio pack"]
