"""Invisible format characters in pack.toml's text (titles, names, mandate and scenario
names): each is an error naming its key, as in every data file (see
``reporter.validate.text``), in ``actions.csv``, in commentary files and in the text options
of sign-off and countersign (``--by``, ``--role``, ...). Every character of Unicode category
Cf counts, the zero-width joiner and non-joiner included, as in data files' text cells.
A right-to-left override in a title would make the cover of a signed pack read other than
its bytes."""

from __future__ import annotations

import re
import unicodedata

from reporter.errors import Problem, one_line


def format_characters(text: str) -> list[str]:
    """The distinct Unicode format characters (category Cf) in ``text``, as ``U+XXXX``."""
    return sorted({f"U+{ord(c):04X}" for c in text if unicodedata.category(c) == "Cf"})


def has_control(text: str) -> bool:
    """Whether ``text`` holds a control character (Unicode Cc: C0 with tab and line breaks,
    DEL, and the C1 range U+0080-U+009F, whose NEL U+0085 some readers take as a line
    break)."""
    return any(unicodedata.category(c) == "Cc" for c in text)


# the longest run of printed text without a space that commentary and actions.csv may hold:
# the PDF breaks such a word anywhere to keep it on the page, and the cost of finding those
# breaks grows with the square of its length (a paragraph of one 4,000-character word took
# 0.33 s to lay out, of 2,000 0.10 s; a 50,000-character word held a build for minutes)
LONGEST_WORD = 300
_LONG_WORD = re.compile(rf"\S{{{LONGEST_WORD + 1},}}")


def long_word_message(text: str) -> str | None:
    """``a word of 50,000 characters with no space ...`` for the first run of ``text`` longer
    than :data:`LONGEST_WORD` characters, or None."""
    found = _LONG_WORD.search(text)
    if found is None:
        return None
    word = found.group()
    return (f"a word of {len(word):,} characters with no space ({word[:40]!r}...); at most "
            f"{LONGEST_WORD}: break it, or make a long address a link's target")


def invisible_message(text: str) -> str | None:
    """``invisible control character U+202E`` (the distinct format characters of ``text``),
    or None when it holds none: the message every text check gives."""
    found = format_characters(text)
    if not found:
        return None
    return f"invisible control character{'s' if len(found) > 1 else ''} {', '.join(found)}"


def toml_problems(raw, fname: str, key: str = "") -> list[Problem]:
    """One problem per string value (or table key) of a parsed TOML document that holds a
    format character, named by its dotted key (list items by position)."""
    problems: list[Problem] = []
    if isinstance(raw, dict):
        for k, v in raw.items():
            here = f"{key}.{k}" if key else str(k)
            if found := format_characters(str(k)):
                problems.append(Problem(f"{fname}:{here}", "invisible control character in "
                                        f"a key: {', '.join(found)}"))
            elif controls := [c for c in str(k) if unicodedata.category(c) == "Cc"]:
                # a line break or tab in a key (a sector's name, say) names nothing in a file
                problems.append(Problem(f"{fname}:{here}", "control character in a key: "
                                        + one_line("".join(dict.fromkeys(controls)))))
            problems += toml_problems(v, fname, here)
    elif isinstance(raw, list):
        for i, v in enumerate(raw):
            problems += toml_problems(v, fname, f"{key}.{i}")
    elif isinstance(raw, str) and (found := format_characters(raw)):
        problems.append(Problem(f"{fname}:{key}",
                                f"invisible control character {', '.join(found)}"))
    return problems
