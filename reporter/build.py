"""Build a pack: compute everything, then write once.

read -> validate -> each part: analyse, chart (:mod:`reporter.pipeline`) -> render (HTML,
PDF) -> write. Nothing touches the output folder until every output exists in memory. The
names other code uses (``assemble``, ``results_files``, ``pack_files``, ``Assembled``,
``EDITIONS``, ``build_time`` ...) are kept here.
"""

from __future__ import annotations

import datetime as dt
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

from reporter.analytics.pack import PackResults
from reporter.config import load_settings
from reporter.errors import Problem
from reporter.memory import release_free_memory
from reporter.output_folder import refuse_overlap
from reporter.pipeline.assemble import assemble
from reporter.pipeline.fund import FundAssembled
from reporter.pipeline.part import value_change_of
from reporter.pipeline.results import pack_files, results_files, write_rolling_csv
from reporter.pipeline.single import EDITION_FILES, EDITIONS, Assembled
from reporter.pipeline.stages import (
    actions_stage,
    build_time,
    fingerprint,
    input_hashes,
    read_stage,
)
from reporter.progress import Progress
from reporter.render.pdf import render_pdf
from reporter.writer import OutputSet, check_target, commit, open_staging

__all__ = [
    "EDITIONS", "EDITION_FILES", "Assembled", "BuildReport", "FundAssembled", "actions_stage",
    "assemble", "build_pack", "build_time", "finish_build", "fingerprint", "input_hashes",
    "pack_files", "read_stage", "results_files", "value_change_of", "write_rolling_csv",
]


@dataclass(frozen=True)
class BuildReport:
    out: Path
    files: list[str]
    warnings: list[Problem]
    results: PackResults


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


def finish_build(a: Assembled | FundAssembled, out: Path, progress: Progress) -> OutputSet:
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
