"""The results files of an assembled pack (a single portfolio or a fund), and the manifest.

Nothing here touches the disk but through the :class:`~reporter.writer.OutputSet` given."""

from __future__ import annotations

import threading
from collections import Counter, deque
from concurrent.futures import Future, ThreadPoolExecutor

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv

from reporter import __version__
from reporter.analytics.allocation import allocation
from reporter.analytics.pack import ROLLING_COLUMNS, PackResults
from reporter.analytics.rolling import RollingBetas
from reporter.csvsafe import csv_text, escape_array
from reporter.jsonvalues import json_text
from reporter.pipeline.fund import FundAssembled
from reporter.pipeline.single import EDITION_FILES, Assembled
from reporter.workbook import pack_workbook
from reporter.writer import OutputSet

MAKE = 500     # series whose rolling betas are made at once for the rolling file


def write_rolling_csv(res: PackResults, sink, block: int = 100,
                      widen: threading.Event | None = None) -> None:
    """Write ``results/rolling_beta.csv`` into the binary file ``sink`` with pyarrow's CSV
    writer, ``block`` series at a time: the rolling betas of 2,000 daily holdings are 4.5
    million rows (300 MB of CSV), which pandas' writer took some 25 s and a whole-table copy
    some 1 GB over. Floats are rounded to 10 decimal places (and printed in their shortest
    form), dates are ISO dates, and text is quoted only when it holds a comma, quote or line
    break. Each block goes from numpy arrays to pyarrow without a Python object per row (the
    series column is dictionary-encoded). The holdings' betas themselves are made here, a
    block at a time (:class:`~reporter.analytics.rolling.HoldingsRolling`).

    pyarrow formats outside Python's lock. With ``widen`` (a build, where this runs beside
    the PDF), blocks are formatted one at a time straight into ``sink`` until ``widen`` is
    set (the PDF done): a second formatting thread beside the PDF would only take the PDF's
    core, and a block formatted into memory first holds its whole text (Large: the PDF
    stage peaked ~150 MB higher that way). The blocks left then, and all of them without
    ``widen``, are formatted on two threads into memory and written in order: at 10,000
    daily holdings the file is 25 million rows, and it is what a build waits for once the
    PDF is done. A block of 100 series of 2,520 daily periods is a quarter of a million
    rows; the betas are made :data:`MAKE` series at a time and shared by their blocks."""
    ids = escape_array(res.rolling_ids())          # no id can start a spreadsheet formula
    quote = any(any(ch in sid for ch in ',"\r\n') for sid in ids)
    dates = pa.array(np.asarray(res.history_dates, dtype="datetime64[D]"), pa.date32())

    n = len(ids)
    made: dict[int, RollingBetas] = {}        # the betas of the chunks being written
    # each chunk is dropped once the last of its blocks has taken its part (blocks may be
    # made in any order once two threads format them), so beside the PDF only one is held
    left = Counter(s // MAKE for s in range(0, n, block)
                   if (min(s + block, n) - 1) // MAKE == s // MAKE)
    making = threading.Lock()

    def betas(cols: np.ndarray) -> RollingBetas | None:
        # made MAKE series at a time: each is a loop over the dates in Python, and a loop
        # over a block of 100 series held Python's lock about as long as one over 500
        # (Large, beside the PDF: about a second of the PDF's time)
        chunk = int(cols[0]) // MAKE
        if int(cols[-1]) // MAKE != chunk:          # a block across chunks: None, so that
            return None                             # rolling_arrays makes its own betas
        with making:
            if chunk not in made:
                whole = np.arange(chunk * MAKE, min((chunk + 1) * MAKE, n))
                made[chunk] = res.rolling.block(whole[whole > 0] - 1)
            got = made[chunk]
            left[chunk] -= 1
            if not left[chunk]:
                del made[chunk]
        part = cols[cols > 0] - max(chunk * MAKE, 1)
        return RollingBetas(got.window, got.beta[:, part], got.beta_se[:, part])

    def table(start: int) -> pa.Table:
        cols = np.arange(start, min(start + block, n))
        t_idx, j_idx, *values = res.rolling_arrays(cols, betas(cols))
        return pa.table({
            "date": dates.take(pa.array(t_idx)),
            "series": pa.DictionaryArray.from_arrays(pa.array(j_idx.astype(np.int32)),
                                                     pa.array(ids[cols], pa.string())),
            **{c: pa.array(np.round(v, 10))
               for c, v in zip(ROLLING_COLUMNS[2:], values, strict=True)}})

    def write(start: int, out) -> None:
        pacsv.write_csv(table(start), out, write_options=pacsv.WriteOptions(
            include_header=start == 0, quoting_header="none", batch_size=1 << 16,
            quoting_style="needed" if quote else "none"))

    def formatted(start: int) -> pa.Buffer:
        out = pa.BufferOutputStream()
        write(start, out)
        return out.getvalue()

    starts = deque(range(0, n, block))
    while widen is not None and starts and not widen.is_set():
        write(starts.popleft(), sink)           # beside the PDF: one block, no copy
    pending: deque[Future] = deque()
    with ThreadPoolExecutor(max_workers=2, thread_name_prefix="rolling") as pool:
        try:
            while starts or pending:
                while starts and len(pending) < 3:          # a bounded number ahead
                    pending.append(pool.submit(formatted, starts.popleft()))
                sink.write(pending.popleft().result())
        finally:
            for f in pending:
                f.cancel()


def fund_results_files(a: FundAssembled) -> dict[str, str]:
    """The fund's results files (besides portfolio.json and manifest.json), as text."""
    csv = csv_text
    tables = a.result_tables()
    return {
        "results/securities.csv": csv(tables["securities"]),
        "results/rolling_beta.csv": csv(tables["rolling_table"]),
        "results/period_returns.csv": csv(tables["period_table"]),
        "results/risk_contributions.csv": csv(tables["risk_table"]),
        "results/mandates.csv": csv(a.table),
        "results/overlap.csv": csv(a.overlap),
        "results/overlap_pairs.csv": csv(a.pairs),
        "results/mandate_portfolio.json": a.mandate_portfolio_json(),
    } | ({"results/mandate_changes.json": a.mandate_changes_json()}
         if a.settings.compare_build is not None or a.settings.compare_archive is not None
         else {})


def rolling_file(a: Assembled | FundAssembled, files: OutputSet,
                 widen: threading.Event | None = None) -> None:
    """Add a single portfolio's rolling-beta file to ``files``, written straight to the
    staging folder (``widen``: see :func:`write_rolling_csv`); a fund's is one of its
    :func:`fund_results_files`, and this adds nothing for it."""
    if not isinstance(a, FundAssembled):
        res = a.results
        files.add_written("results/rolling_beta.csv",
                          lambda sink: write_rolling_csv(res, sink, widen=widen))


def _portfolio_results(a: Assembled, files: OutputSet, rolling: bool = True) -> None:
    """The results files of a single portfolio's one part (with ``rolling``, the rolling
    betas' file too: see :func:`rolling_file`)."""
    res = a.results
    files.add("results/securities.csv", csv_text(res.securities))
    style = a.style.summary() if a.style is not None else {}
    files.add("results/portfolio.json", json_text(res.portfolio_summary() | style))
    if a.style is not None and a.style.attribution is not None:
        files.add("results/attribution.csv", csv_text(a.style.attribution.table()))
    if rolling:
        rolling_file(a, files)
    for rel, table in (("results/period_returns.csv", res.period_table),
                       ("results/risk_contributions.csv", res.risk_table)):
        files.add(rel, csv_text(table))


def _fund_results(a: FundAssembled, files: OutputSet) -> None:
    """The results files of a fund's parts, one long table each, and what joins them."""
    for rel, text in fund_results_files(a).items():
        files.add(rel, text)
    files.add("results/portfolio.json", json_text(a.results.portfolio_summary() | {
        "fund_benchmark": a.inputs.benchmark_label,
        "mandate_weight_source": a.inputs.weight_source}))
    mandate_limits = {p.name: p.limits.as_json() for p in a.parts if p.limits is not None}
    if mandate_limits:
        files.add("results/mandate_limits.json", json_text(mandate_limits))


def results_files(a: Assembled | FundAssembled, files: OutputSet,
                  rolling: bool = True) -> None:
    """Add the results files of a build (all but the manifest) to ``files``; without
    ``rolling``, all but a single portfolio's rolling-beta file (which a build writes beside
    the PDF: see :func:`rolling_file`)."""
    settings = a.settings
    res, ctx = a.results, a.context
    if isinstance(a, FundAssembled):
        _fund_results(a, files)
    else:
        _portfolio_results(a, files, rolling)
    if res.stress is not None:
        files.add("results/risk_scenarios.json", json_text(res.stress.as_json()))
        files.add("results/risk_scenarios.csv", res.stress.csv_text())
    if a.limits is not None:
        files.add("results/limits.json", json_text(a.limits.as_json()))
    if ctx.value_change is not None:
        files.add("results/value.json", json_text(ctx.value_change.as_json()))
    if ctx.allocation:
        files.add("results/allocation.csv", csv_text(allocation(res.securities)))
    if settings.compare_build is not None or settings.compare_archive is not None:
        doc = a.changes.as_json() if a.changes is not None else {
            "previous": None, "note": ctx.compare_note}
        files.add("results/changes.json", json_text(doc))
    files.add("results/pack.xlsx", pack_workbook(a))   # the same tables, for a spreadsheet


def pack_files(a: Assembled | FundAssembled, html: str, pdf: bytes | dict[str, bytes],
               files: OutputSet | None = None) -> OutputSet:
    """Every file of a build: the pack's HTML and PDFs, the results files and the manifest
    (with the sha256 of every other output). ``pdf``: the PDF of each edition by edition
    (see :data:`~reporter.pipeline.single.EDITIONS`), or the full pack's bytes alone.
    ``files``: an output set that holds the results files already (see
    :func:`reporter.build.finish_build`); by default a new one, in memory, gets them."""
    settings, ctx = a.settings, a.context
    if files is None:
        files = OutputSet()
        results_files(a, files)
    files.add("pack.html", html)
    for edition, data in ({"full": pdf} if isinstance(pdf, bytes) else pdf).items():
        files.add(EDITION_FILES[edition], data)
    files.add("results/manifest.json", json_text({
        "tool_version": __version__,
        "pack_name": settings.name,
        "pack_dir": str(settings.pack_dir),
        # what sign-off checks the build folder against before it signs
        "output_sha256": {rel: files.sha256(rel) for rel in files.paths},
        "built_utc": ctx.build_time.strftime("%Y-%m-%dT%H:%M:%SZ"),
        "period_end": settings.period_end.isoformat(),
        "title": settings.title,
        "organisation": settings.organisation,
        "input_fingerprint": ctx.fingerprint,
        "input_sha256": a.hashes,
        "input_files": {r: s.display for r, s in settings.inputs.items()}
        | {rel: rel for rel in a.commentary.hashes}      # commentary files and images
        | ({"actions.csv": "actions.csv"} if "actions.csv" in a.hashes else {}),
        "warnings": [str(w) for w in a.inputs.warnings],
    }))
    return files
