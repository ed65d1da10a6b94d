"""The trustees' static site: every signed pack in an archive, browsable offline.

``build_site`` (in :mod:`reporter.site.build`) verifies the archive, reads the ledger and
the archived results files (:mod:`reporter.site.gather`), draws the interactive charts
(:mod:`reporter.site.charts`) and writes the whole site at once.
"""

from reporter.site.build import ArchiveNotIntact, SiteReport, build_site

__all__ = ["ArchiveNotIntact", "SiteReport", "build_site"]
