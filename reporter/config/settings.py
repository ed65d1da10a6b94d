"""The validated settings of one pack, built once by :func:`reporter.config.load_settings`
and passed down: frozen records with every input file resolved."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from pathlib import Path

from reporter.config.schema import LimitsSection
from reporter.stress_config import StressSection

PERIODS_PER_YEAR = {"monthly": 12, "weekly": 52, "daily": 252}
TOTAL_FUND = "Total fund"     # the results files' name for the whole fund (reserved)


@dataclass(frozen=True)
class InputSpec:
    """A resolved input file and how to read it."""

    role: str
    path: Path
    display: str  # the path as written in pack.toml, used in messages
    sheet: str | None
    delimiter: str
    decimal: str
    date_format: str
    thousands: str | None = None     # thousands separator in numbers, if any
    label: str | None = None         # the name pack.toml gives the series, shown in the pack
    values: str = "returns"          # "returns" | "prices" (a price or total-return index)


@dataclass(frozen=True)
class Settings:
    """The validated settings for one pack; built once and passed down."""

    pack_dir: Path
    config_path: Path
    name: str                        # the scheme's short identifier (archive file names)
    title: str
    organisation: str
    period_end: dt.date
    frequency: str
    currency: str
    inputs: dict[str, InputSpec]
    window: int
    min_obs: int
    confidence: float
    errors: str
    hac_lags: int | None
    blume_intercept: float
    blume_slope: float
    dimson_lags: int
    rolling_window: int
    weight_tolerance: float
    normalise_weights: bool
    allow_short: bool
    stale_zero_run: int
    templates_dir: Path | None
    limits: LimitsSection | None = None      # None: no [limits] table
    compare_build: Path | None = None        # [compare] previous = a build folder
    compare_archive: Path | None = None      # [compare] previous = "archive:DIR"
    mar: float | None = None             # fixed annual MAR; None = the risk-free rate
    covariance: str = "constant_correlation"   # | "auto" | "ledoit_wolf" | "sample"
    vasicek_prior: str = "holdings"      # "holdings" | "market": Vasicek prior's mean
    random_subsets: int = 200            # random equal-weight portfolios per size
    seed: int = 20261130                 # seed of those random draws

    mandates: tuple[Mandate, ...] = ()  # empty: a single-portfolio pack
    fund_benchmark: str | None = None   # "market" | "file" | "policy" (funds only)
    stress: StressSection = StressSection()   # [stress]

    @property
    def periods_per_year(self) -> int:
        return PERIODS_PER_YEAR[self.frequency]

    @property
    def is_fund(self) -> bool:
        """True when pack.toml declares ``[[mandates]]``."""
        return bool(self.mandates)


@dataclass(frozen=True)
class Mandate:
    """One mandate of a fund, resolved: its input roles are keys of ``Settings.inputs``."""

    index: int                       # position in pack.toml (0-based)
    name: str
    slug: str                        # for HTML anchors
    holdings_role: str | None        # None: rows of [inputs] holdings with this mandate name
    benchmark_role: str              # "market" when the mandate names no benchmark
    strategic_weight: float
    range: tuple[float, float] | None
    declared_weight: float | None
    limits: LimitsSection | None
    manager: str | None = None
