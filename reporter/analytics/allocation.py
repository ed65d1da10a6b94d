"""Where the money is: the portfolio's value and weight by asset class, currency and country
(pure; no I/O)."""

from __future__ import annotations

import numpy as np
import pandas as pd

ALLOCATION_DIMENSIONS = {"asset_class": "Asset class", "currency": "Currency",
                         "country": "Country"}
NOT_GIVEN = "(not given)"
ALLOCATION_COLUMNS = ["dimension", "group", "weight", "value", "n_holdings"]


def allocation(securities: pd.DataFrame) -> pd.DataFrame:
    """One row per group of each dimension the holdings give (``asset_class``, ``currency``,
    ``country``): its weight (the net sum of its holdings' weights, a decimal), its value
    (the sum of their market values in the pack's currency; NaN without market values) and
    its number of holdings. Groups are matched as written (an empty cell is
    :data:`NOT_GIVEN`); within a dimension, largest weight first, then by name. Columns:
    :data:`ALLOCATION_COLUMNS`."""
    frames = []
    has_value = "market_value" in securities
    for dim in ALLOCATION_DIMENSIONS:
        if dim not in securities:
            continue
        group = securities[dim].fillna("").astype(str).str.strip().replace("", NOT_GIVEN)
        table = pd.DataFrame({
            "group": group.to_numpy(),
            "weight": securities["weight"].to_numpy(dtype=float),
            "value": (securities["market_value"].to_numpy(dtype=float) if has_value
                      else np.full(len(securities), np.nan)),
        }).groupby("group", sort=True).agg(weight=("weight", "sum"),
                                           value=("value", "sum" if has_value else "first"),
                                           n_holdings=("weight", "size")).reset_index()
        table = table.sort_values(["weight", "group"], ascending=[False, True], kind="stable")
        frames.append(table.assign(dimension=dim))
    if not frames:
        return pd.DataFrame(columns=ALLOCATION_COLUMNS)
    return pd.concat(frames, ignore_index=True)[ALLOCATION_COLUMNS]
