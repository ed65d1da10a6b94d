"""Label placement for print charts, computed in Python from the data and the chart's scales
(pure; no I/O).

vl-convert draws text in the chart's font at a known size but has no label-collision
avoidance for data labels, so labels are placed here: a greedy pass over a few candidate
offsets around each point, taking the first spot that stays inside the plot and clear of
every point and every label placed before it. A label with no free spot is left off (the
caller says so). Text widths are estimated from the font size by character class, on the
high side, so a real label is never wider than its box: ``tests/test_chart_labels.py``
checks the estimate against Pillow's measurement of the DejaVu Sans font file.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# upper bounds of DejaVu Sans advance widths in em by character class (checked against the
# font in the tests); any character outside ASCII counts as a full em
_NARROW = dict.fromkeys("ijlI.,:;!'|", 0.32) | dict.fromkeys("frt()[] -", 0.45)
_WIDE = dict.fromkeys("mwMW%", 1.0) | dict.fromkeys("ABCDEGHKNOQRUVXYZ&", 0.80)
_EM = 0.65          # lowercase letters, digits and the rest of the capitals
LINE = 1.25         # box height per font size: ascent plus descent, with a margin


def text_width(text: str, font_size: float) -> float:
    """An upper estimate of ``text``'s width in px at ``font_size`` in DejaVu Sans."""
    return font_size * sum(_NARROW.get(c, _WIDE.get(c, _EM if c.isascii() else 1.0))
                           for c in text)


@dataclass(frozen=True)
class Box:
    """An axis-aligned box in chart pixels (y down, as in SVG)."""

    x0: float
    y0: float
    x1: float
    y1: float

    def overlaps(self, other: Box, gap: float = 0.0) -> bool:
        return (self.x0 < other.x1 + gap and other.x0 < self.x1 + gap
                and self.y0 < other.y1 + gap and other.y0 < self.y1 + gap)

    def inside(self, width: float, height: float) -> bool:
        return self.x0 >= 0 and self.y0 >= 0 and self.x1 <= width and self.y1 <= height


@dataclass(frozen=True)
class Linear:
    """A linear scale from a data domain to a pixel range (as Vega's with nice off); it
    maps a number or a numpy array."""

    d0: float
    d1: float
    r0: float
    r1: float

    def __call__(self, v):
        return self.r0 + (v - self.d0) / (self.d1 - self.d0) * (self.r1 - self.r0)

    def invert(self, px: float) -> float:
        return self.d0 + (px - self.r0) / (self.r1 - self.r0) * (self.d1 - self.d0)


def point_box(x: float, y: float, half: float) -> Box:
    return Box(x - half, y - half, x + half, y + half)


# candidate spots around a point: right, left, above, below, the four diagonals, then the
# same again twice as far out (side of the point, rows up (-) or down (+), distance factor)
_RING = (("right", 0), ("left", 0), ("centre", -1), ("centre", 1),
         ("right", -1), ("left", -1), ("right", 1), ("left", 1))
_CANDIDATES = tuple((side, up, k) for k in (1.0, 2.0) for side, up in _RING)


@dataclass(frozen=True)
class Placed:
    """A label placed: ``x`` is its left edge and ``y`` its middle, in pixels; ``far`` when
    it sits in the outer ring (the chart draws a leader to it)."""

    text: str
    x: float
    y: float
    box: Box
    far: bool = False


def place_labels(anchors: list[tuple[str, float, float]], obstacles: list[Box], *,
                 width: float, height: float, font_size: float, gap: float = 7.0,
                 pad: float = 1.5, limit: int | None = None) -> list[Placed | None]:
    """Place each ``(text, x, y)`` label (pixels, in priority order) beside its point, clear
    of ``obstacles`` (points and other marks), of each other and of the plot's edges;
    ``gap`` (px) must exceed the point's own half-size plus ``pad``. Returns one
    :class:`Placed` per anchor, or None where no candidate spot is free (or once ``limit``
    labels are placed)."""
    taken = np.array([(b.x0, b.y0, b.x1, b.y1) for b in obstacles], dtype=float).reshape(-1, 4)
    out: list[Placed | None] = []
    h = font_size * LINE
    for text, ax, ay in anchors:
        if limit is not None and sum(p is not None for p in out) >= limit:
            out.append(None)
            continue
        w = text_width(text, font_size)
        found = None
        for side, up, k in _CANDIDATES:
            left = {"right": ax + k * gap, "left": ax - k * gap - w, "centre": ax - w / 2}[side]
            mid = ay + up * (k * gap + h / 2)
            box = Box(left, mid - h / 2, left + w, mid + h / 2)
            if box.inside(width, height) and not _hits(box, taken, pad):
                found = Placed(text, left, mid, box, far=k > 1)
                break
        if found is not None:
            b = found.box
            taken = np.vstack([taken, [b.x0, b.y0, b.x1, b.y1]])
        out.append(found)
    return out


def _hits(box: Box, taken: np.ndarray, pad: float) -> bool:
    """Whether ``box`` overlaps any row (x0, y0, x1, y1) of ``taken`` (vectorised)."""
    return bool(np.any((box.x0 < taken[:, 2] + pad) & (taken[:, 0] < box.x1 + pad)
                       & (box.y0 < taken[:, 3] + pad) & (taken[:, 1] < box.y1 + pad)))
