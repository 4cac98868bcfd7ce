"""A small, safe language for choosing rows of a data table.

A figure sheet can say which rows a panel shows, e.g.::

    land_use in ['urban', 'arable'] and water_temp_c > 4 and not turbidity_ntu is missing

The text is read by a hand-written tokenizer and recursive-descent parser; nothing is ever
handed to Python's ``eval`` or to ``DataFrame.query``.  The language has no attribute
access, no function calls, no arithmetic and no names other than data columns, so a
sheet cannot run code.

Grammar (keywords are case-sensitive lowercase)::

    expr       := or
    or         := and ('or' and)*
    and        := not ('and' not)*
    not        := 'not' not | comparison
    comparison := operand (op operand | ['not'] 'in' list | 'is' ['not'] 'missing')?
    op         := '==' | '!=' | '<' | '<=' | '>' | '>='
    operand    := NUMBER | STRING | 'true' | 'false' | column | '(' expr ')'
    list       := '[' literal (',' literal)* ']'
    column     := [A-Za-z_][A-Za-z0-9_]*  (not a keyword)  |  `any name without backquotes`

Precedence is the usual Boolean-algebra order: ``not`` binds tighter than ``and``, which
binds tighter than ``or``; a comparison binds tighter than all three.

Meaning, row by row (two-valued, so a filter always gives a plain true/false mask):

* a comparison or membership test that involves a missing value is false — for ``!=``
  and ``not in`` as well;
* ``x is missing`` is true where ``x`` is NaN/None/NaT; ``x is not missing`` is its negation;
* ``and`` and ``or`` act on those true/false results; ``not`` negates its test on rows
  whose tested fields are all present and is false elsewhere, so ``not a == b`` means
  ``a != b`` (a missing value passes no test, negated or not); a true/false column used as
  a test counts a missing entry as false;
* text compares with text (``<`` is code-point order), numbers with numbers, true/false
  with true/false (``==``/``!=`` only); a date/time column compares with a quoted date
  such as ``'2024-05-01'``.  Any other mix is an error that names the column and dtype.
"""
from __future__ import annotations

import difflib
import math
import sys
import unicodedata
from dataclasses import dataclass

import numpy as np

from figkit.errors import FigkitError

__all__ = ["Expr", "parse", "evaluate_mask", "KEYWORDS"]

KEYWORDS = frozenset({"and", "or", "not", "in", "is", "missing", "true", "false"})
_OPS = ("==", "!=", "<=", ">=", "<", ">")
_MAX_LENGTH = 10_000
_MAX_DEPTH = 64          # parentheses + 'not'; keeps recursion far from Python's limit
_OPERAND_HINT = "expected a column, a number, quoted text, true, false or '('"
_NUMPY_OP = {"==": np.equal, "!=": np.not_equal, "<": np.less, "<=": np.less_equal,
             ">": np.greater, ">=": np.greater_equal}


# --------------------------------------------------------------------------- errors

def _error(text: str, pos: int, what: str, hint: str | None = None) -> FigkitError:
    """One-line error pointing at a 1-based character column of the filter text."""
    msg = f"filter: {what} at column {pos + 1} in {_shown_text(text, pos)}"
    if hint:
        msg += f"; {hint}"
    return FigkitError(msg)


def _short(src: str, width: int = 40) -> str:
    return src if len(src) <= width else src[:width - 3] + "..."


def _shown_text(text: str, pos: int, width: int = 100) -> str:
    """The filter as quoted in messages; a long one is cut to a window around ``pos``."""
    if len(text) <= width:
        return repr(text)
    lo = max(0, min(pos - width // 2, len(text) - width))
    part = text[lo:lo + width]
    return ("..." if lo else "") + repr(part) + ("..." if lo + width < len(text) else "")


# --------------------------------------------------------------------------- tokens

@dataclass(frozen=True)
class _Token:
    kind: str        # NUM STR NAME KW OP ( ) [ ] , END
    value: object
    pos: int         # 0-based index into the text
    src: str         # the characters as written

    def shown(self) -> str:
        if self.kind == "END":
            return "end of text"
        src = self.src if len(self.src) <= 24 else self.src[:21] + "..."
        return repr(src)


def _is_name_start(ch: str) -> bool:
    return ch.isascii() and (ch.isalpha() or ch == "_")


def _is_name_char(ch: str) -> bool:
    return ch.isascii() and (ch.isalnum() or ch == "_")


def _tokenize(text: str) -> list[_Token]:
    tokens: list[_Token] = []
    i, n = 0, len(text)
    while i < n:
        ch = text[i]
        if ch.isspace():
            i += 1
            continue
        start = i
        two = text[i:i + 2]
        if two in _OPS[:4]:
            tokens.append(_Token("OP", two, i, two))
            i += 2
        elif ch in "<>":
            tokens.append(_Token("OP", ch, i, ch))
            i += 1
        elif ch in "()[],":
            tokens.append(_Token(ch, ch, i, ch))
            i += 1
        elif _starts_number(text, i):
            i = _scan_number(text, i, tokens)
        elif ch in "'\"":
            i = _scan_string(text, i, tokens)
        elif ch == "`":
            end = text.find("`", i + 1)
            if end < 0:
                raise _error(text, start, "unterminated `column name`",
                             "close it with a second backquote")
            name = text[i + 1:end]
            if not name:
                raise _error(text, start, "empty `` column name")
            tokens.append(_Token("NAME", name, i, text[i:end + 1]))
            i = end + 1
        elif _is_name_start(ch):
            while i < n and _is_name_char(text[i]):
                i += 1
            word = text[start:i]
            tokens.append(_Token("KW" if word in KEYWORDS else "NAME", word, start, word))
        else:
            raise _error(text, start, f"unexpected character {ch!r}", _char_hint(text, start))
    tokens.append(_Token("END", None, n, ""))
    return tokens


def _char_hint(text: str, pos: int) -> str | None:
    ch = text[pos]
    if ch == "=":
        return "use '==' to test equality"
    if ch == "!":
        return "use '!=' or 'not'"
    if ch in "&|":
        return "use 'and' / 'or'"
    if ch == "." and pos > 0 and (_is_name_char(text[pos - 1]) or text[pos - 1] in ")`"):
        return "attribute access is not allowed"
    if ch in "+-*/%":
        return "arithmetic is not supported"
    if ch.isdigit() or unicodedata.category(ch) == "No":
        return "write numbers with the digits 0-9"
    if not ch.isascii() and ch.isalpha():
        return "write column names with other letters in backquotes, e.g. `Höhe`"
    return None


def _digit(ch: str) -> bool:
    """An ASCII digit 0-9.  ``str.isdigit`` also takes superscripts and the digits of other
    scripts ('²', '٣'), which ``int`` then refuses or reads as a number nobody typed on purpose."""
    return "0" <= ch <= "9" and len(ch) == 1


def _starts_number(text: str, i: int) -> bool:
    # '-' belongs to a number only when a digit follows ("-3", "-.5"); there is no arithmetic.
    rest = text[i + 1:i + 3] if text[i] == "-" else text[i:i + 2]
    return _digit(rest[:1]) or (rest[:1] == "." and _digit(rest[1:2]))


def _scan_number(text: str, i: int, tokens: list[_Token]) -> int:
    start, n = i, len(text)
    if text[i] == "-":
        i += 1
    while i < n and _digit(text[i]):
        i += 1
    is_float = False
    if i < n and text[i] == ".":
        is_float = True
        i += 1
        while i < n and _digit(text[i]):
            i += 1
    if i < n and text[i] in "eE":
        j = i + 1
        if j < n and text[j] in "+-":
            j += 1
        if j < n and _digit(text[j]):
            is_float = True
            i = j
            while i < n and _digit(text[i]):
                i += 1
    src = text[start:i]
    if i < n and (_is_name_char(text[i]) or text[i] == "."):
        j = i
        while j < n and (_is_name_char(text[j]) or text[j] == "."):
            j += 1
        raise _error(text, start, f"malformed number {text[start:j]!r}")
    # Long digit strings go through float: int() refuses more than 4,300 digits (Python's
    # int_max_str_digits) and numpy comparisons want a value in float range anyway.
    value: float | int = float(src) if is_float or len(src) > 16 else int(src)
    if isinstance(value, int) and abs(value) > 2 ** 53:
        value = float(value)   # keep numpy comparisons in range for any column dtype
    if isinstance(value, float) and not math.isfinite(value):
        raise _error(text, start, f"number {_short(src)!r} is out of range",
                     f"numbers must lie within ±{sys.float_info.max:.3g}")
    tokens.append(_Token("NUM", value, start, src))
    return i


def _scan_string(text: str, i: int, tokens: list[_Token]) -> int:
    # A backslash takes the next character literally; \n and \t are newline and tab.
    quote, start, n = text[i], i, len(text)
    i += 1
    out: list[str] = []
    while i < n:
        ch = text[i]
        if ch == "\\" and i + 1 < n:
            nxt = text[i + 1]
            out.append({"n": "\n", "t": "\t"}.get(nxt, nxt))
            i += 2
        elif ch == quote:
            tokens.append(_Token("STR", "".join(out), start, text[start:i + 1]))
            return i + 1
        else:
            out.append(ch)
            i += 1
    raise _error(text, start, "unterminated text", f"close it with a matching {quote}")


# --------------------------------------------------------------------------- syntax tree

@dataclass(frozen=True)
class _Literal:
    value: object          # int | float | str | bool
    pos: int
    src: str


@dataclass(frozen=True)
class _Column:
    name: str
    pos: int


@dataclass(frozen=True)
class _Compare:
    op: str
    left: object
    right: object
    pos: int               # position of the operator


@dataclass(frozen=True)
class _Member:
    operand: object
    items: tuple           # of _Literal
    negate: bool
    pos: int


@dataclass(frozen=True)
class _IsMissing:
    operand: object
    negate: bool
    pos: int


@dataclass(frozen=True)
class _Not:
    operand: object
    pos: int


@dataclass(frozen=True)
class _BoolOp:
    op: str                # 'and' | 'or'
    items: tuple
    pos: int


def _literal_kind(value: object) -> str:
    if isinstance(value, bool):
        return "bool"
    if isinstance(value, (int, float)):
        return "number"
    return "string"


class _Parser:
    def __init__(self, text: str):
        self.text = text
        self.tokens = _tokenize(text)
        self.i = 0
        self.depth = 0
        self.columns: list[_Column] = []

    # helpers
    @property
    def tok(self) -> _Token:
        return self.tokens[self.i]

    def peek(self, k: int = 1) -> _Token:
        return self.tokens[min(self.i + k, len(self.tokens) - 1)]

    def is_kw(self, word: str, tok: _Token | None = None) -> bool:
        tok = tok or self.tok
        return tok.kind == "KW" and tok.value == word

    def advance(self) -> _Token:
        tok = self.tok
        self.i += 1
        return tok

    def fail(self, expected: str | None = None, tok: _Token | None = None) -> FigkitError:
        tok = tok or self.tok
        hint = expected
        if tok.kind == "NAME" and tok.value.lower() in KEYWORDS and tok.src == tok.value:
            hint = f"keywords are lowercase: '{tok.value.lower()}'"
        return _error(self.text, tok.pos, f"unexpected {tok.shown()}", hint)

    def nest(self, pos: int) -> None:
        self.depth += 1
        if self.depth > _MAX_DEPTH:
            raise _error(self.text, pos, f"nesting deeper than {_MAX_DEPTH} levels")

    # grammar
    def parse(self):
        if self.tok.kind == "END":
            raise FigkitError("filter: the expression is empty", value=self.text)
        node = self.parse_or()
        if self.tok.kind != "END":
            raise self.fail(self.trailing_hint())
        return node

    def trailing_hint(self) -> str:
        tok, prev = self.tok, self.tokens[self.i - 1]
        if tok.kind == "OP":
            return "comparisons cannot be chained; join them with 'and'"
        if tok.kind == "(" and prev.kind == "NAME":
            return "function calls are not allowed"
        if tok.kind == "KW" and tok.value == "not":
            return "write 'not in' or 'is not missing'"
        return "expected 'and', 'or' or the end of the text"

    def parse_or(self):
        first = self.parse_and()
        items = [first]
        while self.is_kw("or"):
            pos = self.advance().pos
            items.append(self.parse_and())
        return items[0] if len(items) == 1 else _BoolOp("or", tuple(items), pos)

    def parse_and(self):
        items = [self.parse_not()]
        while self.is_kw("and"):
            pos = self.advance().pos
            items.append(self.parse_not())
        return items[0] if len(items) == 1 else _BoolOp("and", tuple(items), pos)

    def parse_not(self):
        if self.is_kw("not"):
            tok = self.advance()
            self.nest(tok.pos)
            node = _Not(self.parse_not(), tok.pos)
            self.depth -= 1
            return node
        return self.parse_comparison()

    def parse_comparison(self):
        left = self.parse_operand()
        tok = self.tok
        if tok.kind == "OP":
            self.advance()
            return _Compare(tok.value, left, self.parse_operand(), tok.pos)
        if self.is_kw("in"):
            self.advance()
            return _Member(left, self.parse_list(), False, tok.pos)
        if self.is_kw("not") and self.is_kw("in", self.peek()):
            self.advance()
            self.advance()
            return _Member(left, self.parse_list(), True, tok.pos)
        if self.is_kw("is"):
            self.advance()
            negate = self.is_kw("not")
            if negate:
                self.advance()
            if not self.is_kw("missing"):
                raise self.fail("expected 'missing' after 'is'" +
                                ("" if negate else " or 'is not'"))
            self.advance()
            return _IsMissing(left, negate, tok.pos)
        return left

    def parse_operand(self):
        tok = self.tok
        if tok.kind in ("NUM", "STR"):
            self.advance()
            return _Literal(tok.value, tok.pos, tok.src)
        if self.is_kw("true") or self.is_kw("false"):
            self.advance()
            return _Literal(tok.value == "true", tok.pos, tok.src)
        if tok.kind == "NAME":
            self.advance()
            col = _Column(tok.value, tok.pos)
            self.columns.append(col)
            return col
        if tok.kind == "(":
            self.advance()
            self.nest(tok.pos)
            node = self.parse_or()
            self.depth -= 1
            if self.tok.kind != ")":
                raise self.fail(f"expected ')' to close the '(' at column {tok.pos + 1}")
            self.advance()
            return node
        raise self.fail(_OPERAND_HINT)

    def parse_list(self) -> tuple:
        open_tok = self.tok
        if open_tok.kind != "[":
            raise self.fail("expected a list in square brackets, e.g. ['a', 'b']")
        self.advance()
        items: list[_Literal] = []
        while True:
            tok = self.tok
            if tok.kind in ("NUM", "STR"):
                items.append(_Literal(tok.value, tok.pos, tok.src))
            elif self.is_kw("true") or self.is_kw("false"):
                items.append(_Literal(tok.value == "true", tok.pos, tok.src))
            else:
                raise self.fail("a list holds numbers, quoted text, true or false")
            self.advance()
            kinds = {_literal_kind(it.value) for it in items}
            if len(kinds) > 1:
                raise _error(self.text, tok.pos, "a list mixes "
                             + " and ".join(sorted(_KIND_WORDS[k] for k in kinds)))
            if self.tok.kind == ",":
                self.advance()
                continue
            if self.tok.kind == "]":
                self.advance()
                return tuple(items)
            raise self.fail(f"expected ',' or ']' to close the '[' at column {open_tok.pos + 1}")


_KIND_WORDS = {"number": "numbers", "string": "text", "bool": "true/false",
               "datetime": "dates", "other": "other values", "empty": "missing values"}


# --------------------------------------------------------------------------- evaluation

@dataclass
class _Value:
    kind: str               # number | string | bool | datetime | other | empty
    data: object            # numpy array (per row) or a Python scalar (literal)
    missing: object         # numpy bool array or None (nothing missing)
    label: str              # how error messages name it
    dtype: str = ""
    tz: object = None       # time zone of a datetime column


def _column_value(name: str, series: pd.Series) -> _Value:
    """Classify a column and hand back its values as a numpy array plus a missing mask."""
    import pandas as pd   # here, not at the top: the workflow parses filters without pandas
    dtype = series.dtype
    label = f"column {name!r} (dtype {dtype})"
    missing = series.isna().to_numpy(dtype=bool)
    if isinstance(dtype, pd.CategoricalDtype):
        series = series.astype(object)   # compare the category values themselves
        dtype = series.dtype
    if pd.api.types.is_bool_dtype(dtype):
        return _Value("bool", series.to_numpy(dtype=bool, na_value=False), missing,
                      label, str(dtype))
    if pd.api.types.is_datetime64_any_dtype(dtype):
        ns = pd.DatetimeIndex(series).as_unit("ns").asi8   # UTC nanoseconds if tz-aware
        return _Value("datetime", ns, missing, label, str(dtype), getattr(dtype, "tz", None))
    if pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_complex_dtype(dtype):
        data = (series.to_numpy() if isinstance(dtype, np.dtype)
                else series.to_numpy(dtype=float, na_value=np.nan))
        return _Value("number", data, missing, label, str(dtype))
    if isinstance(dtype, pd.StringDtype):
        return _Value("string", series.to_numpy(dtype=object, na_value=""), missing,
                      label, str(dtype))
    if dtype == object:
        inferred = pd.api.types.infer_dtype(series, skipna=True)
        if inferred == "string":
            return _Value("string", series.to_numpy(dtype=object, na_value=""), missing,
                          label, "object")
        if inferred in ("integer", "floating", "mixed-integer-float", "decimal"):
            return _Value("number", series.to_numpy(dtype=float, na_value=np.nan), missing,
                          label, "object")
        if inferred == "boolean":
            return _Value("bool", series.to_numpy(dtype=bool, na_value=False), missing,
                          label, "object")
        if inferred == "empty":
            return _Value("empty", np.zeros(len(series), bool), missing, label, "object")
        return _Value("other", None, missing, label + f" holding {inferred} values", "object")
    return _Value("other", None, missing, label, str(dtype))


def _literal_value(node: _Literal) -> _Value:
    kind = _literal_kind(node.value)
    word = {"number": "the number", "string": "the text", "bool": "the value"}[kind]
    return _Value(kind, node.value, None, f"{word} {node.src}")


class _Evaluator:
    def __init__(self, text: str, df: pd.DataFrame):
        self.text, self.df, self.n = text, df, len(df)
        self.cache: dict[str, _Value] = {}

    def err(self, pos: int, what: str, hint: str | None = None) -> FigkitError:
        return _error(self.text, pos, what, hint)

    def value(self, node) -> _Value:
        if isinstance(node, _Literal):
            return _literal_value(node)
        if isinstance(node, _Column):
            if node.name not in self.cache:
                self.cache[node.name] = _column_value(node.name, self.df[node.name])
            return self.cache[node.name]
        return _Value("bool", self.test(node), None, "a true/false test")

    def unknown(self, node) -> np.ndarray:
        """Rows where a field compared inside ``node`` is missing ('is missing' tests excepted)."""
        out = np.zeros(self.n, bool)
        stack = [node]
        while stack:
            item = stack.pop()
            if isinstance(item, _IsMissing):
                continue
            if isinstance(item, _Column):
                miss = self.value(item).missing
                if miss is not None:
                    out |= np.asarray(miss, bool)
            elif isinstance(item, _Compare):
                stack += [item.left, item.right]
            elif isinstance(item, _Member):
                stack.append(item.operand)
            elif isinstance(item, _Not):
                stack.append(item.operand)
            elif isinstance(item, _BoolOp):
                stack += list(item.items)
        return out

    def test(self, node) -> np.ndarray:
        """Per-row true/false result of a node; missing counts as false."""
        if isinstance(node, _BoolOp):
            parts = [self.test(item) for item in node.items]
            fn = np.logical_and if node.op == "and" else np.logical_or
            return fn.reduce(parts)
        if isinstance(node, _Not):
            # 'not' keeps only rows whose tested fields are all present, so 'not a == b' means
            # the same as 'a != b' (a missing value never passes a test, negated or not).
            return ~self.test(node.operand) & ~self.unknown(node.operand)
        if isinstance(node, _Compare):
            return self.compare(node)
        if isinstance(node, _Member):
            return self.member(node)
        if isinstance(node, _IsMissing):
            val = self.value(node.operand)
            miss = (np.zeros(self.n, bool) if val.missing is None
                    else np.asarray(val.missing, bool))
            return ~miss if node.negate else miss.copy()
        val = self.value(node)          # a bare column or literal used as a test
        if val.kind not in ("bool", "empty"):
            pos = node.pos
            raise self.err(pos, f"{val.label} is not a true/false test",
                           "compare it with a value, e.g. x > 0 or x == 'a'")
        return self.present(val, np.broadcast_to(np.asarray(val.data, bool), (self.n,)))

    def present(self, val: _Value, result) -> np.ndarray:
        result = np.array(np.broadcast_to(np.asarray(result, dtype=bool), (self.n,)))
        if val.missing is not None:
            result &= ~val.missing
        return result

    def align(self, left: _Value, right: _Value, pos: int, op: str) -> tuple[object, object]:
        """Check two sides can be compared; give back comparable data."""
        if "empty" in (left.kind, right.kind):
            return None, None
        for side in (left, right):
            if side.kind == "other":
                raise self.err(pos, f"cannot compare {side.label}",
                               "filters compare numbers, text, true/false and dates")
        lk, rk = left.kind, right.kind
        if lk == "datetime" or rk == "datetime":
            return self.align_dates(left, right, pos)
        if lk != rk:
            raise self.err(pos, f"cannot compare {left.label} with {right.label}",
                           f"{_KIND_WORDS[lk]} compare only with {_KIND_WORDS[lk]}")
        if lk == "bool" and op not in ("==", "!="):
            raise self.err(pos, f"cannot order true/false values with {op!r}",
                           "use '==' or '!='")
        return left.data, right.data

    def align_dates(self, left: _Value, right: _Value, pos: int) -> tuple[object, object]:
        if left.kind == right.kind:
            if (left.tz is None) != (right.tz is None):
                raise self.err(pos, f"cannot compare {left.label} with {right.label}",
                               "one has a time zone and the other has not")
            return left.data, right.data
        date, other = (left, right) if left.kind == "datetime" else (right, left)
        if other.kind != "string" or not isinstance(other.data, str):
            raise self.err(pos, f"cannot compare {date.label} with {other.label}",
                           "compare a date column with a quoted date, e.g. '2024-05-01'")
        stamp = self.timestamp(other.data, date, pos)
        return (date.data, stamp) if left is date else (stamp, date.data)

    def timestamp(self, text: str, date: _Value, pos: int) -> int:
        import pandas as pd
        try:
            stamp = pd.Timestamp(text)
        except (ValueError, TypeError):
            stamp = None
        if stamp is None or stamp is pd.NaT:
            raise self.err(pos, f"cannot read {text!r} as a date to compare with {date.label}",
                           "write dates like '2024-05-01' or '2024-05-01 13:30'")
        if date.tz is not None and stamp.tz is None:
            stamp = stamp.tz_localize(date.tz)
        elif date.tz is None and stamp.tz is not None:
            raise self.err(pos, f"the date {text!r} has a time zone but {date.label} has none")
        return int(stamp.as_unit("ns").value)

    def compare(self, node: _Compare) -> np.ndarray:
        left, right = self.value(node.left), self.value(node.right)
        a, b = self.align(left, right, node.pos, node.op)
        if a is None:
            return np.zeros(self.n, bool)
        result = self.present(left, _NUMPY_OP[node.op](a, b))
        if right.missing is not None:
            result &= ~right.missing
        return result

    def member(self, node: _Member) -> np.ndarray:
        val = self.value(node.operand)
        items = [it.value for it in node.items]
        kind = _literal_kind(items[0])
        if val.kind == "empty":
            return np.zeros(self.n, bool)
        if val.kind == "datetime" and kind == "string":
            items = [self.timestamp(v, val, it.pos) for v, it in zip(items, node.items)]
        elif val.kind != kind or val.kind == "other":
            raise self.err(node.pos, f"cannot test whether {val.label} is in a list of "
                           f"{_KIND_WORDS[kind]}")
        data = np.broadcast_to(np.asarray(val.data, dtype=object if kind == "string" else None),
                               (self.n,))
        hit = np.isin(data, np.asarray(items, dtype=object if kind == "string" else None))
        return self.present(val, ~hit if node.negate else hit)


# --------------------------------------------------------------------------- public API

class Expr:
    """A parsed row filter.  Build it with :func:`parse`."""

    __slots__ = ("text", "_root", "_column_nodes")

    def __init__(self, text: str, root, column_nodes: tuple):
        self.text = text                   # the original text, unchanged
        self._root = root
        self._column_nodes = column_nodes  # every column reference, in reading order

    def __repr__(self) -> str:
        return f"Expr({self.text!r})"

    @property
    def columns(self) -> frozenset[str]:
        """Names of the data columns the filter reads."""
        return frozenset(c.name for c in self._column_nodes)

    def text_values(self) -> list[tuple[str, str]]:
        """(column, text) for every text literal compared for equality with a column (``==``,
        ``!=``, ``in``, ``not in``), in reading order: the values a typo would make match
        nothing, silently."""
        out = []

        def walk(node):
            if isinstance(node, _Compare) and node.op in ("==", "!="):
                for col, lit in ((node.left, node.right), (node.right, node.left)):
                    if isinstance(col, _Column) and isinstance(lit, _Literal) and isinstance(lit.value, str):
                        out.append((col.name, lit.value))
            elif isinstance(node, _Member) and isinstance(node.operand, _Column):
                out.extend((node.operand.name, it.value) for it in node.items
                           if isinstance(it, _Literal) and isinstance(it.value, str))
            elif isinstance(node, (_Not, _IsMissing)):
                walk(node.operand)
            elif isinstance(node, _BoolOp):
                for it in node.items:
                    walk(it)
        walk(self._root)
        return out

    def evaluate(self, df: pd.DataFrame) -> np.ndarray:
        """Boolean mask with one entry per row of ``df`` (vectorised with numpy).

        Comparisons involving a missing value are false; see the module docstring for the
        full rules.  Raises FigkitError for a column the data lacks (listing those it has)
        or for values that cannot be compared (naming the column and its dtype).
        """
        import pandas as pd
        if not isinstance(df, pd.DataFrame):
            raise TypeError(f"evaluate needs a pandas DataFrame, not {type(df).__name__}")
        for col in self._column_nodes:
            self._check_column(col, df)
        return _Evaluator(self.text, df).test(self._root)

    def _check_column(self, col: _Column, df: pd.DataFrame) -> None:
        import pandas as pd
        names = [str(c) for c in df.columns]
        if col.name not in df.columns:
            hint = None
            close = difflib.get_close_matches(col.name, names, n=1)
            if close:
                hint = f"did you mean {close[0]!r}?"
            elif col.name.lower() in KEYWORDS:
                hint = f"keywords are lowercase: '{col.name.lower()}'"
            shown = names if len(names) <= 40 else names[:40] + [f"... ({len(names) - 40} more)"]
            msg = (f"filter: no column {col.name!r} in the data (column {col.pos + 1} in "
                   f"{_shown_text(self.text, col.pos)})" + (f"; {hint}" if hint else ""))
            raise FigkitError(msg, allowed=", ".join(shown) if shown else "(no columns)")
        if isinstance(df[col.name], pd.DataFrame):
            raise _error(self.text, col.pos, f"column {col.name!r} appears more than once "
                         "in the data")


def parse(text: str) -> Expr:
    """Read a filter expression (grammar in the module docstring) without evaluating it.

    Raises FigkitError with a one-line message giving the 1-based character column of the
    first problem, e.g. ``filter: unexpected ')' at column 11 in 'x > 3 and )'``.
    """
    if not isinstance(text, str):
        raise FigkitError("filter: the expression must be text", value=text)
    if len(text) > _MAX_LENGTH:
        raise FigkitError(f"filter: the expression is longer than {_MAX_LENGTH} characters")
    parser = _Parser(text)
    root = parser.parse()
    return Expr(text, root, tuple(parser.columns))


def evaluate_mask(text: str, df: pd.DataFrame) -> np.ndarray:
    """Parse ``text`` and evaluate it on ``df`` in one step (see :meth:`Expr.evaluate`)."""
    return parse(text).evaluate(df)

