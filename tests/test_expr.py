"""Tests for the row-filter language in figkit.expr.

Sources for the expected results:
* the grammar and missing-value rules in figkit/expr.py's docstring (our own specification);
* pandas element-wise operators and Series.isin / isna as a reference implementation of
  comparison and membership (with missing rows forced to false, as our rules say);
* precedence not > and > or is the usual Boolean-algebra convention (common practice);
  Python's own parser follows the same convention (Python Language Reference,
  "Operator precedence" table) and is used as a reference for the truth tables;
* palmerpenguins (Gorman, Williams & Fraser 2014, PLOS ONE): 344 penguins, Adelie 152,
  Gentoo 124, Chinstrap 68 (from memory, as counted in the package's data).
"""
from __future__ import annotations

import itertools
import operator

import numpy as np
import pandas as pd
import pytest

from figkit.errors import FigkitError
from figkit.expr import Expr, evaluate_mask, parse


@pytest.fixture(scope="module")
def penguins() -> pd.DataFrame:
    palmerpenguins = pytest.importorskip("palmerpenguins")
    return palmerpenguins.load_penguins()


@pytest.fixture
def small() -> pd.DataFrame:
    return pd.DataFrame({
        "x": [1.0, 2.0, np.nan, 4.0, 5.0],
        "n": [10, 20, 30, 40, 50],
        "s": ["a", "b", None, "d", "b"],
        "flag": [True, False, True, False, True],
        "site name": ["up", "up", "down", "down", "mid"],
        "and": [1, 2, 3, 4, 5],       # a column whose name is a keyword
    }, index=[10, 11, 12, 13, 14])   # a non-default index must not matter


def _present(series: pd.Series, result: pd.Series) -> np.ndarray:
    """Reference rule: a comparison with a missing value is false."""
    return (result & series.notna()).to_numpy(dtype=bool)


# --------------------------------------------------------------------------- operators

@pytest.mark.parametrize("op, fn", [("==", operator.eq), ("!=", operator.ne),
                                    ("<", operator.lt), ("<=", operator.le),
                                    (">", operator.gt), (">=", operator.ge)])
def test_number_comparisons_match_pandas(penguins, op, fn):
    # Reference: pandas element-wise comparison; missing bill lengths count as false.
    col = penguins["bill_length_mm"]
    got = evaluate_mask(f"bill_length_mm {op} 44.5", penguins)
    assert got.dtype == bool and got.shape == (len(penguins),)
    np.testing.assert_array_equal(got, _present(col, fn(col, 44.5)))


@pytest.mark.parametrize("op, fn", [("==", operator.eq), ("!=", operator.ne),
                                    ("<", operator.lt), (">=", operator.ge)])
def test_column_against_column(penguins, op, fn):
    # Reference: pandas comparison of two columns; a missing value on either side is false.
    a, b = penguins["bill_length_mm"], penguins["bill_depth_mm"] * 2.5
    df = penguins.assign(depth_x=b)
    got = evaluate_mask(f"bill_length_mm {op} depth_x", df)
    want = (fn(a, b) & a.notna() & b.notna()).to_numpy()
    np.testing.assert_array_equal(got, want)


def test_literal_on_the_left_and_negative_numbers(small):
    # Grammar: operand op operand, either side may be a literal; '-3' is one NUMBER token.
    np.testing.assert_array_equal(evaluate_mask("3 < x", small), [False, False, False, True, True])
    np.testing.assert_array_equal(evaluate_mask("x > -1.5e0", small), [True, True, False, True, True])
    np.testing.assert_array_equal(evaluate_mask("n >= .5e2", small), [False] * 4 + [True])


def test_species_counts(penguins):
    # Gorman et al. (2014) via palmerpenguins: Adelie 152, Gentoo 124, Chinstrap 68 (from memory).
    assert evaluate_mask("species == 'Adelie'", penguins).sum() == 152
    assert evaluate_mask('species == "Gentoo"', penguins).sum() == 124
    assert evaluate_mask("species != 'Adelie'", penguins).sum() == 124 + 68
    assert evaluate_mask("species in ['Gentoo', 'Chinstrap']", penguins).sum() == 124 + 68
    assert evaluate_mask("species not in ['Gentoo', 'Chinstrap']", penguins).sum() == 152


def test_text_ordering_is_code_point_order(small):
    # Our rule: '<' on text is code-point order, like Python's str comparison.
    np.testing.assert_array_equal(evaluate_mask("s < 'b'", small), [True, False, False, False, False])
    np.testing.assert_array_equal(evaluate_mask("s >= 'b'", small), [False, True, False, True, True])


def test_boolean_column_and_literals(small):
    np.testing.assert_array_equal(evaluate_mask("flag", small), small["flag"].to_numpy())
    np.testing.assert_array_equal(evaluate_mask("flag == false", small), ~small["flag"].to_numpy())
    np.testing.assert_array_equal(evaluate_mask("flag != true", small), ~small["flag"].to_numpy())
    assert evaluate_mask("true", small).all() and not evaluate_mask("false", small).any()
    assert evaluate_mask("1 == 1", small).all() and not evaluate_mask("'a' == 'b'", small).any()


# --------------------------------------------------------------------------- precedence

_TRUTH = list(itertools.product([False, True], repeat=3))
_PRECEDENCE = [
    # (filter text, the same text as Python reads it: Python's precedence is not > and > or)
    ("a or b and c", lambda a, b, c: a or b and c),
    ("a and b or c", lambda a, b, c: a and b or c),
    ("not a and b", lambda a, b, c: not a and b),
    ("not a or b", lambda a, b, c: not a or b),
    ("a or not b and c", lambda a, b, c: a or not b and c),
    ("not not a and not b or c", lambda a, b, c: not not a and not b or c),
    ("(a or b) and c", lambda a, b, c: (a or b) and c),
    ("not (a and b)", lambda a, b, c: not (a and b)),
    ("a and (b or c)", lambda a, b, c: a and (b or c)),
    ("((a))", lambda a, b, c: a),
]


@pytest.mark.parametrize("text, ref", _PRECEDENCE, ids=[t for t, _ in _PRECEDENCE])
def test_precedence_truth_table(text, ref):
    # Usual Boolean-algebra precedence (common practice), Python's parser as reference.
    df = pd.DataFrame(_TRUTH, columns=["a", "b", "c"])
    want = [bool(ref(*row)) for row in _TRUTH]
    np.testing.assert_array_equal(evaluate_mask(text, df), want)


def test_parentheses_change_the_result():
    df = pd.DataFrame(_TRUTH, columns=["a", "b", "c"])
    loose = evaluate_mask("a or b and c", df)
    grouped = evaluate_mask("(a or b) and c", df)
    assert (loose != grouped).any()   # e.g. a=True, b=False, c=False


def test_comparison_binds_tighter_than_not(small):
    # 'not x > 3' is not (x > 3); a missing x passes no test, negated or not (our rule), so
    # 'not a == b' and 'a != b' agree row by row (reference: pandas' != with missing as false).
    np.testing.assert_array_equal(evaluate_mask("not x > 3", small), [True, True, False, False, False])
    np.testing.assert_array_equal(evaluate_mask("not s in ['a']", small),
                                  [False, True, False, True, True])
    np.testing.assert_array_equal(evaluate_mask("not s == 'b'", small),
                                  (small["s"].ne("b") & small["s"].notna()).to_numpy())
    np.testing.assert_array_equal(evaluate_mask("not x is missing", small), small["x"].notna().to_numpy())


def test_parenthesised_tests_compare_as_true_false(small):
    got = evaluate_mask("(x > 1) == (n > 20)", small)
    want = (small["x"] > 1).to_numpy() == (small["n"] > 20).to_numpy()
    np.testing.assert_array_equal(got, want)


# --------------------------------------------------------------------------- membership, missing

def test_membership_numbers_and_missing(penguins):
    # Reference: pandas Series.isin; a missing year/value is never 'in' nor 'not in'.
    got = evaluate_mask("year in [2007, 2009]", penguins)
    np.testing.assert_array_equal(got, penguins["year"].isin([2007, 2009]).to_numpy())
    sex = penguins["sex"]
    got = evaluate_mask("sex not in ['male']", penguins)
    np.testing.assert_array_equal(got, _present(sex, ~sex.isin(["male"])))
    assert got.sum() == (sex == "female").sum()


def test_is_missing(penguins):
    # Reference: pandas isna/notna (palmerpenguins has missing sex and measurements).
    for col in ("sex", "bill_length_mm", "species"):
        np.testing.assert_array_equal(evaluate_mask(f"{col} is missing", penguins),
                                      penguins[col].isna().to_numpy())
        np.testing.assert_array_equal(evaluate_mask(f"{col} is not missing", penguins),
                                      penguins[col].notna().to_numpy())
    assert evaluate_mask("sex is missing", penguins).sum() == penguins["sex"].isna().sum() > 0


def test_missing_values_make_comparisons_false(small):
    # Our rule: any comparison with a missing value is false, for '!=' and 'not in' too.
    for text in ("x == 1", "x != 1", "x < 100", "x >= -100", "s != 'zzz'", "s not in ['zzz']",
                 "s in ['a', 'b', 'd']", "n != x", "'zzz' != s", "n > x", "not s is missing"):
        assert not evaluate_mask(text, small)[2], text


def test_nullable_categorical_and_date_columns():
    # Reference: pandas' own comparisons on the same extension dtypes.
    df = pd.DataFrame({
        "i": pd.array([1, None, 3], dtype="Int64"),
        "ok": pd.array([True, None, False], dtype="boolean"),
        "cat": pd.Categorical(["x", "y", None]),
        "when": pd.to_datetime(["2024-01-01", None, "2024-06-01"]),
        "zoned": pd.to_datetime(["2024-01-01 00:30", None, "2024-06-01 00:00"]).tz_localize("UTC"),
    })
    np.testing.assert_array_equal(evaluate_mask("i >= 2", df), [False, False, True])
    np.testing.assert_array_equal(evaluate_mask("ok", df), [True, False, False])
    np.testing.assert_array_equal(evaluate_mask("cat in ['y']", df), [False, True, False])
    np.testing.assert_array_equal(evaluate_mask("when > '2024-03-01'", df),
                                  (df["when"] > pd.Timestamp("2024-03-01")).to_numpy())
    np.testing.assert_array_equal(evaluate_mask("when in ['2024-01-01']", df), [True, False, False])
    np.testing.assert_array_equal(evaluate_mask("zoned < '2024-01-01 01:00'", df),
                                  [True, False, False])


# --------------------------------------------------------------------------- quoting

def test_quoting_forms(small):
    df = pd.DataFrame({"name": ["it's", 'say "hi"', "back\\slash", "plain"]})
    np.testing.assert_array_equal(evaluate_mask('name == "it\'s"', df), [True, False, False, False])
    np.testing.assert_array_equal(evaluate_mask("name == 'it\\'s'", df), [True, False, False, False])
    np.testing.assert_array_equal(evaluate_mask("name == 'say \"hi\"'", df), [False, True, False, False])
    np.testing.assert_array_equal(evaluate_mask("name == 'back\\\\slash'", df), [False, False, True, False])
    # Backquotes name columns with spaces or keyword names; keywords are case-sensitive.
    np.testing.assert_array_equal(evaluate_mask("`site name` == 'up'", small),
                                  [True, True, False, False, False])
    np.testing.assert_array_equal(evaluate_mask("`and` > 3 and x > 4", small),
                                  [False, False, False, False, True])
    assert parse("`site name` == 'up' or `and` > 1").columns == {"site name", "and"}


def test_text_columns_and_attributes():
    expr = parse("  x > 3 and s in ['a']  or not flag ")
    assert isinstance(expr, Expr)
    assert expr.text == "  x > 3 and s in ['a']  or not flag "
    assert expr.columns == frozenset({"x", "s", "flag"})
    assert parse("1 < 2").columns == frozenset()


def test_empty_frame_gives_empty_mask():
    got = evaluate_mask("x > 1", pd.DataFrame({"x": pd.Series([], dtype=float)}))
    assert got.dtype == bool and got.shape == (0,)


# --------------------------------------------------------------------------- errors

@pytest.mark.parametrize("text, column, words", [
    ("x > 3 and )", 11, "unexpected ')'"),
    ("x >", 4, "unexpected end of text"),
    ("(x > 3", 7, "expected ')' to close the '(' at column 1"),
    ("x > 3)", 6, "unexpected ')'"),
    ("x = 3", 3, "use '=='"),
    ("x > 3 && y", 7, "use 'and' / 'or'"),
    ("x > 3 AND y > 1", 7, "keywords are lowercase"),
    ("a < b < c", 7, "cannot be chained"),
    ("x in ['a', 2]", 12, "mixes numbers and text"),
    ("x in []", 7, "unexpected ']'"),
    ("x in ['a',]", 11, "unexpected ']'"),
    ("x in 'a'", 6, "list in square brackets"),
    ("x is nothing", 6, "expected 'missing'"),
    ("x not y", 3, "unexpected 'not'"),
    ("s == 'abc", 6, "unterminated text"),
    ("`a b == 1", 1, "unterminated `column name`"),
    ("3abc > 1", 1, "malformed number"),
    ("x > 3 ; y", 7, "unexpected character ';'"),
    ("x + 1 > 2", 3, "arithmetic is not supported"),
    ("Höhe > 2", 2, "backquotes"),
    ("and", 1, "unexpected 'and'"),
])
def test_syntax_errors_show_position(text, column, words):
    # Expected columns are 1-based character positions in the text (our specification).
    with pytest.raises(FigkitError) as info:
        parse(text)
    msg = str(info.value)
    assert msg.startswith("filter: ")
    assert f"at column {column} in {text!r}" in msg
    assert words in msg
    assert "\n" not in msg


def test_error_message_for_the_brief_example():
    with pytest.raises(FigkitError, match=r"^filter: unexpected '\)' at column 11 in 'x > 3 and \)'"):
        parse("x > 3 and )")


def test_empty_and_non_text_input():
    for text in ("", "   "):
        with pytest.raises(FigkitError, match="empty"):
            parse(text)
    with pytest.raises(FigkitError, match="must be text"):
        parse(3)  # type: ignore[arg-type]


def test_deep_nesting_is_refused_cleanly():
    with pytest.raises(FigkitError, match="nesting deeper"):
        parse("(" * 500 + "x" + ")" * 500)
    with pytest.raises(FigkitError, match="nesting deeper"):
        parse("not " * 500 + "x")


def test_long_text_is_cut_in_messages():
    text = "x > 1 and " * 50 + ")"
    msg = str(pytest.raises(FigkitError, parse, text).value)
    assert len(msg) < 300 and "..." in msg and f"column {len(text)}" in msg


@pytest.mark.parametrize("text", [
    "__import__('os')",
    "__import__('os').system('true')",
    "a.b",
    "x.__class__ == 1",
    "`a`.b == 1",
    "f(x)",
    "len(s) > 1",
    "open('/etc/passwd')",
    "lambda: 1",
    "[x for x in y]",
    "x[0] == 1",
    "x if y else z",
    "x > 1; import os",
    "{'a': 1}",
    "x == @y",
    "x ** 2 > 1",
    "x == True or __builtins__",
])
def test_dangerous_input_is_rejected(text):
    # Our specification: no attribute access, calls, indexing, arithmetic or Python syntax.
    with pytest.raises(FigkitError):
        parse(text).evaluate(pd.DataFrame({"x": [1], "y": [1], "z": [1], "s": ["a"]}))


def test_names_are_only_ever_columns():
    # A dunder name is an ordinary (unknown) column, never a Python object.
    with pytest.raises(FigkitError, match="no column '__import__'"):
        evaluate_mask("__import__ == 1", pd.DataFrame({"x": [1]}))


def test_unknown_column_lists_available(small):
    with pytest.raises(FigkitError) as info:
        evaluate_mask("x > 1 and sx == 'a'", small)
    msg = str(info.value)
    assert "no column 'sx'" in msg and "column 11" in msg
    assert "did you mean" in msg
    for name in small.columns:
        assert name in msg.split("allowed:")[1]


def test_capitalised_keyword_used_as_column_gets_a_hint(small):
    with pytest.raises(FigkitError, match="keywords are lowercase: 'true'"):
        evaluate_mask("flag == True", small)


@pytest.mark.parametrize("text, words", [
    ("s > 3", "column 's' (dtype str) with the number 3"),
    ("3 == s", "the number 3 with column 's' (dtype str)"),
    ("x == 'a'", "column 'x' (dtype float64) with the text 'a'"),
    ("s in [1, 2]", "column 's' (dtype str) is in a list of numbers"),
    ("flag < true", "cannot order true/false"),
    ("flag == 1", "column 'flag' (dtype bool) with the number 1"),
    ("x and flag", "column 'x' (dtype float64) is not a true/false test"),
    ("not n", "column 'n' (dtype int64) is not a true/false test"),
    ("3", "the number 3 is not a true/false test"),
])
def test_type_errors_name_column_and_dtype(small, text, words):
    with pytest.raises(FigkitError) as info:
        evaluate_mask(text, small)
    assert words in str(info.value)
    assert "at column" in str(info.value)


def test_mixed_object_column_and_bad_dates():
    df = pd.DataFrame({"o": [1, "a", None], "when": pd.to_datetime(["2024-01-01"] * 3)})
    with pytest.raises(FigkitError, match=r"column 'o' \(dtype object\)"):
        evaluate_mask("o == 1", df)
    with pytest.raises(FigkitError, match="cannot read 'soon' as a date"):
        evaluate_mask("when > 'soon'", df)
    with pytest.raises(FigkitError, match="quoted date"):
        evaluate_mask("when > 3", df)


def test_evaluate_wants_a_dataframe():
    with pytest.raises(TypeError):
        parse("x > 1").evaluate({"x": [1, 2]})  # type: ignore[arg-type]


def test_vectorised_on_a_large_frame():
    # 200 000 rows: the answer must match numpy's own vectorised operators.
    rng = np.random.default_rng(7)
    n = 200_000
    df = pd.DataFrame({"v": rng.normal(size=n), "g": rng.choice(["a", "b", "c"], n)})
    got = evaluate_mask("g in ['a', 'c'] and v > 0.5 or not g == 'b' and v < -2", df)
    v, g = df["v"].to_numpy(), df["g"].to_numpy()
    want = (np.isin(g, ["a", "c"]) & (v > 0.5)) | ((g != "b") & (v < -2))
    np.testing.assert_array_equal(got, want)
