"""Typed data passed between stages after validation."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from reporter.errors import Problem


@dataclass(frozen=True)
class Holdings:
    """The holdings, one row each, in file order.

    ``frame`` columns: ``security_id, name, sector, weight`` (decimal, sums to 1), plus any of
    ``market_value, asset_class, currency, country, proxy`` that the file gave.
    """

    frame: pd.DataFrame
    weight_source: str          # "weight" | "market_value"
    normalised: bool            # weights were rescaled to sum to 1

    @property
    def ids(self) -> tuple[str, ...]:
        return tuple(self.frame["security_id"])

    @property
    def weights(self) -> np.ndarray:
        return self.frame["weight"].to_numpy(dtype=float)

    @property
    def cash(self) -> np.ndarray:
        """True where ``asset_class`` is ``cash`` (any case): it earns the risk-free rate."""
        if "asset_class" not in self.frame:
            return np.zeros(len(self.frame), dtype=bool)
        return (self.frame["asset_class"].fillna("").astype(str).str.strip().str.casefold()
                == "cash").to_numpy()

    @property
    def proxies(self) -> np.ndarray:
        """Each holding's ``proxy`` (stripped; "" where none)."""
        if "proxy" not in self.frame:
            return np.full(len(self.frame), "", dtype=object)
        return self.frame["proxy"].fillna("").astype(str).str.strip().to_numpy(dtype=object)


@dataclass(frozen=True)
class DatedSeries:
    """A dated per-period series (market return or risk-free rate), sorted by date."""

    dates: np.ndarray   # datetime64[D]
    values: np.ndarray  # float64, decimals per period
    rows: np.ndarray | None = None   # each date's row in its file, as the user sees it
    # rows whose date could not be read (already reported): a gap across one is not new
    unread_rows: np.ndarray | None = None


@dataclass(frozen=True)
class ReturnPanel:
    """Holdings' returns by period: ``values`` is P x N in ``security_ids`` order, NaN if absent.

    ``period_keys`` are the sorted distinct period keys (see ``analytics.returns.period_keys``).
    """

    period_keys: np.ndarray
    security_ids: tuple[str, ...]
    values: np.ndarray
    shape: str                  # "long" | "wide": how the file was laid out
    n_rows: int                 # data rows read


@dataclass(frozen=True)
class ValidInputs:
    """Everything the analytics need, checked."""

    holdings: Holdings
    returns: ReturnPanel
    market: DatedSeries
    risk_free: DatedSeries
    warnings: list[Problem] = field(default_factory=list)
