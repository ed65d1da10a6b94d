"""Build the trustees' static site from a verified archive: gather everything in memory,
then write it once through :func:`reporter.writer.commit` (a new site replaces the old one
whole, or nothing changes).

Layout of a site::

    index.html                      the signed packs, newest first
    packs/<name>/index.html         one page per sign-off, with interactive charts
    packs/<name>/pack.html          the archived HTML pack, byte for byte
    packs/<name>/pack.pdf           the signed PDF, byte for byte (and pack-trustees.pdf)
    trends/<measure>.html           portfolio beta, effective holdings, tracking error, limits
    methods.html                    methodology and the pack's cautions
    checking.html                   how to check a PDF's sha256 with the system's own tools
    assets/vega.js                  Vega, Vega-Lite and vega-embed (vl-convert's bundle)
    assets/site.js, assets/site.css the site's own script and style
    README.md                       what this folder is

Every link is relative and every page works from ``file://``. No page fetches anything
from another host. The output depends only on the archive (and the tool's version): no
time or host name is written except the ledger's own sign-off times.
"""

from __future__ import annotations

import hashlib
import posixpath
from dataclasses import dataclass
from importlib import resources
from pathlib import Path, PurePosixPath

import pandas as pd
import vl_convert as vlc

from reporter import __version__
from reporter.archive.verify import verify_archive
from reporter.charts import BRICK, GREY, INK, OCHRE, TEAL
from reporter.context import CAUTIONS
from reporter.errors import EXIT_FAILED, OutputError, ReporterError
from reporter.progress import Progress
from reporter.render.environment import make_environment
from reporter.site import charts as site_charts
from reporter.site.gather import (
    LIMIT_STATUSES,
    SignedPack,
    current_by_period,
    newest_first,
    read_packs,
)
from reporter.site.limits_view import beta_band, bound_text, limit_counts, limit_text
from reporter.writer import OutputSet, check_target, commit

# Vega-Lite version of the bundle: the one Altair writes its specifications for
VEGALITE_VERSION = ".".join(site_charts.alt.SCHEMA_VERSION.lstrip("v").split(".")[:2])
MAX_FINDINGS = 10


class ArchiveNotIntact(ReporterError):
    """The archive fails verification: no site is built from it (exit 1)."""

    exit_code = EXIT_FAILED


@dataclass(frozen=True)
class Trend:
    """One trend page: ``rows`` has ``pack, title, period_end`` and the figure's columns."""

    slug: str
    title: str
    heading: str
    rows: pd.DataFrame
    value: str | None
    fmt: str
    lo: str | None = None
    hi: str | None = None
    axis: str = ""                     # the value axis title

    @property
    def path(self) -> str:
        return f"trends/{self.slug}.html"


@dataclass(frozen=True)
class SiteReport:
    out: Path
    files: list[str]
    n_packs: int
    n_bytes: int
    head_hash: str | None


def relative(target: str, here: str) -> str:
    """The link from page ``here`` to ``target`` (both relative to the site root)."""
    return posixpath.relpath(target, posixpath.dirname(here) or ".")


def pack_page(pack: SignedPack) -> str:
    """The site path of a sign-off's own page."""
    return f"packs/{pack.name}/index.html"


def entry_page(entry) -> str:
    """The page of a ledger entry (``packs/<archive name>/index.html``)."""
    return f"packs/{PurePosixPath(entry.pdf_path).stem}/index.html"


def pack_pdf(pack: SignedPack) -> str:
    """The site path of the copy of the signed PDF: ``pack.pdf`` beside the archived
    ``pack.html``, whose link to the full edition is ``pack.pdf``."""
    return f"packs/{pack.name}/pack.pdf"


def trustees_pdf(pack: SignedPack) -> tuple[str, str] | None:
    """(archive path, site path) of the signed trustees' edition, when the entry has one:
    ``pack-trustees.pdf`` beside ``pack.html``, as its link names it."""
    rel = str(PurePosixPath(pack.pdf_path).with_name(f"{pack.name}-trustees.pdf"))
    if rel not in pack.entry.file_hashes:
        return None
    return rel, f"packs/{pack.name}/pack-trustees.pdf"


def pack_html(pack: SignedPack) -> str:
    """The site path of the copy of the archived HTML pack."""
    return f"packs/{pack.name}/pack.html"


def signed_at(utc: str) -> str:
    """The ledger's ``2026-12-02T06:14:48Z`` as ``2 December 2026, 06:14 UTC``."""
    from reporter.render.environment import longdate

    return f"{longdate(utc[:10])}, {utc[11:16]} UTC"


def _static(name: str) -> bytes:
    return (resources.files("reporter.templates") / "site" / name).read_bytes()


def trends(packs: list[SignedPack]) -> list[Trend]:
    """The trend tables over the signed periods (latest non-superseded entry per period)."""
    cur = current_by_period(packs)
    base = [{"pack": p.entry.pack_name, "title": p.entry.title,
             "period_end": p.entry.period_end, "page": pack_page(p)} for p in cur]

    def frame(cols: dict[str, str]) -> pd.DataFrame:
        return pd.DataFrame([dict(b, **{k: p.portfolio[v] for k, v in cols.items()})
                             for b, p in zip(base, cur, strict=True)],
                            columns=["pack", "title", "period_end", "page", *cols])

    limit_rows = [dict(b, **item, value_text=limit_text(item["limit"], item["value"]),
                       bound_text=bound_text(item["limit"], item["kind"], item["threshold"]))
                  for b, p in zip(base, cur, strict=True) for item in (p.limits or [])]
    limits = pd.DataFrame(limit_rows, columns=[
        "pack", "title", "period_end", "page", "key", "label", "limit", "scope", "kind",
        "value", "threshold", "status", "value_text", "bound_text"])
    beta = frame({"beta": "beta_regression", "beta_lo": "beta_ci_low",
                  "beta_hi": "beta_ci_high", "beta_weighted": "beta_weighted"})
    bands = [beta_band(p.limits) for p in cur]
    beta["band_min"] = pd.Series([b[0] for b in bands], index=beta.index, dtype=float)
    beta["band_max"] = pd.Series([b[1] for b in bands], index=beta.index, dtype=float)
    return [
        Trend("beta", "Portfolio beta", "Portfolio beta at each signed period", beta,
              "beta", ".2f", "beta_lo", "beta_hi", "Portfolio beta"),
        Trend("effective-holdings", "Effective number of holdings",
              "Effective number of holdings at each signed period",
              frame({"effective_n": "effective_n", "n_holdings": "n_holdings"}),
              "effective_n", ".1f", axis="Effective number of holdings"),
        Trend("tracking-error", "Tracking error",
              "Tracking error (annualised) at each signed period",
              frame({"tracking_error_ann": "tracking_error_ann",
                     "information_ratio_ann": "information_ratio_ann"}),
              "tracking_error_ann", ".2%", axis="Tracking error, annualised"),
        Trend("limits", "Limit status", "Policy limit status at each signed period",
              limits, None, ""),
    ]


def _check_places(archive: Path, out: Path) -> None:
    a, o = archive.resolve(), out.resolve()
    if a == o or a.is_relative_to(o):
        raise OutputError(f"{out}: the archive {archive} is inside it; a site build replaces "
                          "its output folder whole, so choose a folder outside the archive")
    if o.is_relative_to(a):
        raise OutputError(f"{out}: refusing to write into the archive at {archive}; "
                          "signed packs are never overwritten")
    check_target(out, "site")


def build_site(archive: Path | str, out: Path | str, *,
               progress: Progress | None = None) -> SiteReport:
    """Verify ``archive``, then write its site into ``out`` (see the module docstring).

    Refuses (:class:`ArchiveNotIntact`, nothing written) an archive that fails
    :func:`reporter.archive.verify.verify_archive`.
    """
    progress = progress or Progress(quiet=True)
    archive, out = Path(archive), Path(out)
    _check_places(archive, out)
    with progress.stage("verify"):
        report = verify_archive(archive)
    if not report.intact:
        shown = "; ".join(str(f) for f in report.findings[:MAX_FINDINGS])
        more = len(report.findings) - MAX_FINDINGS
        raise ArchiveNotIntact(
            f"{archive}: the archive fails verification ({len(report.findings)} problem(s)): "
            f"{shown}{f'; and {more} more' if more > 0 else ''}. No site was built; run "
            f"'reporter verify --archive {archive}' for the full list")
    with progress.stage("read"):
        packs = read_packs(archive, report.entries)
    with progress.stage("render"):
        files = render_site(archive, packs, report.head_hash)
    with progress.stage("write"):
        commit(files, out, kind="site")
    return SiteReport(out=out, files=files.paths, n_packs=len(packs),
                      n_bytes=sum(len(files[p]) for p in files.paths),
                      head_hash=report.head_hash)


def render_site(archive: Path, packs: list[SignedPack], head_hash: str | None) -> OutputSet:
    """Every file of the site, in memory."""
    env = make_environment()
    env.filters["signed_at"] = signed_at
    env.globals.update(site_charts=site_charts, limit_text=limit_text, bound_text=bound_text)
    ordered = newest_first(packs)
    orgs = sorted({p.entry.organisation for p in packs})
    trend_pages = trends(packs)
    nav = [("index.html", "Signed packs"), *[(t.path, t.title) for t in trend_pages],
           ("methods.html", "Methods and cautions"), ("checking.html", "Checking a PDF")]
    common = {"organisation": orgs[0] if len(orgs) == 1 else None, "nav": nav,
              "tool_version": __version__, "head_hash": head_hash,
              "statuses": LIMIT_STATUSES, "cautions": CAUTIONS, "entry_page": entry_page}
    files = OutputSet()

    def page(path: str, template: str, **values) -> None:
        html = env.get_template(f"site/{template}").render(
            **common, **values, here=path, link=lambda t: relative(t, path))
        files.add(path, html)

    page("index.html", "index.html.j2", packs=ordered, pack_page=pack_page, pack_pdf=pack_pdf,
         limit_counts=limit_counts,
         pack_html=pack_html, n_periods=len({p.entry.period_end for p in packs}))
    for p in ordered:
        page(pack_page(p), "pack.html.j2", pack=p, pack_page=pack_page, pack_pdf=pack_pdf,
             pack_html=pack_html, holdings=_holdings(p), rolling=p.rolling,
             sml_spec=site_charts.spec_json(site_charts.sml_chart(p)),
             rolling_spec=site_charts.spec_json(site_charts.rolling_chart(p)),
             sml_counts=_counts(p))
        pdf = (archive / p.pdf_path).read_bytes()
        if hashlib.sha256(pdf).hexdigest() != p.entry.pdf_sha256:   # verified a moment ago
            raise ArchiveNotIntact(f"{archive / p.pdf_path}: changed while the site was "
                                   "being built; run 'reporter verify'")
        files.add(pack_pdf(p), pdf)
        if (edition := trustees_pdf(p)) is not None:
            data = (archive / edition[0]).read_bytes()
            if hashlib.sha256(data).hexdigest() != p.entry.file_hashes[edition[0]]:
                raise ArchiveNotIntact(f"{archive / edition[0]}: changed while the site was "
                                       "being built; run 'reporter verify'")
            files.add(edition[1], data)
        files.add(pack_html(p), (archive / p.html_path).read_bytes())
    periods = sorted({p.entry.period_end for p in current_by_period(packs)})
    for t in trend_pages:
        spec = None
        if len(t.rows):
            chart = (site_charts.limits_chart(t.rows, periods) if t.value is None else
                     site_charts.trend_chart(t.rows, t.value, t.axis, t.fmt, lo=t.lo, hi=t.hi,
                                             band=t.slug == "beta"))
            spec = site_charts.spec_json(chart)
        page(t.path, "trend.html.j2", trend=t, spec=spec,
             records=t.rows.astype(object).where(t.rows.notna(), None).to_dict(
                 orient="records"),
             grid=_limit_grid(t.rows, periods) if t.value is None else None)
    page("methods.html", "methods.html.j2")
    page("checking.html", "checking.html.j2", example=ordered[0] if ordered else None,
         pack_pdf=pack_pdf, ledger=sorted((p.entry for p in packs), key=lambda e: e.seq))
    palette = {"ink": INK, "teal": TEAL, "ochre": OCHRE, "brick": BRICK, "grey": GREY}
    files.add("assets/site.css", env.get_template("site/site.css.j2").render(**palette))
    files.add("assets/site.js", _static("site.js"))
    files.add("assets/vega.js", vega_bundle())
    files.add("README.md", env.get_template("site/README.md.j2").render(**common))
    return files


def vega_bundle() -> str:
    """Vega, Vega-Lite and vega-embed from vl-convert (one file, no outside requests)."""
    return vlc.javascript_bundle(vl_version=VEGALITE_VERSION)


def _holdings(p: SignedPack) -> list[dict]:
    sec = p.securities.sort_values(["weight", "security_id"], ascending=[False, True],
                                   kind="stable")
    sec = sec.astype(object).where(sec.notna(), None)
    return sec.to_dict(orient="records")


def _counts(p: SignedPack) -> dict[str, int]:
    fitted = p.securities[p.securities["status"] == "fitted"]
    return {k: int(v) for k, v in fitted["sml_position"].value_counts().items()} | {
        "fitted": int(len(fitted))}


def _limit_grid(rows: pd.DataFrame, periods: list[str]) -> dict:
    """The limit-status table: for every signed period, newest first, each limit its pack
    reported (one row each, in the pack's own order), and the periods with no limit
    results."""
    by_period = {p: [r for r in rows.to_dict(orient="records") if r["period_end"] == p]
                 for p in periods}
    return {"periods": [p for p in reversed(periods) if by_period[p]],
            "rows": by_period, "labels": sorted(rows["label"].unique()),
            "not_reported": [p for p in periods if not by_period[p]]}
