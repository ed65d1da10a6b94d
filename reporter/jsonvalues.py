"""Figures as JSON holds them: numpy scalars become Python numbers, and NaN and infinities
(which JSON cannot hold) become null."""

from __future__ import annotations

import json

import numpy as np


def json_ready(v):
    """``v`` with every number inside it (through dicts, lists and tuples) made JSON-safe."""
    if isinstance(v, dict):
        return {k: json_ready(x) for k, x in v.items()}
    if isinstance(v, list | tuple):
        return [json_ready(x) for x in v]
    if isinstance(v, float | np.floating):
        return float(v) if np.isfinite(v) else None
    if isinstance(v, np.integer):
        return int(v)
    if isinstance(v, np.bool_):
        return bool(v)
    return v


def json_text(obj) -> str:
    """A results JSON file's text: :func:`json_ready` values, indented, keys sorted, and a
    final newline."""
    return json.dumps(json_ready(obj), indent=2, sort_keys=True) + "\n"
