"""Holdings with no return history of their own: cash, proxies and exclusions (pure; no I/O).

A holding whose ``asset_class`` is ``cash`` (in any case) earns the risk-free rate in every
period, whatever the returns file says: its excess return is zero, so its beta and its
specific risk are zero (the risk-free asset of Tobin 1958 and Sharpe 1964). It counts at its
weight in every portfolio figure (returns, beta, volatility, contributions, limits) and is not
a point on the security market line.

A holding with no return in the returns file may name a ``proxy``: another holding's id,
``market`` (the market proxy) or ``benchmark`` (the benchmark series). The proxy's returns
stand in for its own, and the pack flags it. A holding with neither is excluded from every
return figure: the portfolio's return is spread over the others
(:func:`reporter.analytics.returns.portfolio_returns`), and the pack says what weight and how
many holdings that is.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
import pandas as pd

from reporter.analytics.market_model import MarketModelFits
from reporter.analytics.returns import period_keys
from reporter.config import Settings
from reporter.models import DatedSeries, ReturnPanel, ValidInputs

MARKET, BENCHMARK = "market", "benchmark"
CASH_STATUS = "cash: earns the risk-free rate"
EXCLUDED_STATUS = "no return history: excluded"
PROXY_STATUS = "proxy: "        # followed by what stands in


@dataclass(frozen=True)
class Coverage:
    """Which holdings have no return history of their own, and what was done about each.

    Arrays are per holding, in the holdings' order. ``proxy`` holds the stand-in used
    (a security id, ``market`` or ``benchmark``), ``""`` where none was used.
    """

    weights: np.ndarray
    cash: np.ndarray          # bool: earns the risk-free rate
    proxied: np.ndarray       # bool: its proxy's returns stand in for its own
    excluded: np.ndarray      # bool: no returns and no usable proxy; outside return figures
    proxy: tuple[str, ...]

    @property
    def stand_in(self) -> np.ndarray:
        """Holdings whose returns are not their own (cash and proxied)."""
        return self.cash | self.proxied

    def summary(self) -> dict:
        """Counts and weights (decimals) of cash, proxied and excluded holdings."""
        out = {}
        for tag, mask in (("cash", self.cash), ("proxied", self.proxied),
                          ("excluded", self.excluded)):
            out[f"n_{tag}"] = int(mask.sum())
            out[f"{tag}_weight"] = float(self.weights[mask].sum())
        return out


def _on_keys(series: DatedSeries | None, keys: np.ndarray, freq: str) -> np.ndarray:
    """``series`` on the period ``keys`` (NaN where it has no value, or when None)."""
    out = np.full(len(keys), np.nan)
    if series is None or not len(series.dates):
        return out
    skeys = period_keys(series.dates, freq)
    pos = np.minimum(np.searchsorted(skeys, keys), len(skeys) - 1)
    hit = skeys[pos] == keys
    out[hit] = series.values[pos[hit]]
    return out


def cover_holdings(inputs: ValidInputs, settings: Settings,
                   benchmark: DatedSeries | None = None) -> tuple[ValidInputs, Coverage]:
    """The inputs with cash holdings' returns set to the risk-free rate and proxies' returns
    standing in for holdings with none, and a :class:`Coverage` saying which is which.

    The returns panel is widened to every period of the market proxy, so that cash and a
    market or benchmark proxy have a return in every period the window may take. A proxy is
    used only for a holding with no return at all; a proxy that itself has none leaves the
    holding excluded. Unchanged inputs are returned when no holding needs either."""
    frame = inputs.holdings.frame
    weights = inputs.holdings.weights
    panel = inputs.returns
    n = len(frame)
    cash = inputs.holdings.cash
    has_own = np.isfinite(panel.values).any(axis=0) if panel.values.size else np.zeros(n, bool)
    proxy = inputs.holdings.proxies
    wants = ~cash & ~has_own & (proxy != "")
    if not (cash.any() or wants.any()):
        none = np.zeros(n, dtype=bool)
        return inputs, Coverage(weights, none, none, ~has_own, ("",) * n)
    freq = settings.frequency
    keys = np.union1d(panel.period_keys, period_keys(inputs.market.dates, freq))
    values = np.full((len(keys), n), np.nan)
    values[np.searchsorted(keys, panel.period_keys)] = panel.values
    values[:, cash] = _on_keys(inputs.risk_free, keys, freq)[:, None]
    lowered = np.char.lower(proxy.astype(str))
    for tag, series in ((MARKET, inputs.market), (BENCHMARK, benchmark)):
        hit = wants & (lowered == tag)
        values[:, hit] = _on_keys(series, keys, freq)[:, None]
    by_id = wants & ~np.isin(lowered, (MARKET, BENCHMARK))
    source = pd.Index(frame["security_id"]).get_indexer(proxy[by_id])
    ok_src = source >= 0
    targets = np.flatnonzero(by_id)[ok_src]
    values[:, targets] = values[:, source[ok_src]]
    proxied = wants & np.isfinite(values).any(axis=0)
    excluded = ~cash & ~has_own & ~proxied
    used = tuple(str(p) if k else "" for p, k in zip(proxy, proxied, strict=True))
    widened = ReturnPanel(period_keys=keys, security_ids=panel.security_ids, values=values,
                          shape=panel.shape, n_rows=panel.n_rows)
    return (dataclasses.replace(inputs, returns=widened),
            Coverage(weights, cash, proxied, excluded, used))


def own_fits(fits: MarketModelFits, coverage: Coverage) -> MarketModelFits:
    """The holdings' fits with cash and proxied holdings marked as not fitted on their own:
    they stay out of the security market line and its tests, while their betas (zero for
    cash, the proxy's otherwise) still count in the portfolio's weighted beta."""
    return dataclasses.replace(fits, fitted=fits.fitted & ~coverage.stand_in)


def fit_status(ok: np.ndarray, coverage: Coverage, min_obs: int) -> np.ndarray:
    """Each holding's status in ``securities.csv``: ``fitted``, ``not fitted: fewer than N
    periods``, :data:`CASH_STATUS`, ``proxy: <stand-in>`` or :data:`EXCLUDED_STATUS`."""
    status = np.where(ok, "fitted", f"not fitted: fewer than {min_obs} periods").astype(object)
    status[coverage.cash] = CASH_STATUS
    status[coverage.excluded] = EXCLUDED_STATUS
    for k in np.flatnonzero(coverage.proxied):     # the few proxied holdings only
        status[k] = PROXY_STATUS + coverage.proxy[k]
    return status
