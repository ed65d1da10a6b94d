"""The build pipeline: compute everything, then write once.

read -> validate -> analyse -> chart -> render (HTML, PDF) -> write. Nothing touches the
output folder until every output exists in memory.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import io
import json
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from reporter import __version__
from reporter.analytics.pack import PackResults, analyse
from reporter.benchmark import validate_benchmark, validate_portfolio_returns
from reporter.charts import build_charts
from reporter.config import INPUT_ROLES, OPTIONAL_ROLES, Settings, load_settings
from reporter.context import PackContext, build_context
from reporter.errors import Problem
from reporter.models import ValidInputs
from reporter.progress import Progress
from reporter.render.html import export_charts, render_html
from reporter.render.pdf import render_pdf
from reporter.validate import read_inputs, validate_tables
from reporter.writer import OutputSet, check_target, commit


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
    for role in INPUT_ROLES:
        out[role] = _sha256(settings.inputs[role].path)
    for role in OPTIONAL_ROLES:
        if role in settings.inputs:
            out[role] = _sha256(settings.inputs[role].path)
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


def _results_csv(res: PackResults) -> str:
    buf = io.StringIO()
    res.securities.to_csv(buf, index=False, lineterminator="\n", float_format="%.10g")
    return buf.getvalue()


def _json(obj) -> str:
    def clean(v):
        if isinstance(v, float | np.floating):
            return None if not np.isfinite(v) else float(v)
        if isinstance(v, np.integer):
            return int(v)
        return v
    return json.dumps({k: clean(v) for k, v in obj.items()}, indent=2, sort_keys=True) + "\n"


@dataclass(frozen=True)
class Assembled:
    """Everything computed for one pack, before any rendering to PDF or writing."""

    settings: Settings
    inputs: ValidInputs
    results: PackResults
    context: PackContext
    svgs: dict
    hashes: dict[str, str]

    def html(self, for_print: bool = False) -> str:
        return render_html(self.context, self.svgs, for_print=for_print,
                           user_templates=self.settings.templates_dir)


def assemble(settings: Settings, *, strict: bool = False,
             progress: Progress | None = None) -> Assembled:
    """Read, validate, analyse and chart one pack (no output is written)."""
    progress = progress or Progress(quiet=True)
    with progress.stage("read"):
        raws, read_problems = read_inputs(settings)
    with progress.stage("validate"):
        benchmark, bench_problems = validate_benchmark(settings, raws)
        own, own_problems = validate_portfolio_returns(settings, raws)
        inputs = validate_tables(settings, raws,
                                 [*read_problems, *bench_problems, *own_problems], strict=strict)
    with progress.stage("analyse"):
        res = analyse(inputs, settings, benchmark=benchmark, portfolio=own)
        hashes = input_hashes(settings)
    with progress.stage("chart"):
        charts = build_charts(res)
        ctx = build_context(settings, inputs, res, charts, fingerprint(hashes), build_time())
        svgs = export_charts(ctx)
    return Assembled(settings, inputs, res, ctx, svgs, hashes)


def build_pack(pack: Path | str, out: Path | str, *, strict: bool = False,
               progress: Progress | None = None) -> BuildReport:
    """Build ``pack`` (folder or pack.toml) into ``out``: pack.html, pack.pdf, results/."""
    progress = progress or Progress(quiet=True)
    out = Path(out)
    settings = load_settings(pack)
    check_target(out)
    a = assemble(settings, strict=strict, progress=progress)
    with progress.stage("render"):
        html = a.html(for_print=False)
        pdf = render_pdf(a.html(for_print=True))
    res, ctx = a.results, a.context
    files = OutputSet()
    files.add("pack.html", html)
    files.add("pack.pdf", pdf)
    files.add("results/securities.csv", _results_csv(res))
    files.add("results/portfolio.json", _json(res.portfolio_summary()))
    buf = io.StringIO()
    res.rolling_table.to_csv(buf, index=False, lineterminator="\n", float_format="%.10g")
    files.add("results/rolling_beta.csv", buf.getvalue())
    buf = io.StringIO()
    res.period_table.to_csv(buf, index=False, lineterminator="\n", float_format="%.10g")
    files.add("results/period_returns.csv", buf.getvalue())
    buf = io.StringIO()
    res.risk_table.to_csv(buf, index=False, lineterminator="\n", float_format="%.10g")
    files.add("results/risk_contributions.csv", buf.getvalue())
    files.add("results/manifest.json", _json({
        "tool_version": __version__,
        "built_utc": ctx.build_time.strftime("%Y-%m-%dT%H:%M:%SZ"),
        "period_end": settings.period_end.isoformat(),
        "title": settings.title,
        "organisation": settings.organisation,
        "input_fingerprint": ctx.fingerprint,
        "input_sha256": a.hashes,
        "input_files": {r: settings.inputs[r].display for r in INPUT_ROLES}
        | {r: settings.inputs[r].display for r in OPTIONAL_ROLES if r in settings.inputs},
        "warnings": [str(w) for w in a.inputs.warnings],
    }))
    with progress.stage("write"):
        commit(files, out)
    return BuildReport(out=out, files=files.paths, warnings=a.inputs.warnings, results=res)
