"""Rules on text: how security ids are normalised and compared, and invisible characters.

* An id is trimmed of spaces and put in Unicode normal form C (NFC), so that ``TVXÉ01``
  typed with a composed É and the same id with E + combining acute are one security, in
  every file and wherever ids are matched.
* Two ids of one file that differ only by case (after NFC and trimming) are an error: they
  are almost always one security typed twice, and taking them as two would split it.
* A format character (Unicode category Cf: the bidirectional controls U+202A-U+202E,
  U+2066-U+2069, U+200E, U+200F, U+061C, the zero-width space U+200B, U+FEFF inside text ...)
  in any text cell or column name of any input is an error: it is invisible, and a
  right-to-left override makes ``TVX<U+202E>004`` display as ``TVX400``. (A byte-order mark
  at the very start of a CSV file is not text of any cell; the reader drops it.)
"""

from __future__ import annotations

import unicodedata

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from reporter.errors import Collector, place
from reporter.readers import RawTable
from reporter.validate.common import MAX_PER_CHECK

INVISIBLE_PATTERN = r"\p{Cf}"        # RE2 (pyarrow), Unicode general category "format"


def normalise_id(text: str) -> str:
    """A security id (or other text) as it is matched everywhere: without format characters
    (each is reported as an error by :func:`check_invisible`, so dropping them here only
    keeps one problem from being reported again as a mismatch), trimmed, in NFC."""
    if any(unicodedata.category(c) == "Cf" for c in text):
        text = "".join(c for c in text if unicodedata.category(c) != "Cf")
    return unicodedata.normalize("NFC", text.strip()).strip()


def normalised_ids(texts: list[str | None]) -> tuple[list[str], np.ndarray, bool]:
    """Distinct id texts -> ``(ids, id_of_text, changed)``: the normalised ids in order of first
    appearance, each text's position in them (-1 for a blank or null text), and whether NFC
    changed any text beyond trimming (so that two texts may have become one id)."""
    ids: list[str] = []
    index_of: dict[str, int] = {}
    id_of_text = np.full(len(texts), -1, dtype=np.int64)
    changed = False
    for k, text in enumerate(texts):
        if text is None:
            continue
        sid = normalise_id(text)
        changed = changed or sid != text.strip()
        if sid:
            id_of_text[k] = index_of.setdefault(sid, len(ids))
            if id_of_text[k] == len(ids):
                ids.append(sid)
    return ids, id_of_text, changed


def case_clashes(ids: list[str]) -> list[tuple[int, int]]:
    """Pairs ``(first, later)`` of positions in the distinct ids ``ids`` that differ only by
    case; each later id is paired with the first id of its kind."""
    first_of: dict[str, int] = {}
    out = []
    for j, sid in enumerate(ids):
        key = sid.casefold()
        if key in first_of:
            out.append((first_of[key], j))
        else:
            first_of[key] = j
    return out


def case_clash_message(later: str, first: str, first_row: int | None) -> str:
    at = f" (row {first_row})" if first_row is not None else ""
    return (f"security id {later!r} differs from {first!r}{at} only by case: give one "
            "security one id")


def letter_scripts(text: str) -> list[str]:
    """The scripts of the letters of ``text`` (the first word of each letter's Unicode name:
    LATIN, CYRILLIC, GREEK ...), in order of first use. Two or more in one short name is
    what a look-alike letter (Cyrillic "Е" for Latin "E") leaves behind."""
    seen: dict[str, None] = {}
    for ch in text:
        if unicodedata.category(ch).startswith("L"):
            seen.setdefault(unicodedata.name(ch, "UNKNOWN ").split(" ", 1)[0], None)
    return list(seen)


def visible(text: str) -> str:
    """``text`` with each format character written as ``<U+XXXX>`` (for messages)."""
    return "".join(f"<U+{ord(c):04X}>" if unicodedata.category(c) == "Cf" else c for c in text)


def _describe(text: str) -> str:
    found = list(dict.fromkeys(f"U+{ord(c):04X}" for c in text
                               if unicodedata.category(c) == "Cf"))
    plural = "s" if len(found) > 1 else ""
    return f"invisible control character{plural} {', '.join(found)}"


def check_invisible(raw: RawTable, coll: Collector) -> None:
    """An error for every column name and text cell of ``raw`` holding a format character
    (at most :data:`MAX_PER_CHECK` cells per column listed, then a count of the rest).

    Vectorised: one RE2 match over each text column (over its dictionary alone when the
    reader delivered one, as for the ids and dates of a long returns file), and Python only
    for the few cells reported.
    """
    for name in raw.table.column_names:
        if any(unicodedata.category(c) == "Cf" for c in name):
            coll.error(place(raw.name, 1, visible(name)), f"column name: {_describe(name)}")
    for name, column in zip(raw.table.column_names, raw.table.columns, strict=True):
        label = visible(name)
        count, first = _invisible_cells(column)
        for i, text in first:
            coll.error(place(raw.name, raw.row_number(i), label), _describe(text))
        if count > len(first):
            coll.error(raw.name, f"... and {count - len(first)} more cells with invisible "
                       f"characters in column {label}")


def _invisible_cells(column: pa.ChunkedArray) -> tuple[int, list[tuple[int, str]]]:
    """How many cells of ``column`` hold a format character, and ``(row, text)`` of the
    first :data:`MAX_PER_CHECK` (nothing for a column that is not text)."""
    offset, count, first = 0, 0, []
    for chunk in column.chunks:
        if pa.types.is_dictionary(chunk.type) and pa.types.is_string(chunk.type.value_type):
            hit = _matches(chunk.dictionary)
            if hit.any():
                codes = chunk.indices.fill_null(-1).to_numpy(zero_copy_only=False)
                rows = np.flatnonzero(np.append(hit, False)[codes])   # -1 (null): last slot
                texts = chunk.dictionary.to_pylist()
                count += len(rows)
                first += [(offset + int(i), texts[codes[i]])
                          for i in rows[:MAX_PER_CHECK - len(first)]]
        elif pa.types.is_string(chunk.type) or pa.types.is_large_string(chunk.type):
            rows = np.flatnonzero(_matches(chunk))
            count += len(rows)
            first += [(offset + int(i), chunk[int(i)].as_py())
                      for i in rows[:MAX_PER_CHECK - len(first)]]
        offset += len(chunk)
    return count, first


def _matches(values: pa.Array) -> np.ndarray:
    if len(values) == 0:
        return np.zeros(0, dtype=bool)
    found = pc.match_substring_regex(values, INVISIBLE_PATTERN).fill_null(False)
    return np.asarray(found.to_numpy(zero_copy_only=False), dtype=bool)
