"""Price and total-return index files in place of returns, and custodian number formats.

Reference data: Ken French Data Library monthly industry portfolios (``linearmodels``
bundle). Each industry's returns are compounded into an index; the pack built from the
index must give the same betas as the pack built from the returns (to 1e-10), and a month
missing from the index must cost the return on each side of it (never bridged), which
statsmodels ``OLS`` on the returns with those months removed confirms.
"""

from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from reporter.analytics.pack import analyse
from reporter.cli import main
from reporter.config import load_settings
from reporter.validate import validate_pack
from reporter.validate.cells import date_format_hint, separator_hint
from tests.conftest import DEMO, run_cli
from tests.test_pipeline_french import INDUSTRIES, write_french_pack

WINDOW = 120
GAP = "Durbl"          # this industry's index misses one month inside the window


def _index(returns: pd.Series, base: float = 100.0) -> np.ndarray:
    """Levels with a base one period before the first return: base, base(1+r1), ..."""
    return base * np.concatenate([[1.0], np.cumprod(1.0 + returns.to_numpy())])


@pytest.fixture(scope="module")
def packs(tmp_path_factory, french):
    """(returns pack, long prices pack with the market as an index, wide prices pack)."""
    base = tmp_path_factory.mktemp("french")
    folders = {k: base / k for k in ("returns", "long", "wide")}
    for f in folders.values():
        f.mkdir()
    df = write_french_pack(folders["returns"], french, WINDOW, {})
    first = (pd.Timestamp(df["date"].iloc[0]) - pd.offsets.MonthEnd(1)).strftime("%Y-%m-%d")
    dates = [first, *df["date"]]
    wide = pd.DataFrame({"date": dates} | {s: _index(df[s]) for s in INDUSTRIES})
    missing = dates[-30]                                   # inside the window
    long = wide.melt(id_vars="date", var_name="security_id", value_name="price")
    long = long[~((long["security_id"] == GAP) & (long["date"] == missing))]
    market = pd.DataFrame({"date": dates, "price": _index(df["MktRF"] + df["RF"], 250.0)})
    wide.loc[wide["date"] == missing, GAP] = np.nan
    for name in ("long", "wide"):
        folder = folders[name]
        for f in ("holdings.csv", "risk_free.csv", "market.csv"):
            (folder / f).write_bytes((folders["returns"] / f).read_bytes())
        (long if name == "long" else wide).to_csv(folder / "prices.csv", index=False,
                                                   float_format="%.17g")
        toml = (folders["returns"] / "pack.toml").read_text().replace(
            'returns = "returns.csv"', 'prices = "prices.csv"')
        if name == "long":
            market.to_csv(folder / "market_index.csv", index=False, float_format="%.17g")
            toml = toml.replace('market = "market.csv"', 'market = { path = "market_index.csv"'
                                ', values = "prices", name = "US market index" }')
        (folder / "pack.toml").write_text(toml)
    out = {}
    for name, folder in folders.items():
        settings = load_settings(folder)
        out[name] = analyse(validate_pack(settings), settings).securities.set_index(
            "security_id")
    return df, missing, out


@pytest.mark.parametrize("layout", ["long", "wide"])
def test_index_gives_the_returns_betas(packs, layout):
    _, _, res = packs
    full = [s for s in INDUSTRIES if s != GAP]
    cols = ["beta", "alpha", "beta_se_hac", "r_squared", "n_obs"]
    np.testing.assert_allclose(res[layout].loc[full, cols].to_numpy(dtype=float),
                               res["returns"].loc[full, cols].to_numpy(dtype=float),
                               rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize("layout", ["long", "wide"])
def test_a_missing_price_costs_both_returns(packs, layout):
    df, missing, res = packs
    win = df.tail(WINDOW).reset_index(drop=True)
    gone = int(np.flatnonzero(win["date"] == missing)[0])
    y = (win[GAP] - win["RF"]).to_numpy()
    keep = np.ones(WINDOW, dtype=bool)
    keep[[gone, gone + 1]] = False            # the month of the gap and the month after it
    ref = sm.OLS(y[keep], sm.add_constant(win["MktRF"].to_numpy()[keep])).fit()  # statsmodels
    row = res[layout].loc[GAP]
    assert row["n_obs"] == WINDOW - 2
    np.testing.assert_allclose([row["beta"], row["alpha"]], [ref.params[1], ref.params[0]],
                               rtol=1e-9)


def test_custodian_numbers(tmp_path, capsys):
    """Thousands separators and accounting negatives, as a custodian export writes them."""
    from tests.data.bad_pack import write_pack
    from tests.data.make_bad_cases import make_case

    pack = make_case("thousands_without_setting")
    pack.toml["inputs"]["thousands"] = '","'
    rows = pack.rows("returns.csv")
    rows[5][2] = '"(0.0123)"'                                      # line 7
    rows[6][2] = "(1.5e-2)"
    write_pack(pack, tmp_path)
    assert main(["check", str(tmp_path)]) == 0
    settings = load_settings(tmp_path)
    inputs = validate_pack(settings)
    w = inputs.holdings.frame.set_index("security_id")["weight"]
    assert w.tolist() == pytest.approx([0.4, 0.3, 0.2, 0.1], rel=1e-15)
    panel = pd.DataFrame(inputs.returns.values, columns=inputs.returns.security_ids)
    assert panel.iloc[1][rows[5][1]] == -0.0123 and panel.iloc[1][rows[6][1]] == -0.015


def test_a_thousands_separator_that_does_not_group_in_threes_is_refused(tmp_path, capsys):
    """With thousands = ",", a separator is dropped only where it groups the whole part in
    threes. "1155087,64" (a decimal comma) had become 115,508,764, a weight 100 x too large,
    and "0,012" a return of 12, with no message; each is now refused at its cell."""
    from tests.data.bad_pack import write_pack
    from tests.data.make_bad_cases import make_case

    pack = make_case("thousands_without_setting")
    pack.toml["inputs"]["thousands"] = '","'
    holdings = pack.rows("holdings.csv")
    holdings[0][-1] = '"4000000,25"'                               # line 2: a decimal comma
    holdings[1][-1] = '"3,0,0,0000.00"'                            # line 3: groups not threes
    returns = pack.rows("returns.csv")
    returns[5][2] = '"0,012"'                                      # line 7: a leading 0 group
    write_pack(pack, tmp_path)
    assert main(["check", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    why = '; the thousands separator "," must group the digits before the decimal mark "." ' \
          'in threes (1,234,567.8)'
    for line in ("holdings.csv:2:market_value: not a number: '4000000,25'",
                 "holdings.csv:3:market_value: not a number: '3,0,0,0000.00'",
                 "returns.csv:7:return: not a number: '0,012'"):
        assert line + why in err.splitlines(), err
    # grouped in threes, in brackets or with a sign and an exponent: still read
    holdings[0][-1], holdings[1][-1] = '"4,000,000.25"', '"+3,000,000e0"'
    returns[5][2] = '"(0.012)"'
    write_pack(pack, tmp_path)
    assert main(["check", str(tmp_path)]) == 0, capsys.readouterr().err


@pytest.mark.parametrize(("text", "decimal", "thousands", "hint"), [
    ("6,931,283.20", ".", None, '; it has thousands separators: set thousands = ","'),
    ("6.931.283,20", ".", None, '; it has thousands separators: set thousands = "." and '
                                'decimal = ","'),
    ("(1,234.50)", ".", None, '; it has thousands separators: set thousands = ","'),
    ("1 234", ".", None, '; it has thousands separators: set thousands = " "'),
    ("12.5%", ".", None, ""),
    ("#N/A", ".", None, ""),
    ("０.００１", ".", None, "; its digits are not the digits 0-9 (full-width or another "
                         "script's)"),           # had been told to set thousands = "."
    ("٠.٠٠١", ".", None, "; its digits are not the digits 0-9 (full-width or another "
                       "script's)"),
    ("1155087,64", ".", ",", '; the thousands separator "," must group the digits before the '
                             'decimal mark "." in threes (1,234,567.8)'),
    ("1155087.64", ",", ".", '; the thousands separator "." must group the digits before the '
                             'decimal mark "," in threes (1.234.567,8)'),
])
def test_separator_hint(text, decimal, thousands, hint):
    assert separator_hint(text, decimal, thousands) == hint


def test_date_hint():
    assert date_format_hint("31/08/2024", "%Y-%m-%d") == \
        '; it reads as day-first: set date_format = "%d/%m/%Y"'
    assert date_format_hint("08/31/2024", "%Y-%m-%d") == \
        '; it reads as month-first: set date_format = "%m/%d/%Y"'
    assert date_format_hint("2024-08-31", "%d/%m/%Y") == \
        '; it reads as year-first: set date_format = "%Y-%m-%d"'
    assert date_format_hint("last month", "%Y-%m-%d") == ""


@pytest.mark.parametrize(("change", "expected"), [
    (lambda t: t.replace('returns = "returns.csv"',
                         'returns = "returns.csv"\nprices = "returns.csv"'),
     "pack.toml:inputs.prices: give returns or prices, not both"),
    (lambda t: t.replace('returns = "returns.csv"\n', ""),
     "pack.toml:inputs.returns: required key is missing (or give prices, a price or "
     "total-return index file)"),
    (lambda t: t.replace('holdings = "holdings.csv"',
                         'holdings = { path = "holdings.csv", values = "prices" }'),
     "pack.toml:inputs.holdings.values: only the returns, market proxy and benchmark files may "
     "be given as prices"),
    (lambda t: t.replace('holdings = "holdings.csv"',
                         'holdings = { path = "holdings.csv", name = "Custodian" }'),
     "pack.toml:inputs.holdings.name: a name is shown only for the market proxy, a benchmark, "
     "the portfolio returns and the risk-free rate"),
    (lambda t: t.replace('[inputs]', '[inputs]\nthousands = "."\ndecimal = "."'),
     "pack.toml:inputs.holdings: the thousands separator and the decimal mark are the same "
     "character"),
])
def test_settings_problems(tmp_path, capsys, change, expected):
    from tests.data.bad_pack import base_pack, write_pack

    write_pack(base_pack(), tmp_path)
    toml = tmp_path / "pack.toml"
    toml.write_text(change(toml.read_text()))
    assert main(["check", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert err.splitlines()[0] == expected
    assert "Traceback" not in err


def test_a_price_more_than_101_times_the_one_before_is_refused(tmp_path, capsys):
    """Returns made from prices have the bound of returns given as such (+10,000% in one
    period): a price 200 times the period before's is a data error (a lost decimal point, a
    missed split), named at the later price's row, in the holdings' prices and in a market
    index alike."""
    pack = tmp_path / "pack"
    shutil.copytree(DEMO, pack)
    r = pd.read_csv(pack / "returns.csv", dtype={"security_id": str})
    r = r.sort_values(["security_id", "date"], ignore_index=True)
    r["price"] = r.groupby("security_id")["return"].transform(lambda s: 10 * (1 + s).cumprod())
    jump = r.index[r["security_id"] == "TVX001"][40]
    later = (r["security_id"] == "TVX001") & (r.index >= jump)
    r.loc[later, "price"] *= 200
    r[["date", "security_id", "price"]].to_csv(pack / "prices.csv", index=False,
                                               float_format="%.17g")
    m = pd.read_csv(pack / "market.csv")
    m["price"] = 1000 * (1 + m["return"]).cumprod()
    m.loc[70:, "price"] *= 150
    m[["date", "price"]].to_csv(pack / "market_index.csv", index=False, float_format="%.17g")
    toml = (pack / "pack.toml").read_text().replace('returns = "returns.csv"',
                                                    'prices = "prices.csv"')
    (pack / "pack.toml").write_text(toml.replace(
        'market = "market.csv"', 'market = { path = "market_index.csv", values = "prices" }'))
    code, _, err = run_cli(capsys, "check", pack)
    assert code == 2 and "Traceback" not in err
    stock = 200 * (1 + r.loc[jump, "return"])
    index = 150 * (1 + m.loc[70, "return"])
    lines = err.splitlines()
    assert (f"prices.csv:{jump + 2}:price: the price is {stock:,.4g} times the period before's "
            f"(a return of {stock - 1:g}, above +10,000% in one period); check the data"
            ) in lines, lines
    assert (f"market_index.csv:{70 + 2}:price: the price is {index:,.4g} times the period "
            f"before's (a return of {index - 1:g}, above +10,000% in one period); check the "
            "data") in lines, lines
