"""The number formats and unit notes of ``results/pack.xlsx``, from column names, and the
:class:`Sheet` a table is written as (see :mod:`reporter.workbook`)."""

from __future__ import annotations

import re
from dataclasses import dataclass

import pandas as pd

PERCENT = "0.00%"
DECIMAL2 = "0.00"
INTEGER = "0"
DATE = "yyyy-mm-dd"
PERIOD_WORD = {12: "month", 52: "week", 252: "day", 4: "quarter", 1: "year"}
_XML_ILLEGAL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\ufffe\uffff]")
_XML_ESCAPE_LIKE = re.compile(r"_(x[0-9A-Fa-f]{4}_)")
_ANN = re.compile(r"_ann(?![a-z])")
MIN_WIDTH, MAX_WIDTH = 8, 60
# results/period_returns.csv: each row's return over its own period (cumulative or annualised,
# as its ``basis`` says)
PERIOD_RETURNS = ("portfolio", "market", "difference", "benchmark", "benchmark_difference")


@dataclass(frozen=True)
class Sheet:
    """One worksheet: ``table``'s columns and rows. ``key`` names a column whose text decides
    the number format of the columns in ``keyed`` row by row (the portfolio's ``value`` by its
    key, a limit's ``value`` and ``threshold`` by the limit)."""

    name: str
    table: pd.DataFrame
    key: str | None = None
    keyed: tuple[str, ...] = ()
    returns: tuple[str, ...] = ()       # return columns whose period is the row's (see basis)


# --- formats and units, from column names ---------------------------------------------------

def _base(name: str) -> str:
    """The name without its ``_ann`` mark; of a dotted key its last part, except that every
    figure under ``beta.`` (the beta change in changes.json) is a beta."""
    b = _ANN.sub("", name.lower())
    return "beta" if b.startswith("beta.") else b.rsplit(".", 1)[-1]


def is_ratio(name: str) -> bool:
    """Betas, t-statistics, z, F, correlations, shrinkage and ratios: ``0.00``."""
    b = _base(name)
    return (b.endswith(("_t", "_z", "_f")) or b in ("z", "critical", "target", "lo_scale")
            or any(w in b for w in ("beta", "ratio", "sharpe", "sortino", "r_squared",
                                    "effective_n", "correlation", "shrinkage")))


def is_weight(name: str) -> bool:
    """Weights, shares and margins (decimals of a whole, not per period)."""
    b = _base(name)
    return any(w in b for w in ("weight", "share", "range_low", "range_high", "margin"))


def is_return(name: str) -> bool:
    """Per-period decimal returns, alphas, volatilities and their kin (annualised with _ann)."""
    b = _base(name)
    return b in ("m2", "m2_excess", "mar", "change") or any(w in b for w in (
        "return", "_ret", "ret_", "alpha", "vol", "tracking_error", "te_contribution",
        "sml_residual", "sml_expected", "mean_excess", "risk_free", "premium", "treynor",
        "residual_before", "residual_now", "residual_change", "deviation", "drawdown",
        "intercept", "slope"))


def is_count(name: str) -> bool:
    b = _base(name)
    return b.startswith("n_") or b in ("hac_lags", "periods_per_year", "rolling_window")


def number_format(name: str) -> str | None:
    """The display format of a number in column (or under key) ``name``; None: General.
    Ratios are tested first (``alpha_t`` is a t-statistic, ``beta_ci_low`` a beta)."""
    b = _base(name)
    if b.endswith("p_value"):
        return "0.0000"
    if is_ratio(name):
        return DECIMAL2
    if is_weight(name) or is_return(name):
        return PERCENT
    if is_count(name):
        return INTEGER
    return None


def unit_note(name: str, period: str) -> str:
    """``annualised``, ``per period (<period>)`` or empty, from the column name: returns,
    alphas, volatilities and the Sharpe, information and appraisal ratios are per period
    unless ``_ann``; weights, betas and t-statistics have no period."""
    b = _base(name)
    periodic = any(w in b for w in ("sharpe", "sortino", "information_ratio",
                                    "appraisal_ratio")) or (
        is_return(name) and not is_weight(name) and not is_ratio(name) and "differs" not in b)
    if not periodic:
        return ""
    return "annualised" if _ANN.search(name.lower()) else f"per period ({period})"


def sheet_text(text: str) -> str:
    """``text`` as a worksheet can hold it: characters XML 1.0 forbids as ``_xHHHH_``, and a
    literal ``_xHHHH_`` protected as ``_x005F_xHHHH_`` (ECMA-376 Part 1, ST_Xstring)."""
    text = _XML_ESCAPE_LIKE.sub(r"_x005F_\1", text)
    return _XML_ILLEGAL.sub(lambda m: f"_x{ord(m.group()):04X}_", text)
