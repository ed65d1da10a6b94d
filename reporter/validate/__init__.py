"""Raw tables -> typed, checked inputs. Every problem is gathered with its place.

Each problem is reported as ``file:row:column: message`` where ``row`` is the row
as the user sees it (a CSV line number, a spreadsheet row, a Parquet 1-based row).
Per kind of problem at most :data:`MAX_PER_CHECK` places are listed, followed by a
count of the rest, so that a wholly wrong file gives a readable report.

Stated rules (also in the README):

* a security's returns look like percentages when their median absolute value is
  above :data:`PERCENT_MEDIAN` for the frequency, or more than half of them are above 1
  in absolute value;
* a risk-free rate whose median, annualised, is above 25% is warned about as a likely
  annual rate given per period;
* a holding's prices look stale when it has ``checks.stale_zero_run`` or more identical
  returns in a row (exact zeros, or one non-zero value repeated);
* security ids are trimmed and in Unicode NFC; ids of one file that differ only by case, and
  invisible format characters in any text, are errors (see :mod:`reporter.validate.text`);
* ``nan`` and ``inf`` in a number column are "not a finite number", not an empty value.
"""

from __future__ import annotations

from reporter.validate.cells import as_dates, as_float, as_text, date_codes
from reporter.validate.common import MAX_PER_CHECK, HoldingRows
from reporter.validate.holdings import HOLDINGS_OPTIONAL, HOLDINGS_REQUIRED, validate_holdings
from reporter.validate.long_quick import _clean_long_matrix
from reporter.validate.pack import (
    _check_coverage,
    check_sector_limit_names,
    read_inputs,
    validate_pack,
    validate_tables,
)
from reporter.validate.panel import longest_constant_run
from reporter.validate.returns import validate_returns
from reporter.validate.series import INDEX_MOVE_LIMIT, validate_series
from reporter.validate.values import PERCENT_MEDIAN, looks_like_percent

__all__ = [
    "HOLDINGS_OPTIONAL", "HOLDINGS_REQUIRED", "INDEX_MOVE_LIMIT", "MAX_PER_CHECK", "PERCENT_MEDIAN",
    "HoldingRows", "_check_coverage", "check_sector_limit_names", "_clean_long_matrix",
    "as_dates", "as_float", "as_text",
    "date_codes",
    "longest_constant_run", "looks_like_percent", "read_inputs", "validate_holdings",
    "validate_pack", "validate_returns", "validate_series", "validate_tables",
]
