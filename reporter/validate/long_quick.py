"""The one-pass route from a clean long returns file to its matrix (see DEVELOPERS.md)."""

from __future__ import annotations

import unicodedata

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from reporter.analytics.returns import period_keys
from reporter.validate.cells import _parse_date_texts
from reporter.validate.text import case_clashes, normalised_ids
from reporter.validate.values import MAX_PERIOD_RETURN, _percent_columns


def _clean_long_matrix(raw, date_format: str, frequency: str):
    """The periods x ids matrix of a long returns file in one pass over the reader's column
    chunks, for a file in which no row needs a message; else None, and the caller runs the
    full checks of :func:`_returns_long`, which find and place every problem.

    This is not a second set of rules, only a quicker route to the same panel: it gives up
    (returns None) at the first sign that a row might need a message (an empty or bad date
    or id, an id that Unicode normalisation changes or that differs from another only by
    case, an invisible character, a return that is not a finite number at or above -100%,
    two rows for one cell, a period with no row, a security that looks like percentages).
    Then it has touched no file row twice and allocated nothing of the file's length: ids
    and dates are mapped per chunk through the chunk's own (small) dictionary, and each
    chunk's cells are written straight into the matrix. Returns ``(matrix, keys, ids,
    percent, row_where)``; ``row_where(test)`` is the first data row whose (period, id) codes pass
    ``test(periods, ids)`` (for the rare message about a clean file: a stale price).
    """
    table = raw.table
    cols = [table[c] for c in ("date", "security_id", "return")]
    date, sid, ret = cols
    if not (pa.types.is_dictionary(date.type) and pa.types.is_dictionary(sid.type)
            and pa.types.is_floating(ret.type)) or any(c.null_count for c in cols):
        return None
    batches = pa.table({"d": date, "s": sid, "r": ret}).to_batches()
    # distinct texts over the chunks' own dictionaries, in order of first appearance, and
    # each chunk's dictionary as positions in them
    distinct = [pc.unique(pa.concat_arrays([b.column(k).dictionary for b in batches]))
                for k in (0, 1)]
    local = [tuple(pc.index_in(b.column(k).dictionary, value_set=distinct[k]).to_numpy()
                   for k in (0, 1)) for b in batches]
    date_texts, id_texts = (d.to_pylist() for d in distinct)
    days = _parse_date_texts(date_texts, date_format)
    if np.isnat(days).any():
        return None
    keys, period_of_text = np.unique(period_keys(days, frequency), return_inverse=True)
    ids, id_of_text, changed = normalised_ids(id_texts)
    # a blank id, an id that NFC changes (two texts may be one security), ids that differ
    # only by case, or an invisible character: the full checks report these
    if (id_of_text < 0).any() or changed or case_clashes(ids) or any(
            unicodedata.category(c) == "Cf" for text in id_texts + date_texts for c in text):
        return None
    n_ids = len(ids)
    space = len(keys) * n_ids
    if space > 200_000_000:
        return None              # the full checks find repeated cells without a bit map
    itype = np.int32 if space < 2**31 else np.int64
    maps = [((period_of_text[dl] * n_ids).astype(itype), id_of_text[il].astype(itype))
            for dl, il in local]
    seen = np.zeros(space, dtype=bool)
    flat = np.empty(space)
    for b, (pmap, smap) in zip(batches, maps, strict=True):
        v = b.column(2).to_numpy()
        if not ((v >= -1.0) & (v <= MAX_PERIOD_RETURN)).all():   # NaN fails the first
            return None
        cell = pmap[b.column(0).indices.to_numpy()]
        cell += smap[b.column(1).indices.to_numpy()]
        seen[cell] = True
        flat[cell] = v
    n_cells = int(np.count_nonzero(seen))
    if n_cells < table.num_rows or not seen.reshape(len(keys), n_ids).any(axis=1).all():
        return None
    if n_cells < space:
        flat[~seen] = np.nan
    matrix = flat.reshape(len(keys), n_ids)
    percent = _percent_columns(matrix, frequency)
    if percent[0].any():
        return None

    def row_where(test) -> int:
        offset = 0
        for b, (pmap, smap) in zip(batches, maps, strict=True):
            hit = np.flatnonzero(test(pmap[b.column(0).indices.to_numpy()] // n_ids,
                                      smap[b.column(1).indices.to_numpy()]))
            if len(hit):
                return offset + int(hit[0])
            offset += b.num_rows
        raise LookupError("no such row")

    return matrix, keys, ids, percent, row_where
