"""Benchmark: every stage of a pack build against its floor, peak memory, and a batch of
schemes on 1..cores workers. Writes the table to BENCHMARKS.md.

    python benchmarks/bench_pack.py                      # Small, Large, XL and Batch (long)
    python benchmarks/bench_pack.py --quick              # all but XL
    python benchmarks/bench_pack.py --workloads small    # the quickest
    python benchmarks/bench_pack.py --investigate        # where WeasyPrint spends its time

Each single-scheme workload runs in its own process, so its peak RSS is its own. Floors are
measured in that same process, after the build: ``pyarrow.csv.read_csv`` of the four input
files (read), one ``numpy.linalg.lstsq`` of every holding on [1, market] plus one
``numpy.cov`` (analytics), and WeasyPrint rendering the pack's own print HTML of every
edition (the full pack and the trustees', as the build's PDF stage does) with every chart
removed (PDF). All data are invented and seeded (see workloads.py).

The memory target is set against a baseline measured in the same run: the peak RSS of a
process that has only imported the tool and started the chart engine (one tiny vl-convert
conversion). A build may take at most that baseline plus 6 x the float64 return matrix.
"""

from __future__ import annotations

# the tool's process settings (numpy's huge-page advice, OpenBLAS's idle threads; see
# reporter/__init__.py), made before numpy is first imported, as in a build
import reporter  # noqa: F401  # isort: skip

import argparse
import contextlib
import json
import os
import platform
import re
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from workloads import write_scheme  # noqa: E402

WORKLOADS = {  # name: (holdings, periods, frequency)
    "small": (50, 120, "monthly"),
    "large": (2000, 2520, "daily"),
    "xl": (10000, 2520, "daily"),
}
QUICK_SKIPS = ("xl",)
# fresh-process runs of each workload: the table shows the median run (by its whole-build
# ratio), and every run's ratios are listed, each against the floors measured in that run;
# one machine's speed moves 10-20 % between runs, so one run can meet or miss a target alone
RUNS = {"small": 3, "large": 3, "xl": 1}
# the issue's targets (issue 24): whole build against the sum of its floors, analytics
# against its floor, what the charts add to the chart-free PDF, peak RSS in matrices above
# the baseline, and an absolute ceiling on peak RSS
TARGETS = {
    "small": {"charts": 0.50, "matrices": 6.0},
    "large": {"whole": 2.0, "analytics": 4.0, "charts": 0.50, "matrices": 6.0},
    "xl": {"whole": 2.5, "matrices": 6.0, "peak_bytes": 4e9},
}
BATCH = (60, 120, "monthly")
STAGES = ["read", "validate", "analytics", "charts", "html", "pdf", "results"]
SVG = re.compile(r"<svg\b.*?</svg>|<img class=\"chart-image\"[^>]*>", re.S)  # every chart


PROGRESS_STAGE = {"read": "read", "validate": "validate", "analyse": "analytics",
                  "chart": "charts", "html": "html", "pdf": "pdf", "write": "results"}


def current_rss() -> int:
    """This process's resident set now, in bytes (Linux; 0 elsewhere)."""
    try:
        with open("/proc/self/statm") as fh:
            return int(fh.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")
    except OSError:
        return 0


def peak_rss() -> int:
    """This process's peak resident set so far, in bytes: ``VmHWM`` of /proc/self/status,
    the high-water mark of this process's own memory map. Not ``getrusage``'s ``ru_maxrss``:
    Linux carries that across ``exec`` from the process that started this one, so a
    subprocess started by a large process (here, the build measuring WeasyPrint alone in a
    fresh process) reported its parent's peak as its own."""
    with open("/proc/self/status", encoding="ascii") as fh:
        for line in fh:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) * 1024
    raise OSError("no VmHWM in /proc/self/status")


@contextlib.contextmanager
def stage_memory(progress, every: float = 0.005):
    """Sample RSS every ``every`` seconds while ``progress`` runs its stages; fills
    ``progress.rss`` with the highest RSS seen in each stage (named as in :data:`STAGES`)."""
    progress.rss = {}
    current = ["before"]
    stop = threading.Event()
    plain_stage = progress.stage

    @contextlib.contextmanager
    def stage(name, part=None):
        current[0] = PROGRESS_STAGE.get(name, name)
        try:
            with plain_stage(name, part):
                yield
        finally:
            current[0] = "between"

    def sample():
        while not stop.is_set():
            now, at = current_rss(), current[0]
            if now > progress.rss.get(at, 0):
                progress.rss[at] = now
            stop.wait(every)

    progress.stage = stage
    thread = threading.Thread(target=sample, daemon=True)
    thread.start()
    try:
        yield progress
    finally:
        stop.set()
        thread.join()
        progress.stage = plain_stage


def _timed(times: dict, name: str, fn):
    t0 = time.perf_counter()
    out = fn()
    times[name] = time.perf_counter() - t0
    return out


def run_stages(folder: Path) -> dict:
    """Build the pack in ``folder`` exactly as ``reporter build`` does, timing its stages
    (read, validate, analyse and chart inside :func:`reporter.build.assemble`, then HTML, PDF
    and the results files), then measure the floors."""
    import pyarrow.csv as pacsv

    from reporter.build import EDITIONS, assemble, finish_build
    from reporter.config import load_settings
    from reporter.progress import Progress
    from reporter.render.pdf import render_pdf

    settings = load_settings(folder)
    progress = Progress(quiet=True)
    with stage_memory(progress), tempfile.TemporaryDirectory() as out:
        a = assemble(settings, progress=progress)
        finish_build(a, Path(out) / "pack", progress, release=True)     # as a build does
        pdf = (Path(out) / "pack" / "pack.pdf").read_bytes()
    peak_build = peak_rss()
    times = progress.times
    # "results": what the write stage adds once the PDF is done (the results files are
    # written into the staging folder by a second thread while the PDF renders)
    t = {"read": times["read"], "validate": times["validate"], "analytics": times["analyse"],
         "charts": times["chart"], "html": times["html"], "pdf": times["pdf"],
         "results": times.get("results", 0.0) + times["write"]}
    html = a.html(for_print=True)
    # the PDF stage renders every edition (the full pack and the trustees'), so its floor is
    # every edition's print HTML with the charts removed
    bare_editions = [SVG.sub("", a.html(for_print=True, edition=e)) for e in EDITIONS]
    inputs = a.inputs

    floors: dict[str, float] = {}
    files = [settings.inputs[r].path for r in ("holdings", "returns", "market", "risk_free")]
    _timed(floors, "read", lambda: [pacsv.read_csv(f) for f in files])
    y = np.nan_to_num(inputs.returns.values[-settings.window:])
    m = inputs.market.values[-len(y):]
    x = np.column_stack([np.ones(len(m)), m])
    y = y[-len(m):]
    _timed(floors, "analytics", lambda: (np.linalg.lstsq(x, y, rcond=None), np.cov(y.T)))
    bare = SVG.sub("", html)
    _timed(floors, "pdf", lambda: [render_pdf(b) for b in bare_editions])
    # the same editions with their charts, rendered alone as the floor is: what the charts
    # add to the PDF, without the results thread that shares the build's PDF stage
    charted = {}
    with_charts = [a.html(for_print=True, edition=e) for e in EDITIONS]   # (not timed)
    _timed(charted, "pdf", lambda: [render_pdf(h) for h in with_charts])
    pdf_rss = pdf_floor_rss(bare)
    return {"stages": t, "floors": floors, "peak_rss": peak_build,
            "stage_rss": progress.rss, "pdf_floor_rss": pdf_rss,
            "pdf_with_charts": charted["pdf"],
            "matrix_bytes": int(y.size * 8), "n_holdings": int(y.shape[1]),
            "n_periods": int(y.shape[0]), "pdf_bytes": len(pdf), "html_bytes": len(html),
            "pages": _pages(pdf)}


APPENDIX = re.compile(r'<section class="chapter" id="holdings">.*?</section>', re.S)


def investigate(folder: Path, repeat: int = 1) -> dict:
    """Time WeasyPrint on variants of the same print HTML: the charts as built (each an image
    of its SVG, or a PNG when dense), every chart inline SVG, PNG charts at print
    resolution, no charts, no holdings appendix, and fonts embedded whole."""
    import base64

    import vl_convert as vlc
    from weasyprint import HTML
    from weasyprint.urls import URLFetcher

    from reporter.analytics.pack import analyse
    from reporter.build import build_time
    from reporter.charts import THEME_CONFIG, build_charts
    from reporter.config import load_settings
    from reporter.context import build_context
    from reporter.render.html import export_charts, print_charts, render_html
    from reporter.validate import validate_pack

    settings = load_settings(folder)
    inputs = validate_pack(settings)
    res = analyse(inputs, settings)
    ctx = build_context(settings, inputs, res, build_charts(res), "0" * 64, build_time())
    t: dict[str, float] = {}
    svgs = _timed(t, "export charts as SVG", lambda: export_charts(ctx))

    def pngs():
        out = {}
        for name, chart in ctx.charts.items():
            png = vlc.vegalite_to_png(chart.to_dict(), scale=300 / 72, config=THEME_CONFIG)
            out[name] = (f'<img alt="" style="max-width:100%" src="data:image/png;base64,'
                         f'{base64.b64encode(png).decode()}">')
        return out

    png_markup = _timed(t, "export charts as PNG, 300 dpi", pngs)
    html_built = render_html(ctx, print_charts(ctx, svgs), for_print=True)
    html_svg = render_html(ctx, svgs, for_print=True)
    html_png = render_html(ctx, png_markup, for_print=True)

    data_only = URLFetcher()

    def fetch_data_uri(url, *args, **kwargs):
        if not url.startswith("data:"):
            raise ValueError(f"refused {url!r}")
        return data_only.fetch(url)

    def pdf(html, **opts):
        return HTML(string=html, url_fetcher=fetch_data_uri).write_pdf(**opts)

    sizes = {}
    for label, html, opts in [
            ("PDF, charts as built (SVG images; PNG when dense)", html_built, {}),
            ("PDF, every chart inline SVG", html_svg, {}),
            ("PDF, PNG charts at 300 dpi", html_png, {}),
            ("PDF, no charts", SVG.sub("", html_built), {}),
            ("PDF, no holdings appendix", APPENDIX.sub("", html_built), {}),
            ("PDF, fonts embedded whole (no subsetting)", html_built, {"full_fonts": True})]:
        runs: dict[str, float] = {}
        for _ in range(repeat):        # the fastest of ``repeat`` runs
            sizes[label] = len(_timed(runs, label, lambda h=html, o=opts: pdf(h, **o)))
            t[label] = min(t.get(label, float("inf")), runs[label])
    return {"times": t, "pdf_bytes": sizes}


def _pages(pdf: bytes) -> int:
    import io

    import pypdf

    return len(pypdf.PdfReader(io.BytesIO(pdf)).pages)


def baseline_rss() -> int:
    """Peak RSS (bytes) of this process after importing the tool and starting the chart
    engine with one tiny conversion: what every build carries before it reads any data.
    Call it in a fresh process (see :func:`baseline`)."""
    import vl_convert as vlc

    import reporter.build  # noqa: F401 - the whole pipeline, as ``reporter build`` imports it
    import reporter.cli  # noqa: F401

    vlc.vegalite_to_svg({"data": {"values": [{"a": 1}]}, "mark": "point",
                         "encoding": {"x": {"field": "a", "type": "quantitative"}}})
    return peak_rss()


def baseline(html: Path | None = None) -> int:
    """:func:`baseline_rss` in a process of its own; with ``html``, that process then renders
    the file with WeasyPrint (as the tool does), and its peak RSS then is returned."""
    out = subprocess.run([sys.executable, __file__, "--baseline"]
                         + ([str(html)] if html else []), capture_output=True, text=True,
                         check=True)
    return int(out.stdout.strip().splitlines()[-1])


def pdf_floor_rss(html: str) -> int:
    """Peak RSS of a fresh process that imports the tool, starts the chart engine and renders
    ``html`` (the chart-free print HTML) to PDF: the memory the libraries take for this
    pack's PDF alone, with no data held."""
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "bare.html"
        path.write_text(html, encoding="utf-8")
        return baseline(path)


def make_workload(name: str, folder: Path) -> None:
    """Write workload ``name``'s invented scheme into ``folder`` (see :mod:`workloads`)."""
    n, periods, freq = WORKLOADS[name]
    write_scheme(folder, n, periods, freq, seed=7, label=name[:1].upper(),
                 window=periods if freq == "daily" else None)


def child(name: str, folder: Path, study: bool = False) -> None:
    repeat = 3 if name == "small" else 1
    print(json.dumps(investigate(folder, repeat) if study else run_stages(folder)))


def single(name: str, study: bool = False, runs: int = 1) -> list[dict]:
    """``runs`` measurements of workload ``name``, each in a fresh process. The scheme is
    written once, in a process of its own: written by the measuring process, its peak (574
    MB for Large, more than most of the build's stages) and the heap it left behind were
    counted in the build's peak RSS."""
    with tempfile.TemporaryDirectory() as tmp:
        subprocess.run([sys.executable, __file__, "--make", name, tmp], check=True)
        outs = [subprocess.run([sys.executable, __file__, "--child", name, tmp]
                               + (["--investigate"] if study else []),
                               capture_output=True, text=True, check=True)
                for _ in range(runs)]
    return [json.loads(out.stdout.strip().splitlines()[-1]) for out in outs]


def batch(n_schemes: int) -> dict:
    """Per-scheme wall time of build-all over ``n_schemes`` schemes on 1..cores workers, on
    the process pool and on a dask.distributed LocalCluster (each run from the start of its
    workers, their warm-up included, to the last scheme built), and the Small workload's
    whole build (the sum of its stages, in its own process) measured just before, as the
    yardstick: one warm worker should build a scheme in at most 1.5x that."""
    from reporter.batch import build_all

    cores = os.cpu_count() or 1
    small = single("small")[0]
    out = {"n_schemes": n_schemes, "per_scheme": {}, "small_whole": sum(
        small["stages"].values())}
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp) / "schemes"
        n, periods, freq = BATCH
        for i in range(n_schemes):
            write_scheme(root / f"scheme-{i:03d}", n, periods, freq, seed=100 + i,
                         label=f"S{i:03d}")
        for scheduler in ("pool", "dask"):
            for workers in range(1, cores + 1):
                dest = Path(tmp) / f"out-{scheduler}-{workers}"
                t0 = time.perf_counter()
                if scheduler == "pool":
                    results = build_all(root, dest, workers=workers)
                else:
                    from distributed import LocalCluster

                    with LocalCluster(n_workers=workers, threads_per_worker=1,
                                      processes=True, dashboard_address=None) as cluster:
                        results = build_all(root, dest, scheduler=cluster.scheduler_address)
                wall = time.perf_counter() - t0
                assert all(r.status == "built" for r in results), results
                out["per_scheme"][f"{scheduler} {workers}"] = wall / n_schemes
    return out


def table(results: dict[str, dict], batch_result: dict | None,
          load: tuple[float, float] | None = None, base_rss: int | None = None) -> str:
    lines = [f"Machine: {platform.machine()}, {os.cpu_count()} cores, Python "
             f"{platform.python_version()}, {platform.system()} {platform.release()}.",
             f"Run on {time.strftime('%Y-%m-%d', time.gmtime())}. Each workload is built "
             "in fresh processes (see RUNS; the table shows the median run, and a last line "
             "every run's ratios), each stage once a run, its floors measured in the same "
             "process (machines are noisy: read the ratios, not the seconds)."
             + (f" Load average (1 min) {load[0]:.1f} at the start and {load[1]:.1f} at the "
                "end: other work on the machine slows every figure." if load else ""), ""]
    if base_rss:
        lines += [f"Memory baseline: a process that has only imported the tool and started "
                  f"the chart engine (one tiny conversion) peaks at {base_rss / 1e6:.0f} MB "
                  "RSS, measured in this run.", ""]
    for name, r in results.items():
        s, f = r["stages"], r["floors"]
        lines += [f"### {name.capitalize() if len(name) > 2 else name.upper()}: "
                  f"{r['n_holdings']:,} holdings x {r['n_periods']:,} periods in the window, "
                  f"{r['pages']} PDF pages", "",
                  "| stage | seconds | floor | ratio | peak RSS in stage |",
                  "| --- | ---: | --- | ---: | ---: |"]
        floor_of = {"read": "read", "validate": None, "analytics": "analytics",
                    "charts": None, "html": None, "pdf": "pdf", "results": None}
        stage_rss = r.get("stage_rss", {})
        for st in STAGES:
            fl = floor_of[st]
            ratio = (f"{(s['read'] + s['validate']) / f['read']:.2f} (read + validate)"
                     if st == "validate" else f"{s[st] / f[fl]:.2f}" if fl else "")
            mem = f"{stage_rss[st] / 1e6:.0f} MB" if st in stage_rss else ""
            lines.append(f"| {st} | {s[st]:.2f} | {f'{f[fl]:.2f} s' if fl else ''} | {ratio} "
                         f"| {mem} |")
        lines += [""] + [f"- {line}" for line in target_lines(name, r, base_rss)] + [""]
    if batch_result:
        small = batch_result["small_whole"]
        lines += [f"### Batch: {batch_result['n_schemes']} schemes of {BATCH[0]} holdings x "
                  f"{BATCH[1]} months, warm workers", "",
                  "| scheduler | workers | seconds per scheme | x the Small build |",
                  "| --- | ---: | ---: | ---: |"]
        for key, sec in batch_result["per_scheme"].items():
            scheduler, w = key.split()
            lines.append(f"| {scheduler} | {w} | {sec:.2f} | {sec / small:.2f} |")
        for scheduler in ("pool", "dask"):
            runs = [v for k, v in batch_result["per_scheme"].items()
                    if k.startswith(scheduler)]
            falls = all(b < a for a, b in zip(runs, runs[1:], strict=False))
            lines.append(f"- {scheduler}: one worker {runs[0]:.2f} s a scheme = "
                         f"{runs[0] / small:.2f} x the Small workload's whole build "
                         f"({small:.2f} s, measured just before); target at most 1.5; "
                         f"{'falls' if falls else 'does not fall'} with workers up to "
                         f"{len(runs)}")
        lines.append("")
    return "\n".join(lines)


def ratios(r: dict, base_rss: int | None) -> dict[str, float]:
    """One run's figures against its own floors: the whole build, the analytics, what the
    charts add to the chart-free PDFs (measured alone) and the peak RSS above the baseline
    in matrices (NaN without a baseline or a charted PDF)."""
    s, f = r["stages"], r["floors"]
    nan = float("nan")
    return {
        "whole": sum(s.values()) / sum(f.values()),
        "analytics": s["analytics"] / f["analytics"],
        "charts": ((s["charts"] + r["pdf_with_charts"] - f["pdf"]) / f["pdf"]
                   if "pdf_with_charts" in r else nan),
        "matrices": ((r["peak_rss"] - base_rss) / r["matrix_bytes"] if base_rss else nan)}


def median_run(runs: list[dict], base_rss: int | None) -> dict:
    """The run whose whole-build ratio is the median of ``runs`` (the lower middle one of an
    even number), with every run's :func:`ratios` under ``"runs"`` when there are several."""
    order = sorted(range(len(runs)), key=lambda i: ratios(runs[i], base_rss)["whole"])
    mid = dict(runs[order[(len(runs) - 1) // 2]])
    if len(runs) > 1:
        mid["runs"] = [ratios(r, base_rss) for r in runs]
    return mid


def target_lines(name: str, r: dict, base_rss: int | None) -> list[str]:
    """Each of the issue's targets for workload ``name`` as a ratio, with its target beside
    it (and "met" or "missed"), or the plain figure where the workload has no target; with
    several runs (``r["runs"]``, see :func:`median_run`), a last line gives each run's."""
    s, f, want = r["stages"], r["floors"], TARGETS.get(name, {})

    def verdict(value: float, key: str, fmt: str) -> str:
        if key not in want:
            return ""
        ok = "met" if value <= want[key] else "missed"
        return f"; target at most {format(want[key], fmt)} ({ok})"

    total, floor_sum = sum(s.values()), sum(f.values())
    got = ratios(r, base_rss)
    whole, analytics, charts, above = (got[k] for k in ("whole", "analytics", "charts",
                                                         "matrices"))
    in_build = (s["charts"] + s["pdf"] - f["pdf"]) / f["pdf"]
    out = [f"whole build {total:.2f} s = {whole:.2f} x the sum of the floors "
           f"({floor_sum:.2f} s){verdict(whole, 'whole', '.1f')}",
           f"analytics {s['analytics']:.2f} s = {analytics:.1f} x its floor "
           f"({f['analytics']:.2f} s){verdict(analytics, 'analytics', '.1f')}"]
    if "pdf_with_charts" in r:
        out.append(f"charts (their export, {s['charts']:.2f} s, + both editions' PDFs with "
                   f"charts, {r['pdf_with_charts']:.2f} s, rendered alone as the floor is) add "
                   f"{charts:+.0%} to the chart-free PDFs of both editions "
                   f"({f['pdf']:.2f} s){verdict(charts, 'charts', '+.0%')}")
    out.append(f"in the build, the chart stage and the PDF stage (where the results files "
               f"are written beside the PDF) together are {in_build:+.0%} over the "
               f"chart-free PDFs")
    peak, matrix = r["peak_rss"], r["matrix_bytes"]
    if base_rss:
        out.append(f"peak RSS {peak / 1e6:.0f} MB = the baseline ({base_rss / 1e6:.0f} MB) + "
                   f"{(peak - base_rss) / 1e6:.0f} MB = + {above:.1f} x the float64 return "
                   f"matrix ({matrix / 1e6:.3g} MB){verdict(above, 'matrices', '.0f')}")
        if r.get("pdf_floor_rss"):
            pdf_own = r["pdf_floor_rss"] - base_rss
            out.append(f"WeasyPrint alone on the chart-free print HTML (a fresh process, no "
                       f"data held) peaks at the baseline + {pdf_own / 1e6:.0f} MB = "
                       f"+ {pdf_own / matrix:.1f} x the matrix")
    else:
        out.append(f"peak RSS {peak / 1e6:.0f} MB (float64 return matrix "
                   f"{matrix / 1e6:.1f} MB; no baseline measured)")
    if "peak_bytes" in want:
        share = peak / want["peak_bytes"]
        out.append(f"peak RSS {peak / 1e9:.2f} GB = {share:.2f} x the ceiling of "
                   f"{want['peak_bytes'] / 1e9:.0f} GB; target at most 1.00 "
                   f"({'met' if share <= 1 else 'missed'})")
    if len(r.get("runs", [])) > 1:
        def each(key: str, fmt: str) -> str:
            return ", ".join(format(run[key], fmt) for run in r["runs"])

        out.append(f"the {len(r['runs'])} runs (the table shows the median one), each against "
                   f"its own floors: whole build {each('whole', '.2f')} x; analytics "
                   f"{each('analytics', '.1f')} x; charts {each('charts', '+.0%')}; peak RSS "
                   f"above the baseline {each('matrices', '.1f')} x the matrix")
    return out


def workload_problems(workloads: str) -> str:
    """Why a ``--workloads`` list is refused (names are lower case, comma-separated), or ""."""
    known = [*WORKLOADS, "batch"]
    bad = [w for w in workloads.split(",") if w not in known]
    if not bad:
        return ""
    return (f"unknown workload(s) {', '.join(repr(w) for w in bad)}; "
            f"choose from {', '.join(known)}")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--child", nargs=2, metavar=("WORKLOAD", "DIR"))
    ap.add_argument("--make", nargs=2, metavar=("WORKLOAD", "DIR"), help=argparse.SUPPRESS)
    ap.add_argument("--workloads", default="small,large,xl,batch")
    ap.add_argument("--quick", action="store_true",
                    help=f"skip the long workloads ({', '.join(QUICK_SKIPS)})")
    ap.add_argument("--baseline", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("baseline_html", nargs="?", help=argparse.SUPPRESS)
    ap.add_argument("--batch-schemes", type=int, default=8)
    ap.add_argument("--runs", type=int, default=0,
                    help="fresh-process runs of every workload (default: RUNS, 3 or 1)")
    ap.add_argument("--investigate", action="store_true",
                    help="time WeasyPrint on variants of the pack (with --workloads NAME)")
    ap.add_argument("--out", type=Path, default=HERE.parent / "BENCHMARKS.md")
    args = ap.parse_args()
    unknown = workload_problems(args.workloads)
    if unknown:
        ap.error(unknown)
    if args.baseline:
        peak = baseline_rss()
        if args.baseline_html:
            from reporter.render.pdf import render_pdf

            render_pdf(Path(args.baseline_html).read_text(encoding="utf-8"))
            peak = peak_rss()
        print(peak)
        return
    if args.child:
        child(args.child[0], Path(args.child[1]), args.investigate)
        return
    if args.make:
        make_workload(args.make[0], Path(args.make[1]))
        return
    if args.investigate:
        for name in (w for w in args.workloads.split(",") if w in WORKLOADS):
            r = single(name, study=True)[0]
            print(f"### Where WeasyPrint spends its time: {name}\n")
            print("| variant | seconds | PDF bytes |\n| --- | ---: | ---: |")
            for label, sec in r["times"].items():
                size = r["pdf_bytes"].get(label)
                print(f"| {label} | {sec:.2f} | {f'{size:,}' if size else ''} |")
        return
    wanted = [w for w in args.workloads.split(",") if not (args.quick and w in QUICK_SKIPS)]
    load_start = os.getloadavg()[0]
    base = baseline()
    results = {}
    for name in (w for w in wanted if w in WORKLOADS):
        results[name] = median_run(single(name, runs=args.runs or RUNS[name]), base)
        print(f"{name}: done", file=sys.stderr, flush=True)
    batch_result = batch(args.batch_schemes) if "batch" in wanted else None
    text = table(results, batch_result, (load_start, os.getloadavg()[0]), base)
    print(text)
    if args.out:
        args.out.write_text("# Benchmarks\n\nWritten by `make bench` "
                            "(`python benchmarks/bench_pack.py`).\n\n" + text)


if __name__ == "__main__":
    main()
