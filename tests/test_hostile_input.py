"""Hostile and broken input (issue 17): every case gives one line starting 'figkit: error:' (or a
FigkitError, whose text is that line), never a traceback, a hang or a half-written file.  The
cases are generated (hypothesis, derandomized: the same cases on every run), not listed.

Outside references, beside each check:
* UTF-8: RFC 3629 (which byte sequences are UTF-8); Python's strict ``utf-8`` codec is the
  reference decoder that says where the first bad byte lies;
* byte-order marks: the Unicode Standard, section 23.8 "Specials" / Table 2-4 (EF BB BF for
  UTF-8, FF FE and FE FF for UTF-16, FF FE 00 00 for UTF-32); UTF-16 itself: RFC 2781;
* file signatures: PNG (ISO/IEC 15948, 89 50 4E 47 0D 0A 1A 0A), gzip (RFC 1952, 1F 8B),
  PDF (ISO 32000-1, 7.5.2, "%PDF-"), zip (PKWARE APPNOTE, 50 4B 03 04) — from memory;
* tab-separated sheets read as CSV with a tab delimiter (RFC 4180's quoting); Python's ``csv``
  module is the reference reader;
* Unicode digits and superscripts: general categories Nd and No of the Unicode Character
  Database (``unicodedata``); float range: IEEE 754 binary64 (``sys.float_info.max``).
"""
from __future__ import annotations

import csv
import io
import subprocess
import sys
import time
import unicodedata
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from figkit.data import natural_key, order_notes
from figkit.errors import SHOWN_VALUE_MAX, SPELLING_POOL_MAX, SPELLING_SEARCHES_MAX, FigkitError
from figkit.expr import parse
from figkit.sheet import (MAX_CELL_CHARS, MAX_NAME_BYTES, MAX_RESULTS_PATH_CHARS, SYSTEM_FOLDERS,
                          load_config, read_sheet, validate_config)
from figkit.text import decode_text

HEADER = ["id", "dataset", "chart", "x", "caption"]
# Printable text as a sheet cell may hold it: no controls (refused elsewhere), no surrogates
# (not encodable), no tab/newline/quote (they are the sheet's own syntax, RFC 4180).
CELL = st.text(st.characters(blacklist_categories=("Cc", "Cs"), blacklist_characters='"'),
               min_size=1, max_size=30).map(str.strip).filter(bool)
FAST = settings(max_examples=150, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])


def sheet_text(captions: list[str]) -> str:
    lines = ["\t".join(HEADER)]
    lines += [f"f{i}\treadings\thistogram\twater_temp_c\t{c}" for i, c in enumerate(captions)]
    return "\n".join(lines) + "\n"


def expected_cells(text: str) -> list[dict]:
    """The reference reading: Python's csv module on the text, tab as delimiter (RFC 4180)."""
    rows = list(csv.reader(io.StringIO(text, newline=""), delimiter="\t"))
    return [{h: v.strip() for h, v in zip(rows[0], r) if v.strip()} for r in rows[1:]]


# --------------------------------------------------------------------------- 1. encodings

ENCODINGS = {   # codec -> the bytes the file starts with (Unicode Standard, Table 2-4)
    "utf-8": b"", "utf-8-sig": b"\xef\xbb\xbf", "utf-16-le": b"\xff\xfe", "utf-16-be": b"\xfe\xff",
}


@FAST
@given(captions=st.lists(CELL, min_size=1, max_size=5), codec=st.sampled_from(sorted(ENCODINGS)))
def test_sheet_in_utf8_with_or_without_bom_and_utf16_reads_the_same(tmp_path_factory, captions, codec):
    text = sheet_text(captions)
    path = tmp_path_factory.mktemp("enc") / "figures.tsv"
    data = text.encode(codec)
    path.write_bytes(data if codec.endswith("sig") else ENCODINGS[codec] + data)
    rows = read_sheet(path)
    assert [r.error for r in rows] == [None] * len(captions)
    assert [{k: r.cells[k] for k in r.given} for r in rows] == expected_cells(text)


def first_bad_utf8(data: bytes) -> int | None:
    """The reference: where Python's strict UTF-8 decoder (RFC 3629) stops."""
    try:
        data.decode("utf-8")
    except UnicodeDecodeError as exc:
        return exc.start
    return None


@FAST
@given(captions=st.lists(CELL, min_size=1, max_size=4), pos=st.integers(0, 10_000),
       bad=st.binary(min_size=1, max_size=3).filter(lambda b: first_bad_utf8(b) is not None))
def test_sheet_with_bytes_that_are_not_utf8_names_the_file_and_the_offset(tmp_path_factory,
                                                                          captions, pos, bad):
    good = sheet_text(captions).encode("utf-8")
    # insert between characters (never inside one), so the reference decoder stops at the insert
    cut = [i for i in range(len(good) + 1) if i == len(good) or good[i] & 0xC0 != 0x80]
    at = cut[pos % len(cut)]
    data = good[:at] + bad + good[at:]
    if data.startswith((b"\xef\xbb\xbf", b"\xff\xfe", b"\xfe\xff")):
        return   # a byte-order mark made by the insert is another case (below)
    path = tmp_path_factory.mktemp("bad") / "figures.tsv"
    path.write_bytes(data)
    with pytest.raises(FigkitError) as info:
        read_sheet(path)
    msg = str(info.value)
    assert "\n" not in msg and str(path) in msg
    assert f"at byte offset {first_bad_utf8(data)}:" in msg          # Python's utf-8 codec
    assert "UTF-8" in msg


@FAST
@given(text=st.text(st.characters(whitelist_categories=("Ll", "Lu")), min_size=3, max_size=40),
       accented=st.sampled_from("éèàüöñçøÅÉ"))
def test_latin1_settings_are_refused_naming_latin1(tmp_path_factory, text, accented):
    root = tmp_path_factory.mktemp("latin")
    (root / "config").mkdir()
    yaml_text = f"sheet: config/figures.tsv\nresults: results\nfields:\n  x: {{label: {accented}{text}}}\n"
    try:
        data = yaml_text.encode("latin-1")
    except UnicodeEncodeError:
        return   # letters outside latin-1: not this case
    (root / "config" / "config.yaml").write_bytes(data)
    with pytest.raises(FigkitError) as info:
        load_config(root)
    msg = str(info.value)
    offset = yaml_text.index(accented)    # ASCII before it: byte offset == character offset
    assert f"byte offset {offset}:" in msg and "config.yaml" in msg
    assert "latin-1" in msg and f"0x{ord(accented):02X}" in msg   # ISO 8859-1 = first 256 code points


SIGNATURES = {   # first bytes of each format (see the module docstring), and the word we expect
    b"\x89PNG\r\n\x1a\n": "PNG", b"\x1f\x8b\x08": "gzip", b"%PDF-1.7\n": "PDF",
    b"PK\x03\x04": "zip", b"\xff\xfe\x00\x00": "UTF-32",
}


@FAST
@given(sig=st.sampled_from(sorted(SIGNATURES)), body=st.binary(max_size=200))
def test_binary_file_given_as_sheet_or_settings_names_its_kind(tmp_path_factory, sig, body):
    path = tmp_path_factory.mktemp("bin") / "figures.tsv"
    path.write_bytes(sig + body)
    with pytest.raises(FigkitError) as info:
        read_sheet(path)
    msg = str(info.value)
    assert SIGNATURES[sig] in msg and "byte offset 0" in msg and "\n" not in msg


@FAST
@given(text=st.text(st.characters(min_codepoint=0x20, max_codepoint=0x7e), min_size=2, max_size=50))
def test_utf16_without_bom_is_refused_not_read_as_nul_bytes(text):
    data = text.encode("utf-16-le")     # RFC 2781: no BOM; ASCII then alternates with NUL bytes
    with pytest.raises(FigkitError) as info:
        decode_text(data, "figures.tsv", "figure sheet")
    assert "UTF-16" in str(info.value) and "byte offset 1:" in str(info.value)


@FAST
@given(text=st.text(st.characters(min_codepoint=0x20, max_codepoint=0x7e), min_size=1, max_size=50),
       cut=st.integers(1, 1))
def test_utf16_cut_short_is_refused(text, cut):
    data = b"\xff\xfe" + text.encode("utf-16-le")
    with pytest.raises(FigkitError) as info:
        decode_text(data[:-cut], "figures.tsv", "figure sheet")
    # RFC 2781: code units are two bytes; a trailing odd byte is an incomplete unit
    assert f"byte offset {len(data) - 2}:" in str(info.value)


COLUMNS = ["site", "water_temp_c"]


@FAST
@given(values=st.lists(st.tuples(CELL.filter(lambda s: not set(s) & set(",\"'\\")),
                                  st.floats(-50, 50, allow_nan=False)), min_size=1, max_size=20),
       codec=st.sampled_from(sorted(ENCODINGS)), gz=st.booleans())
def test_data_file_encodings_read_the_same(tmp_path_factory, values, codec, gz):
    import gzip
    from figkit.data import read_columns, read_dataset
    text = "site,water_temp_c\n" + "".join(f"{s},{v!r}\n" for s, v in values)
    data = text.encode(codec)
    data = data if codec.endswith("sig") else ENCODINGS[codec] + data
    path = tmp_path_factory.mktemp("data") / ("d.csv.gz" if gz else "d.csv")
    path.write_bytes(gzip.compress(data) if gz else data)
    assert read_columns(path) == COLUMNS
    df = read_dataset(path, COLUMNS)
    assert [str(s) for s in df["site"]] == [s for s, _ in values] or \
        df["site"].dtype != object   # pandas may read digit-only sites as numbers
    assert list(df["water_temp_c"]) == [v for _, v in values]   # repr round-trips a float


@FAST
@given(rows=st.integers(1, 3000), bad=st.sampled_from([b"\xe9", b"\xff", b"\xc3(", b"\xed\xa0\x80"]),
       gz=st.booleans(), bom=st.booleans())
def test_data_file_with_a_bad_byte_far_in_names_the_offset(tmp_path_factory, rows, bad, gz, bom):
    import gzip
    from figkit.data import read_dataset
    good = b"\xef\xbb\xbf" * bom + b"site,water_temp_c\n" + b"".join(
        b"S%d,%d.5\n" % (i, i % 30) for i in range(rows))
    at = good.rindex(b"S")            # the last row's site name
    data = good[:at] + bad + good[at:]
    path = tmp_path_factory.mktemp("data") / ("d.csv.gz" if gz else "d.csv")
    path.write_bytes(gzip.compress(data) if gz else data)
    with pytest.raises(FigkitError) as info:
        read_dataset(path, COLUMNS)
    # Python's utf-8 codec; a byte-order mark (EF BB BF) is three bytes of the file
    assert f"byte offset {first_bad_utf8(data)}:" in str(info.value)


def figkit_cli(root: Path, *args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "figkit", *args], cwd=root, capture_output=True,
                          text=True, timeout=120)


@pytest.fixture(scope="module")
def project(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("proj") / "p"
    subprocess.run([sys.executable, "-m", "figkit", "init", str(root)], check=True, capture_output=True)
    return root


def one_line_error(proc: subprocess.CompletedProcess) -> str:
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr
    errors = [ln for ln in proc.stderr.splitlines() if ln.startswith("figkit: error:")]
    assert len(errors) == 1, proc.stderr
    return errors[0]


@pytest.mark.parametrize("name", ["config/config.yaml", "config/figures.tsv", "data/readings.csv"])
def test_cli_reads_utf16_and_refuses_latin1_in_one_line(project, name):
    """Each of the three kinds of text file figkit reads, through `figkit lint` as a user runs it."""
    path = project / name
    original = path.read_bytes()
    try:
        path.write_bytes(b"\xff\xfe" + original.decode("utf-8").encode("utf-16-le"))  # RFC 2781
        proc = figkit_cli(project, "lint")
        assert proc.returncode == 0, proc.stderr
        path.write_bytes(original.replace(b"\n", "\n# ré\n".encode("latin-1"), 1)
                         if name.endswith(".yaml") else
                         original.replace(b"water", "wat\xe9r".encode("latin-1"), 2))
        line = one_line_error(proc := figkit_cli(project, "lint"))
        assert name.split("/")[-1] in line and "byte offset" in line and "latin-1" in line
        assert not (project / "results").exists()
    finally:
        path.write_bytes(original)


# --------------------------------------------------------------------------- 3. filter text

OTHER_DIGITS = [chr(c) for c in range(0x80, 0x3000)
                if unicodedata.category(chr(c)) in ("Nd", "No")]   # Unicode Character Database


@FAST
@given(digit=st.sampled_from(OTHER_DIGITS), before=st.sampled_from(["x > ", "x == 1", "x in [1, ", "x >= 3"]))
def test_filter_with_other_digits_or_superscripts_points_at_them(digit, before):
    text = before + digit
    with pytest.raises(FigkitError) as info:
        parse(text)
    assert f"at column {len(before) + 1} " in str(info.value)
    assert "0-9" in str(info.value)


@FAST
@given(mantissa=st.integers(1, 9), exponent=st.integers(309, 100_000), sign=st.sampled_from(["", "-"]))
def test_filter_numbers_beyond_float_range_are_refused_with_position(mantissa, exponent, sign):
    src = f"{sign}{mantissa}e{exponent}"
    assert abs(float(src)) == float("inf")      # IEEE 754 binary64 overflows (Python's float)
    with pytest.raises(FigkitError) as info:
        parse(f"x > {src}")
    assert "out of range" in str(info.value) and "at column 5 " in str(info.value)


@FAST
@given(digits=st.integers(310, 9_000))
def test_filter_long_integers_are_refused_not_a_traceback(digits):
    with pytest.raises(FigkitError) as info:
        parse("x == " + "9" * digits)
    assert "at column 6 " in str(info.value) or "longer than" in str(info.value)


TOKENS = ["x", "`a b`", "3", "-2.5", "'t'", "==", "!=", "<", ">=", "and", "or", "not", "in", "is",
          "missing", "(", ")", "[", "]", ",", "=", "!", "&", "+", ".", "²", "1e999", "٣", "@", "'",
          "`", "true"]


@settings(max_examples=600, deadline=None, derandomize=True)
@given(st.lists(st.sampled_from(TOKENS), min_size=1, max_size=12))
def test_any_token_soup_parses_or_gives_a_one_line_error_with_its_column(tokens):
    text = " ".join(tokens)
    try:
        parse(text)
    except FigkitError as exc:
        msg = str(exc)
        assert "\n" not in msg and "at column" in msg, msg


# --------------------------------------------------------------------------- 2. sizes

SHEET_COLUMNS = ["id", "dataset", "chart", "x", "y", "strata", "filter", "options", "caption",
                 "height_mm"]


@settings(max_examples=40, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(column=st.sampled_from(SHEET_COLUMNS),
       length=st.integers(MAX_CELL_CHARS + 1, 1_100_000),
       char=st.sampled_from(["a", "(", " ", "9", "é", "語"]))
def test_overlong_cells_give_one_short_line_naming_row_column_and_limit(tmp_path_factory, column,
                                                                       length, char):
    cells = dict(id="big", dataset="readings", chart="histogram", x="water_temp_c")
    cells[column] = "x" + char * (length - 2) + "x"   # stripped cells keep their length
    lines = ["\t".join(SHEET_COLUMNS), "\t".join(cells.get(c, "") for c in SHEET_COLUMNS)]
    path = tmp_path_factory.mktemp("big") / "figures.tsv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    start = time.monotonic()
    try:
        rows = read_sheet(path)
        err = rows[0].error
    except FigkitError as exc:      # beyond the csv module's own field limit: the whole sheet
        err = exc
    assert time.monotonic() - start < 5
    msg = str(err)
    assert "sheet row 2" in msg and f"{MAX_CELL_CHARS:,}" in msg and "\n" not in msg
    assert len(msg) < 1000                         # the value is quoted cut short
    if length <= 131_072 - 10:                     # Python's csv.field_size_limit() default
        assert f"field '{column}'" in msg and f"{length:,} characters" in msg


def test_a_caption_at_the_limit_is_accepted(tmp_path):
    path = tmp_path / "figures.tsv"
    caption = ("Dissolved oxygen by season. " * 400)[:MAX_CELL_CHARS].strip()
    path.write_text(f"id\tdataset\tchart\tx\tcaption\nf\treadings\thistogram\tx\t{caption}\n",
                    encoding="utf-8")
    (row,) = read_sheet(path)
    assert row.error is None and row.cells["caption"] == caption


@settings(max_examples=30, deadline=None, derandomize=True)
@given(depth=st.integers(65, 100_000), closing=st.booleans())
def test_deep_parentheses_are_refused_quickly(depth, closing):
    text = "(" * depth + "x > 1" + (")" * depth if closing else "")
    start = time.monotonic()
    with pytest.raises(FigkitError) as info:
        parse(text)
    assert time.monotonic() - start < 2
    assert "\n" not in str(info.value) and len(str(info.value)) < 1000


@settings(max_examples=20, deadline=None, derandomize=True)
@given(n_values=st.integers(1, 30_000), n_missing=st.integers(1, 4_000), seed=st.integers(0, 99))
def test_orders_spelling_search_is_bounded(n_values, n_missing, seed):
    import difflib
    values = [f"station-{(i * 7919 + seed) % 99991:05d}" for i in range(n_values)]
    order = [f"statoin-{i:05d}" for i in range(n_missing)]
    start = time.monotonic()
    (note, *_) = order_notes("site", order, values)
    assert time.monotonic() - start < 3
    named = note.count("'statoin-")
    assert named == min(n_missing, SPELLING_SEARCHES_MAX)
    if n_missing > SPELLING_SEARCHES_MAX:
        assert f"and {n_missing - SPELLING_SEARCHES_MAX:,} more" in note
    if len(set(values)) <= SPELLING_POOL_MAX:    # the hint, as difflib itself finds it
        ref = difflib.get_close_matches(order[0], sorted(set(values), key=natural_key), n=1)
        assert (f"did you mean '{ref[0]}'" in note) == bool(ref)


@FAST
@given(value=st.text(min_size=SHOWN_VALUE_MAX + 1, max_size=50_000),
       allowed=st.lists(st.text(max_size=20), max_size=3000))
def test_error_lines_quote_long_values_cut_short(value, allowed):
    msg = str(FigkitError("bad value", row=2, figure="f", field="caption", value=value,
                          allowed=allowed))
    assert "\n" not in msg and len(msg) < 25 * SHOWN_VALUE_MAX
    assert f"({len(value):,} characters)" in msg


# --------------------------------------------------------------------------- 4. settings and paths

BASE_SETTINGS = {"datasets": {"readings": "data/readings.csv"}}


def settings_error(root: Path, **changes) -> str:
    with pytest.raises(FigkitError) as info:
        validate_config(dict(BASE_SETTINGS, **changes), root)
    msg = str(info.value)
    assert "\n" not in msg and len(msg) < 1500
    return msg


NAME = st.text("abcxyz0189-_", min_size=1, max_size=12)


@FAST
@given(name=NAME, below=st.lists(NAME, max_size=3))
def test_results_folder_that_is_or_lies_under_a_file_is_refused(tmp_path_factory, name, below):
    root = tmp_path_factory.mktemp("res")
    (root / name).write_text("not a folder\n", encoding="utf-8")
    msg = settings_error(root, results="/".join([name, *below]))
    assert "field 'results'" in msg and ("is a file" if not below else "which is a file") in msg
    assert (root / name).is_file()


@FAST
@given(system=st.sampled_from(SYSTEM_FOLDERS), below=st.lists(NAME, max_size=3),
       via=st.sampled_from(["", "/.", "/x/..", "//"]))
def test_results_folder_under_a_system_folder_is_refused(tmp_path_factory, system, below, via):
    root = tmp_path_factory.mktemp("sys")
    target = "/".join([system + via, *below])
    msg = settings_error(root, results=target)
    assert f"system folder {system}" in msg                       # /proc: proc(5), from memory


@FAST
@given(char=st.sampled_from(["a", "é", "語", "😀"]), extra=st.integers(1, 40))
def test_results_folder_names_longer_than_name_max_bytes_are_refused(tmp_path_factory, char, extra):
    # NAME_MAX: 255 bytes per name on Linux file systems (limits.h, from memory), counted in
    # UTF-8 bytes (RFC 3629: é takes 2, 語 3, 😀 4)
    n = MAX_NAME_BYTES // len(char.encode("utf-8")) + extra
    root = tmp_path_factory.mktemp("long")
    msg = settings_error(root, results=char * n)
    assert f"{n * len(char.encode('utf-8')):,} bytes" in msg
    fits = char * (MAX_NAME_BYTES // len(char.encode("utf-8")))
    validate_config(dict(BASE_SETTINGS, results=fits), root)        # at the limit: accepted


@FAST
@given(depth=st.integers(1, 3000))
def test_deep_results_folders_are_refused_past_the_path_limit(tmp_path_factory, depth):
    root = tmp_path_factory.mktemp("deep")
    results = "/".join(["ab"] * depth)
    full = len(str(root.resolve())) + 1 + len(results)
    if full > MAX_RESULTS_PATH_CHARS:
        assert f"{full:,} characters long" in settings_error(root, results=results)
    else:
        validate_config(dict(BASE_SETTINGS, results=results), root)
    assert not (root / "ab").exists()                                # nothing made


@FAST
@given(pos=st.integers(0, 7), control=st.sampled_from(["\x00", "\x1b", "\x7f"]))
def test_results_folder_with_a_nul_or_control_character_is_refused(tmp_path_factory, pos, control):
    root = tmp_path_factory.mktemp("nul")
    value = "results"[:pos] + control + "results"[pos:]
    msg = settings_error(root, results=value)
    assert "field 'results'" in msg and f"position {pos + 1}" in msg


def test_no_datasets_is_refused(tmp_path):
    msg = settings_error(tmp_path, datasets={})
    assert "field 'datasets'" in msg


@pytest.fixture()
def style_dir(tmp_path) -> Path:
    import shutil
    from conftest import REPO
    styles = tmp_path / "proj" / "styles"
    shutil.copytree(REPO / "figkit" / "styles", styles)
    return styles


@settings(max_examples=30, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(which=st.sampled_from(["house.yaml", "house.mplstyle"]),
       target=st.sampled_from(["system", "outside", "self", "loop2", "dotdot"]))
def test_style_files_must_lie_inside_the_styles_folder(style_dir, which, target):
    from figkit.style import load_style
    import os
    path = style_dir / which
    saved = path.read_bytes()
    outside = style_dir.parent.parent / f"outside-{which}"
    outside.write_bytes(saved)
    extra = []
    try:
        path.unlink()
        if target == "system":
            path.symlink_to("/etc/hostname")
        elif target == "outside":
            path.symlink_to(outside)
        elif target == "self":
            path.symlink_to(path.name)
        elif target == "loop2":
            other = style_dir / "other"
            other.symlink_to(path.name)
            path.symlink_to("other")
            extra.append(other)
        else:   # a name going up and out, no link at all (only the style sheet is named by YAML)
            path.write_bytes(saved)
            if which == "house.yaml":
                return
            (style_dir / "house.yaml").write_text((style_dir / "house.yaml").read_text(
                encoding="utf-8").replace("sheet: house.mplstyle", f"sheet: ../../{outside.name}"),
                encoding="utf-8")
        with pytest.raises(FigkitError) as info:
            load_style("house", style_dir)
        msg = str(info.value)
        assert ("outside the styles folder" in msg or "points to itself" in msg), msg
    finally:
        for p in [path, *extra]:
            if p.is_symlink() or p.exists():
                p.unlink()
        path.write_bytes(saved)
        house = style_dir / "house.yaml"
        house.write_text(house.read_text(encoding="utf-8").replace(
            f"sheet: ../../{outside.name}", "sheet: house.mplstyle"), encoding="utf-8")
        os.remove(outside)


@pytest.mark.parametrize("results", ["afile", "afile/deeper", "/proc/self/figs", "/etc"])
def test_cli_render_refuses_bad_results_folders_in_one_line(project, results):
    config = project / "config" / "config.yaml"
    original = config.read_text(encoding="utf-8")
    (project / "afile").write_text("x\n", encoding="utf-8")
    try:
        config.write_text(original.replace("results: results", f"results: {results}"),
                          encoding="utf-8")
        line = one_line_error(figkit_cli(project, "render", "--id", "oxygen-by-land-use"))
        assert "field 'results'" in line
        assert not Path("/etc/figures").exists()
    finally:
        config.write_text(original, encoding="utf-8")
        (project / "afile").unlink()


# --------------------------------------------------------------------------- 5. bad data accepted

def data_project(root: Path, frame, sheet_row: dict) -> "object":
    """A one-figure project over ``frame`` (written as CSV); returns the row's FigureSpec."""
    import shutil
    from conftest import REPO
    from figkit.sheet import load_project
    (root / "data").mkdir(parents=True, exist_ok=True)
    if not (root / "styles").exists():
        shutil.copytree(REPO / "figkit" / "styles", root / "styles")
    frame.to_csv(root / "data" / "t.csv", index=False)
    cols = list(sheet_row)
    (root / "figures.tsv").write_text("\t".join(cols) + "\n" + "\t".join(sheet_row[c] for c in cols)
                                      + "\n", encoding="utf-8")
    project = load_project(root, settings={"datasets": {"t": "data/t.csv"}, "sheet": "figures.tsv"})
    return project.spec(sheet_row["id"])


# Lower-case words that are text to any reader: pandas' read_csv takes 'nan' and 'null' as
# missing (its documented default na_values), and 'inf'/'infinity' are numbers to it and to
# Python's float.
WORD = st.text("abcdefghijklmnopqrstuvwxyz", min_size=2, max_size=8).filter(
    lambda w: w not in {"nan", "null", "inf", "infinity"})


@settings(max_examples=40, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(n_numbers=st.integers(1, 120), words=st.lists(WORD, min_size=1, max_size=4, unique=True),
       n_rows=st.integers(130, 400), seed=st.integers(0, 2**16), chart=st.sampled_from(["box", "violin"]))
def test_numbers_mixed_with_text_in_a_category_axis(tmp_path_factory, n_numbers, words, n_rows,
                                                    seed, chart):
    import random
    import pandas as pd
    from figkit.data import CONTINUOUS_DISTINCT, load_figure_data
    rng = random.Random(seed)
    numbers = [str(10 * i + 5) for i in range(n_numbers)]      # decimal numerals, from memory
    xs = numbers + words + [rng.choice(numbers + words) for _ in range(n_rows - n_numbers - len(words))]
    rng.shuffle(xs)
    frame = pd.DataFrame({"g": xs, "v": [rng.random() for _ in xs]})
    spec = data_project(tmp_path_factory.mktemp("mix"), frame,
                        dict(id="m", dataset="t", chart=chart, x="g", y="v"))
    text_rows = [i for i, x in enumerate(xs) if x in words]      # the reference count, by hand
    where = f"first at row {text_rows[0] + 2} of the file"      # header = row 1 (RFC 4180 header)
    if n_numbers > CONTINUOUS_DISTINCT:
        with pytest.raises(FigkitError) as info:
            load_figure_data(spec)
        msg = str(info.value)
        assert "field 'x'" in msg and f"text in {len(text_rows)} rows" in msg and where in msg
        assert f"in {len(xs) - len(text_rows)} rows ({n_numbers} distinct)" in msg
    else:
        notes = [n for n in load_figure_data(spec).notes if "mixes numbers" in n]
        assert len(notes) == 1 and f"with text ({len(text_rows)} rows" in notes[0] and where in notes[0]


@settings(max_examples=25, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(n_days=st.integers(2, 150), start=st.dates(), seed=st.integers(0, 2**16))
def test_dates_as_text_in_a_category_axis(tmp_path_factory, n_days, start, seed):
    import datetime
    import random
    import pandas as pd
    from figkit.data import CONTINUOUS_DISTINCT, load_figure_data
    if start.year > 9000:
        start = start.replace(year=2000)
    rng = random.Random(seed)
    days = [(start + datetime.timedelta(days=i)).isoformat() for i in range(n_days)]   # ISO 8601
    xs = days + [rng.choice(days) for _ in range(60)]
    frame = pd.DataFrame({"d": xs, "v": [rng.random() for _ in xs]})
    spec = data_project(tmp_path_factory.mktemp("dates"), frame,
                        dict(id="d", dataset="t", chart="box", x="d", y="v"))
    if n_days > CONTINUOUS_DISTINCT:
        with pytest.raises(FigkitError) as info:
            load_figure_data(spec)
        assert "dates stored as text" in str(info.value) and f"({n_days} distinct)" in str(info.value)
    else:
        load_figure_data(spec)   # a few sampling dates are categories


@settings(max_examples=30, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(n_rows=st.integers(5, 300), where=st.lists(st.integers(0, 299), min_size=1, max_size=5),
       sign=st.sampled_from(["inf", "Infinity", "1e999"]), chart=st.sampled_from(["count-bars", "tiles"]))
def test_infinite_weights_are_refused_with_count_and_first_row(tmp_path_factory, n_rows, where,
                                                                sign, chart):
    import pandas as pd
    from figkit.data import load_figure_data
    rows = sorted({w % n_rows for w in where})
    weights = ["3"] * n_rows
    for r in rows:
        weights[r] = sign      # each reads as IEEE 754 +infinity (pandas' C parser, Python float)
    frame = pd.DataFrame({"a": ["p", "q"] * (n_rows // 2) + ["p"] * (n_rows % 2),
                          "b": ["r"] * n_rows, "w": weights})
    row = dict(id="w", dataset="t", chart=chart, x="a", weight="w")
    if chart == "tiles":
        row["y"] = "b"
    spec = data_project(tmp_path_factory.mktemp("inf"), frame, row)
    with pytest.raises(FigkitError) as info:
        load_figure_data(spec)
    msg = str(info.value)
    assert "field 'weight'" in msg and f"infinite values in {len(rows)} rows" in msg
    assert f"first at row {rows[0] + 2} of the file" in msg


@settings(max_examples=25, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(n_panels=st.integers(2, 6), empty=st.sets(st.integers(0, 5), min_size=1), seed=st.integers(0, 99))
def test_panels_that_draw_no_data_give_a_caution_or_an_error(tmp_path_factory, n_panels, empty, seed):
    import pandas as pd
    from figkit.data import load_figure_data
    empty = {e % n_panels for e in empty}
    panels = [f"P{i}" for i in range(n_panels)]
    g = [p for p in panels for _ in range(4)]
    y = [None if int(p[1:]) in empty else float(i + seed) for i, p in enumerate(g)]
    frame = pd.DataFrame({"s": g, "x": [float(i) for i in range(len(g))], "y": y})
    spec = data_project(tmp_path_factory.mktemp("empty"), frame,
                        dict(id="e", dataset="t", chart="scatter", x="x", y="y", strata="s"))
    if len(empty) == n_panels:
        with pytest.raises(FigkitError) as info:
            load_figure_data(spec)
        assert "would show nothing" in str(info.value) and f"missing in {len(g)} of {len(g)} rows" \
            in str(info.value) and "field 'y'" in str(info.value)
    else:
        notes = [n for n in load_figure_data(spec).notes if "draw no data" in n]
        assert len(notes) == 1 and notes[0].startswith(f"{len(empty)} of {n_panels} panels")
        assert all(f"'P{e}'" in notes[0] for e in sorted(empty)[:5])


@settings(max_examples=10, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(n=st.integers(301, 6000))
def test_too_many_categories_on_an_axis_are_refused_quickly(tmp_path_factory, n):
    import pandas as pd
    from figkit.data import MAX_CATEGORIES_PER_AXIS, load_figure_data
    frame = pd.DataFrame({"a": [f"c{i}" for i in range(n)], "w": [1] * n})
    spec = data_project(tmp_path_factory.mktemp("cats"), frame,
                        dict(id="c", dataset="t", chart="count-bars", x="a", weight="w"))
    start = time.monotonic()
    with pytest.raises(FigkitError) as info:
        load_figure_data(spec)
    assert time.monotonic() - start < 5
    assert f"{n:,} distinct values" in str(info.value) and str(MAX_CATEGORIES_PER_AXIS) in str(info.value)


@settings(max_examples=4, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(value_len=st.integers(81, 10_000), label_len=st.integers(81, 10_000), char=st.sampled_from("aé語"))
def test_long_labels_are_cut_with_an_ellipsis_and_cautioned(tmp_path_factory, value_len, label_len, char):
    import matplotlib
    matplotlib.use("Agg")
    import pandas as pd
    from figkit.data import load_figure_data
    from figkit.render import figure
    from figkit.sheet import load_project
    from figkit.spec import MAX_LABEL_CHARS
    root = tmp_path_factory.mktemp("labels")
    long_value = "S" + char * (value_len - 1)
    frame = pd.DataFrame({"s": [long_value] * 20 + ["short"] * 20,
                          "x": [float(i) for i in range(40)], "y": [float(i % 7) for i in range(40)]})
    data_project(root, frame, dict(id="l", dataset="t", chart="scatter", x="x", y="y", strata="s"))
    settings_ = {"datasets": {"t": "data/t.csv"}, "sheet": "figures.tsv",
                 "fields": {"x": {"label": char * label_len}}}
    project = load_project(root, settings=settings_)
    spec = project.spec("l")
    notes = load_figure_data(spec).notes
    assert any("label of field 'x'" in n for n in notes)
    assert any("1 panel titles" in n for n in notes)
    start = time.monotonic()
    fig = figure("l", project)
    assert time.monotonic() - start < 60
    texts = [t.get_text() for t in fig.findobj(matplotlib.text.Text)]
    assert max(len(t) for t in texts) <= MAX_LABEL_CHARS + 20      # a unit may follow the label
    assert any(t.endswith("\u2026") for t in texts)   # U+2026 HORIZONTAL ELLIPSIS (Unicode)


@settings(max_examples=30, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(option=st.sampled_from([("box", "whisker"), ("violin", "bandwidth"), ("density", "bandwidth"),
                               ("histogram", "bins")]),
       value=st.sampled_from(["inf", "-inf", "nan", "1e999", "Infinity", "NaN"]))
def test_options_that_are_not_finite_numbers_are_refused(tmp_path_factory, option, value):
    import pandas as pd
    chart, key = option
    assert not __import__("math").isfinite(float(value))   # IEEE 754: not finite (Python's float)
    frame = pd.DataFrame({"g": ["a", "b"] * 5, "v": [float(i) for i in range(10)]})
    row = dict(id="o", dataset="t", chart=chart, x="g" if chart in ("box", "violin") else "v",
               options=f"{key}={value}")
    if chart in ("box", "violin"):
        row["y"] = "v"
    with pytest.raises(FigkitError) as info:
        data_project(tmp_path_factory.mktemp("opt"), frame, row)
    assert "field 'options'" in str(info.value) and key in str(info.value)


@FAST
@given(text=st.text(st.characters(min_codepoint=0x20, max_codepoint=0x7e).filter(lambda c: c not in ',"'),
                    min_size=4, max_size=60))
def test_data_file_in_utf16_without_bom_is_refused_but_a_nul_in_a_value_is_data(tmp_path_factory, text):
    from figkit.data import read_columns
    root = tmp_path_factory.mktemp("nul")
    plain = f"site,v\n{text},1\n"
    (root / "a.csv").write_bytes(plain.encode("utf-16-le"))          # RFC 2781, no BOM
    with pytest.raises(FigkitError) as info:
        read_columns(root / "a.csv")
    assert "UTF-16" in str(info.value) and "byte offset 1:" in str(info.value)
    (root / "b.csv").write_bytes(f"site,v\nS\x00{text},1\n".encode("utf-8"))
    assert read_columns(root / "b.csv") == ["site", "v"]   # data values are not ours to refuse
