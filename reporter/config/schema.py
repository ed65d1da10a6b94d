"""The schema of ``pack.toml``: one strict pydantic model per table. An unknown key or a
wrong type is an error that names its key (see :mod:`reporter.config.problems`)."""

from __future__ import annotations

import datetime as dt
from typing import Annotated, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field

from reporter.stress_config import Shock, StressSection

INPUT_ROLES = ("holdings", "returns", "market", "risk_free")
OPTIONAL_ROLES = ("benchmark", "portfolio_returns", "cash_flows",   # read only when named
                  "factors", "benchmark_sectors", "weights_history")   # see factor_inputs



class _Strict(BaseModel):
    # allow_inf_nan=False: nan and inf (which TOML allows) are refused by every float key
    model_config = ConfigDict(extra="forbid", frozen=True, strict=True, allow_inf_nan=False)


class PackSection(_Strict):
    """``[pack]``: what the cover shows and the period covered."""

    title: Annotated[str, Field(min_length=1, max_length=200)]
    organisation: Annotated[str, Field(min_length=1, max_length=200)]
    period_end: dt.date
    frequency: Literal["monthly", "weekly", "daily"] = "monthly"
    currency: Annotated[str, Field(pattern=r"^[A-Z]{3}$")] = "GBP"
    # a short identifier for the scheme, used to name archived packs; default: the folder name
    name: Annotated[str, Field(pattern=r"^[a-z0-9][a-z0-9-]{0,63}$")] | None = None


class InputFile(_Strict):
    """One data file, with optional reading options (CSV delimiter, decimal comma, sheet...)."""

    path: Annotated[str, Field(min_length=1)]
    sheet: str | None = None
    delimiter: Annotated[str, Field(min_length=1, max_length=1)] | None = None
    decimal: Literal[".", ","] | None = None
    date_format: Annotated[str, Field(min_length=2)] | None = None
    thousands: Literal[",", ".", " ", "'"] | None = None
    name: Annotated[str, Field(min_length=1, max_length=120)] | None = None  # shown in the pack
    values: Literal["returns", "prices"] | None = None   # a price or total-return index file


class InputsSection(_Strict):
    """``[inputs]``: the data files, relative to ``pack.toml``.

    Each may be a plain path or an inline table ``{ path = ..., delimiter = ";" ... }``.
    ``delimiter``, ``decimal``, ``date_format`` and ``thousands`` given here apply to every
    file. ``prices`` (a price or total-return index file) may stand in for ``returns``.
    """

    holdings: str | InputFile | None = None   # required, except when every mandate names its own
    returns: str | InputFile | None = None
    prices: str | InputFile | None = None
    market: str | InputFile
    risk_free: str | InputFile
    benchmark: str | InputFile | None = None   # optional `date, return` series
    portfolio_returns: str | InputFile | None = None   # optional: the portfolio's own returns
    factors: str | InputFile | None = None             # optional: see reporter.factor_inputs
    benchmark_sectors: str | InputFile | None = None
    weights_history: str | InputFile | None = None
    cash_flows: str | InputFile | None = None   # optional `date, amount` (+ in); see flows.py
    delimiter: Annotated[str, Field(min_length=1, max_length=1)] = ","
    decimal: Literal[".", ","] = "."
    date_format: Annotated[str, Field(min_length=2)] = "%Y-%m-%d"
    thousands: Literal[",", ".", " ", "'"] | None = None


class AnalysisSection(_Strict):
    """``[analysis]``: the estimation window and the minimum history for a fit."""

    window: Annotated[int, Field(ge=3, le=100_000)] = 60
    min_obs: Annotated[int, Field(ge=3, le=100_000)] = 24
    confidence: Annotated[float, Field(gt=0.5, lt=1.0)] = 0.95
    errors: Literal["hac", "ols"] = "hac"
    hac_lags: Annotated[int, Field(ge=0, le=1000)] | None = None
    blume_intercept: float = 0.33
    blume_slope: float = 0.67
    dimson_lags: Annotated[int, Field(ge=1, le=10)] = 1
    rolling_window: Annotated[int, Field(ge=6, le=100_000)] | None = None
    # minimum acceptable return for downside deviation and Sortino: "risk_free" (each
    # period's rate) or a fixed annual decimal rate
    mar: Annotated[Annotated[float, Field(ge=-1.0, le=1.0)] | None,
                   BeforeValidator(lambda v: None if v == "risk_free" else v)] = None
    # covariance behind risk contributions (reporter/analytics/covariance.py): shrinkage toward
    # constant correlation (default), toward the identity ("ledoit_wolf"; "auto" as before)
    covariance: Literal["constant_correlation", "auto", "ledoit_wolf",
                        "sample"] = "constant_correlation"
    vasicek_prior: Literal["holdings", "market"] = "holdings"   # prior mean: theirs, or 1
    random_subsets: Annotated[int, Field(ge=10, le=10_000)] = 200
    seed: Annotated[int, Field(ge=0)] = 20261130


class ChecksSection(_Strict):
    """``[checks]``: how strict validation is."""

    weight_tolerance: Annotated[float, Field(ge=0.0, le=0.1)] = 1e-4
    normalise_weights: bool = False
    allow_short: bool = False
    stale_zero_run: Annotated[int, Field(ge=2)] | None = None


class RenderSection(_Strict):
    """``[render]``: optional folder of user templates that override the packaged ones."""

    templates: str | None = None


Fraction = Annotated[float, Field(gt=0.0, le=1.0)]


OTHER_SECTORS = "*"     # the key of ``max_sector_weight`` for every sector not named


class LimitsSection(_Strict):
    """``[limits]``: the investment policy's limits, each optional (see README, Limits).

    ``max_sector_weight`` is one maximum for every sector, or a table of per-sector maxima
    in which the key ``"*"`` covers every sector not named. ``watch_margin`` is a fraction
    of each limit (of the band's width for a two-sided band or range): a value within that
    distance inside the limit is on watch.
    """

    beta_min: float | None = None
    beta_max: float | None = None
    max_holding_weight: Fraction | None = None
    max_sector_weight: Fraction | dict[str, Fraction] | None = None
    min_effective_n: Annotated[float, Field(gt=0.0)] | None = None
    min_holdings: Annotated[int, Field(ge=1)] | None = None
    max_tracking_error_ann: Annotated[float, Field(gt=0.0, le=5.0)] | None = None
    max_idiosyncratic_share: Fraction | None = None
    max_var_95_ann: Annotated[float, Field(gt=0.0, le=5.0)] | None = None   # historical VaR
    max_stress_loss: Fraction | None = None       # loss from beta x stress_shock
    stress_shock: Shock = -0.20
    watch_margin: Annotated[float, Field(ge=0.0, lt=1.0)] = 0.10
    # asset class -> [low, high] share of the portfolio (decimals); see limits.py
    asset_class_ranges: dict[str, Annotated[list[Annotated[float, Field(ge=0.0, le=1.0)]],
                                            Field(min_length=2, max_length=2)]] | None = None


class CompareSection(_Strict):
    """``[compare]``: the earlier pack to compare with: a build folder, or
    ``"archive:ARCHIVE_DIR"`` for the latest signed pack before this period."""

    previous: Annotated[str, Field(min_length=1)]


class MandateSection(_Strict):
    """One ``[[mandates]]`` entry: a part of the fund run against its own benchmark.

    ``holdings`` and ``benchmark`` are files relative to ``pack.toml``; without ``holdings``
    the mandate's rows are those of ``[inputs] holdings`` whose ``mandate`` column holds
    ``name``; without ``benchmark`` the mandate is measured against ``[inputs] market``.
    ``strategic_weight`` and ``range`` (low, high) are decimals of the whole fund; ``weight``
    is the mandate's current weight, needed only when the holdings give no market values.
    """

    name: Annotated[str, Field(min_length=1, max_length=80)]
    manager: Annotated[str, Field(min_length=1, max_length=120)] | None = None
    holdings: str | InputFile | None = None
    benchmark: str | InputFile | None = None
    strategic_weight: Annotated[float, Field(ge=0.0, le=1.0)]
    range: Annotated[list[Annotated[float, Field(ge=0.0, le=1.0)]],
                     Field(min_length=2, max_length=2)] | None = None
    weight: Annotated[float, Field(ge=0.0, le=1.0)] | None = None
    limits: LimitsSection | None = None
    portfolio_returns: str | InputFile | None = None   # the manager's own returns


class FundSection(_Strict):
    """``[fund]``: the total fund's benchmark: a ``date, return`` file, or ``"policy"`` for the
    mandates' benchmarks mixed at their strategic weights and rebalanced every period.
    Without it the total fund is measured against ``[inputs] market``."""

    benchmark: str | InputFile | None = None


class PackFile(_Strict):
    pack: PackSection
    inputs: InputsSection
    analysis: AnalysisSection = AnalysisSection()
    checks: ChecksSection = ChecksSection()
    render: RenderSection = RenderSection()
    limits: LimitsSection | None = None
    compare: CompareSection | None = None
    fund: FundSection | None = None
    mandates: list[MandateSection] | None = None
    stress: StressSection = StressSection()
