"""Text that leaves the tool in a CSV file cannot start a spreadsheet formula.

Following the OWASP guidance on CSV injection: a text cell that begins with ``=``, ``+``,
``-``, ``@``, a tab or a carriage return is written with a leading apostrophe, which
spreadsheets read as "this cell is text". ``+`` and ``-`` are left alone when the whole cell
is a number (``-0.5``, ``+3e-2``). So that the escape can be undone exactly, a cell that
already begins with an apostrophe gets one more. Reading a results CSV back (the comparison
with an earlier build, the trustees' site) removes exactly one leading apostrophe
(:func:`unescape`). Numbers, dates and column names are never touched; the HTML and PDF show
the original text.
"""

from __future__ import annotations

import io
import re

import numpy as np
import pandas as pd

TRIGGERS = ("=", "+", "-", "@", "\t", "\r", "'")
_NUMBER = re.compile(r"[+-](\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")


def needs_escape(text: str) -> bool:
    """Whether ``text`` would begin a formula (or an escape) in a spreadsheet."""
    if not text or text[0] not in TRIGGERS:
        return False
    return not (text[0] in "+-" and _NUMBER.fullmatch(text) is not None)


def escape(text: str) -> str:
    """``text`` as it is written in a CSV cell: with a leading apostrophe if it needs one."""
    return "'" + text if needs_escape(text) else text


def unescape(text: str) -> str:
    """The original text of a cell written by :func:`escape`."""
    return text[1:] if isinstance(text, str) and text.startswith("'") else text


def escape_array(values: np.ndarray) -> np.ndarray:
    """:func:`escape` over an array of strings (a copy when any changes)."""
    flags = [isinstance(v, str) and needs_escape(v) for v in values]
    if not any(flags):
        return values
    out = np.array(values, dtype=object)
    for i in np.flatnonzero(flags):
        out[i] = "'" + out[i]
    return out


def is_text(s: pd.Series) -> bool:
    """Whether a column may hold text: object dtype (pandas 2) or a string dtype (pandas 3
    reads text as ``str``, which is not ``object``)."""
    return s.dtype == object or pd.api.types.is_string_dtype(s.dtype)


def escape_frame(df: pd.DataFrame) -> pd.DataFrame:
    """``df`` with every text cell escaped (the frame itself when nothing needs it)."""
    changed = {}
    for col in df.columns:
        s = df[col]
        if is_text(s):
            texts = s.to_numpy(dtype=object)
            escaped = escape_array(texts)
            if escaped is not texts:
                changed[col] = pd.Series(escaped, index=s.index, dtype=object)
    return df.assign(**changed) if changed else df


def unescape_frame(df: pd.DataFrame, columns) -> pd.DataFrame:
    """Undo :func:`escape` in the named text columns of a frame read back from a results CSV."""
    for col in columns:
        if col in df.columns:
            df[col] = df[col].map(unescape)
    return df


def csv_text(df: pd.DataFrame) -> str:
    """A results table as CSV text: text cells escaped, floats to 10 significant figures,
    ``\\n`` line ends, no index."""
    buf = io.StringIO()
    escape_frame(df).to_csv(buf, index=False, lineterminator="\n", float_format="%.10g")
    return buf.getvalue()
