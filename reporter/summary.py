"""``reporter check``: validate a pack and summarise its data without building anything."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from reporter.analytics.pack import build_window
from reporter.analytics.stress import scenario_windows
from reporter.analytics.style import factors_on_window
from reporter.config import Settings, load_settings
from reporter.config.schema import INPUT_ROLES
from reporter.errors import Problem
from reporter.pipeline.assemble import CheckedInputs, checked_inputs


@dataclass(frozen=True)
class CheckSummary:
    text: str
    warnings: list[Problem]


def check_pack(pack: Path | str, strict: bool = False) -> CheckSummary:
    """Check ``pack``'s inputs as a build does (every input, the optional files, the earlier
    pack, the commentary and the action log: :func:`checked_inputs`) and describe
    holdings, dates, coverage and warnings. Nothing is computed beyond the window."""
    settings = load_settings(pack)
    checked = checked_inputs(settings, strict=strict)
    if checked.fund is not None:
        return _check_fund(settings, checked)
    part = checked.parts[0]
    inputs = part.inputs
    win = build_window(inputs, settings)
    _check_scenarios(settings, inputs)
    if part.style is not None and part.style.factors is not None:
        # the one check of the factors that needs the window's market: as the build runs it
        factors_on_window(win.dates, win.market_excess, part.style.factors, settings)
    h = inputs.holdings
    n_obs = np.isfinite(win.returns).sum(axis=0)
    full = int((n_obs == win.n_periods).sum())
    short = int((n_obs < settings.min_obs).sum())
    lines = [
        f"pack: {settings.title} ({settings.organisation}), period ending {settings.period_end}",
        f"holdings: {len(h.ids)} from {settings.inputs['holdings'].display}, weights from "
        f"{h.weight_source}{' (rescaled)' if h.normalised else ''}, "
        f"{h.frame['sector'].nunique()} sectors",
        f"returns: {inputs.returns.shape} layout, {inputs.returns.n_rows} rows, "
        f"{len(inputs.returns.period_keys)} periods",
        f"market: {len(inputs.market.dates)} periods, {inputs.market.dates[0]} to "
        f"{inputs.market.dates[-1]}; risk-free: {len(inputs.risk_free.dates)} periods",
        f"window: {win.n_periods} {settings.frequency} periods, {win.dates[0]} to {win.dates[-1]}",
        f"coverage: {full} holding(s) with the full window, {short} below min_obs "
        f"({settings.min_obs}) and not to be fitted",
        *_optional_lines(settings),
        f"warnings: {len(checked.warnings)}",
        "ok: the inputs pass every check",
    ]
    return CheckSummary(text="\n".join(lines), warnings=checked.warnings)


def _check_scenarios(settings: Settings, inputs) -> None:
    """The named stress scenarios' windows against the history, as the build's stress stage
    finds them (the market's periods up to period_end; no returns copied): a window outside
    it is a ``pack.toml:stress.scenarios.N.start`` (or ``.end``) error here too."""
    hist = build_window(inputs, settings, periods=0, holdings=False)
    scenario_windows(settings.stress, hist.dates, settings.frequency)


def _optional_lines(settings: Settings) -> list[str]:
    """One line naming the input files beyond the four tables that were checked too, if any."""
    others = [r for r in settings.inputs if r not in INPUT_ROLES]
    if not others:
        return []
    return ["other inputs checked: " + ", ".join(settings.inputs[r].display for r in others)]


def _check_fund(settings: Settings, checked: CheckedInputs) -> CheckSummary:
    """``reporter check`` for a fund: the total fund and one line per mandate."""
    fin = checked.fund
    win = build_window(fin.total, settings)
    _check_scenarios(settings, fin.total)
    lines = [
        f"pack: {settings.title} ({settings.organisation}), period ending {settings.period_end}",
        f"fund: {len(fin.total.holdings.ids)} securities in {len(fin.positions)} positions, "
        f"{len(fin.mandates)} mandate(s), weights from {fin.weight_source}; measured against "
        f"{fin.benchmark_label}",
        *(f"mandate {m.mandate.name!r}: {len(m.inputs.holdings.ids)} holdings, weight "
          f"{m.weight:.1%} (strategic {m.mandate.strategic_weight:.1%}), benchmark "
          f"{m.benchmark_name}" for m in fin.mandates),
        f"window: {win.n_periods} {settings.frequency} periods, {win.dates[0]} to {win.dates[-1]}",
        *_optional_lines(settings),
        f"warnings: {len(checked.warnings)}",
        "ok: the inputs pass every check",
    ]
    return CheckSummary(text="\n".join(lines), warnings=checked.warnings)
