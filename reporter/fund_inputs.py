"""Validate a fund's inputs: each mandate's holdings and benchmark, and the whole fund.

A fund pack (``[[mandates]]`` in pack.toml) gives its holdings either in one file with a
``mandate`` column or in one file per mandate, and each mandate's benchmark (a ``date,
return`` file, by default ``[inputs] market``). Each mandate's holdings are checked exactly
as a single portfolio's are (required columns, duplicate ids, weights summing to 1 within the
mandate, ...). Every problem of every file is gathered and reported at once, as for a single
portfolio; nothing is computed until all of them pass.

Weights: within a mandate, its holdings' weights (or market values) sum to 1. A mandate's
weight in the fund comes from market values when every mandate's holdings give them, else
from the weight declared in pack.toml (``mandates.N.weight``). The total fund holds each
security once, with weight W_i = sum over mandates of v_m w_(m,i).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
import pandas as pd

from reporter.analytics.returns import period_keys
from reporter.benchmark import validate_gross_returns, validate_portfolio_returns
from reporter.config import Mandate, Settings
from reporter.errors import Collector, Problem, place
from reporter.input_options import against_phrase, series_name
from reporter.models import DatedSeries, Holdings, ReturnPanel, ValidInputs
from reporter.readers import RawTable
from reporter.validate import (
    HOLDINGS_OPTIONAL,
    HoldingRows,
    _check_coverage,
    as_text,
    check_sector_limit_names,
    validate_holdings,
    validate_returns,
    validate_series,
)
from reporter.validate.common import delimiter_hint
from reporter.validate.text import case_clashes, normalise_id

MANDATE_COLUMN = "mandate"


@dataclass(frozen=True)
class MandateInputs:
    """One mandate's checked inputs: ``inputs.market`` is the mandate's own benchmark and
    ``inputs.holdings`` its holdings with weights summing to 1 within the mandate."""

    mandate: Mandate
    inputs: ValidInputs
    weight: float                    # v_m, the mandate's current weight in the fund
    benchmark_name: str              # the benchmark's name (pack.toml's name, or "Benchmark")
    benchmark_phrase: str = "its benchmark"   # the same in a sentence (input_options)
    own: DatedSeries | None = None   # the manager's own returns, net of fees (if given)
    gross: DatedSeries | None = None  # and gross of fees (if the file gives them)


@dataclass(frozen=True)
class FundInputs:
    """A fund's checked inputs: the total fund (every security once, combined weight; its
    ``market`` is the fund's benchmark) and each mandate."""

    total: ValidInputs
    mandates: tuple[MandateInputs, ...]
    benchmark_label: str             # what the total fund is measured against, in words
    benchmark_name: str              # the same in short: a series' name or "policy mix"
    weight_source: str               # "market values" | "declared weights"
    positions: pd.DataFrame          # mandate, security_id, name, weight_in_mandate,
    #                                  weight_in_fund: one row per holding of each mandate
    warnings: list[Problem]
    own: DatedSeries | None = None   # the total fund's own returns, net ([inputs]) ...
    gross: DatedSeries | None = None  # ... and gross of fees


def _subtable(raw: RawTable, idx: np.ndarray) -> RawTable:
    """The rows ``idx`` of ``raw`` without the mandate column, keeping the rows' numbers."""
    table = raw.table.take(idx)
    table = table.drop_columns([MANDATE_COLUMN])
    return dataclasses.replace(raw, table=table, rows=raw.row_numbers(idx))


def _mandate_holdings(settings: Settings, raws: dict[str, RawTable], coll: Collector
                      ) -> tuple[dict[int, Holdings], dict[int, RawTable]]:
    """Each mandate's checked holdings (weights within the mandate), and the table of its
    rows as read (its rows keep the file's numbers), by mandate index."""
    cfg = settings.config_path.name
    out: dict[int, Holdings] = {}
    tables: dict[int, RawTable] = {}
    if settings.mandates[0].holdings_role is None:            # one file, a mandate column
        raw = raws.get("holdings")
        if raw is None:
            return out, tables
        if MANDATE_COLUMN not in raw.table.column_names:
            coll.error(place(raw.name, 1, MANDATE_COLUMN), "required column is missing: a "
                       "fund's holdings file names each holding's mandate "
                       f"(the file has: {', '.join(raw.table.column_names)})"
                       + delimiter_hint(raw, (MANDATE_COLUMN,)))
            return out, tables
        names = as_text(raw, MANDATE_COLUMN, coll, allow_empty=False)
        known = {normalise_id(m.name) for m in settings.mandates}
        given = pd.Series(names, dtype=object)
        unknown = np.flatnonzero((~given.isin(known) & given.notna() & (given != "")).to_numpy())
        for i in unknown[:10]:
            coll.error(place(raw.name, raw.row_number(int(i)), MANDATE_COLUMN),
                       f"mandate {names[i]!r} is not declared in {cfg} (the [[mandates]] "
                       f"are: {', '.join(repr(m.name) for m in settings.mandates)})")
        if len(unknown) > 10:
            coll.error(raw.name, f"... and {len(unknown) - 10} more rows of undeclared mandates")
        for m in settings.mandates:
            idx = np.flatnonzero(names == normalise_id(m.name))
            if not len(idx):
                coll.error(f"{cfg}:mandates.{m.index}.name", f"no holding in {raw.name} has "
                           f"the mandate {m.name!r}")
                continue
            sub = Collector()
            tables[m.index] = _subtable(raw, idx)
            h = validate_holdings(tables[m.index], settings, sub)
            for p in sub.problems:          # name the mandate in each error
                (coll.error if p.severity == "error" else coll.warn)(
                    p.where, p.message + (f" (mandate {m.name!r})"
                                          if p.severity == "error" else ""), p.count)
            if h is not None:
                out[m.index] = h
        return out, tables
    for m in settings.mandates:
        raw = raws.get(m.holdings_role or "")
        if raw is None:
            continue
        own = dataclasses.replace(settings, inputs={**settings.inputs,
                                                    "holdings": settings.inputs[m.holdings_role]})
        h = validate_holdings(raw, own, coll)
        tables[m.index] = raw
        if h is not None:
            out[m.index] = h
    return out, tables


def _mandate_weights(settings: Settings, holdings: dict[int, Holdings],
                     coll: Collector) -> tuple[np.ndarray | None, str]:
    """v_m for every mandate, from market values when every mandate gives them, else as
    declared in pack.toml; and which of the two it was."""
    cfg = settings.config_path.name
    ms = settings.mandates
    values = [holdings[m.index].frame.get("market_value") for m in ms]
    declared = [m.declared_weight for m in ms]
    if all(v is not None and np.isfinite(v.to_numpy(dtype=float)).all() for v in values):
        totals = np.array([float(v.sum()) for v in values])
        if any(d is not None for d in declared):
            coll.warn(f"{cfg}:mandates", "the declared mandate weights are ignored: every "
                      "mandate's holdings give market values, and the weights come from them")
        if totals.sum() <= 0:
            coll.error(f"{cfg}:mandates", "the mandates' market values sum to zero or less")
            return None, "market values"
        return totals / totals.sum(), "market values"
    if any(d is None for d in declared):
        coll.error(f"{cfg}:mandates", "the mandates' weights in the fund cannot be derived: "
                   "give market_value in every mandate's holdings, or declare each mandate's "
                   "current weight (mandates.N.weight)")
        return None, "declared weights"
    v = np.array(declared, dtype=float)
    total = float(v.sum())
    if abs(total - 1.0) > settings.weight_tolerance:
        msg = (f"the declared mandate weights sum to {total:.6g}, not 1 (tolerance "
               f"{settings.weight_tolerance:g})")
        if settings.normalise_weights and total > 0:
            coll.warn(f"{cfg}:mandates", msg + "; rescaled to sum to 1")
            v = v / total
        else:
            coll.error(f"{cfg}:mandates", msg)
            return None, "declared weights"
    return v, "declared weights"


def fund_holdings(frames: list[pd.DataFrame], mandate_weights: np.ndarray,
                  names: list[str]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The total fund's holdings, each security once with its combined weight
    W_i = sum_m v_m w_(m,i) (market values summed when every mandate gives them), in order of
    first appearance; and the long table of positions (mandate, security_id, name,
    weight_in_mandate, weight_in_fund)."""
    long = pd.concat([f.assign(mandate=n, weight_in_fund=f["weight"] * v)
                      for f, v, n in zip(frames, mandate_weights, names, strict=True)],
                     ignore_index=True)
    positions = long[["mandate", "security_id", "name", "weight", "weight_in_fund"]].rename(
        columns={"weight": "weight_in_mandate"})
    agg = {"name": "first", "sector": "first", "weight_in_fund": "sum"}
    if "market_value" in long and long["market_value"].notna().all():
        agg["market_value"] = "sum"
    for c in HOLDINGS_OPTIONAL:
        if c in long:
            agg[c] = "first"
    total = long.groupby("security_id", sort=False).agg(agg).reset_index()
    total = total.rename(columns={"weight_in_fund": "weight"})
    cols = ["security_id", "name", "sector", "weight"]
    return total[cols + [c for c in total.columns if c not in cols]], positions


def _series_problems(settings: Settings, role: str, raws: dict[str, RawTable], rf: DatedSeries,
                     coll: Collector) -> DatedSeries | None:
    """A benchmark file checked like the market proxy, and over the same window."""
    raw = raws.get(role)
    if raw is None:
        return None
    as_market = dataclasses.replace(settings, inputs={**settings.inputs,
                                                      "market": settings.inputs[role]})
    series = validate_series(raw, "return", as_market, coll)
    if series is not None:
        _check_coverage(as_market, series, rf, None, coll)
    return series


def aligned(series: DatedSeries, dates: np.ndarray, freq: str) -> np.ndarray:
    """``series`` on the periods of ``dates``, NaN where it has none."""
    keys = period_keys(dates, freq)
    skeys = period_keys(series.dates, freq)
    pos = np.minimum(np.searchsorted(skeys, keys), len(skeys) - 1)
    return np.where(skeys[pos] == keys, series.values[pos], np.nan)


def policy_mix(benchmarks: list[DatedSeries], weights: np.ndarray, calendar: DatedSeries,
               freq: str) -> DatedSeries:
    """The policy benchmark r_t = sum_m s_m r_(m,t): the mandates' benchmarks at fixed weights
    ``weights``, rebalanced to them every period, on the periods of ``calendar`` (the market
    proxy's) back to the first period before which any of them has no return."""
    mix = np.column_stack([aligned(b, calendar.dates, freq) for b in benchmarks]) @ weights
    bad = np.flatnonzero(~np.isfinite(mix))
    start = int(bad[-1]) + 1 if len(bad) else 0
    return DatedSeries(dates=calendar.dates[start:], values=mix[start:])


def validate_fund(settings: Settings, raws: dict[str, RawTable], read_problems=(),
                  strict: bool = False) -> FundInputs:
    """Check every input of a fund pack; raise :class:`InputError` listing every problem."""
    coll = Collector()
    coll.problems.extend(read_problems)
    holdings, tables = _mandate_holdings(settings, raws, coll)
    ms = settings.mandates
    v, weight_source = (_mandate_weights(settings, holdings, coll)
                        if len(holdings) == len(ms) else (None, ""))
    market = validate_series(raws["market"], "return", settings, coll) \
        if "market" in raws else None
    rf = validate_series(raws["risk_free"], "rate", settings, coll) \
        if "risk_free" in raws else None
    total_frame = positions = read_at = None
    union = None
    if v is not None:
        total_frame, positions = fund_holdings([holdings[m.index].frame for m in ms], v,
                                               [m.name for m in ms])
        src = "market_value" if weight_source == "market values" else "weight"
        union = Holdings(frame=total_frame, weight_source=src, normalised=False)
        where = ", ".join(dict.fromkeys(
            settings.inputs[m.holdings_role or "holdings"].display for m in ms))
        _warn_conflicts(pd.concat([holdings[m.index].frame.assign(mandate=m.name)
                                   for m in ms]), where, coll)
        cfg = settings.config_path.name
        check_sector_limit_names(settings.limits, union, f"{cfg}:limits.max_sector_weight",
                                 coll)
        for m in ms:
            check_sector_limit_names(m.limits, holdings[m.index],
                                     f"{cfg}:mandates.{m.index}.limits.max_sector_weight", coll)
        first = _first_rows(ms, holdings, tables)
        _warn_case_clashes(first, coll)
        rows = [first.get(sid) for sid in union.ids]
        read_at = HoldingRows(tuple(r[1].name if r else where for r in rows),
                              tuple(r[1].row_number(r[2]) if r else None for r in rows))
    panel = validate_returns(raws["returns"], union, settings, coll, read_at) \
        if "returns" in raws and union is not None else None
    benches: dict[str, DatedSeries | None] = {}
    if market is not None and rf is not None:
        _check_coverage(settings, market, rf, panel, coll)
        benches["market"] = market
        roles = {m.benchmark_role for m in ms} | (
            {"fund.benchmark"} if settings.fund_benchmark == "file" else set())
        for role in sorted(roles - {"market"}):
            benches[role] = _series_problems(settings, role, raws, rf, coll)
    owns = {role: _own_returns(settings, raws, role, coll)
            for role in [f"mandates.{m.index}.portfolio_returns" for m in ms]
            + ["portfolio_returns"] if role in settings.inputs}
    # each problem once (the same risk-free gap is found against every benchmark)
    coll.problems = list(dict.fromkeys(coll.problems))
    coll.raise_if_errors(strict=strict)
    assert market is not None and rf is not None and panel is not None and v is not None
    assert positions is not None and union is not None
    strategic = np.array([m.strategic_weight for m in ms])
    if settings.fund_benchmark == "policy":
        fund_market = policy_mix([benches[m.benchmark_role] for m in ms], strategic, market,
                                 settings.frequency)
        label = "the policy mix of the mandates' benchmarks at their strategic weights"
        short = "policy mix"
    elif settings.fund_benchmark == "file":
        fund_market = benches["fund.benchmark"]
        short = series_name(settings, "fund.benchmark")
        label = "the fund's benchmark" + (f" ({short})" if short != "Fund benchmark" else "")
    else:
        fund_market = market
        short = series_name(settings, "market")
        label = "the market proxy" + (f" ({short})" if short != "Market proxy" else "")
    columns = pd.Index(panel.security_ids)
    out = []
    for m, vm in zip(ms, v, strict=True):          # a handful of mandates
        h = holdings[m.index]
        idx = columns.get_indexer(list(h.ids))
        sub = ReturnPanel(period_keys=panel.period_keys, security_ids=h.ids,
                          values=panel.values[:, idx], shape=panel.shape, n_rows=panel.n_rows)
        out.append(MandateInputs(
            mandate=m, weight=float(vm),
            inputs=ValidInputs(holdings=h, returns=sub, market=benches[m.benchmark_role],
                               risk_free=rf, warnings=[]),
            benchmark_name=series_name(settings, m.benchmark_role),
            benchmark_phrase=against_phrase(settings, m.benchmark_role),
            **owns.get(f"mandates.{m.index}.portfolio_returns", {})))
    total = ValidInputs(holdings=union, returns=panel, market=fund_market, risk_free=rf,
                        warnings=coll.warnings)
    return FundInputs(total=total, mandates=tuple(out), benchmark_label=label,
                      benchmark_name=short,
                      weight_source=weight_source, positions=positions,
                      warnings=coll.warnings, **owns.get("portfolio_returns", {}))


def _own_returns(settings: Settings, raws: dict[str, RawTable], role: str,
                 coll: Collector) -> dict:
    """A portfolio returns file (the fund's or a mandate's): ``{"own": net, "gross": gross}``
    with its problems added to ``coll``; each must cover the window."""
    net, problems = validate_portfolio_returns(settings, raws, role)
    gross, gross_problems = validate_gross_returns(settings, raws, role)
    coll.problems.extend([*problems, *gross_problems])
    return {"own": net, "gross": gross}


def _first_rows(ms: tuple[Mandate, ...], holdings: dict[int, Holdings],
                tables: dict[int, RawTable]) -> dict[str, tuple[Mandate, RawTable, int]]:
    """Each id of the fund (in order of first appearance, as the total fund holds them):
    the first mandate that holds it, the table of that mandate's rows and the id's position
    in it."""
    first: dict[str, tuple[Mandate, RawTable, int]] = {}
    for m in ms:
        for i, sid in enumerate(holdings[m.index].ids):
            if isinstance(sid, str) and sid:
                first.setdefault(sid, (m, tables[m.index], i))
    return first


def _warn_case_clashes(first: dict[str, tuple[Mandate, RawTable, int]],
                       coll: Collector) -> None:
    """A warning, at its file, row and column, for each id of a mandate that differs only by
    case from an id of an earlier mandate (two ids of one mandate are an error of its
    holdings already): the total fund holds them as two securities."""
    ids = list(first)
    for a, b in case_clashes(ids):
        (ma, raw_a, i), (mb, raw_b, j) = first[ids[a]], first[ids[b]]
        if ma.index == mb.index:
            continue
        at_first = f"{raw_a.name} row {raw_a.row_number(i)}, mandate {ma.name!r}"
        coll.warn(place(raw_b.name, raw_b.row_number(j), "security_id"),
                  f"security id {ids[b]!r} (mandate {mb.name!r}) differs from {ids[a]!r} "
                  f"({at_first}) only by case: the total fund holds them as two securities; "
                  "give one security one id")


def _warn_conflicts(long: pd.DataFrame, where: str, coll: Collector) -> None:
    """A warning for each security that two mandates describe differently (name or sector);
    the total fund uses the first description."""
    n = long.groupby("security_id", sort=False)[["name", "sector"]].nunique()
    for sid in n.index[(n > 1).any(axis=1)][:10]:
        rows = long[long["security_id"] == sid]
        coll.warn(where, f"security {sid} is described differently by the mandates "
                  f"{', '.join(repr(x) for x in rows['mandate'])}; the total fund uses "
                  f"{rows['name'].iloc[0]!r} ({rows['sector'].iloc[0]})")

