"""Load and validate ``pack.toml`` into one frozen settings object.

Every problem in the file is collected and reported at once as
``pack.toml:<key>: <message>``: unknown keys, wrong types, out-of-range values
and input paths that leave the pack folder. Nothing else in the tool reads the
TOML file.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

from pydantic import ValidationError

from reporter.config.mandates import resolve_mandates
from reporter.config.problems import (
    date_format_problem,
    guarded_path,
    limits_problems,
    pack_name_from_folder,
    pydantic_problems,
    resolve_compare,
    resolve_pack,
)
from reporter.config.schema import INPUT_ROLES, OPTIONAL_ROLES, InputFile, PackFile
from reporter.config.settings import InputSpec, Settings
from reporter.errors import InputError, Problem
from reporter.input_options import input_file_problems, returns_or_prices
from reporter.invisible import toml_problems

DEFAULT_ROLLING_WINDOW = {"monthly": 36, "weekly": 104, "daily": 252}
DEFAULT_STALE_RUN = {"monthly": 3, "weekly": 4, "daily": 5}


def load_settings(pack: Path | str) -> Settings:
    """Read ``pack.toml`` (or the folder holding it) into :class:`Settings`.

    Raises :class:`InputError` with every problem found.
    """
    pack_dir, config_path = resolve_pack(Path(pack))
    fname = config_path.name
    try:
        raw = tomllib.loads(config_path.read_text(encoding="utf-8"))
    except UnicodeDecodeError as exc:
        raise InputError([Problem(fname, f"not UTF-8 text ({exc.reason})")]) from None
    except tomllib.TOMLDecodeError as exc:
        hint = (" (the file starts with a byte-order mark: save it as UTF-8 without one)"
                if config_path.read_bytes().startswith(b"\xef\xbb\xbf") else "")
        raise InputError([Problem(fname, f"not valid TOML: {exc}{hint}")]) from None
    except RecursionError:          # arrays or tables nested thousands deep
        raise InputError([Problem(fname, "not a pack's settings: its arrays or tables are "
                                  "nested too deeply to read")]) from None
    if hidden := toml_problems(raw, fname):
        raise InputError(hidden)
    try:
        model = PackFile.model_validate(raw)
    except ValidationError as exc:
        raise InputError(pydantic_problems(exc, fname)) from None

    problems: list[Problem] = []
    if model.analysis.min_obs > model.analysis.window:
        problems.append(Problem(f"{fname}:analysis.min_obs",
                                f"min_obs ({model.analysis.min_obs}) is larger than the window "
                                f"({model.analysis.window})"))
    lags = model.analysis.hac_lags
    if lags is not None and lags >= model.analysis.min_obs:
        # a fit may have as few as min_obs observations, and a lag reaches back that many
        # periods: at min_obs or more there is no pair of observations that far apart
        problems.append(Problem(f"{fname}:analysis.hac_lags",
                                f"hac_lags ({lags}) must be below min_obs "
                                f"({model.analysis.min_obs}), the fewest observations a "
                                "holding's fit may have"))

    inputs: dict[str, InputSpec] = {}
    defaults = model.inputs
    fmt_problem = date_format_problem(defaults.date_format)
    if fmt_problem:
        problems.append(Problem(f"{fname}:inputs.date_format", fmt_problem))
    if defaults.holdings is None and not model.mandates:
        problems.append(Problem(f"{fname}:inputs.holdings", "required key is missing"))

    def add_input(role: str, entry: str | InputFile, key: str) -> None:
        where = key + (".path" if isinstance(entry, InputFile) else "")
        text = entry.path if isinstance(entry, InputFile) else entry
        # the path is checked (an empty one refused) before the short form is made an
        # InputFile, whose own refusal of an empty path would not be a problem of the pack
        path = guarded_path(pack_dir, text, f"{fname}:{where}", problems, must_exist=True)
        if path is None:
            return
        spec = entry if isinstance(entry, InputFile) else InputFile(path=entry)
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
        templates_dir = guarded_path(pack_dir, model.render.templates,
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
