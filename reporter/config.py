"""Load and validate ``pack.toml`` into one frozen settings object.

Every problem in the file is collected and reported at once as
``pack.toml:<key>: <message>``: unknown keys, wrong types, out-of-range values
and input paths that leave the pack folder. Nothing else in the tool reads the
TOML file.
"""

from __future__ import annotations

import datetime as dt
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Annotated, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, ValidationError

from reporter.errors import InputError, Problem
from reporter.input_options import input_file_problems, returns_or_prices
from reporter.invisible import toml_problems
from reporter.stress_config import Shock, StressSection

PERIODS_PER_YEAR = {"monthly": 12, "weekly": 52, "daily": 252}
INPUT_ROLES = ("holdings", "returns", "market", "risk_free")
OPTIONAL_ROLES = ("benchmark", "portfolio_returns", "cash_flows",   # read only when named
                  "factors", "benchmark_sectors", "weights_history")   # see factor_inputs


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, strict=True)


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


DEFAULT_ROLLING_WINDOW = {"monthly": 36, "weekly": 104, "daily": 252}
DEFAULT_STALE_RUN = {"monthly": 3, "weekly": 4, "daily": 5}


def _loc(loc: tuple) -> str:
    # a list position is kept after "mandates" and "scenarios" (mandates.1.name), dropped elsewhere
    return ".".join(str(p) for k, p in enumerate(loc)
                    if (not isinstance(p, int) or (k and loc[k - 1] in ("mandates", "scenarios")))
                    and p not in _UNION_TAGS)


# pydantic names the alternatives of a str | table (or number | table) field
_UNION_TAGS = {"str", "InputFile", "constrained-float", "dict[str,constrained-float]"}


def _pydantic_problems(err: ValidationError, fname: str) -> list[Problem]:
    problems: dict[str, Problem] = {}
    for e in err.errors():
        loc = tuple(e["loc"])
        if ("str" in loc or "constrained-float" in loc) and isinstance(e.get("input"), dict):
            # a table given for a `str | table` field: only the table's own errors matter
            continue
        key = _loc(loc) or "(top level)"
        kind = e["type"]
        if kind == "extra_forbidden":
            msg = "unknown key"
        elif kind == "missing":
            msg = "required key is missing"
        else:
            msg = e["msg"]
            if "input" in e and not isinstance(e["input"], dict):
                msg += f" (got {e['input']!r})"
        # a str | table field yields one error per alternative; keep the first
        problems.setdefault(f"{key}|{kind}" if kind == "extra_forbidden" else key,
                            Problem(f"{fname}:{key}", msg))
    return list(problems.values())


def _resolve_pack(pack: Path) -> tuple[Path, Path]:
    pack = Path(pack)
    config_path = pack / "pack.toml" if pack.is_dir() else pack
    if not config_path.is_file():
        raise InputError([Problem(str(config_path), "no pack.toml found here")])
    return config_path.parent.resolve(), config_path.resolve()


def load_settings(pack: Path | str) -> Settings:
    """Read ``pack.toml`` (or the folder holding it) into :class:`Settings`.

    Raises :class:`InputError` with every problem found.
    """
    pack_dir, config_path = _resolve_pack(Path(pack))
    fname = config_path.name
    try:
        raw = tomllib.loads(config_path.read_text(encoding="utf-8"))
    except UnicodeDecodeError as exc:
        raise InputError([Problem(fname, f"not UTF-8 text ({exc.reason})")]) from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError([Problem(fname, f"not valid TOML: {exc}")]) from None
    if hidden := toml_problems(raw, fname):
        raise InputError(hidden)
    try:
        model = PackFile.model_validate(raw)
    except ValidationError as exc:
        raise InputError(_pydantic_problems(exc, fname)) from None

    problems: list[Problem] = []
    if model.analysis.min_obs > model.analysis.window:
        problems.append(Problem(f"{fname}:analysis.min_obs",
                                f"min_obs ({model.analysis.min_obs}) is larger than the window "
                                f"({model.analysis.window})"))

    inputs: dict[str, InputSpec] = {}
    defaults = model.inputs
    fmt_problem = date_format_problem(defaults.date_format)
    if fmt_problem:
        problems.append(Problem(f"{fname}:inputs.date_format", fmt_problem))
    if defaults.holdings is None and not model.mandates:
        problems.append(Problem(f"{fname}:inputs.holdings", "required key is missing"))

    def add_input(role: str, entry: str | InputFile, key: str) -> None:
        spec = entry if isinstance(entry, InputFile) else InputFile(path=entry)
        where = key + (".path" if isinstance(entry, InputFile) else "")
        path = _guarded_path(pack_dir, spec.path, f"{fname}:{where}", problems, must_exist=True)
        if path is None:
            return
        inputs[role] = InputSpec(
            role=role,
            path=path,
            display=spec.path,
            sheet=spec.sheet,
            delimiter=spec.delimiter or defaults.delimiter,
            decimal=spec.decimal or defaults.decimal,
            date_format=spec.date_format or defaults.date_format,
            thousands=spec.thousands or defaults.thousands, label=spec.name,
            values="prices" if role == "returns" and key == "inputs.prices" else
            spec.values or "returns",
        )
        problems.extend(input_file_problems(role, spec, key, fname))
        fmt_problem = date_format_problem(spec.date_format) if spec.date_format else None
        if fmt_problem:
            problems.append(Problem(f"{fname}:{key}.date_format", fmt_problem))
        if spec.sheet is not None and path.suffix.lower() != ".xlsx":
            problems.append(Problem(f"{fname}:{key}.sheet",
                                    "a sheet applies only to an .xlsx file"))

    for role in INPUT_ROLES + OPTIONAL_ROLES:
        if getattr(defaults, role) is not None:
            add_input(role, getattr(defaults, role), f"inputs.{role}")
    problems.extend(returns_or_prices(defaults, fname))
    if defaults.prices is not None and defaults.returns is None:
        add_input("returns", defaults.prices, "inputs.prices")
    mandates, fund_benchmark = resolve_mandates(model, fname, add_input, problems)
    for role, spec in inputs.items():
        if spec.thousands == spec.decimal:
            problems.append(Problem(f"{fname}:inputs.{role}", "the thousands separator and the "
                                    "decimal mark are the same character"))
        if spec.delimiter == spec.decimal:
            problems.append(Problem(f"{fname}:inputs.{role}",
                                    "the delimiter and the decimal mark are the same character"))

    templates_dir = None
    if model.render.templates is not None:
        templates_dir = _guarded_path(pack_dir, model.render.templates,
                                      f"{fname}:render.templates", problems, must_exist=True,
                                      want_dir=True)
    problems += limits_problems(model.limits, fname)
    compare_build, compare_archive = resolve_compare(model.compare, pack_dir, fname, problems)
    if problems:
        raise InputError(problems)

    freq = model.pack.frequency
    return Settings(
        pack_dir=pack_dir,
        config_path=config_path,
        name=model.pack.name or pack_name_from_folder(pack_dir),
        title=model.pack.title,
        organisation=model.pack.organisation,
        period_end=model.pack.period_end,
        frequency=freq,
        currency=model.pack.currency,
        inputs=inputs,
        window=model.analysis.window,
        min_obs=model.analysis.min_obs,
        confidence=model.analysis.confidence,
        errors=model.analysis.errors,
        hac_lags=model.analysis.hac_lags,
        blume_intercept=model.analysis.blume_intercept,
        blume_slope=model.analysis.blume_slope,
        dimson_lags=model.analysis.dimson_lags,
        rolling_window=model.analysis.rolling_window or DEFAULT_ROLLING_WINDOW[freq],
        weight_tolerance=model.checks.weight_tolerance,
        normalise_weights=model.checks.normalise_weights,
        allow_short=model.checks.allow_short,
        stale_zero_run=model.checks.stale_zero_run or DEFAULT_STALE_RUN[freq],
        templates_dir=templates_dir,
        limits=model.limits,
        compare_build=compare_build,
        compare_archive=compare_archive,
        mar=None if model.analysis.mar is None else float(model.analysis.mar),
        covariance=model.analysis.covariance,
        vasicek_prior=model.analysis.vasicek_prior,
        random_subsets=model.analysis.random_subsets,
        seed=model.analysis.seed,
        mandates=mandates,
        fund_benchmark=fund_benchmark,
        stress=model.stress,
    )


TOTAL_FUND = "Total fund"     # the results files' name for the whole fund (reserved)
STRATEGIC_TOLERANCE = 1e-6    # |sum of strategic weights - 1| allowed


def resolve_mandates(model: PackFile, fname: str, add_input, problems: list[Problem]
                     ) -> tuple[tuple[Mandate, ...], str | None]:
    """The ``[[mandates]]`` and ``[fund]`` tables as :class:`Mandate` records and the kind of
    the fund's benchmark (``"market"``, ``"file"`` or ``"policy"``); ``((), None)`` for a
    single-portfolio pack. Files are registered with ``add_input`` under the roles
    ``mandates.<i>.holdings``, ``mandates.<i>.benchmark`` and ``fund.benchmark``; every
    problem is appended to ``problems`` as ``pack.toml:<key>: message``."""
    if not model.mandates:
        if model.fund is not None:
            problems.append(Problem(f"{fname}:fund", "a [fund] table needs [[mandates]]"))
        elif model.mandates is not None:
            problems.append(Problem(f"{fname}:mandates", "the list of mandates is empty"))
        return (), None
    out: list[Mandate] = []
    seen: dict[str, int] = {}
    own_files = [m.holdings is not None for m in model.mandates]
    if model.inputs.holdings is not None and any(own_files):
        problems.append(Problem(f"{fname}:inputs.holdings", "give the holdings either in one "
                                "file with a mandate column ([inputs] holdings) or per mandate "
                                "(mandates.N.holdings), not both"))
    elif model.inputs.holdings is None and not all(own_files):
        for i, has in enumerate(own_files):
            if not has:
                problems.append(Problem(f"{fname}:mandates.{i}.holdings", "required key is "
                                        "missing: there is no [inputs] holdings file with a "
                                        "mandate column"))
    for i, m in enumerate(model.mandates):
        key = f"mandates.{i}"
        name = m.name.strip()
        if name.casefold() in seen:
            problems.append(Problem(f"{fname}:{key}.name", f"mandate name {name!r} is used "
                                    f"twice (first at mandates.{seen[name.casefold()]})"))
        seen.setdefault(name.casefold(), i)
        if name.casefold() == TOTAL_FUND.casefold():
            problems.append(Problem(f"{fname}:{key}.name", f"{TOTAL_FUND!r} is reserved for "
                                    "the whole fund; choose another name"))
        if m.range is not None:
            lo, hi = m.range
            if not lo <= m.strategic_weight <= hi:
                problems.append(Problem(f"{fname}:{key}.range", f"the range [{lo:g}, {hi:g}] "
                                        "does not contain the strategic weight "
                                        f"{m.strategic_weight:g}"))
        if m.limits is not None:
            problems.extend(limits_problems(m.limits, fname, prefix=f"{key}.limits"))
        h_role = f"{key}.holdings" if m.holdings is not None else None
        if m.holdings is not None:
            add_input(h_role, m.holdings, h_role)
        b_role = f"{key}.benchmark" if m.benchmark is not None else "market"
        if m.benchmark is not None:
            add_input(b_role, m.benchmark, b_role)
        if m.portfolio_returns is not None:
            add_input(f"{key}.portfolio_returns", m.portfolio_returns, f"{key}.portfolio_returns")
        slug = re.sub(r"[^a-z0-9]+", "-", name.lower()).strip("-") or "mandate"
        out.append(Mandate(index=i, name=name, slug=f"m{i + 1}-{slug}"[:60],
                           holdings_role=h_role, benchmark_role=b_role,
                           strategic_weight=m.strategic_weight,
                           range=tuple(m.range) if m.range is not None else None,
                           declared_weight=m.weight, limits=m.limits, manager=m.manager))
    total = sum(m.strategic_weight for m in model.mandates)
    if abs(total - 1.0) > STRATEGIC_TOLERANCE:
        problems.append(Problem(f"{fname}:mandates", f"the strategic weights sum to {total:.6g}, "
                                "not 1"))
    declared = [m.weight for m in model.mandates]
    if any(w is not None for w in declared) and any(w is None for w in declared):
        missing = ", ".join(f"mandates.{i}" for i, w in enumerate(declared) if w is None)
        problems.append(Problem(f"{fname}:mandates", "a current weight is declared for some "
                                f"mandates but not for {missing}; declare all or none"))
    kind = "market"
    bench = model.fund.benchmark if model.fund is not None else None
    if isinstance(bench, str) and bench == "policy":
        kind = "policy"
    elif bench is not None:
        kind = "file"
        add_input("fund.benchmark", bench, "fund.benchmark")
    if model.inputs.benchmark is not None:
        problems.append(Problem(f"{fname}:inputs.benchmark", "not used in a fund with mandates: "
                                "give the fund's benchmark in [fund] and each mandate's in "
                                "[[mandates]]"))
    for role in ("factors", "benchmark_sectors", "weights_history"):   # see factor_inputs
        if getattr(model.inputs, role) is not None:
            problems.append(Problem(f"{fname}:inputs.{role}", "not used in a fund with "
                                    "mandates yet: give it in a single-portfolio pack"))
    return tuple(out), kind


def pack_name_from_folder(folder: Path) -> str:
    """A scheme identifier from a folder name: lower case, runs of other characters as '-'."""
    slug = re.sub(r"[^a-z0-9]+", "-", folder.name.lower()).strip("-")[:64].strip("-")
    return slug or "pack"


def limits_problems(limits: LimitsSection | None, fname: str,
                    prefix: str = "limits") -> list[Problem]:
    """Checks across the keys of ``[limits]`` (or a mandate's ``limits`` table, keys under
    ``prefix``) that the schema cannot express."""
    if limits is None:
        return []
    out = []
    if (limits.beta_min is not None and limits.beta_max is not None
            and limits.beta_min > limits.beta_max):
        out.append(Problem(f"{fname}:{prefix}.beta_min",
                           f"beta_min ({limits.beta_min}) is above beta_max ({limits.beta_max})"))
    if isinstance(limits.max_sector_weight, dict) and not limits.max_sector_weight:
        out.append(Problem(f"{fname}:{prefix}.max_sector_weight", "the table names no sector"))
    out += [Problem(f"{fname}:{prefix}.asset_class_ranges.{k}", f"the range's low ({lo:g}) "
                    f"is above its high ({hi:g})")
            for k, (lo, hi) in (limits.asset_class_ranges or {}).items() if lo > hi]
    return out


ARCHIVE_PREFIX = "archive:"


def resolve_compare(compare: CompareSection | None, pack_dir: Path, fname: str,
                    problems: list[Problem]) -> tuple[Path | None, Path | None]:
    """``[compare] previous`` as (build folder, archive folder); one of them or neither.

    The path may be absolute or relative to the pack folder, and may lie outside it (an
    earlier build is usually elsewhere); it is only read, never written."""
    if compare is None:
        return None, None
    raw = compare.previous
    is_archive = raw.startswith(ARCHIVE_PREFIX)
    rel = raw[len(ARCHIVE_PREFIX):] if is_archive else raw
    where = f"{fname}:compare.previous"
    if not rel:
        problems.append(Problem(where, "give the archive folder after 'archive:'"))
        return None, None
    path = (pack_dir / Path(rel).expanduser()).resolve()
    if not path.is_dir():
        problems.append(Problem(where, f"folder {rel!r} does not exist"))
        return None, None
    return (None, path) if is_archive else (path, None)


def date_format_problem(fmt: str) -> str | None:
    """Why ``fmt`` cannot read dates, or None. ``fmt`` is a ``strptime`` format that must give
    at least the year and the month (a monthly file may leave out the day); it is tried on a
    sample date, so that a bad directive is reported here rather than failing the read."""
    sample = dt.date(2001, 2, 3)
    try:
        parsed = dt.datetime.strptime(sample.strftime(fmt), fmt)
    except ValueError as exc:
        return f"date format {fmt!r} cannot be used: {exc}"
    if (parsed.year, parsed.month) != (sample.year, sample.month):
        return f"date format {fmt!r} does not give the year and the month"
    return None


def _guarded_path(base: Path, rel: str, where: str, problems: list[Problem], *,
                  must_exist: bool, want_dir: bool = False) -> Path | None:
    """Resolve ``rel`` against ``base``; refuse a path that leaves ``base``."""
    candidate = Path(rel)
    if candidate.is_absolute():
        problems.append(Problem(where, f"path {rel!r} must be relative to the pack folder"))
        return None
    resolved = (base / candidate).resolve()
    if not resolved.is_relative_to(base):
        problems.append(Problem(where, f"path {rel!r} leaves the pack folder"))
        return None
    if must_exist:
        if want_dir and not resolved.is_dir():
            problems.append(Problem(where, f"folder {rel!r} does not exist"))
            return None
        if not want_dir and not resolved.is_file():
            problems.append(Problem(where, f"file {rel!r} does not exist"))
            return None
    return resolved
