"""Benchmark: what the charts cost a pack's PDF, and the candidates to make it less.

    python benchmarks/bench_charts.py                        # Small and Large
    python benchmarks/bench_charts.py --workloads small --repeat 3
    python benchmarks/bench_charts.py --side-by-side /work/notes/charts_sml_dpi.png

Each workload is built in its own fresh process (so the chart engine's start is measured
cold), then, in that process and interleaved round by round (the fastest of ``--repeat``
rounds is kept):

- the chart stage: Altair's ``to_dict`` and vl-convert's export, chart by chart (warm engine);
- (c) every chart of the pack exported in one engine call (one ``vconcat`` spec);
- (d) the engine's start, paid once per process: a warm engine saves it on every later pack;
- WeasyPrint on both editions' print HTML (full and trustees'), with no charts (the floor)
  and with the charts drawn as before (the security market line as it is on screen, a PNG
  at 300 dpi when dense), (a) with the binned print variant, (b) with the dense charts at
  lower resolutions, and with every chart a PNG.

The cost of a candidate is (its chart export + its print preparation + its PDFs - the
chart-free PDFs) / the chart-free PDFs. ``bench_pack.py`` divides by the full edition's
chart-free PDF alone; that figure is given too. Times are the process's CPU seconds (every
step is single-threaded apart from the engine's own thread), so that other work on the machine
moves them less than it moves wall time. Ratios only: the seconds move with the load.
"""

from __future__ import annotations

# the tool's process settings (numpy's huge-page advice, OpenBLAS's idle threads; see
# reporter/__init__.py), made before numpy is first imported, as in a build
import reporter  # noqa: F401  # isort: skip

import argparse
import json
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from workloads import write_scheme  # noqa: E402

WORKLOADS = {"small": (50, 120, "monthly"), "large": (2000, 2520, "daily")}
CHART = re.compile(r"<svg\b.*?</svg>|<img class=\"chart-image\"[^>]*>", re.S)
DPIS = (300, 200, 150)


def _clock(fn):
    """``fn()`` and the CPU seconds this process spent on it (all its threads, the chart
    engine's included): on a machine shared with other work, wall time measures the others."""
    t0 = time.process_time()
    out = fn()
    return out, time.process_time() - t0


def engine_start() -> float:
    """Seconds of the first vl-convert call in this process (a one-point chart)."""
    import vl_convert as vlc

    spec = {"mark": "point", "data": {"values": [{"a": 1}]},
            "encoding": {"x": {"field": "a", "type": "quantitative"}}}
    return _clock(lambda: vlc.vegalite_to_svg(spec, allowed_base_urls=[]))[1]


def exports(charts: dict) -> dict:
    """Seconds of ``to_dict`` and of the export of each chart, and of one call for all."""
    import altair as alt
    import vl_convert as vlc

    from reporter.charts import PRINT_ONLY, THEME_CONFIG

    to_dict = export = 0.0
    for chart in charts.values():
        spec, t = _clock(lambda c=chart: c.to_dict(validate=False))
        to_dict += t
        export += _clock(lambda s=spec: vlc.vegalite_to_svg(s, config=THEME_CONFIG,
                                                            allowed_base_urls=[]))[1]
    screen = [c for n, c in sorted(charts.items()) if not n.endswith(PRINT_ONLY)]
    one, t_dict = _clock(lambda: alt.vconcat(*screen).to_dict(validate=False))
    t_one = _clock(lambda: vlc.vegalite_to_svg(one, config=THEME_CONFIG,
                                               allowed_base_urls=[]))[1]
    variants = sum(_clock(lambda c=c: vlc.vegalite_to_svg(
        c.to_dict(validate=False), config=THEME_CONFIG, allowed_base_urls=[]))[1]
        for n, c in charts.items() if n.endswith(PRINT_ONLY))
    return {"to_dict": to_dict, "export": export, "print_variants": variants,
            "one_call_to_dict": t_dict, "one_call_export": t_one, "n_charts": len(screen)}


def every_chart_png(svgs: dict, dpi: float) -> dict:
    """Every chart as a PNG at ``dpi``, sized as its SVG (print variants in place)."""
    import base64

    import vl_convert as vlc
    from markupsafe import Markup

    from reporter.charts import PRINT_ONLY
    from reporter.render.html import _SVG_SIZE

    out = {}
    for name, svg in svgs.items():
        if name.endswith(PRINT_ONLY):
            continue
        svg = svgs.get(name + PRINT_ONLY, svg)
        w, h = _SVG_SIZE.search(svg).groups()
        data = base64.b64encode(vlc.svg_to_png(str(svg), scale=dpi / 72)).decode()
        out[name] = Markup(f'<img class="chart-image" alt="Chart" style="width:{w}px;'
                           f'height:{h}px" src="data:image/png;base64,{data}">')
    return out


def measure(folder: Path, repeat: int) -> dict:
    """Every figure of one workload (see the module's docstring)."""
    from reporter.build import EDITIONS, assemble
    from reporter.charts import PRINT_ONLY
    from reporter.config import load_settings
    from reporter.progress import Progress
    from reporter.render.html import print_charts, render_html
    from reporter.render.pdf import render_pdf

    cold = engine_start()
    settings = load_settings(folder)
    progress = Progress(quiet=True)
    a = assemble(settings, progress=progress)
    ctx, svgs = a.context, a.svgs
    before_svgs = {n: s for n, s in svgs.items() if not n.endswith(PRINT_ONLY)}
    prep = {"before (300 dpi when dense)": lambda: print_charts(ctx, before_svgs, dpi=300),
            "(a) binned SML (adopted)": lambda: print_charts(ctx, svgs)}
    prep |= {f"(b) {d} dpi when dense": (lambda d=d: print_charts(ctx, before_svgs, dpi=d))
             for d in DPIS[1:]}
    prep |= {f"every chart a PNG, {d} dpi": (lambda d=d: every_chart_png(svgs, d))
             for d in (200, 150)}
    made, prep_t = {}, {}
    for label, fn in prep.items():
        made[label], prep_t[label] = _clock(fn)

    def html(charts, edition):
        return render_html(ctx, charts, for_print=True, user_templates=settings.templates_dir,
                           template=EDITIONS[edition], extra={"edition": edition})

    pages = {label: {e: html(c, e) for e in EDITIONS} for label, c in made.items()}
    adopted = pages["(a) binned SML (adopted)"]
    pages["no charts"] = {e: CHART.sub("", t) for e, t in adopted.items()}
    best: dict[str, float] = {}       # by HTML text: a variant that changes nothing shares
    sizes = {}
    for _ in range(repeat):
        for label, by_edition in pages.items():
            for e, text in by_edition.items():
                if text in best and best.get(f"{text} rounds", 0) > _:
                    continue
                pdf, t = _clock(lambda s=text: render_pdf(s, base_dir=settings.pack_dir,
                                                         allowed=(settings.pack_dir,)))
                best[text] = min(best.get(text, float("inf")), t)
                best[f"{text} rounds"] = _ + 1
                sizes.setdefault(label, {})[e] = len(pdf)
    pdf_t = {label: {e: best[text] for e, text in by_edition.items()}
             for label, by_edition in pages.items()}
    ex = exports(ctx.charts)
    ex["engine_start_cold"] = cold
    return {"exports": ex, "prep": prep_t, "pdf": pdf_t, "pdf_bytes": sizes,
            "chart_stage": progress.times["chart"], "n_holdings": len(a.results.securities)}


def costs(r: dict) -> dict:
    """Each candidate's cost on the chart-free PDFs: ``both`` (both editions' floor) and
    ``full`` (bench_pack's: the full edition's floor alone)."""
    ex, floor = r["exports"], r["pdf"]["no charts"]
    floor_both, floor_full = sum(floor.values()), floor["full"]
    export_before = ex["to_dict"] + ex["export"] - ex["print_variants"]
    out = {}
    for label, t in r["prep"].items():
        export = export_before + (ex["print_variants"] if "before" not in label
                                  and "dpi when dense" not in label else 0.0)
        extra = export + t + sum(r["pdf"][label].values()) - floor_both
        out[label] = {"both": extra / floor_both,
                      "full": (extra + floor_both - floor_full) / floor_full,
                      "export": export, "prep": t,
                      "pdf_extra": sum(r["pdf"][label].values()) - floor_both}
    return out


def dense_pdfs(folder: Path, look: Path, dpis=DPIS) -> None:
    """The full edition's PDF with the dense security market line (as the HTML draws it,
    every point) rasterised at each of ``dpis``: ``look/dpi-N.pdf``."""
    from reporter.build import assemble
    from reporter.charts import PRINT_ONLY
    from reporter.config import load_settings
    from reporter.render.html import print_charts, render_html
    from reporter.render.pdf import render_pdf

    settings = load_settings(folder)
    a = assemble(settings)
    svgs = {n: s for n, s in a.svgs.items() if not n.endswith(PRINT_ONLY)}
    for d in dpis:
        html = render_html(a.context, print_charts(a.context, svgs, dpi=d), for_print=True)
        (look / f"dpi-{d}.pdf").write_bytes(render_pdf(html, base_dir=settings.pack_dir,
                                                       allowed=(settings.pack_dir,)))


def _page_of_largest_image(pdf: Path) -> int:
    """The page that shows the widest image (by poppler's ``pdfimages -list``)."""
    listing = subprocess.run(["pdfimages", "-list", str(pdf)], capture_output=True,
                             text=True, check=True).stdout.splitlines()[2:]
    rows = [ln.split() for ln in listing if ln.split()[2] == "image"]
    return int(max(rows, key=lambda r: int(r[3]))[0]) if rows else 1


def side_by_side(look: Path, out: Path, dpis=DPIS, view_dpi: int = 96) -> None:
    """The page of the dense chart in the PDFs of :func:`dense_pdfs`, drawn by poppler's
    pdftoppm at ``view_dpi`` (a screen at 100% zoom: one CSS pixel a screen pixel) and at
    twice that, cut to the chart, each row the chart at ``dpis`` side by side."""
    from PIL import Image, ImageDraw

    rows = []
    for res in (view_dpi, 2 * view_dpi):
        row = []
        for d in dpis:
            pdf = look / f"dpi-{d}.pdf"
            page = _page_of_largest_image(pdf)
            stem = look / f"p{d}-{res}"
            subprocess.run(["pdftoppm", "-r", str(res), "-png", "-singlefile", "-f",
                            str(page), "-l", str(page), str(pdf), str(stem)], check=True)
            row.append(_chart_box(Image.open(f"{stem}.png").convert("RGB")))
        rows.append(row)
    w = sum(c.width for c in rows[-1]) + 30
    h = sum(max(c.height for c in row) + 28 for row in rows)
    sheet = Image.new("RGB", (w, h), "white")
    draw = ImageDraw.Draw(sheet)
    y = 0
    for res, row in zip((view_dpi, 2 * view_dpi), rows, strict=True):
        x = 0
        for d, c in zip(dpis, row, strict=True):
            draw.text((x + 4, y + 6), f"chart rasterised at {d} dpi; page shown at {res} dpi "
                      f"({res * 100 // view_dpi}% zoom)", fill="black")
            sheet.paste(c, (x, y + 24))
            x += c.width + 30
        y += max(c.height for c in row) + 28
    sheet.save(out)


def _chart_box(img):
    """The page cut to its largest block of non-white rows (the chart)."""
    import numpy as np

    ink = (np.asarray(img.convert("L")) < 235).sum(axis=1) > 0
    best = (0, img.height)
    start = None
    for y, on in enumerate(np.r_[ink, False]):
        if on and start is None:
            start = y
        elif not on and start is not None:
            if y - start > best[1] - best[0] or best == (0, img.height):
                best = (start, y)
            start = None
    gap = img.height // 14
    return img.crop((0, max(0, best[0] - gap), img.width, min(img.height, best[1] + gap)))


def child(name: str, folder: Path, repeat: int, look: bool) -> None:
    n, periods, freq = WORKLOADS[name]
    write_scheme(folder / "pack", n, periods, freq, seed=7, label=name[:1].upper(),
                 window=periods if freq == "daily" else None)
    if look:
        dense_pdfs(folder / "pack", folder)
        return
    r = measure(folder / "pack", repeat)
    print(json.dumps(r | {"costs": costs(r)}))


def report(name: str, r: dict) -> str:
    ex = r["exports"]
    apart = ex["export"] - ex["print_variants"]
    lines = [f"### {name}: {r['n_holdings']:,} holdings", "",
             f"- chart stage in the build: {r['chart_stage']:.2f} s; Altair to_dict "
             f"{ex['to_dict']:.2f} s, vl-convert export {ex['export']:.2f} s over "
             f"{ex['n_charts']} charts (print variants {ex['print_variants']:.2f} s)",
             f"- (c) one engine call for all {ex['n_charts']} charts: export "
             f"{ex['one_call_export']:.2f} s against {apart:.2f} s one by one "
             f"({ex['one_call_export'] / max(1e-9, apart):.2f}x)",
             f"- (d) the engine's cold start: {ex['engine_start_cold']:.2f} s, paid once per "
             "process; a warm engine saves it on every later pack", "",
             "| candidate | export s | print prep s | PDF extra s | cost (both editions) "
             "| cost (full floor) |", "| --- | ---: | ---: | ---: | ---: | ---: |"]
    for label, c in r["costs"].items():
        lines.append(f"| {label} | {c['export']:.2f} | {c['prep']:.2f} | {c['pdf_extra']:.2f}"
                     f" | {c['both']:+.0%} | {c['full']:+.0%} |")
    floor = r["pdf"]["no charts"]
    lines += ["", f"Chart-free PDFs: full {floor['full']:.2f} s, trustees' "
              f"{floor['trustees']:.2f} s.", ""]
    return "\n".join(lines)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--child", nargs=2, metavar=("WORKLOAD", "DIR"))
    ap.add_argument("--workloads", default="small,large")
    ap.add_argument("--repeat", type=int, default=2)
    ap.add_argument("--side-by-side", type=Path, default=None,
                    help="only write the dense SML of Large at 300, 200 and 150 dpi side by side")
    ap.add_argument("--look", action="store_true")
    args = ap.parse_args()
    if args.child:
        child(args.child[0], Path(args.child[1]), args.repeat, args.look)
        return
    for name in args.workloads.split(","):
        if name not in WORKLOADS:
            ap.error(f"unknown workload {name!r}; choose from {', '.join(WORKLOADS)}")
    if args.side_by_side:
        with tempfile.TemporaryDirectory() as tmp:
            subprocess.run([sys.executable, __file__, "--child", "large", tmp, "--look"],
                           check=True)
            side_by_side(Path(tmp), args.side_by_side)
        return
    for name in args.workloads.split(","):
        with tempfile.TemporaryDirectory() as tmp:
            out = subprocess.run([sys.executable, __file__, "--child", name, tmp, "--repeat",
                                  str(args.repeat)], capture_output=True, text=True, check=True)
            r = json.loads(out.stdout.strip().splitlines()[-1])
            print(report(name.capitalize(), r), flush=True)


if __name__ == "__main__":
    main()
