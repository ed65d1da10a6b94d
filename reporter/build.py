"""The build pipeline: compute everything, then write once.

read -> validate -> analyse -> chart -> render (HTML, PDF) -> write. Nothing touches the
output folder until every output exists in memory.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv

from reporter import __version__
from reporter.actions import ActionLog, read_actions
from reporter.analytics.allocation import allocation
from reporter.analytics.changes import PackChanges, compare_packs
from reporter.analytics.fees import fee_figures
from reporter.analytics.flows import ValueChange, pack_value_change
from reporter.analytics.pack import ROLLING_COLUMNS, PackResults, analyse
from reporter.analytics.style import StyleResults, analyse_style
from reporter.benchmark import (
    validate_benchmark,
    validate_gross_returns,
    validate_portfolio_returns,
)
from reporter.changes import read_previous
from reporter.charts import build_charts
from reporter.commentary import CommentarySet, read_commentary
from reporter.config import Settings, load_settings
from reporter.context import PackContext, build_context
from reporter.csvsafe import csv_text, escape_array
from reporter.errors import InputError, Problem
from reporter.factor_inputs import validate_style_inputs
from reporter.jsonvalues import json_text
from reporter.limits import LimitsReport, evaluate_limits
from reporter.memory import release_free_memory
from reporter.models import ValidInputs
from reporter.output_folder import refuse_overlap
from reporter.progress import Progress
from reporter.render.html import export_charts, print_charts, render_html
from reporter.render.pdf import render_pdf
from reporter.style_charts import style_charts
from reporter.validate import read_inputs, validate_tables
from reporter.validate.flows import (
    CashFlows,
    earlier_end,
    flow_period_start,
    validate_cash_flows,
)
from reporter.workbook import pack_workbook
from reporter.writer import OutputSet, check_target, commit, open_staging


@dataclass(frozen=True)
class BuildReport:
    out: Path
    files: list[str]
    warnings: list[Problem]
    results: PackResults


def build_time() -> dt.datetime:
    """The build's timestamp: ``SOURCE_DATE_EPOCH`` when set (reproducible builds), else now."""
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if epoch and epoch.strip().isdigit():
        return dt.datetime.fromtimestamp(int(epoch), tz=dt.UTC)
    return dt.datetime.now(dt.UTC).replace(microsecond=0)


def input_hashes(settings: Settings) -> dict[str, str]:
    """sha256 of pack.toml and of each input file, keyed by role."""
    out = {"pack.toml": _sha256(settings.config_path)}
    for role, spec in settings.inputs.items():      # the mandates' files too, in a fund
        out[role] = _sha256(spec.path)
    return out


def fingerprint(hashes: dict[str, str]) -> str:
    """One sha256 over the per-file hashes, in a fixed order."""
    text = "".join(f"{k}={hashes[k]}\n" for k in sorted(hashes))
    return hashlib.sha256(text.encode()).hexdigest()


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def write_rolling_csv(res: PackResults, sink, block: int = 50) -> None:
    """Write ``results/rolling_beta.csv`` into the binary file ``sink`` with pyarrow's CSV
    writer, ``block`` series at a time: the rolling betas of 2,000 daily holdings are 4.5
    million rows (300 MB of CSV), which pandas' writer took some 25 s and a whole-table copy
    some 1 GB over. Floats are rounded to 10 decimal places (and printed in their shortest
    form), dates are ISO dates, and text is quoted only when it holds a comma, quote or line
    break. Each block goes from numpy arrays to pyarrow without a Python object per row (the
    series column is dictionary-encoded). pyarrow formats outside Python's lock, so this can
    run beside the PDF."""
    ids = escape_array(res.rolling_ids())          # no id can start a spreadsheet formula
    quote = any(any(ch in sid for ch in ',"\r\n') for sid in ids)
    options = pacsv.WriteOptions(quoting_header="none", batch_size=1 << 16,
                                 quoting_style="needed" if quote else "none")
    dates = pa.array(np.asarray(res.history_dates, dtype="datetime64[D]"), pa.date32())
    writer = None
    for start in range(0, len(ids), block):
        cols = np.arange(start, min(start + block, len(ids)))
        t_idx, j_idx, *values = res.rolling_arrays(cols)
        table = pa.table({
            "date": dates.take(pa.array(t_idx)),
            "series": pa.DictionaryArray.from_arrays(pa.array(j_idx.astype(np.int32)),
                                                     pa.array(ids[cols], pa.string())),
            **{c: pa.array(np.round(v, 10))
               for c, v in zip(ROLLING_COLUMNS[2:], values, strict=True)}})
        writer = writer or pacsv.CSVWriter(sink, table.schema, write_options=options)
        writer.write_table(table)
    writer.close()


# the PDF editions of a build: edition -> (template, file name)
EDITIONS = {"full": "pack.html.j2", "trustees": "trustees.html.j2"}
EDITION_FILES = {"full": "pack.pdf", "trustees": "pack-trustees.pdf"}


def actions_stage(settings: Settings, hashes: dict[str, str]) -> ActionLog:
    """The pack's action log (``actions.csv``, optional); its sha256 joins ``hashes`` so
    that the input fingerprint, and sign-off's check of the inputs, notice an edit."""
    log = read_actions(settings.pack_dir, settings.period_end)
    if log.sha256 is not None:
        hashes["actions.csv"] = log.sha256
    return log


@dataclass(frozen=True)
class Assembled:
    """Everything computed for one pack, before any rendering to PDF or writing."""

    settings: Settings
    inputs: ValidInputs
    results: PackResults
    context: PackContext
    svgs: dict
    hashes: dict[str, str]
    print_svgs: dict = field(default_factory=dict)   # the charts as the PDF draws them
    limits: LimitsReport | None = None
    changes: PackChanges | None = None
    compare_warnings: list[Problem] = field(default_factory=list)
    commentary: CommentarySet = field(default_factory=CommentarySet)
    style: StyleResults | None = None    # factor model and attribution, when given

    def html(self, for_print: bool = False, signoff: dict | None = None,
             edition: str = "full") -> str:
        """The pack's HTML; ``edition`` "trustees" gives the trustees' edition (the same
        context through ``trustees.html.j2``)."""
        charts = (self.print_svgs or self.svgs) if for_print else self.svgs
        return render_html(self.context, charts, for_print=for_print,
                           user_templates=self.settings.templates_dir, signoff=signoff,
                           template=EDITIONS[edition], extra={"edition": edition})


def read_stage(settings: Settings, strict: bool = False) -> tuple:
    """What the read stage gathers, for a single pack or a fund: the raw input tables and the
    problems of those that could not be read, the earlier pack to compare with (or None) and
    the warnings about it, the commentary, and the note shown when there is nothing to
    compare. With ``strict``, a comparison warning stops the build."""
    raws, read_problems = read_inputs(settings)
    previous, compare_warnings = read_previous(settings)
    commentary = read_commentary(settings.pack_dir)
    compare_note = compare_warnings[0].message if compare_warnings else None
    if "changes" in commentary.by_section and previous is None and compare_note is None:
        compare_warnings.append(Problem(
            "commentary/changes.md", "not shown: there is no [compare] table in "
            "pack.toml, so the pack has no 'Since last pack' section", "warning"))
    if strict and compare_warnings:
        raise InputError(compare_warnings)
    return raws, read_problems, previous, compare_warnings, commentary, compare_note


def assemble(settings: Settings, *, strict: bool = False, progress: Progress | None = None,
             at: dt.datetime | None = None) -> Assembled:  # or a fund's FundAssembled
    """Read, validate, analyse and chart one pack (no output is written).

    ``at`` fixes the build time shown in the pack (sign-off re-renders a build with the time
    it was built); by default it is :func:`build_time`.
    """
    if settings.is_fund:
        from reporter.fund_build import assemble_fund

        return assemble_fund(settings, strict=strict, progress=progress, at=at)
    progress = progress or Progress(quiet=True)
    with progress.stage("read"):
        (raws, read_problems, previous, compare_warnings, commentary,
         compare_note) = read_stage(settings, strict)
    with progress.stage("validate"):
        benchmark, bench_problems = validate_benchmark(settings, raws)
        own, own_problems = validate_portfolio_returns(settings, raws)
        style_in, style_problems = validate_style_inputs(settings, raws)
        gross, gross_problems = validate_gross_returns(settings, raws)
        flows, flow_problems = validate_cash_flows(settings, raws,
                                                   earlier_end(settings, previous))
        inputs = validate_tables(settings, raws, list(dict.fromkeys(
            [*read_problems, *bench_problems, *own_problems, *style_problems,
             *gross_problems, *flow_problems])), strict=strict)
        del raws                    # the typed inputs hold everything needed from here on
        release_free_memory()
    with progress.stage("analyse"):
        res = analyse(inputs, settings, benchmark=benchmark, portfolio=own)
        res, style = analyse_style(res, inputs.holdings.frame, settings, style_in)
        hashes = input_hashes(settings)
        hashes.update(commentary.hashes)        # the commentary files and their images
        actions = actions_stage(settings, hashes)
        limits = evaluate_limits(settings.limits, res) if settings.limits else None
        changes = None
        if previous is not None:
            changes = compare_packs(previous, res,
                                    limits.as_json()["limits"] if limits else None,
                                    settings.confidence)
        money = value_change_of(settings, res, previous, flows)
        fees = (fee_figures(res.window.dates, own, gross, settings.frequency,
                            settings.periods_per_year) if own is not None and gross is not None
                else None)
    with progress.stage("chart"):
        charts = build_charts(res, limits) | style_charts(style)
        ctx = build_context(settings, inputs, res, charts, fingerprint(hashes),
                            at or build_time(), limits=limits, changes=changes,
                            compare_note=compare_note, commentary=commentary.by_section,
                            style=style, actions=actions, value_change=money, fees=fees)
        svgs = export_charts(ctx)
        for_pdf = print_charts(ctx, svgs)
    return Assembled(settings, inputs, res, ctx, svgs, hashes, print_svgs=for_pdf, limits=limits,
                     changes=changes, compare_warnings=compare_warnings, commentary=commentary,
                     style=style)


def value_change_of(settings: Settings, res: PackResults, previous,
                    flows: CashFlows | None) -> ValueChange | None:
    """The pack's value and its change since the last pack (see :mod:`analytics.flows`)."""
    prev_end = earlier_end(settings, previous)
    prev_value = previous.portfolio.get("total_value") if prev_end is not None else None
    prev_value = float(prev_value) if isinstance(prev_value, int | float) else None
    return pack_value_change(
        settings.currency, settings.period_end, res.portfolio_summary()["total_value"],
        prev_end, prev_value, flow_period_start(settings, prev_end),
        flows.dates if flows is not None else None, flows.amounts if flows is not None else None)


def results_files(a: Assembled, files: OutputSet) -> None:
    """Add the results files of a build (all but the manifest) to ``files``."""
    settings = a.settings
    res, ctx = a.results, a.context
    if settings.is_fund:
        from reporter.fund_build import fund_results_files

        for rel, text in fund_results_files(a).items():
            files.add(rel, text)
        files.add("results/portfolio.json", json_text(res.portfolio_summary() | {
            "fund_benchmark": a.inputs.benchmark_label,
            "mandate_weight_source": a.inputs.weight_source}))
        mandate_limits = {p.name: p.limits.as_json() for p in a.parts if p.limits is not None}
        if mandate_limits:
            files.add("results/mandate_limits.json", json_text(mandate_limits))
    else:
        files.add("results/securities.csv", csv_text(res.securities))
        style = a.style.summary() if a.style is not None else {}
        files.add("results/portfolio.json", json_text(res.portfolio_summary() | style))
        if a.style is not None and a.style.attribution is not None:
            files.add("results/attribution.csv", csv_text(a.style.attribution.table()))
        files.add_written("results/rolling_beta.csv", lambda sink: write_rolling_csv(res, sink))
        for rel, table in (("results/period_returns.csv", res.period_table),
                           ("results/risk_contributions.csv", res.risk_table)):
            files.add(rel, csv_text(table))
    if res.stress is not None:
        files.add("results/risk_scenarios.json", json_text(res.stress.as_json()))
        files.add("results/risk_scenarios.csv", res.stress.csv_text())
    if a.limits is not None:
        files.add("results/limits.json", json_text(a.limits.as_json()))
    if a.context.value_change is not None:
        files.add("results/value.json", json_text(a.context.value_change.as_json()))
    if a.context.allocation:
        files.add("results/allocation.csv", csv_text(allocation(res.securities)))
    if settings.compare_build is not None or settings.compare_archive is not None:
        doc = a.changes.as_json() if a.changes is not None else {
            "previous": None, "note": ctx.compare_note}
        files.add("results/changes.json", json_text(doc))
    files.add("results/pack.xlsx", pack_workbook(a))   # the same tables, for a spreadsheet


def pack_files(a: Assembled, html: str, pdf: bytes | dict[str, bytes],
               files: OutputSet | None = None) -> OutputSet:
    """Every file of a build: the pack's HTML and PDFs, the results files and the manifest
    (with the sha256 of every other output). ``pdf``: the PDF of each edition by edition
    (see :data:`EDITIONS`), or the full pack's bytes alone. ``files``: an output set that holds
    the results files already (see :func:`finish_build`); by default a new one, in memory,
    gets them."""
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


def build_pack(pack: Path | str, out: Path | str, *, strict: bool = False,
               progress: Progress | None = None, at: dt.datetime | None = None) -> BuildReport:
    """Build ``pack`` (folder or pack.toml) into ``out``: pack.html, pack.pdf, results/.

    ``at`` fixes the build time (a batch gives all its schemes one); default :func:`build_time`.
    """
    progress = progress or Progress(quiet=True)
    out = Path(out)
    settings = load_settings(pack)
    refuse_overlap(settings.pack_dir, out, "pack folder")
    check_target(out)
    a = assemble(settings, strict=strict, progress=progress, at=at)
    files = finish_build(a, out, progress)
    return BuildReport(out=out, files=files.paths,
                       warnings=a.inputs.warnings + a.compare_warnings, results=a.results)


def finish_build(a: Assembled, out: Path, progress: Progress) -> OutputSet:
    """Render the HTML and PDF of an assembled pack and write every file into ``out``
    (stages html, pdf and write). The results files are written into the staging folder
    beside ``out`` by a second thread while WeasyPrint renders the PDF: the largest, the
    rolling betas, is formatted by pyarrow outside Python's lock, and goes to disk as it is
    made rather than being held in memory. A failure anywhere (an interrupt included) removes
    the staging folder at once; the results thread stops at its next write."""
    settings = a.settings
    with progress.stage("html"):
        html = a.html(for_print=False)
        print_html = {e: a.html(for_print=True, edition=e) for e in EDITIONS}
        release_free_memory()       # the analysis' and charts' temporaries, before the PDF
    files = OutputSet(open_staging(out))
    pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="results")
    try:
        results = pool.submit(results_files, a, files)
        with progress.stage("pdf"):
            pdf = {e: render_pdf(text, base_dir=settings.pack_dir,
                                 allowed=(settings.pack_dir,))
                   for e, text in print_html.items()}
        with progress.stage("write"):
            results.result()            # the results files, written meanwhile
            pack_files(a, html, pdf, files)
            commit(files, out)
    except BaseException:
        files.discard()                 # before waiting for the thread, which it stops
        raise
    finally:
        pool.shutdown(wait=True)
    return files
