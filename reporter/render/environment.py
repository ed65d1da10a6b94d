"""The Jinja environment: user templates first, packaged defaults second.

A user folder (``[render] templates`` in pack.toml) is searched first. A user template can
extend the default it replaces through the ``default/`` prefix, e.g.
``{% extends "default/pack.html.j2" %}``. Autoescaping is on for every template, so any
string from an input file is escaped in HTML.
"""

from __future__ import annotations

import datetime as dt
import math
from importlib import resources
from pathlib import Path

from jinja2 import (
    ChoiceLoader,
    Environment,
    FileSystemLoader,
    PrefixLoader,
    StrictUndefined,
)

DASH = "\u2013"


def _missing(x) -> bool:
    return x is None or (isinstance(x, float) and math.isnan(x))


def pct(x, digits: int = 1, signed: bool = False) -> str:
    """A decimal as a percentage: 0.0123 -> '1.2%'."""
    if _missing(x):
        return DASH
    s = f"{x * 100:+.{digits}f}%" if signed else f"{x * 100:.{digits}f}%"
    return s.replace("-", "\u2212")


def bp(x, signed: bool = True) -> str:
    """A decimal as basis points: 0.0123 -> '+123 bp'."""
    if _missing(x):
        return DASH
    s = f"{x * 1e4:+.0f} bp" if signed else f"{x * 1e4:.0f} bp"
    return s.replace("-", "\u2212")


def num(x, digits: int = 2, signed: bool = False) -> str:
    """A plain number with fixed decimals and a true minus sign."""
    if _missing(x):
        return DASH
    s = f"{x:+.{digits}f}" if signed else f"{x:.{digits}f}"
    return s.replace("-", "\u2212")


def fit(x, width: int, align: str = "<") -> str:
    """Text set in exactly ``width`` characters, for the fixed-width print listing: cut with
    an ellipsis when longer, padded with spaces (``align`` '<' left, '>' right)."""
    text = "" if x is None else str(x)
    if len(text) > width:
        text = text[:width - 1] + "\u2026"
    return f"{text:{align}{width}}"


def longdate(d) -> str:
    """A date as '30 November 2026'."""
    if isinstance(d, str):
        d = dt.date.fromisoformat(d[:10])
    return f"{d.day} {d:%B %Y}"


def default_templates_dir() -> Path:
    """The packaged templates: ``templates/`` at the top of the repository, installed as the
    ``reporter.templates`` package (see pyproject.toml)."""
    return Path(str(resources.files("reporter.templates")))


def make_environment(user_templates: Path | None = None) -> Environment:
    """Jinja environment with the layered loader and the display filters."""
    default = FileSystemLoader(str(default_templates_dir()))
    loaders = []
    if user_templates is not None:
        loaders.append(FileSystemLoader(str(user_templates)))
    loaders += [PrefixLoader({"default": default}), default]
    env = Environment(loader=ChoiceLoader(loaders), autoescape=True, undefined=StrictUndefined,
                      trim_blocks=True, lstrip_blocks=True, keep_trailing_newline=True)
    env.filters.update(pct=pct, bp=bp, num=num, longdate=longdate, fit=fit)
    return env
