"""Benchmark: what tagging the PDF costs. WeasyPrint renders the demo pack's print HTML
untagged and tagged (``pdf_tags=True``), and as the archive's tagged PDF/A-3a against the
untagged PDF/A-3b it replaced, interleaved, several runs each; prints the medians and the
ratios. Times are the process's CPU seconds (WeasyPrint runs on one thread), so that other
work on a shared machine does not blur the comparison.

    python benchmarks/bench_pdf_tags.py [--runs 3]
"""

from __future__ import annotations

import argparse
import datetime as dt
import statistics
import time
from pathlib import Path

from weasyprint import HTML

from reporter.build import assemble
from reporter.config import load_settings
from reporter.render.pdf import PackFetcher

REPO = Path(__file__).resolve().parent.parent


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--runs", type=int, default=3)
    args = parser.parse_args()
    settings = load_settings(REPO / "inputs" / "demo")
    a = assemble(settings, at=dt.datetime(2026, 11, 30, tzinfo=dt.UTC))
    html = a.html(for_print=True)
    base = settings.pack_dir.resolve().as_uri() + "/"
    cases = {"pack.pdf untagged": {}, "pack.pdf tagged": {"pdf_tags": True},
             "archive PDF/A-3b": {"pdf_variant": "pdf/a-3b"},
             "archive PDF/A-3a": {"pdf_variant": "pdf/a-3a", "pdf_tags": True}}
    times: dict[str, list[float]] = {k: [] for k in cases}
    sizes: dict[str, int] = {}
    for _ in range(args.runs):
        for name, options in cases.items():      # interleaved, so drift hits all alike
            fetcher = PackFetcher([settings.pack_dir])
            start = time.process_time()      # CPU time: the machine may be shared
            pdf = HTML(string=html, base_url=base, url_fetcher=fetcher).write_pdf(**options)
            times[name].append(time.process_time() - start)
            sizes[name] = len(pdf)
    med = {k: statistics.median(v) for k, v in times.items()}
    for name in cases:
        runs = ", ".join(f"{t:.2f}" for t in times[name])
        print(f"{name:20s} median {med[name]:.2f} s CPU  (runs {runs})  {sizes[name] / 1e6:.2f} MB")
    print(f"tagged / untagged pack.pdf: {med['pack.pdf tagged'] / med['pack.pdf untagged']:.2f}")
    print(f"PDF/A-3a / PDF/A-3b:        {med['archive PDF/A-3a'] / med['archive PDF/A-3b']:.2f}")


if __name__ == "__main__":
    main()
