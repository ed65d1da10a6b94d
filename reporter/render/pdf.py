"""Render HTML to PDF with WeasyPrint, refusing every network or file fetch."""

from __future__ import annotations

from weasyprint import HTML


class _NoFetch:
    """A URL fetcher that refuses everything: the pack must be self-contained."""

    def __call__(self, url: str, *args, **kwargs):
        raise ValueError(f"the pack may not fetch {url!r}")


def render_pdf(html: str) -> bytes:
    """PDF bytes for an HTML string that carries its own CSS and SVG."""
    return HTML(string=html, base_url=None, url_fetcher=_NoFetch()).write_pdf()
