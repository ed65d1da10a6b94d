"""``pack.toml`` into one validated settings object (see :mod:`reporter.config.load`).

- :mod:`~reporter.config.schema`: the file's tables as strict pydantic models;
- :mod:`~reporter.config.settings`: the frozen :class:`Settings` passed down the build;
- :mod:`~reporter.config.problems`: key-named problems, checks across keys, safe paths;
- :mod:`~reporter.config.mandates`: a fund's ``[[mandates]]`` and ``[fund]``;
- :mod:`~reporter.config.load`: :func:`load_settings`, which joins them.

The names other modules use are re-exported here.
"""

from reporter.config.load import DEFAULT_ROLLING_WINDOW, DEFAULT_STALE_RUN, load_settings
from reporter.config.mandates import STRATEGIC_TOLERANCE, resolve_mandates
from reporter.config.problems import (
    ARCHIVE_PREFIX,
    date_format_problem,
    limits_problems,
    pack_name_from_folder,
    resolve_compare,
)
from reporter.config.schema import (
    INPUT_ROLES,
    OPTIONAL_ROLES,
    OTHER_SECTORS,
    AnalysisSection,
    ChecksSection,
    CompareSection,
    FundSection,
    InputFile,
    InputsSection,
    LimitsSection,
    MandateSection,
    PackFile,
    PackSection,
    RenderSection,
)
from reporter.config.settings import PERIODS_PER_YEAR, TOTAL_FUND, InputSpec, Mandate, Settings

__all__ = [
    "ARCHIVE_PREFIX", "DEFAULT_ROLLING_WINDOW", "DEFAULT_STALE_RUN", "INPUT_ROLES",
    "OPTIONAL_ROLES", "PERIODS_PER_YEAR", "STRATEGIC_TOLERANCE", "TOTAL_FUND",
    "AnalysisSection", "ChecksSection", "CompareSection", "FundSection", "InputFile",
    "InputSpec", "InputsSection", "LimitsSection", "OTHER_SECTORS", "Mandate",
    "MandateSection", "PackFile",
    "PackSection", "RenderSection", "Settings", "date_format_problem", "limits_problems",
    "load_settings", "pack_name_from_folder", "resolve_compare", "resolve_mandates",
]
