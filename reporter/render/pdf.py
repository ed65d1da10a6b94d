"""Render HTML to PDF with WeasyPrint, refusing every network or file fetch."""

from __future__ import annotations

from collections.abc import Sequence

from weasyprint import HTML, Attachment


class _NoFetch:
    """A URL fetcher that refuses everything: the pack must be self-contained."""

    def __call__(self, url: str, *args, **kwargs):
        raise ValueError(f"the pack may not fetch {url!r}")


def render_pdf(html: str, *, variant: str | None = None,
               attachments: Sequence[Attachment] = ()) -> bytes:
    """PDF bytes for an HTML string that carries its own CSS and SVG.

    ``variant`` is a WeasyPrint PDF variant such as ``"pdf/a-3b"`` (ISO 19005-3, level B);
    ``attachments`` are embedded files (PDF/A-3 allows any file type as an attachment).
    """
    return HTML(string=html, base_url=None, url_fetcher=_NoFetch()).write_pdf(
        pdf_variant=variant, attachments=list(attachments) or None)
