"""Build many schemes' packs at once: a local process pool, or a Dask cluster.

Each pack folder directly under the schemes folder (a folder holding ``pack.toml``) is one
task, :func:`build_scheme`, which reads its own inputs and writes its own output folder
``OUT/<scheme>/`` through the same atomic writer as a single build. Both runners submit that
one function once per scheme and collect the results as they finish, so one failing scheme
never stops the others, and the outputs are those of ``reporter build`` run on each folder.

Each worker is made ready once, before its first scheme (:func:`warm_worker`: the libraries
imported, the chart engine started, WeasyPrint's fonts loaded), by the process pool's
initializer or by a Dask worker plugin, and then builds scheme after scheme.
"""

from __future__ import annotations

import datetime as dt
import multiprocessing
import os
import sys
import time
from collections.abc import Callable, Iterable
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass
from pathlib import Path

from reporter.build import build_time
from reporter.errors import (
    EXIT_FAILED,
    InputError,
    OutputError,
    Problem,
    ReporterError,
    symlink_loop,
)
from reporter.output_folder import refuse_overlap
from reporter.writer import refuse_archive

BUILT, FAILED = "built", "failed"
CONNECT_TIMEOUT = "10s"


class ClusterError(ReporterError):
    """The Dask scheduler cannot be used (exit 1; no scheme was built)."""

    exit_code = EXIT_FAILED


@dataclass(frozen=True)
class SchemeResult:
    """How one scheme's build ended; ``reason`` is the first problem line for a failure."""

    scheme: str
    status: str
    seconds: float
    reason: str = ""
    n_problems: int = 0
    n_warnings: int = 0


def discover(schemes_dir: Path | str) -> list[Path]:
    """The pack folders directly under ``schemes_dir`` (each holds a pack.toml), by name."""
    root = Path(schemes_dir)
    if not root.is_dir():
        raise InputError([Problem(str(root), "no such folder of schemes")])
    packs = sorted(p for p in root.iterdir() if p.is_dir() and (p / "pack.toml").is_file())
    if not packs:
        raise InputError([Problem(str(root), "holds no pack folder (a folder with pack.toml)")])
    return packs


def warm_worker() -> float:
    """Make this process ready to build packs: import the pipeline, start the chart engine
    (vl-convert's JavaScript runtime, about 0.4 s on its first call in a process) and lay out
    one line with WeasyPrint (fonts, Pango). Seconds taken. Run once per worker, never
    before a fork: the engine's threads do not survive one."""
    start = time.perf_counter()
    import altair as alt

    from reporter import build  # noqa: F401  (the whole pipeline's imports)
    from reporter.render.html import chart_svg
    from reporter.render.pdf import render_pdf

    chart_svg(alt.Chart(alt.Data(values=[{"x": 1}])).mark_point().encode(x=alt.X("x:Q")))
    render_pdf("<p>ready</p>")
    return time.perf_counter() - start


class WarmWorker:
    """A Dask worker plugin that runs :func:`warm_worker` once as each worker starts (a
    :class:`distributed.WorkerPlugin`; the base class is taken from distributed when used)."""

    name = "reporter-warm-worker"
    idempotent = True

    def setup(self, worker) -> None:
        warm_worker()

    def teardown(self, worker) -> None:
        return None

    def transition(self, key, start, finish, **kwargs) -> None:
        return None


def build_scheme(pack: str, out: str, strict: bool = False,
                 at: dt.datetime | None = None) -> SchemeResult:
    """Build one scheme (the task run by a worker); never raises for a bad scheme.

    ``at`` is the batch's build time, passed with the task so that workers on any machine
    stamp the packs alike (``SOURCE_DATE_EPOCH`` is read once, by the submitting process).
    """
    from reporter.build import build_pack

    scheme = Path(pack).name
    start = time.perf_counter()
    try:
        report = build_pack(pack, out, strict=strict, at=at)
    except InputError as exc:
        errors = [p for p in exc.problems if p.severity == "error"] or exc.problems
        return SchemeResult(scheme, FAILED, time.perf_counter() - start, str(errors[0]),
                            n_problems=len(exc.problems))
    except ReporterError as exc:
        return SchemeResult(scheme, FAILED, time.perf_counter() - start, str(exc), 1)
    except Exception as exc:  # an internal fault in one scheme must not stop the rest
        loop = symlink_loop(exc)
        return SchemeResult(scheme, FAILED, time.perf_counter() - start,
                            loop or f"internal error: {type(exc).__name__}: {exc}", 1)
    return SchemeResult(scheme, BUILT, time.perf_counter() - start,
                        n_warnings=len(report.warnings))


def build_all(schemes_dir: Path | str, out: Path | str, *, workers: int | None = None,
              scheduler: str | None = None, strict: bool = False,
              on_result: Callable[[SchemeResult, int, int], None] | None = None,
              ) -> list[SchemeResult]:
    """Build every scheme under ``schemes_dir`` into ``out/<scheme>/``; results by scheme.

    ``workers`` is the local pool's size (default: the machine's cores, at most the number of
    schemes); ``scheduler`` is a Dask scheduler address, used instead of the local pool.
    ``on_result(result, done, total)`` is called as each scheme finishes.
    """
    packs = discover(schemes_dir)
    out = Path(out).absolute()
    refuse_overlap(schemes_dir, out, "folder of schemes")
    check_target_root(out)
    at = build_time()
    tasks = [(str(p.absolute()), str(out / p.name), strict, at) for p in packs]
    run = _dask_results if scheduler else _pool_results
    results = []
    for result in run(tasks, workers=workers, scheduler=scheduler):
        results.append(result)
        if on_result:
            on_result(result, len(results), len(tasks))
    return sorted(results, key=lambda r: r.scheme)


def check_target_root(out: Path) -> None:
    """``out`` holds one build folder per scheme: refuse an archive, a file, or a link (each
    scheme's folder is checked as a single build's is)."""
    if out.is_symlink():
        raise OutputError(f"{out}: is a symbolic link (to {os.readlink(out)}); give the folder "
                          "itself as --out")
    refuse_archive(out)
    if out.exists() and not out.is_dir():
        raise OutputError(f"{out}: exists and is not a folder")


def _pool_results(tasks: list[tuple], *, workers: int | None, scheduler=None
                  ) -> Iterable[SchemeResult]:
    n = max(1, min(workers or os.cpu_count() or 1, len(tasks)))
    # forkserver: workers start from a clean process that has imported the tool once
    ctx = multiprocessing.get_context("forkserver" if sys.platform != "win32" else "spawn")
    if ctx.get_start_method() == "forkserver":
        ctx.set_forkserver_preload(["reporter.build"])
    with ProcessPoolExecutor(max_workers=n, mp_context=ctx, initializer=warm_worker) as pool:
        futures = {pool.submit(build_scheme, *t): t for t in tasks}
        for fut in as_completed(futures):
            yield _result_of(fut, futures[fut])


def _dask_results(tasks: list[tuple], *, workers=None, scheduler: str
                  ) -> Iterable[SchemeResult]:
    try:
        from distributed import Client
        from distributed import as_completed as dask_completed
    except ImportError:
        raise ClusterError("--scheduler needs dask.distributed: pip install "
                          "'committee-pack-reporter[cluster]'") from None
    try:
        client = Client(scheduler, timeout=CONNECT_TIMEOUT)
    except (OSError, TimeoutError) as exc:
        raise ClusterError(f"cannot reach the Dask scheduler at {scheduler}: {exc}") from None
    with client:
        client.register_plugin(_dask_plugin())   # on every worker, and on any that joins
        futures = {client.submit(build_scheme, *t, pure=False, key=f"build-{i}"): t
                   for i, t in enumerate(tasks)}
        for fut in dask_completed(futures):
            yield _result_of(fut, futures[fut])


def _dask_plugin():
    from distributed import WorkerPlugin

    return type("WarmWorkerPlugin", (WarmWorker, WorkerPlugin), {})()


def _result_of(fut, task: tuple) -> SchemeResult:
    """A finished task's result; a worker that died is reported for its scheme alone."""
    try:
        return fut.result()
    except Exception as exc:
        return SchemeResult(Path(task[0]).name, FAILED, 0.0,
                            f"worker failed: {type(exc).__name__}: {exc}", 1)


def summary_table(results: list[SchemeResult]) -> str:
    """The end-of-run table: scheme, status, seconds and the reason for a failure."""
    width = max([len(r.scheme) for r in results] + [6])
    lines = [f"{'scheme':<{width}}  {'status':<6}  {'time':>7}  reason",
             f"{'-' * width}  ------  -------  ------"]
    for r in results:
        reason = r.reason
        if r.n_problems > 1:
            reason += f" (and {r.n_problems - 1} more problems)"
        elif r.status == BUILT and r.n_warnings:
            reason = f"{r.n_warnings} warning(s)"
        lines.append(f"{r.scheme:<{width}}  {r.status:<6}  {r.seconds:6.1f}s  {reason}")
    built = sum(r.status == BUILT for r in results)
    lines.append(f"{built} built, {len(results) - built} failed")
    return "\n".join(lines)
