"""Benchmark: a commentary edit to the new HTML in ``reporter preview``, against a full build.

    python benchmarks/bench_preview.py                # 9 edits, 3 full builds
    python benchmarks/bench_preview.py --edits 15 --builds 5

On a copy of the demo pack in a temporary folder (nothing is written anywhere else):

- edit to page: a preview server runs on a free port of 127.0.0.1; each edit appends a new
  sentence to ``commentary/summary.md`` and the clock runs until ``GET /`` returns a page
  holding it (the file watch, the staged rebuild and the served page; ``/`` is polled every
  5 ms). Median over the edits;
- the staged rebuild alone: ``StagedPack.refresh()`` after an edit, in this process (what the
  watch triggers). Median over the edits;
- full build: ``reporter build`` (HTML, PDF and results files) of the same pack into a
  temporary folder, in this process. Median of ``--builds``.

Target (issue 23): the edit-to-page median at most 0.5 s, or 5% of the full build, whichever
is larger. Exit 1 when it is missed, or when an edit re-estimated anything.
"""

from __future__ import annotations

import argparse
import http.client
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
DEMO = REPO / "inputs" / "demo"
SUMMARY = Path("commentary") / "summary.md"
TIMEOUT_S = 30


def _page(port: int) -> str:
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=10)
    try:
        conn.request("GET", "/")
        return conn.getresponse().read().decode("utf-8")
    finally:
        conn.close()


def edit_to_page(pack: Path, edits: int) -> tuple[list[float], int]:
    """Seconds from each commentary edit to the served page showing it; and the number of
    full assemblies the edits caused (0 when every edit only re-rendered)."""
    from reporter.preview.server import Preview

    preview = Preview(pack, port=0)
    times = []
    try:
        preview.start()
        if not preview.ready.wait(TIMEOUT_S):
            raise SystemExit("the file watch did not start")
        assemblies = preview.staged.assemblies
        path = pack / SUMMARY
        for k in range(edits):
            marker = f"Benchmark sentence {k}: {time.time_ns()}."
            text = path.read_text(encoding="utf-8") + f"\n{marker}\n"
            time.sleep(0.3)                         # let the previous edit settle
            t0 = time.perf_counter()
            path.write_text(text, encoding="utf-8")
            while marker not in _page(preview.port):
                if time.perf_counter() - t0 > TIMEOUT_S:
                    raise SystemExit(f"edit {k} did not reach the page within {TIMEOUT_S} s")
                time.sleep(0.005)
            times.append(time.perf_counter() - t0)
        return times, preview.staged.assemblies - assemblies
    finally:
        preview.close()


def staged_refresh(pack: Path, edits: int) -> list[float]:
    """Seconds of ``StagedPack.refresh()`` after each commentary edit (cache warm)."""
    from reporter.preview.staged import StagedPack

    staged = StagedPack(pack)
    assert staged.refresh().ok
    path = pack / SUMMARY
    times = []
    for k in range(edits):
        path.write_text(path.read_text(encoding="utf-8") + f"\nRefresh {k}.\n",
                        encoding="utf-8")
        t0 = time.perf_counter()
        page = staged.refresh()
        times.append(time.perf_counter() - t0)
        assert page.ok and f"Refresh {k}." in page.html and page.stages == "render"
    return times


def full_builds(pack: Path, builds: int, work: Path) -> list[float]:
    """Seconds of each full ``reporter build`` of ``pack`` into a new temporary folder."""
    from reporter.build import build_pack

    times = []
    for k in range(builds):
        t0 = time.perf_counter()
        build_pack(pack, work / f"build-{k}")
        times.append(time.perf_counter() - t0)
    return times


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--edits", type=int, default=9)
    parser.add_argument("--builds", type=int, default=3)
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="bench-preview-") as tmp:
        work = Path(tmp)
        pack = work / "pack"
        shutil.copytree(DEMO, pack)
        build = full_builds(pack, args.builds, work)
        edits, assemblies = edit_to_page(pack, args.edits)
        refresh = staged_refresh(pack, args.edits)
    full, edit, stage = (statistics.median(t) for t in (build, edits, refresh))
    target = max(0.5, 0.05 * full)
    print(f"full build (median of {len(build)}):     {full:7.3f} s   "
          f"[{', '.join(f'{t:.2f}' for t in build)}]")
    print(f"edit to page (median of {len(edits)}):   {edit:7.3f} s   "
          f"[{', '.join(f'{t:.3f}' for t in edits)}]")
    print(f"staged rebuild alone (median):   {stage:7.3f} s")
    print(f"ratio edit/full build:           {edit / full:7.3f}  ({100 * edit / full:.1f}%)")
    print(f"target: <= {target:.3f} s (max of 0.5 s and 5% of the full build); "
          f"re-estimations during the edits: {assemblies}")
    ok = edit <= target and assemblies == 0
    print("PASS" if ok else "FAIL")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
