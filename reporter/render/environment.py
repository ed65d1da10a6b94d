"""The Jinja environment: user templates first, packaged defaults second.

A user folder (``[render] templates`` in pack.toml) is searched first. A user template can
extend the default it replaces through the ``default/`` prefix, e.g.
``{% extends "default/pack.html.j2" %}``. Autoescaping is on for every template, so any
string from an input file is escaped in HTML.

A user template is untrusted (it comes from a pack folder), so every template runs in Jinja's
immutable sandbox (no ``_`` attributes such as ``cycler.__init__.__globals__``, no changing
of lists or dicts), and, with user templates, no attribute of a numpy, pandas, path, file or
module object (``x.tofile(...)`` would write a file); the loaders never follow a link out of their
folder; and, when user templates are in use, the rendered HTML is checked by
:func:`reporter.render.safety.check_html`. A template error becomes an
:class:`~reporter.errors.InputError` naming the template and line (:func:`template_error`).
"""

from __future__ import annotations

import datetime as dt
import math
import os
import traceback
from importlib import resources
from pathlib import Path

from jinja2 import (
    BytecodeCache,
    ChoiceLoader,
    Environment,
    FileSystemLoader,
    PrefixLoader,
    StrictUndefined,
    Template,
    TemplateError,
    TemplateNotFound,
    TemplateSyntaxError,
)
from jinja2.exceptions import SecurityError
from jinja2.loaders import split_template_path
from jinja2.sandbox import ImmutableSandboxedEnvironment
from markupsafe import Markup

from reporter.errors import InputError, Problem

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


def plural(n, singular: str, plural_form: str | None = None) -> str:
    """A count with its noun in the right number: ``3 | plural("holding")`` -> '3 holdings',
    ``1 | plural("holding")`` -> '1 holding'. The plural adds "s" unless given."""
    count = int(n)
    word = singular if count == 1 else (plural_form or singular + "s")
    return f"{count} {word}"


def money(x, currency: str = "", signed: bool = False) -> str:
    """An amount in whole units of ``currency`` with thousands separators:
    6931283.2 -> 'GBP 6,931,283'."""
    if _missing(x):
        return DASH
    s = f"{x:+,.0f}" if signed else f"{x:,.0f}"
    return ((currency + " ") if currency else "") + s.replace("-", "\u2212")


def fit(x, width: int, align: str = "<") -> str:
    """Text set in exactly ``width`` characters, for the fixed-width print listing: cut with
    an ellipsis when longer, padded with spaces (``align`` '<' left, '>' right)."""
    text = "" if x is None else str(x)
    if len(text) > width:
        text = text[:width - 1] + "\u2026"
    return f"{text:{align}{width}}"


LONG_NAME = 48     # characters above which a name cell may wrap (pack.css: td.name.long)


def name_cell(x) -> str:
    """The class of a table cell holding a name: ``name`` keeps it on one line; ``name long``
    lets one longer than :data:`LONG_NAME` characters wrap, anywhere if it must, so that an
    overlong name (an unbroken one above all) cannot push the figures beside it off the page."""
    return "name long" if x is not None and len(str(x)) > LONG_NAME else "name"


def long_cell(x) -> Markup:
    """`` class="long"`` for a table cell of other text that may run long (a sector's
    name) when it is longer than :data:`LONG_NAME` characters: it wraps as a long name does
    (:func:`name_cell`), anywhere if it must; else nothing, and the cell wraps at its spaces
    as any cell does."""
    return Markup(' class="long"') if x is not None and len(str(x)) > LONG_NAME else Markup("")


def longdate(d) -> str:
    """A date as '30 November 2026'."""
    if isinstance(d, str):
        d = dt.date.fromisoformat(d[:10])
    return f"{d.day} {d:%B %Y}"


def default_templates_dir() -> Path:
    """The packaged templates: ``templates/`` at the top of the repository, installed as the
    ``reporter.templates`` package (see pyproject.toml)."""
    return Path(str(resources.files("reporter.templates")))


class FolderLoader(FileSystemLoader):
    """A :class:`~jinja2.FileSystemLoader` of one folder that never leaves it: a template
    whose real path (every link followed) lies outside the folder's real path is refused
    with a :class:`~jinja2.exceptions.SecurityError`, which stops the render (a
    ``TemplateNotFound`` would let the next loader serve a default in its place)."""

    def __init__(self, folder: Path | str) -> None:
        super().__init__(str(folder))
        self.folder = Path(folder)

    def get_source(self, environment: Environment, template: str):
        pieces = split_template_path(template)          # no ".." parts
        root = os.path.realpath(self.folder)
        filename = os.path.join(self.folder, *pieces)
        if not os.path.lexists(filename):
            raise TemplateNotFound(template)
        real = os.path.realpath(filename)
        if os.path.commonpath([root, real]) != root:
            raise SecurityError(f"{template!r} is a link to a file outside the templates "
                                "folder; refused")
        if not os.path.isfile(real):
            raise TemplateNotFound(template)
        with open(real, encoding=self.encoding) as fh:    # the checked path, not the link
            contents = fh.read()
        mtime = os.path.getmtime(real)
        return contents, os.path.normpath(filename), lambda: _mtime(real) == mtime


def _mtime(path: str) -> float | None:
    try:
        return os.path.getmtime(path)
    except OSError:
        return None


# objects whose attributes a template may not reach: their methods write or read files
# (``ndarray.tofile``, ``DataFrame.to_csv``, ``Path.read_text``) or run code
_UNSAFE_MODULES = ("numpy", "pandas", "pathlib", "os", "io", "posix", "altair", "subprocess",
                   "shutil", "builtins.module")


class PackSandbox(ImmutableSandboxedEnvironment):
    """Jinja's immutable sandbox. With user templates (``user_templates`` set), no attribute
    of a numpy, pandas, path, file or module object is reachable either. (The packaged
    site templates, which never run beside user templates, read pandas tables.)"""

    user_templates: Path | None = None

    def is_safe_attribute(self, obj, attr: str, value) -> bool:
        if self.user_templates is not None:
            kind = type(obj)
            module = kind.__module__ or ""
            if module.split(".")[0] in _UNSAFE_MODULES or kind.__name__ == "module":
                return False
        return super().is_safe_attribute(obj, attr, value)

    def get_template(self, name, parent=None, globals=None):
        """The template ``name``; a syntax error in it becomes an
        :class:`~reporter.errors.InputError` naming the template and line, and so does any
        other failure to load it at the top (``parent`` None). Under an ``include`` or
        ``extends`` (``parent`` given) the error goes on to the render, whose traceback
        holds the including template's line."""
        try:
            return super().get_template(name, parent, globals)
        except TemplateError as exc:
            if parent is None or isinstance(exc, TemplateSyntaxError):
                raise template_error(exc, self) from None
            raise


class CheckedTemplate(Template):
    """A template whose top-level render maps template errors to an
    :class:`~reporter.errors.InputError` (see :func:`template_error`) and, when the
    environment serves user templates, checks the HTML it renders
    (:func:`reporter.render.safety.check_html`)."""

    def render(self, *args, **kwargs) -> str:
        env = self.environment
        user = env.user_templates
        try:
            html = super().render(*args, **kwargs)
        except (TemplateError, RecursionError) as exc:
            raise template_error(exc, env) from None
        except InputError:
            raise
        except Exception as exc:        # e.g. a filter given text: the user template's fault
            if user is None:
                raise
            raise template_error(exc, env) from None
        if user is not None:
            from reporter.render.safety import check_html

            check_html(html, self.name or "?")
        return html


def template_error(exc: BaseException, env: Environment) -> InputError:
    """One problem naming the template and line where ``exc`` (a Jinja error) arose, as
    ``templates/NAME:LINE`` (``default/NAME`` for a packaged template)."""
    where = None
    if isinstance(exc, TemplateSyntaxError) and exc.lineno:
        where = _template_place(exc.filename, exc.lineno, env, exc.name)
    if where is None:
        # the innermost frame that is a template's (Jinja gives template frames the
        # template's file name and line); read from the frames, no source file opened
        for frame, line in reversed(list(traceback.walk_tb(exc.__traceback__))):
            where = _template_place(frame.f_code.co_filename, line, env)
            if where is not None:
                break
    if isinstance(exc, TemplateNotFound):
        message = f"template {exc.name!r} not found"
    elif isinstance(exc, RecursionError):
        message = "templates nest or recurse too deeply"
    elif isinstance(exc, TemplateError):
        message = (exc.message or str(exc)).strip().splitlines()[0]
    else:
        message = f"{type(exc).__name__}: {str(exc).strip().splitlines()[0] if str(exc) else ''}"
    kind = {TemplateSyntaxError: "syntax error", SecurityError: "refused by the sandbox"}
    label = next((v for k, v in kind.items() if isinstance(exc, k)), None)
    return InputError([Problem(where or "templates", f"{label}: {message}" if label
                               else message)])


def _template_place(filename: str | None, line: int | None, env: Environment,
                    name: str | None = None) -> str | None:
    """``templates/NAME:LINE`` for a file in the user folder, ``default/NAME:LINE`` for a
    packaged one, None for a file that is neither (a frame of Python code)."""
    if not filename:
        return None
    path = os.path.normpath(filename)
    if not os.path.isabs(path):
        return None
    for folder, label in ((getattr(env, "user_templates", None), "templates"),
                          (default_templates_dir(), "default")):
        if folder is None:
            continue
        root = os.path.normpath(folder)
        if os.path.commonpath([root, path]) == root and path != root:
            rel = Path(os.path.relpath(path, root)).as_posix()
            return f"{label}/{rel}:{line}" if line else f"{label}/{rel}"
    if name and not filename.endswith(".py"):
        return f"templates/{name}:{line}"
    return None


def make_environment(user_templates: Path | None = None,
                     bytecode_cache: BytecodeCache | None = None) -> Environment:
    """The sandboxed Jinja environment with the layered loader and the display filters.
    With ``user_templates``, every top-level render's HTML is checked for references and
    elements a pack may not hold (:mod:`reporter.render.safety`). ``bytecode_cache`` keeps
    compiled templates between environments (the preview's re-renders); Jinja recompiles a
    template whose source changed."""
    default = FolderLoader(default_templates_dir())
    loaders = []
    if user_templates is not None:
        loaders.append(FolderLoader(user_templates))
    loaders += [PrefixLoader({"default": default}), default]
    env = PackSandbox(loader=ChoiceLoader(loaders), autoescape=True, undefined=StrictUndefined,
                      trim_blocks=True, lstrip_blocks=True, keep_trailing_newline=True,
                      bytecode_cache=bytecode_cache)
    env.template_class = CheckedTemplate
    env.user_templates = Path(user_templates) if user_templates is not None else None
    env.filters.update(pct=pct, bp=bp, num=num, longdate=longdate, fit=fit,
                       plural=plural, money=money, name_cell=name_cell,
                       long_cell=long_cell)
    return env
