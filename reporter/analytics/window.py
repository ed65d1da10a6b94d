"""The estimation window: market periods up to ``period_end`` and the data aligned to them
(pure; no I/O)."""

from __future__ import annotations

import numpy as np

from reporter.analytics.returns import Window, period_keys
from reporter.config import Settings
from reporter.errors import InputError, Problem
from reporter.models import DatedSeries, ValidInputs


def build_window(inputs: ValidInputs, settings: Settings, periods: int | None = None,
                 holdings: bool = True) -> Window:
    """The last ``periods`` (default ``settings.window``) market periods up to ``period_end``,
    with aligned data; ``periods=0`` takes every market period up to ``period_end``.
    ``holdings=False`` leaves out the holdings' returns (a T x 0 matrix): the market and the
    risk-free rate alone, without a copy of the returns."""
    freq = settings.frequency
    end_key = period_keys(np.array([np.datetime64(settings.period_end, "D")]), freq)[0]
    mkeys_all = period_keys(inputs.market.dates, freq)
    n = settings.window if periods is None else periods
    idx = np.flatnonzero(mkeys_all <= end_key)
    idx = idx[-n:] if n else idx
    mkeys = mkeys_all[idx]
    rf = _align(inputs.risk_free, mkeys, freq)
    panel = inputs.returns
    pos = np.searchsorted(panel.period_keys, mkeys)
    pos_c = np.minimum(pos, max(len(panel.period_keys) - 1, 0))
    present = (pos < len(panel.period_keys)) & (panel.period_keys[pos_c] == mkeys) if len(
        panel.period_keys) else np.zeros(len(mkeys), dtype=bool)
    if holdings and len(pos) and present.all() and panel.values.flags.c_contiguous and \
            np.array_equal(pos, np.arange(pos[0], pos[0] + len(pos))):
        # the window is a run of the panel's own rows: a read-only view, not a second copy
        # of the T x N returns (40 MB at 2,000 daily holdings over ten years). Only of a
        # C-ordered panel, as the copy is: the products' roundings follow the layout
        rets = panel.values[pos[0]:pos[0] + len(pos)].view()
        rets.flags.writeable = False
    else:
        rets = np.full((len(mkeys), len(panel.security_ids) if holdings else 0), np.nan)
        if holdings:
            rets[present] = panel.values[pos_c[present]]
    return Window(dates=inputs.market.dates[idx], security_ids=panel.security_ids,
                  returns=rets, market=inputs.market.values[idx], risk_free=rf)


def constant_premium(market_excess: np.ndarray, settings: Settings) -> Problem | None:
    """Every beta divides by the market premium's variance: a premium that is the same in
    every period of the window (a constant market return less a constant rate) is bad input,
    named, not a division by zero. The problem, or None. Validation asks it too, so that
    ``check`` names this before anything it makes singular (a factor, say)."""
    x = market_excess[np.isfinite(market_excess)]
    if len(x) and np.ptp(x) > 0:
        return None
    spec = settings.inputs.get("market")
    where = spec.display if spec is not None else "market proxy"
    return Problem(where, f"the market proxy's return less the risk-free rate is the same in "
                   f"all {len(x)} periods of the window, so no beta can be estimated; check "
                   "the market and risk-free files")


def _require_varying_market(market_excess: np.ndarray, settings: Settings) -> None:
    if (problem := constant_premium(market_excess, settings)) is not None:
        raise InputError([problem])


def _align(series: DatedSeries, keys: np.ndarray, freq: str) -> np.ndarray:
    skeys = period_keys(series.dates, freq)
    pos = np.searchsorted(skeys, keys)
    return series.values[pos]


def _align_optional(series: DatedSeries | None, dates: np.ndarray,
                    freq: str) -> np.ndarray | None:
    """``series`` on the periods of ``dates`` (NaN where it has none), or None."""
    if series is None:
        return None
    keys = period_keys(dates, freq)
    skeys = period_keys(series.dates, freq)
    pos = np.minimum(np.searchsorted(skeys, keys), len(skeys) - 1)
    return np.where(skeys[pos] == keys, series.values[pos], np.nan)
