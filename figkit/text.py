"""Text from the sheet, the settings and the data on its way into files, pages and terminals.

Sheet and settings text is typed by people, so a control character there is refused (see
:func:`refuse_controls`).  Data values are not ours to refuse: where a category value becomes a
label (panel titles, legend entries, tick labels, stats.csv, the build log) its control
characters are written as escapes (``\\x1b``, ``\\n``), the way Python's ``repr`` shows them, so an SVG
stays well-formed XML and a terminal shows the text instead of obeying it.  Captions reach the
Snakemake report through :class:`ReportText`, which makes them plain text, never markup.
"""
from __future__ import annotations

import json
import re

from .errors import FigkitError

# Unicode general category Cc (C0 controls, DEL, C1 controls), and the bidirectional embedding,
# override and isolate controls of Unicode Standard Annex #9, which reorder what a terminal or a
# page shows (CVE-2021-42574).  XML 1.0 (section 2.2, "Char") forbids most of C0 outright.
CONTROLS = re.compile("[\x00-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069]")
# The same, less tab, line feed and carriage return: a quoted sheet cell may hold line breaks.
SHEET_CONTROLS = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069]")


def _escape(match: re.Match) -> str:
    return repr(match.group())[1:-1]   # as Python writes it: \\n, \\x1b, \\u202e


def shown(value) -> str:
    """``str(value)`` with every control character written as an escape (``\\x1b``)."""
    return CONTROLS.sub(_escape, str(value))


def terminal(text: str) -> str:
    """Text for a terminal (or a label the layout wrapped): control characters escaped, line
    breaks and tabs kept."""
    return SHEET_CONTROLS.sub(_escape, text)


def refuse_controls(text: str, *, row=None, figure=None, field=None, where="sheet") -> None:
    """Raise a one-line FigkitError if typed text holds a control character."""
    m = SHEET_CONTROLS.search(text)
    if m:
        raise FigkitError(f"{where} text holds the control character {_escape(m)} at position "
                          f"{m.start() + 1}", row=row, figure=figure, field=field, value=text,
                          allowed="printable text (tabs and line breaks only inside a quoted cell)")


# Every ASCII character that is neither a letter, a digit nor a space can start or end
# reStructuredText markup (inline markup, roles, references, substitutions, directives, lists,
# section adornments); each is written with a backslash, which docutils reads as "this character
# itself" (reStructuredText Markup Specification, "Escaping Mechanism").
_RST_SPECIAL = re.compile(r"[!-/:-@\[-`{-~]")


def rst_text(text: str) -> str:
    """reStructuredText that docutils renders as exactly ``text``, on one line: whitespace runs
    become one space (as HTML shows them anyway), control characters are escaped (:func:`shown`),
    and every markup character is backslash-escaped, so nothing is a directive, a role, a link or
    HTML.  Docutils escapes ``<``, ``>`` and ``&`` when it writes the HTML."""
    one_line = " ".join(shown(" ".join(str(text).split())).split())
    if not one_line:
        return ""
    # A leading escaped space (which docutils drops) keeps a line of escaped punctuation, such as
    # two backslashes, from reading as a transition or a section underline.
    return "\\ " + _RST_SPECIAL.sub(lambda m: "\\" + m.group(), one_line)


class ReportText:
    """Sheet text handed to the report's caption template as a Snakemake param.

    In the template, ``.rst`` is the text as plain reStructuredText (:func:`rst_text`).  Its
    ``str()`` is what Snakemake lists under "Job parameters" and embeds, as JSON, inside a
    ``<script>`` element of the report: a JSON string with ``<``, ``>``, ``&`` and every control
    character written as ``\\u003c`` and so on (the usual way to put JSON into a script
    element), so no ``</script>`` in a cell can end the script.  Snakemake does not record
    params of this type for its rerun trigger; the row's fingerprint, which holds every cell,
    does that."""

    __slots__ = ("text",)

    def __init__(self, text) -> None:
        self.text = "" if text is None else str(text)

    @property
    def rst(self) -> str:
        return rst_text(self.text)

    def __str__(self) -> str:
        return _SCRIPT_UNSAFE.sub(lambda m: f"\\u{ord(m.group()):04x}",
                                  json.dumps(self.text, ensure_ascii=False))

    __repr__ = __str__


# What json.dumps leaves as it is but a script element or a terminal must not get raw.
_SCRIPT_UNSAFE = re.compile("[<>&\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069]")
