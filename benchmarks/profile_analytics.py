"""Profile the analytics stage on a benchmark workload, and time it against its floor.

    python benchmarks/profile_analytics.py                  # Large: time stage and floor
    python benchmarks/profile_analytics.py --cprofile       # + the top functions (cProfile)
    python benchmarks/profile_analytics.py --lines          # + the top ten lines (line_profiler)
    python benchmarks/profile_analytics.py --kernels        # + the dense kernels the methods need
    python benchmarks/profile_analytics.py --holdings 200 --periods 500

The stage is what ``reporter build`` runs under "analyse" for a single pack
(:func:`reporter.analytics.pack.analyse`, then the style figures and the limits); its floor
is the one the pack benchmark uses (benchmarks/bench_pack.py): one ``numpy.linalg.lstsq``
of every holding on [1, market] plus one ``numpy.cov``. Both are
timed ``--repeat`` times in this one process and the minimum of each is reported, so the
ratio holds on a loaded machine. The line profile needs line_profiler, which the tool does
not depend on: ``.venv/bin/pip install line_profiler``.
"""

from __future__ import annotations

# the tool's process settings (numpy's huge-page advice, OpenBLAS's idle threads; see
# reporter/__init__.py), made before numpy is first imported, as in a build
import reporter  # noqa: F401  # isort: skip

import argparse
import cProfile
import io
import os
import pstats
import sys
import tempfile
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from timing import best_of  # noqa: E402
from workloads import write_scheme  # noqa: E402


def analyse_stage(settings, inputs):
    """What the build's "analyse" stage runs for a pack without optional inputs
    (reporter/pipeline/part.py). The input files' hashes are the validate stage's, and are
    not timed here (an earlier version counted them: about 0.09 s on Large). Run, as a
    build runs it, with glibc's malloc set as a build sets it (reporter.memory)."""
    from reporter.analytics.pack import analyse
    from reporter.analytics.style import StyleInputs, analyse_style
    from reporter.limits import evaluate_limits
    from reporter.memory import heap_reuse, return_large_blocks

    return_large_blocks()
    with heap_reuse():
        res = analyse(inputs, settings)
        res, _ = analyse_style(res, inputs.holdings.frame, settings, StyleInputs())
        if settings.limits:
            evaluate_limits(settings.limits, res)
    return res


def floor(settings, inputs):
    """One lstsq of every holding on [1, market] plus one cov (bench_pack.py's floor)."""
    y = np.nan_to_num(inputs.returns.values[-settings.window:])
    m = inputs.market.values[-len(y):]
    x = np.column_stack([np.ones(len(m)), m])
    y = y[-len(m):]
    return np.linalg.lstsq(x, y, rcond=None), np.cov(y.T)


def kernels(settings, inputs, repeat: int) -> dict[str, float]:
    """The dense kernels the stage's published methods need at the least, each timed alone
    (best of ``repeat``) on this workload: the one centred Gram matrix of the window (the
    covariance floor's own work); a Cholesky factor of the complete holdings' block for each
    of the three positive-definiteness questions the pack asks (the holdings' and the active
    covariance estimates, each from pairwise moments, and the GRS test's residual covariance);
    the GRS condition bound's triangular inverse; and the Newey-West lag products, one pass of
    the T x N residuals for each lag (here the returns stand in for the residuals)."""
    from scipy.linalg.lapack import dtrtri

    from reporter.analytics.market_model import newey_west_lags

    y = inputs.returns.values[-settings.window:]
    complete = np.isfinite(y).all(axis=0)
    x = np.nan_to_num(y)
    T = len(x)
    centred = x - x.mean(axis=0)
    gram = centred.T @ centred
    block = gram[np.ix_(complete, complete)] / T
    block[np.diag_indices_from(block)] += 1e-12 * float(np.trace(block))
    low = np.linalg.cholesky(block)
    lags = int(newey_west_lags(T))
    e = centred

    def hac():
        for lag in range(1, lags + 1):
            np.einsum("ij,ij->j", e[lag:], e[:-lag])

    return {
        "Gram matrix X'X of the centred window": best_of(lambda: centred.T @ centred, repeat),
        f"3 Cholesky factors of the {int(complete.sum())}-holding complete block":
            3 * best_of(lambda: np.linalg.cholesky(block), repeat),
        "triangular inverse (GRS condition bound)":
            best_of(lambda: dtrtri(low.T, lower=0), repeat),
        f"Newey-West lag products ({lags} passes of T x N)": best_of(hac, repeat),
    }


def line_profile(settings, inputs, top: int) -> str:
    try:
        from line_profiler import LineProfiler
    except ImportError:
        print("line_profiler is not installed: run .venv/bin/pip install line_profiler",
              file=sys.stderr)
        raise SystemExit(2) from None
    import reporter.analytics.pack as pack_mod
    from reporter.analytics import covariance, diversification, regression, sml

    lp = LineProfiler()
    funcs = [pack_mod.analyse]
    for mod in (regression, covariance, diversification, sml):
        funcs += [f for f in vars(mod).values()
                  if callable(f) and getattr(f, "__module__", "") == mod.__name__
                  and hasattr(f, "__code__")]
    for mod in _split_modules():
        funcs += [f for f in vars(mod).values()
                  if callable(f) and getattr(f, "__module__", "") == mod.__name__
                  and hasattr(f, "__code__")]
    for f in funcs:
        lp.add_function(f)
    lp.runcall(analyse_stage, settings, inputs)
    stats = lp.get_stats()
    rows = []
    for (fname, _, func), lines in stats.timings.items():
        for lineno, _, t in lines:
            rows.append((t * stats.unit, fname, lineno, func))
    rows.sort(reverse=True)
    out = [f"{'seconds':>8}  location"]
    for t, fname, lineno, func in rows[:top]:
        text = Path(fname).read_text().splitlines()[lineno - 1].strip()[:90]
        out.append(f"{t:8.3f}  {Path(fname).name}:{lineno} ({func})  {text}")
    return "\n".join(out)


def _split_modules():
    """The analytics modules beside the four above (those split out of them later)."""
    import importlib
    import pkgutil

    import reporter.analytics as pkg
    mods = []
    for info in pkgutil.iter_modules(pkg.__path__):
        if info.name in {"pack", "regression", "covariance", "diversification", "sml"}:
            continue
        mods.append(importlib.import_module(f"reporter.analytics.{info.name}"))
    return mods


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--holdings", type=int, default=2000)
    ap.add_argument("--periods", type=int, default=2520)
    ap.add_argument("--frequency", default="daily")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--cprofile", action="store_true")
    ap.add_argument("--lines", action="store_true")
    ap.add_argument("--top", type=int, default=10)
    ap.add_argument("--kernels", action="store_true",
                    help="also time the dense kernels the methods need at the least")
    a = ap.parse_args(argv)
    if a.lines:
        try:
            import line_profiler  # noqa: F401
        except ImportError:
            print("line_profiler is not installed: run .venv/bin/pip install line_profiler",
                  file=sys.stderr)
            return 2

    # what a build has imported before its analyse stage (the chart and render modules
    # among them): imported here so that no timing below includes a first import
    import reporter.analytics.style  # noqa: F401
    import reporter.build  # noqa: F401
    import reporter.limits  # noqa: F401
    from reporter.config import load_settings
    from reporter.validate import validate_pack

    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "pack"
        write_scheme(folder, a.holdings, a.periods, a.frequency, seed=7, label="L",
                     window=a.periods if a.frequency == "daily" else None)
        settings = load_settings(folder)
        inputs = validate_pack(settings)
        t_stage = t_floor = float("nan")
        t_analyse = best_of(lambda: __import__("reporter.analytics.pack").analytics.pack
                            .analyse(inputs, settings), a.repeat)
        t_stage = best_of(lambda: analyse_stage(settings, inputs), a.repeat)
        t_floor = best_of(lambda: floor(settings, inputs), a.repeat)
        print(f"workload: {a.holdings} holdings x {a.periods} {a.frequency} periods; "
              f"load average {os.getloadavg()[0]:.2f}")
        print(f"analyse(): {t_analyse:.3f} s; analyse stage: {t_stage:.3f} s; "
              f"floor (lstsq + cov): {t_floor:.3f} s; stage / floor = {t_stage / t_floor:.2f}x")
        if a.kernels:
            times = kernels(settings, inputs, a.repeat)
            total = sum(times.values())
            print("\nkernels the methods need, each alone (best of "
                  f"{a.repeat}):")
            for name, t in times.items():
                print(f"  {t:7.3f} s  {name}")
            print(f"  {total:7.3f} s  in all = {total / t_floor:.2f}x the floor; the stage is "
                  f"{t_stage / total:.2f}x these kernels")
        if a.cprofile:
            prof = cProfile.Profile()
            prof.runcall(analyse_stage, settings, inputs)
            buf = io.StringIO()
            pstats.Stats(prof, stream=buf).sort_stats("tottime").print_stats(a.top)
            print("\ncProfile, top functions by own time:")
            print("\n".join(line for line in buf.getvalue().splitlines()
                            if line.strip() and not line.startswith(("   Ordered", "  List"))))
        if a.lines:
            print(f"\nline_profiler, top {a.top} lines:")
            print(line_profile(settings, inputs, a.top))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
