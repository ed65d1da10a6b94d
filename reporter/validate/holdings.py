"""The holdings file: ids, names, sectors and weights (from weight or market_value)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from reporter.config import Settings
from reporter.errors import Collector, place
from reporter.models import Holdings
from reporter.readers import RawTable
from reporter.validate.cells import as_float, as_text
from reporter.validate.common import _Capped, _require_columns, delimiter_hint
from reporter.validate.text import case_clash_message, case_clashes

HOLDINGS_REQUIRED = ("security_id", "name", "sector")
HOLDINGS_OPTIONAL = ("asset_class", "currency", "country", "proxy")
PROXY_SERIES = ("market", "benchmark")   # a proxy may also name another holding's id
# market values summing past this get a warning: below it every whole number is a float64
EXACT_UNITS = 2 ** 53
# weights whose sum is within this of zero are not rescaled (checks.normalise_weights): the
# division would blow up rounding error (a sum of -1.4e-16 from +0.6, -0.6, ...) into weights
# of 1e16. Far above double rounding of a few thousand weights of order 1, far below any
# sum a real weights file meant to rescale (a truncated file summing to 0.95, say).
WEIGHT_SUM_FLOOR = 1e-6


def validate_holdings(raw: RawTable, settings: Settings, coll: Collector) -> Holdings | None:
    """Check the holdings file and derive weights (from ``weight`` or ``market_value``)."""
    names = raw.table.column_names
    has_w, has_mv = "weight" in names, "market_value" in names
    if not (has_w or has_mv):
        coll.error(place(raw.name, 1, "weight"),
                   "required column is missing: give weight or market_value"
                   + (delimiter_hint(raw, ("weight",))
                      or delimiter_hint(raw, ("market_value",))))
    optional = HOLDINGS_OPTIONAL + ("weight", "market_value")
    if not _require_columns(raw, HOLDINGS_REQUIRED, optional, coll) or not (has_w or has_mv):
        return None
    if raw.table.num_rows == 0:
        coll.error(raw.name, "the file has no holdings")
        return None
    spec = settings.inputs["holdings"]
    ids = as_text(raw, "security_id", coll, allow_empty=False)
    frame = pd.DataFrame({
        "security_id": ids,
        "name": as_text(raw, "name", coll, allow_empty=False),
        "sector": as_text(raw, "sector", coll, allow_empty=False),
    })
    seen: dict[str, int] = {}
    for i, sid in enumerate(ids):
        if sid is None or sid == "":
            continue
        if sid in seen:
            coll.error(place(raw.name, raw.row_number(i), "security_id"),
                       f"duplicate security id {sid!r} (first at row {raw.row_number(seen[sid])})")
        else:
            seen[sid] = i
    distinct = list(seen)
    for first, later in case_clashes(distinct):
        a, b = distinct[first], distinct[later]
        coll.error(place(raw.name, raw.row_number(seen[b]), "security_id"),
                   case_clash_message(b, a, raw.row_number(seen[a])))
    column = "weight" if has_w else "market_value"
    if has_w and has_mv:
        coll.warn(place(raw.name, 1, "market_value"), "both weight and market_value given; "
                  "weights are taken from the weight column")
    raw_w = as_float(raw, column, coll, spec.decimal, allow_empty=False,
                     thousands=spec.thousands)
    if has_mv:
        frame["market_value"] = as_float(raw, "market_value", coll, spec.decimal,
                                         thousands=spec.thousands,
                                         allow_empty=False) if has_w else raw_w
    neg = np.flatnonzero(raw_w < 0)
    if len(neg) and not settings.allow_short:
        capped = _Capped(coll, f"negative values in column {column}")
        for i in neg:
            capped.add(place(raw.name, raw.row_number(int(i)), column),
                       f"negative {column} {raw_w[i]:g}: short positions are not allowed "
                       "(set checks.allow_short = true)")
        capped.close()
    if has_mv:
        _check_market_values(raw, frame["market_value"].to_numpy(dtype=float),
                             has_w and not settings.allow_short, coll)
    for opt in HOLDINGS_OPTIONAL:
        if opt in names:
            frame[opt] = as_text(raw, opt, coll, allow_empty=True)
    if "proxy" in frame:
        _check_proxies(raw, frame, seen, "benchmark" in settings.inputs, coll)

    normalised = False
    if not np.isnan(raw_w).any():
        total = float(raw_w.sum())
        if column == "market_value":
            if total <= 0:
                coll.error(place(raw.name, None, column), "market values sum to zero or less")
                return None
            if float(np.abs(raw_w).sum()) > EXACT_UNITS:
                coll.warn(place(raw.name, None, column), f"market values sum to {total:,.0f}, "
                          f"beyond {EXACT_UNITS:,}: figures are held as 64-bit floats, exact "
                          "to the unit only below that, so sums and the pack's money figures "
                          "may be off in their last units (about 1 in 10^16)")
            weights = raw_w / total
        else:
            weights = raw_w
            if abs(total - 1.0) > settings.weight_tolerance:
                msg = (f"weights sum to {total:.6g}, not 1 (tolerance "
                       f"{settings.weight_tolerance:g})")
                if settings.normalise_weights and abs(total) <= WEIGHT_SUM_FLOOR:
                    # long and short weights that cancel: dividing by a sum of ~0 would make
                    # every weight astronomically large (or infinite), not "rescale" them
                    coll.error(place(raw.name, None, column), f"weights sum to {total:.6g}, "
                               "which is zero to rounding, so they cannot be rescaled to sum "
                               "to 1; give weights that sum to 1")
                elif settings.normalise_weights:
                    coll.warn(place(raw.name, None, column), msg + "; rescaled to sum to 1")
                    weights = raw_w / total
                    normalised = True
                else:
                    coll.error(place(raw.name, None, column), msg + "; fix the file or set "
                               "checks.normalise_weights = true")
        frame["weight"] = weights
    else:
        frame["weight"] = raw_w
    frame = frame[["security_id", "name", "sector", "weight"]
                  + [c for c in frame.columns if c not in ("security_id", "name", "sector",
                                                           "weight")]]
    holdings = Holdings(frame=frame, weight_source=column, normalised=normalised)
    if holdings.cash.all():
        # cash earns the risk-free rate: no excess return, no beta, nothing for the pack's
        # regressions and ratios to measure (they divided by a variance of zero)
        coll.error(place(raw.name, None, "asset_class"), "every holding is cash, which earns "
                   "the risk-free rate: the pack has no market exposure to measure; a pack "
                   "needs at least one holding that is not cash")
    return holdings



def _check_market_values(raw: RawTable, values: np.ndarray, negatives: bool,
                         coll: Collector) -> None:
    """A market value of zero is an error (the holding is not held); so is a negative one
    when ``negatives`` (when market values give the weights, the weight check reports it)."""
    bad = np.flatnonzero((values == 0) | ((values < 0) & negatives))
    capped = _Capped(coll, "market values of zero or less")
    for i in bad:
        capped.add(place(raw.name, raw.row_number(int(i)), "market_value"),
                   f"market value {values[i]:g} is not positive: give the holding's value "
                   "in the pack's currency, or leave the holding out")
    capped.close()


def _check_proxies(raw: RawTable, frame: pd.DataFrame, seen: dict[str, int],
                   has_benchmark: bool, coll: Collector) -> None:
    """Each ``proxy`` is empty, ``market``, ``benchmark`` (when the pack has one) or the id of
    another holding in this file."""
    for i, value in enumerate(frame["proxy"]):
        text = value.strip() if isinstance(value, str) else ""
        if not text:
            continue
        word = text.casefold()
        where = place(raw.name, raw.row_number(i), "proxy")
        if word == "benchmark" and not has_benchmark:
            coll.error(where, "proxy 'benchmark' but the pack has no [inputs] benchmark")
        elif word not in PROXY_SERIES and text not in seen:
            coll.error(where, f"proxy {text!r} is not a security id in this file, nor "
                       "'market' or 'benchmark'")
        elif text == frame["security_id"].iat[i]:
            coll.error(where, f"holding {text!r} names itself as its proxy")
