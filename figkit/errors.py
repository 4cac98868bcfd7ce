"""One error type for everything a user can get wrong.

A user-facing error is one line: where (sheet row, figure id, field), what (the bad
value) and what would have been accepted.  The command-line entry points print
``str(err)`` and exit with status 2 instead of showing a traceback.
"""
from __future__ import annotations

from collections.abc import Iterable

# The closest-spelling search (difflib's ratio) costs time in the product of the lengths of the
# two strings, once per allowed value: searching a column of a million identifiers, or thousands
# of misspelt values each against thousands of values, would hang a build for a hint.  So a
# search looks through at most this many allowed values (more: no hint) ...
SPELLING_POOL_MAX = 5_000
# ... and one message makes at most this many searches (the values it names are cut there too).
SPELLING_SEARCHES_MAX = 5
# A bad value is quoted in messages up to this many characters (then '...'): a 1 MB cell must
# not become a 1 MB line on the terminal.
SHOWN_VALUE_MAX = 200


def closest(value, choices, cutoff: float = 0.6) -> str | None:
    """The allowed value closest in spelling to ``value`` (difflib's ratio, at least ``cutoff``:
    the same search as the filter and orders checks), or None; None too when there are more than
    SPELLING_POOL_MAX choices or ``value`` is longer than SHOWN_VALUE_MAX characters."""
    import difflib
    if not isinstance(value, str) or len(value) > SHOWN_VALUE_MAX:
        return None
    choices = list(choices)
    if len(choices) > SPELLING_POOL_MAX:
        return None
    found = difflib.get_close_matches(value, [str(c) for c in choices], n=1, cutoff=cutoff)
    return found[0] if found else None


def did_you_mean(value, choices) -> str:
    """" (did you mean 'x'?)" for the closest allowed value, or "" when none is close."""
    best = closest(value, choices)
    return f" (did you mean {best!r}?)" if best is not None and best != value else ""


class FigkitError(Exception):
    """A mistake in the user's sheet, config, styles or data."""

    def __init__(self, message: str, *, row: int | None = None, figure: str | None = None,
                 field: str | None = None, value: object = None,
                 allowed: Iterable[object] | str | None = None):
        self.row, self.figure, self.field, self.value = row, figure, field, value
        self.allowed = allowed
        self.message = message
        super().__init__(self.format())

    def format(self) -> str:
        where = []
        if self.row is not None:
            where.append(f"sheet row {self.row}")
        if self.figure:
            where.append(f"figure '{self.figure}'")
        if self.field:
            where.append(f"field '{self.field}'")
        text = (", ".join(where) + ": " if where else "") + self.message
        if self.value is not None and repr(self.value) not in text:
            shown_value = repr(self.value)
            if len(shown_value) > SHOWN_VALUE_MAX:
                shown_value = (f"{shown_value[:SHOWN_VALUE_MAX - 3]}... "
                               f"({len(str(self.value)):,} characters)")
            text += f" (got {shown_value})"
        if self.allowed is not None:
            allowed = self.allowed if isinstance(self.allowed, str) else ", ".join(
                str(a) for a in self.allowed)
            if len(allowed) > 20 * SHOWN_VALUE_MAX:   # thousands of categories: name the first
                allowed = allowed[:20 * SHOWN_VALUE_MAX - 3] + "..."
            text += f"; allowed: {allowed}"
        from .text import shown    # a cell's control characters must not reach the terminal
        return shown(" ".join(text.split()))  # always one line

    def at(self, *, row: int | None = None, figure: str | None = None,
           field: str | None = None) -> "FigkitError":
        """Fill in the location once the caller knows it (keeps what is already set)."""
        return FigkitError(self.message, row=self.row if self.row is not None else row,
                           figure=self.figure or figure, field=self.field or field,
                           value=self.value, allowed=self.allowed)
