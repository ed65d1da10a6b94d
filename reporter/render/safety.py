"""What a pack's HTML may hold once a user template has rendered it.

A pack folder must not run code or fetch anything. A user template's HTML (screen and print)
is parsed with the standard library's :class:`html.parser.HTMLParser`, and its CSS (``<style>``
elements and ``style`` attributes) with tinycss2 (WeasyPrint's own CSS tokenizer, which
undoes CSS escapes and comments as a browser does). It is refused when it holds:

- a reference that is fetched (``src``, ``srcset``, ``<link href>``, ``<object data>``,
  ``poster``, ``background``, an SVG ``href``/``xlink:href``, CSS ``url()``, ``image-set()``
  or ``@import``) to anything but a ``data:`` URL or a relative path inside the pack: ``http:``,
  ``file:``, ``//host/x``, ``/etc/x`` and ``../x`` are all refused. A ``data:`` URL is refused
  where it could hold a stylesheet (``<link href>``, ``@import``), as that could fetch in turn;
- a link a reader clicks (``<a href>``, ``<area href>``, a form's ``action``) other than a
  ``#fragment``, a relative path inside the pack, or an ``http:``, ``https:`` or ``mailto:``
  address (the same rule as links in the commentary): clicking a link fetches nothing by
  itself, but ``javascript:`` and ``data:`` links run code;
- a ``<script>``, ``<iframe>``, ``<frame>``, ``<object>``, ``<embed>``, ``<applet>``,
  ``<portal>`` or ``<base>`` element, ``<meta http-equiv="refresh">``, an ``on*=`` event
  attribute, or an SVG ``<set>``/``<animate>`` of an ``href``;
- an HTML comment, ``<![CDATA[``, ``<?...>`` or a declaration other than the doctype (browsers
  and html.parser end some of these at different places, which could hide markup from the
  check), and markup inside a ``<style>`` element.

As a second line, the raw text is searched for the refused element names after ``<``: the
packaged templates escape every input string, so none can appear but as markup.
"""

from __future__ import annotations

import posixpath
import re
from html.parser import HTMLParser
from urllib.parse import unquote, urlsplit

import tinycss2

from reporter.errors import InputError, Problem

REFUSED_ELEMENTS = frozenset({"script", "iframe", "frame", "frameset", "object", "embed",
                              "applet", "portal", "base", "noscript"})
# attributes whose URL is fetched when the page (or the PDF) is drawn
FETCH_ATTRIBUTES = frozenset({"src", "href", "xlink:href", "data", "poster", "background",
                              "lowsrc", "dynsrc", "longdesc", "codebase", "archive", "manifest",
                              "ping", "icon", "profile", "usemap", "cite"})
SRCSET_ATTRIBUTES = frozenset({"srcset", "imagesrcset"})
LINK_ELEMENTS = frozenset({"a", "area"})      # their href is followed only when clicked
LINK_ATTRIBUTES = frozenset({"action", "formaction"})
LINK_SCHEMES = frozenset({"http", "https", "mailto"})
# CSS functions whose string argument is a URL (url("x") is a function token, url(x) a URL token)
CSS_URL_FUNCTIONS = frozenset({"url", "src", "image", "image-set", "-webkit-image-set"})
MAX_PROBLEMS = 20
_RAW_REFUSED = re.compile(r"<\s*/?\s*(" + "|".join(sorted(REFUSED_ELEMENTS)) + r")\b", re.I)
_URL_NOISE = re.compile(r"[\t\n\r]")


def check_html(html: str, template: str) -> None:
    """Raise :class:`~reporter.errors.InputError` naming ``templates/<template>`` for every
    reference or element of ``html`` that a pack may not hold (see the module docstring)."""
    checker = _Checker()
    checker.feed(html)
    checker.close()
    found = list(dict.fromkeys(checker.problems))
    if not any(p.startswith("refused <") for p in found):
        for m in _RAW_REFUSED.finditer(html):
            found.append(f"refused <{m.group(1).lower()}> element (a pack may not run code "
                         "or embed another page)")
            break
    if found:
        where = f"templates/{template}"
        raise InputError([Problem(where, text) for text in found[:MAX_PROBLEMS]])


def url_problem(url: str, *, link: bool = False, data_ok: bool = True) -> str | None:
    """Why ``url`` may not be used (a sentence), or None when it may: a ``data:`` URL (when
    ``data_ok``) or a relative path that stays inside the pack; for a ``link``, also a
    ``#fragment`` or an ``http:``, ``https:`` or ``mailto:`` address."""
    # as a browser reads it: spaces and control characters around, tabs and newlines inside
    # dropped, backslashes taken as slashes
    text = _URL_NOISE.sub("", url.strip("\x00\x01\x02\x03\x04\x05\x06\x07\x08\x0b\x0c\x0e"
                                        "\x0f\x10\x11\x12\x13\x14\x15\x16\x17\x18\x19\x1a"
                                        "\x1b\x1c\x1d\x1e\x1f \t\n\r")).replace("\\", "/")
    if text == "" or text.startswith("#"):
        return None
    try:
        parts = urlsplit(text)
    except ValueError:
        return f"refused remote reference {url!r}"
    scheme = parts.scheme.lower()
    if scheme:
        if scheme == "data" and data_ok and not link:
            return None
        if link and scheme in LINK_SCHEMES:
            return None
        return f"refused remote reference {url!r}"
    if parts.netloc or text.startswith("//"):
        return f"refused remote reference {url!r}"
    path = unquote(parts.path)
    if path.startswith("/"):
        return f"refused reference {url!r} outside the pack folder"
    norm = posixpath.normpath(path) if path else "."
    if norm == ".." or norm.startswith("../"):
        return f"refused reference {url!r} outside the pack folder"
    return None


def srcset_urls(value: str) -> list[str]:
    """The URLs of a ``srcset`` attribute (image candidates: a URL, then descriptors up to
    a comma), following the HTML standard's parsing; a ``data:`` URL may hold commas."""
    urls, i, n = [], 0, len(value)
    while i < n:
        while i < n and (value[i].isspace() or value[i] == ","):
            i += 1
        start = i
        while i < n and not value[i].isspace():
            i += 1
        url = value[start:i]
        if not url:
            break
        if url.endswith(","):
            urls.append(url.rstrip(","))
            continue
        urls.append(url)
        depth = 0
        while i < n:                    # descriptors, up to a comma outside parentheses
            ch = value[i]
            depth += ch == "("
            depth -= ch == ")" and depth > 0
            i += 1
            if ch == "," and depth == 0:
                break
    return urls


def css_urls(css: str) -> list[tuple[str, bool]]:
    """Every URL a piece of CSS would fetch, each with whether it is an ``@import``."""
    found: list[tuple[str, bool]] = []
    _walk_css(tinycss2.parse_component_value_list(css, skip_comments=True), found)
    return found


def _walk_css(tokens, found: list[tuple[str, bool]]) -> None:
    importing = False           # after @import: its first string or URL is the target
    for tok in tokens:
        kind = tok.type
        if kind in ("whitespace", "comment"):
            continue
        if kind == "at-keyword":
            importing = tok.lower_value == "import"
            continue
        if kind == "url":
            found.append((tok.value, importing))
        elif kind == "string" and importing:
            found.append((tok.value, True))
        elif kind == "function":
            if tok.lower_name in CSS_URL_FUNCTIONS:
                found.extend((arg.value, importing) for arg in tok.arguments
                             if arg.type == "string")
            _walk_css(tok.arguments, found)
        elif kind in ("() block", "[] block", "{} block"):
            _walk_css(tok.content, found)
        importing = False


class _Checker(HTMLParser):
    """Gathers a sentence for every refused element, attribute and reference."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.problems: list[str] = []
        self._style: list[str] | None = None

    def _url(self, url: str, **kw) -> None:
        problem = url_problem(url, **kw)
        if problem:
            self.problems.append(problem)

    def _css(self, css: str) -> None:
        for url, is_import in css_urls(css):
            self._url(url, data_ok=not is_import)

    def handle_starttag(self, tag: str, attrs) -> None:
        if tag in REFUSED_ELEMENTS:
            self.problems.append(f"refused <{tag}> element (a pack may not run code or "
                                 "embed another page)")
        values = {name: value or "" for name, value in attrs}
        if tag == "meta" and values.get("http-equiv", "").strip().lower() == "refresh":
            self.problems.append('refused <meta http-equiv="refresh"> (a pack may not '
                                 "load another page)")
        if tag in ("set", "animate") and values.get("attributename", "").lower() in (
                "href", "xlink:href"):
            self.problems.append(f"refused <{tag}> of an href (a pack may not change "
                                 "a link as it is shown)")
        for name, value in values.items():
            if name.startswith("on"):
                self.problems.append(f"refused event attribute '{name}' on <{tag}> "
                                     "(a pack may not run code)")
            elif name in SRCSET_ATTRIBUTES:
                for url in srcset_urls(value):
                    self._url(url)
            elif name in ("href", "xlink:href") and tag in LINK_ELEMENTS:
                self._url(value, link=True)
            elif name in LINK_ATTRIBUTES:
                self._url(value, link=True)
            elif name in FETCH_ATTRIBUTES:
                self._url(value, data_ok=not (tag == "link" and name == "href"))
            elif name == "style" or "(" in value or "\\" in value:
                self._css(value)        # style, and SVG presentation such as fill="url(...)"
        if tag == "style":
            self._style = []

    def handle_startendtag(self, tag: str, attrs) -> None:
        self.handle_starttag(tag, attrs)
        if tag == "style":
            self._style = None

    def handle_endtag(self, tag: str) -> None:
        if tag == "style" and self._style is not None:
            css = "".join(self._style)
            self._style = None
            if "<" in css:
                self.problems.append("refused markup inside a <style> element")
            self._css(css)

    def handle_data(self, data: str) -> None:
        if self._style is not None:
            self._style.append(data)

    def handle_comment(self, data: str) -> None:
        self.problems.append("refused HTML comment (comments are not passed through; use "
                             "a Jinja {# comment #})")

    def handle_decl(self, decl: str) -> None:
        if decl.strip().lower() != "doctype html":
            self.problems.append(f"refused declaration <!{decl[:40]}>")

    def unknown_decl(self, data: str) -> None:
        self.problems.append(f"refused declaration <![{data[:40]}")

    def handle_pi(self, data: str) -> None:
        self.problems.append(f"refused processing instruction <?{data[:40]}")

    def close(self) -> None:
        super().close()
        if self._style is not None:          # a <style> never closed: its text still counts
            self.handle_endtag("style")
