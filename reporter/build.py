"""Build a pack: compute everything, then write once.

read -> validate -> each part: analyse, chart (:mod:`reporter.pipeline`) -> render (HTML,
PDF) -> write. Nothing touches the output folder until every output exists in memory. The
names other code uses (``assemble``, ``results_files``, ``pack_files``, ``Assembled``,
``EDITIONS``, ``build_time`` ...) are kept here.
"""

from __future__ import annotations

import datetime as dt
import threading
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from reporter.analytics.pack import PackResults
from reporter.config import load_settings
from reporter.errors import Problem
from reporter.memory import release_free_memory
from reporter.output_folder import refuse_overlap
from reporter.pipeline.assemble import assemble
from reporter.pipeline.fund import FundAssembled
from reporter.pipeline.part import value_change_of
from reporter.pipeline.results import pack_files, results_files, rolling_file, write_rolling_csv
from reporter.pipeline.single import EDITION_FILES, EDITIONS, Assembled
from reporter.pipeline.stages import (
    actions_stage,
    build_time,
    fingerprint,
    input_hashes,
    read_stage,
)
from reporter.progress import Progress
from reporter.render.html import MemoryBytecodeCache
from reporter.render.pdf import render_pdf
from reporter.writer import OutputSet, check_target, commit, open_staging

__all__ = [
    "EDITIONS", "EDITION_FILES", "Assembled", "BuildReport", "FundAssembled", "actions_stage",
    "assemble", "build_pack", "build_time", "finish_build", "fingerprint", "input_hashes",
    "pack_files", "read_stage", "results_files", "value_change_of", "write_rolling_csv",
]


@dataclass(frozen=True)
class BuildReport:
    """What a build wrote. ``results`` are the pack's results as the build left them: the
    large arrays only the files needed are released (:func:`release_arrays`)."""

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
    if settings.compare_build is not None:      # the earlier build is an input too
        refuse_overlap(settings.compare_build, out, "earlier build ([compare] previous)")
    check_target(out)
    a = assemble(settings, strict=strict, progress=progress, at=at)
    files = finish_build(a, out, progress, release=True)
    return BuildReport(out=out, files=files.paths,
                       warnings=a.inputs.warnings + a.compare_warnings, results=a.results)


def finish_build(a: Assembled | FundAssembled, out: Path, progress: Progress, *,
                 release: bool = False) -> OutputSet:
    """Render the HTML and PDF of an assembled pack and write every file into ``out``
    (stages html, pdf and write). The rolling-beta file, the largest results file, is
    written into the staging folder beside ``out`` by a second thread while WeasyPrint
    renders the PDF: pyarrow formats it outside Python's lock and it goes to disk as it is
    made, never whole in memory. The other results files come after the PDF: they are made
    in Python (the workbook above all), and beside the PDF they held Python's lock for
    seconds, slowing the PDF about as much as they took, with their memory on top of
    WeasyPrint's (Large: PDF stage 802 MB and 10.9 s with them beside it, 629 MB and
    6.5 s without, at load 2). With ``release`` (a build, which has no further use for
    ``a``), ``a`` is consumed: the arrays nothing renders from (the window's returns, the
    covariance estimates) are released before the HTML, and the returns the rolling betas
    are made from once every results file is written (see :func:`release_arrays`). A failure
    anywhere (an interrupt included) removes the staging folder at once; the results thread
    stops at its next write."""
    settings = a.settings
    if release:
        release_arrays(a, rolling=False)
    with progress.stage("html"):
        compiled = MemoryBytecodeCache()        # each template compiled once for all pages
        html = a.html(for_print=False, bytecode_cache=compiled)
        print_html = {e: a.html(for_print=True, edition=e, bytecode_cache=compiled)
                      for e in EDITIONS}
        release_free_memory()       # the analysis' and charts' temporaries, before the PDF

    pdf_done = threading.Event()        # then the results thread may format on two threads

    files = OutputSet(open_staging(out))
    pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="results")
    try:
        rolling = pool.submit(rolling_file, a, files, pdf_done)
        with progress.stage("pdf"):
            pdf = {e: render_pdf(text, base_dir=settings.pack_dir,
                                 allowed=(settings.pack_dir,))
                   for e, text in print_html.items()}
        pdf_done.set()
        with progress.stage("write"):
            results_files(a, files, rolling=False)
            rolling.result()            # the rolling file, written meanwhile
            if release:                 # (a fund's rolling table is one of its results)
                release_arrays(a, rolling=True)
            pack_files(a, html, pdf, files)
            commit(files, out)
    except BaseException:
        files.discard()                 # before waiting for the thread, which it stops
        raise
    finally:
        pdf_done.set()
        pool.shutdown(wait=True)
    return files


def release_arrays(a: Assembled | FundAssembled, rolling: bool = True) -> None:
    """Drop from ``a``'s results (every part of a fund) the arrays nothing needs once its
    charts, HTML and (with ``rolling``) results files are made: the window's T x N returns,
    the two N x N covariance estimates and the returns the rolling betas are made from. Their
    places keep empty arrays, and every other figure stays, so ``a`` can still render its
    HTML and summaries; :attr:`BuildReport.results` is these released results."""
    parts = (a.total, *a.parts) if isinstance(a, FundAssembled) else (a,)
    for res in (p.results for p in parts):
        drop = {"window": replace(res.window, returns=np.empty((res.window.n_periods, 0))),
                "covariance": replace(res.covariance, matrix=np.empty((0, 0))),
                "covariance_active": replace(res.covariance_active, matrix=np.empty((0, 0)))}
        if rolling:
            drop["rolling"] = res.rolling.released()
        for name, value in drop.items():       # the results are frozen for every other use
            object.__setattr__(res, name, value)
