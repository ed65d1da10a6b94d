"""What every reader returns (:class:`RawTable`) and the checks every reader shares: a
column named twice, blank rows. Kept apart from the readers so that each file format's
reader (``reporter.readers``, ``reporter.readers_xlsx``) builds on it without importing
another."""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from reporter.errors import InputError, Problem

# Columns that are identifiers or labels: always read as text, never inferred.
TEXT_COLUMNS = ("date", "security_id", "name", "sector", "asset_class", "currency", "country")

@dataclass(frozen=True)
class RawTable:
    """A file's columns as read, before any validation."""

    name: str            # the path as written in pack.toml
    table: pa.Table
    first_row: int       # row number of the first data row as the user sees it
    format: str          # "csv" | "xlsx" | "parquet"
    # user-visible row number of each data row, when blank rows were dropped (else None)
    rows: np.ndarray | None = None
    # what the reader noticed that the user should hear of (warnings), e.g. hidden sheets
    notes: tuple[Problem, ...] = ()
    # a long returns CSV read in streamed batches straight into its matrix: the matrix and
    # what goes with it (see reporter.validate.long_stream), and ``table`` has no rows
    clean: object | None = None

    @property
    def n_rows(self) -> int:
        """Data rows read (a streamed file's, too; blank rows dropped are not counted)."""
        return self.clean.n_rows if self.clean is not None else self.table.num_rows

    def row_numbers(self, indices: np.ndarray) -> np.ndarray:
        """:meth:`row_number` of many data rows at once."""
        indices = np.asarray(indices, dtype=np.int64)
        return self.rows[indices] if self.rows is not None else self.first_row + indices

    def row_number(self, index: int) -> int:
        """The user-visible row number of 0-based data row ``index``."""
        if self.rows is not None:
            return int(self.rows[index])
        return self.first_row + index


def _refuse_duplicate_columns(display: str, names: list[str]) -> None:
    """A column named twice cannot be told apart from its twin: refuse the file."""
    dupes = sorted({c for c in names if names.count(c) > 1})
    if dupes:
        raise InputError([Problem(f"{display}:1:{c}", "column name appears more than once")
                          for c in dupes])


def _drop_blank_rows(table: pa.Table, first_row: int, lines: np.ndarray | None = None
                     ) -> tuple[pa.Table, np.ndarray | None]:
    """Drop rows in which every field is empty; return the kept rows' user-visible numbers
    (None when they are ``first_row`` + index). ``lines``: each row's number when it is not
    (a CSV record spanning lines)."""
    if table.num_columns == 0 or table.num_rows == 0:
        return table, lines
    if min(c.null_count for c in table.columns) == 0:
        return table, lines         # some column has no empty field: no row is blank
    blank = functools.reduce(pc.and_, [pc.is_null(c) for c in table.columns])
    blank = np.asarray(blank.to_numpy(zero_copy_only=False), dtype=bool)
    if not blank.any():
        return table, lines
    keep = ~blank
    numbers = lines[keep] if lines is not None else np.flatnonzero(keep) + first_row
    return table.filter(pa.array(keep)), numbers
