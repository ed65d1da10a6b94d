"""A clean long returns CSV read in streamed batches straight into its matrix.

The file is read with :func:`pyarrow.csv.open_csv`, one block at a time: each batch's cells
are kept as two 32-bit codes and a float (16 bytes a row, about what the whole table would
take, but without the whole-file reader's working memory, some 4x that), and the periods x
ids matrix is filled once at the end, batch by batch, each batch's codes freed as it is
written. This is the same quicker route as :func:`reporter.validate.long_quick.
_clean_long_matrix`, taken one step earlier: it gives up (returns None) at the first sign
that any row might need a message, and the caller then reads the file whole and runs every
check as before, so that every message, row number and warning is exactly as it was.
"""

from __future__ import annotations

import unicodedata
from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv

from reporter.analytics.returns import period_keys
from reporter.config import InputSpec
from reporter.readers import RawTable, _csv_header, _text_type, csv_options
from reporter.validate.cells import _parse_date_texts
from reporter.validate.text import case_clashes, normalise_id, normalised_ids
from reporter.validate.values import MAX_PERIOD_RETURN, _percent_columns

LONG_COLUMNS = ("date", "security_id", "return")
# The streaming reader reads some 32 blocks ahead of the batch being converted: with 1 MiB
# blocks that is ~40 MB of Arrow memory at its peak, against ~140 MB with the whole read's
# 4 MiB blocks, and no slower (measured on the Large workload's 156 MB returns file)
STREAM_BLOCK_BYTES = 1 << 20


@dataclass(frozen=True)
class StreamedLong:
    """What :func:`_clean_long_matrix` gives, for a file read in streamed batches."""

    matrix: np.ndarray          # periods x ids
    keys: np.ndarray            # each row's period key, ascending
    ids: list[str]              # each column's security id, in order of first appearance
    percent: tuple[np.ndarray, np.ndarray]
    n_rows: int                 # data rows in the file
    spec: InputSpec
    frequency: str

    def as_clean(self):
        """``(matrix, keys, ids, percent, row_where)`` as :func:`_clean_long_matrix` returns."""
        return self.matrix, self.keys, self.ids, self.percent, self.row_where

    def row_where(self, test) -> int:
        """The first data row whose (period, id) codes pass ``test(periods, ids)``, found by
        streaming the file again (only for the rare message about a clean file)."""
        period_of = {k: p for p, k in enumerate(self.keys.tolist())}
        id_of = {sid: j for j, sid in enumerate(self.ids)}
        offset = 0
        for batch in _batches(self.spec, _csv_header(self.spec.path, self.spec.delimiter))[0]:
            dates, sids = batch.column("date"), batch.column("security_id")
            days = _parse_date_texts(dates.dictionary.to_pylist(), self.spec.date_format)
            pmap = np.array([period_of[k] for k in period_keys(days, self.frequency).tolist()],
                            dtype=np.int64)
            smap = np.array([id_of.get(normalise_id(t), -1)
                             for t in sids.dictionary.to_pylist()], dtype=np.int64)
            hit = np.flatnonzero(test(pmap[dates.indices.to_numpy()],
                                      smap[sids.indices.to_numpy()]))
            if len(hit):
                return offset + int(hit[0])
            offset += batch.num_rows
        raise LookupError("no such row")


def stream_long_returns(spec: InputSpec, frequency: str) -> RawTable | None:
    """The returns file of ``spec`` as a :class:`RawTable` that carries its matrix already
    (``clean``) and no rows, when the file is a long CSV of exactly ``date``,
    ``security_id`` and ``return`` in which no row needs a message; else None (read it
    whole). Never raises: whatever goes wrong is found again, and reported, by the whole
    read."""
    if spec.path.suffix.lower() not in (".csv", ".txt") or spec.values != "returns" \
            or spec.thousands is not None:
        return None
    try:
        header = _csv_header(spec.path, spec.delimiter)
        if sorted(header) != sorted(LONG_COLUMNS):
            return None
        found = _stream(spec, header, frequency)
    except Exception:             # noqa: BLE001 - the whole read reports it, with its place
        return None
    if found is None:
        return None
    empty = pa.table({c: pa.array([], type=_text_type(c) if c != "return" else pa.float64())
                      for c in header})
    return RawTable(spec.display, empty, 2, "csv", clean=found)


def _batches(spec: InputSpec, header: list[str]):
    """The file's record batches, with the whole read's options (see
    :func:`reporter.readers._read_csv_body`) and the return column as a float; and the list
    into which malformed lines are gathered."""
    bad: list = []
    reader = pacsv.open_csv(spec.path, **csv_options(
        spec, header, bad, {"date": _text_type("date"), "security_id": _text_type("security_id"),
                            "return": pa.float64()}, block_size=STREAM_BLOCK_BYTES))
    return reader, bad


class _Texts:
    """Distinct texts in order of first appearance, and each batch dictionary's positions in
    them (a batch often repeats the previous batch's dictionary: then it is not looked up
    again)."""

    def __init__(self) -> None:
        self.known = pa.array([], type=pa.string())
        self._last: tuple[pa.Array, np.ndarray] | None = None

    @property
    def texts(self) -> list[str]:
        return self.known.to_pylist()

    def positions(self, dictionary: pa.Array) -> np.ndarray:
        if self._last is not None and self._last[0].equals(dictionary):
            return self._last[1]
        at = pc.index_in(dictionary, value_set=self.known)
        new = pc.is_null(at)
        if pc.any(new).as_py():
            # texts not seen before, in the batch's own order of first appearance (a
            # dictionary is in that order) and after every text seen before
            fresh = dictionary.filter(new)
            start = len(self.known)
            self.known = pa.concat_arrays([self.known, fresh.cast(pa.string())])
            filled = np.cumsum(new.to_numpy(zero_copy_only=False)) - 1 + start
            pos = np.where(new.to_numpy(zero_copy_only=False), filled,
                           at.fill_null(0).to_numpy()).astype(np.int32)
        else:
            pos = at.to_numpy().astype(np.int32)
        self._last = (dictionary, pos)
        return pos


def _stream(spec: InputSpec, header: list[str], frequency: str) -> StreamedLong | None:
    reader, bad = _batches(spec, header)
    dates, sids = _Texts(), _Texts()
    parts: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []
    n_rows = 0
    for batch in reader:
        if bad or any(c.null_count for c in batch.columns):
            return None
        v = batch.column("return").to_numpy()
        if not ((v >= -1.0) & (v <= MAX_PERIOD_RETURN)).all():   # NaN fails the first
            return None
        d, s = batch.column("date"), batch.column("security_id")
        parts.append((dates.positions(d.dictionary)[d.indices.to_numpy()],
                      sids.positions(s.dictionary)[s.indices.to_numpy()], v.copy()))
        n_rows += batch.num_rows
    if bad or not n_rows:
        return None
    date_texts, id_texts = dates.texts, sids.texts
    texts = date_texts + id_texts
    if any(("\r" in t or "\n" in t) for t in texts) or any(
            unicodedata.category(c) == "Cf" for t in texts for c in t):
        return None        # a record across lines, or an invisible character: the full checks
    days = _parse_date_texts(date_texts, spec.date_format)
    if np.isnat(days).any():
        return None
    keys, period_of_text = np.unique(period_keys(days, frequency), return_inverse=True)
    ids, id_of_text, changed = normalised_ids(id_texts)
    # a blank id, an id that NFC changes (two texts may be one security) or ids that differ
    # only by case: the full checks report these. Two texts of one period, or an id padded
    # with spaces on some rows, are one row or column (a clash is a repeated cell, below)
    if (id_of_text < 0).any() or changed or case_clashes(ids):
        return None
    n_ids = len(ids)
    space = len(keys) * n_ids
    if space > 200_000_000:
        return None
    row_of_text = period_of_text.astype(np.int64) * n_ids
    column_of_text = id_of_text.astype(np.int64)
    seen = np.zeros(space, dtype=bool)
    flat = np.empty(space)
    while parts:
        d, s, v = parts.pop(0)              # each batch's codes are freed once written
        cell = row_of_text[d]
        cell += column_of_text[s]
        seen[cell] = True
        flat[cell] = v
        del d, s, v, cell
    n_cells = int(np.count_nonzero(seen))
    if n_cells < n_rows:
        return None                         # a repeated (period, security) cell
    if n_cells < space:
        flat[~seen] = np.nan
    del seen
    matrix = flat.reshape(len(keys), n_ids)
    percent = _percent_columns(matrix, frequency)
    if percent[0].any():
        return None
    return StreamedLong(matrix, keys, ids, percent, n_rows, spec, frequency)
