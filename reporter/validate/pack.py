"""Every input of a pack: read them all, check them all, and the checks across files
(coverage of the window, frequency)."""

from __future__ import annotations

import unicodedata

import numpy as np

from reporter.analytics.coverage import cover_holdings
from reporter.analytics.returns import frequency_gaps, period_keys, portfolio_returns
from reporter.analytics.window import constant_premium
from reporter.config import OTHER_SECTORS, LimitsSection, Settings
from reporter.errors import Collector, InputError, Problem, place
from reporter.models import DatedSeries, Holdings, ReturnPanel, ValidInputs
from reporter.readers import RawTable, read_input
from reporter.validate.common import MAX_PER_CHECK, _Capped, _period_word
from reporter.validate.holdings import validate_holdings
from reporter.validate.long_stream import stream_long_returns
from reporter.validate.returns import validate_returns
from reporter.validate.series import validate_series
from reporter.validate.text import check_invisible, letter_scripts


def read_inputs(settings: Settings) -> tuple[dict[str, RawTable], list]:
    """Read every input file; returns the tables read and the problems found in reading them
    (files that could not be read, what the reader warned about, and invisible characters in
    any text cell: see :mod:`reporter.validate.text`)."""
    raws: dict[str, RawTable] = {}
    problems = []
    for role, spec in settings.inputs.items():
        try:
            # a clean long returns CSV straight into its matrix, in streamed batches; any
            # other file, or one in which a row needs a message, is read whole
            streamed = stream_long_returns(spec, settings.frequency) if role == "returns" \
                else None
            raws[role] = streamed if streamed is not None else read_input(spec)
        except InputError as exc:
            problems.extend(exc.problems)
            continue
        problems.extend(raws[role].notes)
        coll = Collector()
        check_invisible(raws[role], coll)
        problems.extend(coll.problems)
    return raws, problems


def validate_tables(settings: Settings, raws: dict[str, RawTable], read_problems=(),
                    strict: bool = False, benchmark: DatedSeries | None = None) -> ValidInputs:
    """Check every table; raise :class:`InputError` listing every problem found.
    ``benchmark``: the checked benchmark series, if any (a holding may name it as proxy)."""
    coll = Collector()
    coll.problems.extend(read_problems)
    holdings = validate_holdings(raws["holdings"], settings, coll) if "holdings" in raws else None
    market = validate_series(raws["market"], "return", settings, coll) if "market" in raws \
        else None
    rf = validate_series(raws["risk_free"], "rate", settings, coll) if "risk_free" in raws \
        else None
    panel = validate_returns(raws["returns"], holdings, settings, coll,
                             raws.get("holdings")) if "returns" in raws \
        else None
    if holdings is not None:
        check_sector_limit_names(settings.limits, holdings, f"{settings.config_path.name}:"
                                 "limits.max_sector_weight", coll)
    if market is not None and rf is not None:
        _check_coverage(settings, market, rf, panel, coll)
    if holdings is not None and panel is not None and not coll.errors:
        _check_wipe_out(settings, holdings, panel, market, rf, benchmark, coll)
    coll.raise_if_errors(strict=strict)
    assert holdings is not None and market is not None and rf is not None and panel is not None
    return ValidInputs(holdings=holdings, returns=panel, market=market, risk_free=rf,
                       warnings=coll.warnings)


def validate_pack(settings: Settings, strict: bool = False) -> ValidInputs:
    """Read and check every input in one call."""
    raws, problems = read_inputs(settings)
    return validate_tables(settings, raws, problems, strict=strict)


def _check_return_frequency(settings: Settings, panel: ReturnPanel, mkeys: np.ndarray,
                            coll: Collector) -> None:
    """A holding's returns must come at the declared frequency: on the market's calendar, at
    least half of the steps between its consecutive returns must be a single period (a
    suspension leaves one long step; quarterly data in a monthly pack leave no short one)."""
    pos = np.searchsorted(mkeys, panel.period_keys)
    pos_c = np.minimum(pos, len(mkeys) - 1)
    on_calendar = (pos < len(mkeys)) & (mkeys[pos_c] == panel.period_keys)
    if on_calendar.all() and np.array_equal(pos_c, np.arange(len(mkeys))):
        present = np.isfinite(panel.values)      # the panel is on the market's calendar
    else:
        present = np.zeros((len(mkeys), panel.values.shape[1]), dtype=bool)
        present[pos_c[on_calendar]] = np.isfinite(panel.values[on_calendar])
    n = np.count_nonzero(present, axis=0)
    single = np.count_nonzero(present[1:] & present[:-1], axis=0)
    bad = np.flatnonzero((n >= 3) & (2 * single < n - 1))
    capped = _Capped(coll, "holdings whose returns are less frequent than declared")
    for j in bad:
        capped.add(place(settings.inputs["returns"].display, None, "date"),
                   f"returns for {panel.security_ids[j]} look less frequent than "
                   f"{settings.frequency}: {single[j]} of the {n[j] - 1} steps between them are "
                   f"one {_period_word(settings)}")
    capped.close()


def _report_gaps(settings: Settings, market: DatedSeries, win: np.ndarray,
                 coll: Collector) -> int:
    """An error for each pair of market dates at positions ``win`` that are not consecutive
    periods (one whose date could not be read is reported already); returns how many."""
    mname = settings.inputs["market"].display
    gaps = frequency_gaps(market.dates[win], settings.frequency)
    if market.rows is not None and market.unread_rows is not None and len(market.unread_rows):
        lo, hi = market.rows[win][gaps - 1], market.rows[win][gaps]
        unread = np.sort(market.unread_rows)
        explained = np.searchsorted(unread, hi) > np.searchsorted(unread, lo, side="right")
        gaps = gaps[~explained]
    for g in gaps[:MAX_PER_CHECK]:
        where = (place(mname, int(market.rows[win][g]), "date") if market.rows is not None
                 else mname)
        coll.error(where, f"the dates {market.dates[win][g - 1]} and {market.dates[win][g]} "
                   f"are not consecutive {settings.frequency} periods (a period is missing "
                   "between them)")
    if len(gaps) > MAX_PER_CHECK:
        coll.error(mname, f"... and {len(gaps) - MAX_PER_CHECK} more gaps in the window")
    return len(gaps)


def _check_coverage(settings: Settings, market: DatedSeries, rf: DatedSeries,
                    panel: ReturnPanel | None, coll: Collector) -> None:
    cfg = settings.config_path.name
    end = np.datetime64(settings.period_end, "D")
    end_key = period_keys(np.array([end]), settings.frequency)[0]
    mkeys = period_keys(market.dates, settings.frequency)
    mname, rname = settings.inputs["market"].display, settings.inputs["risk_free"].display
    if mkeys[-1] < end_key:
        coll.error(f"{cfg}:pack.period_end", f"period_end {settings.period_end} is after the "
                   f"last date in {mname} ({market.dates[-1]})")
        return
    if panel is not None and len(panel.period_keys) and panel.period_keys[-1] < end_key:
        coll.warn(settings.inputs["returns"].display,
                  f"no holding has a return for the period of period_end {settings.period_end}")
    upto = np.flatnonzero(mkeys <= end_key)
    if len(upto) < settings.window:
        # a gap makes the data short: name it; the window is too long only if the calendar
        # from the first date is (daily data have no calendar of their own: say both)
        gaps = _report_gaps(settings, market, upto, coll)
        span = int(end_key - mkeys[upto[0]]) + 1 if len(upto) else 0
        if not gaps or settings.frequency == "daily" or span < settings.window:
            coll.error(f"{cfg}:analysis.window", f"the window ({settings.window} periods) is "
                       f"longer than the data: {mname} has {len(upto)} periods up to "
                       f"{settings.period_end}")
        return
    win = upto[-settings.window:]
    _report_gaps(settings, market, win, coll)
    if panel is not None:
        _check_return_frequency(settings, panel, mkeys, coll)
    rkeys = period_keys(rf.dates, settings.frequency)

    missing = np.setdiff1d(mkeys[win], rkeys)
    if len(missing):
        at = np.isin(mkeys[win], missing)
        dates, mrows = market.dates[win][at], (market.rows[win][at] if market.rows is not None
                                                else [None] * int(at.sum()))
        after = np.searchsorted(rkeys, missing)     # the risk-free row it is missing before
        for k in range(min(len(missing), MAX_PER_CHECK)):
            if rf.rows is not None and after[k] < len(rf.rows):
                where = place(rname, int(rf.rows[after[k]]), "date")
                hint = "missing before this row"
            else:
                where, hint = rname, "missing after the last row"
            market_at = f" ({mname} row {mrows[k]})" if mrows[k] is not None else ""
            coll.error(where, f"no rate for the period of {dates[k]}{market_at}, which the "
                       f"window needs; {hint}")
        if len(missing) > MAX_PER_CHECK:
            coll.error(rname, f"... and {len(missing) - MAX_PER_CHECK} more periods of the "
                       "window with no rate")
        return
    pos = np.searchsorted(rkeys, mkeys[win])
    if (problem := constant_premium(market.values[win] - rf.values[pos], settings)) is not None:
        coll.problems.append(problem)


def _folded(name: str) -> str:
    """A sector name with case, spaces and Unicode compatibility forms (NFKC: a full-width
    letter, a decomposed accent) set aside, for finding the held sector a limit meant."""
    return "".join(unicodedata.normalize("NFKC", name).split()).casefold()


def check_sector_limit_names(limits: LimitsSection | None, holdings: Holdings, where: str,
                             coll: Collector) -> None:
    """Each sector that ``max_sector_weight`` of ``limits`` names must be one a holding of
    ``holdings`` belongs to, written exactly as the holdings file writes it (a limit is
    applied to the sector of that exact name). A name that matches a held sector but for
    case, spaces or Unicode form (NFKC) is an error: its limit would be applied to a weight
    of 0 and the sector itself judged only under "*". An empty name is an error. A name
    that matches nothing is a warning (a sector not held today weighs 0), unless its letters
    mix scripts (Cyrillic "Е" in "Еnergy", which NFKC does not fold): that is an error, as a
    look-alike of a held name would be. ``where``: the
    table's place in pack.toml, for the messages."""
    table = limits.max_sector_weight if limits is not None else None
    if not isinstance(table, dict):
        return
    held = sorted({str(s) for s in holdings.frame["sector"].dropna()})
    folded = {_folded(s): s for s in held}
    for name in sorted(table):
        if name == OTHER_SECTORS or name in held:
            continue
        if not name.strip():
            coll.error(f"{where}.{name!r}", "a sector name that is empty or only spaces "
                       "names no sector; write the sector as the holdings file does")
            continue
        near = folded.get(_folded(name))
        scripts = letter_scripts(name)
        if near is None and len(scripts) > 1:
            coll.error(f"{where}.{name}", f"the sector name {name!r} mixes "
                       f"{' and '.join(s.title() for s in scripts)} letters, as a look-alike "
                       "letter does, and no holding's sector is written so; write it as the "
                       "holdings file does")
        elif near is not None:
            coll.error(f"{where}.{name}", f"no holding's sector is {name!r}, but {near!r} is "
                       "(sector names must match exactly); write it as the holdings file does")
        else:
            coll.warn(f"{where}.{name}", f"no holding belongs to the sector {name!r}, so its "
                      "limit applies to a weight of 0; check the name against the holdings "
                      "file's sectors")


def _check_wipe_out(settings: Settings, holdings: Holdings, panel: ReturnPanel,
                    market: DatedSeries | None, rf: DatedSeries | None,
                    benchmark: DatedSeries | None, coll: Collector) -> None:
    """Today's weights applied to each period's returns (the back-cast the pack reports) must
    not lose all of the portfolio: with short positions the gross exposure can exceed 100%,
    and a period return of -100% or worse leaves nothing to compound (and a fractional power
    of a negative number). One error, naming the first such period up to ``period_end``.
    Cash earns the risk-free rate and a proxy (another holding, the market or the
    ``benchmark``) stands in, as in the analysis."""
    weights = holdings.weights
    if not settings.allow_short or not len(panel.period_keys) or (weights >= 0).all():
        return       # long-only weights summing to 1 average returns that are above -100%
    if market is not None and rf is not None:
        covered, _ = cover_holdings(ValidInputs(holdings=holdings, returns=panel, market=market,
                                                risk_free=rf, warnings=[]), settings,
                                    benchmark)
        panel = covered.returns
    end_key = period_keys(np.array([np.datetime64(settings.period_end, "D")]),
                          settings.frequency)[0]
    upto = panel.period_keys <= end_key
    with np.errstate(invalid="ignore", over="ignore"):
        port = portfolio_returns(panel.values[upto], weights)
    keys = panel.period_keys[upto]
    dates = None
    if market is not None:
        mkeys = period_keys(market.dates, settings.frequency)
        pos = np.minimum(np.searchsorted(mkeys, keys), len(mkeys) - 1)
        dates = np.where(mkeys[pos] == keys, market.dates[pos], np.datetime64("NaT"))
    problem = wipe_out_problem(settings, holdings, port, dates)
    if problem is not None:
        coll.problems.append(problem)


def wipe_out_problem(settings: Settings, holdings: Holdings, port: np.ndarray,
                     dates: np.ndarray | None) -> Problem | None:
    """The error for a portfolio whose return ``port`` (by period, dated ``dates``) is -100%
    or worse in some period, or None. Shared by validation and the analysis (which sees the
    proxies' and cash's returns too), so that both say the same."""
    with np.errstate(invalid="ignore"):
        lost = np.flatnonzero(port <= -1.0)
    if not len(lost):
        return None
    k = int(lost[0])
    label = str(dates[k]) if dates is not None and not np.isnat(dates[k]) else f"period {k + 1}"
    gross = float(np.abs(holdings.weights).sum())
    more = f" (and in {len(lost) - 1} more period(s))" if len(lost) > 1 else ""
    spec = settings.inputs.get("holdings")
    return Problem(place(spec.display if spec else "holdings", None, holdings.weight_source),
                   f"the gross leverage of {gross:.4g} (sum of |weights|) wipes the portfolio "
                   f"out: its return in the period of {label} is {port[k]:.0%}{more}, and "
                   "nothing is left to compound; reduce the long and short weights")
