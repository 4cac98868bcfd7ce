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


# --------------------------------------------------------------------------- text files
# Which bytes figkit reads as text (the sheet, config.yaml, house-style YAML, CSV/TSV data):
# UTF-8 (RFC 3629) with or without a byte-order mark, and UTF-16 with its byte-order mark (a
# spreadsheet's "Unicode text" export).  Anything else is refused in one line naming the file,
# the byte offset and the likely cause, rather than guessed at: a guessed encoding silently
# turns 'µS/cm' into 'ÂµS/cm' in a published axis label.
BOMS = ((b"\xff\xfe\x00\x00", None), (b"\x00\x00\xfe\xff", None),   # UTF-32: refused
        (b"\xef\xbb\xbf", "utf-8-sig"), (b"\xff\xfe", "utf-16"), (b"\xfe\xff", "utf-16"))
# File signatures of things that are not text at all, first bytes as their formats define them.
SIGNATURES = ((b"\x89PNG\r\n\x1a\n", "a PNG image"), (b"\x1f\x8b", "gzip-compressed data"),
              (b"%PDF-", "a PDF document"), (b"PK\x03\x04", "a zip archive or a spreadsheet "
              "workbook (.xlsx, .ods); export the sheet as tab-separated text"),
              (b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1", "an old spreadsheet workbook (.xls); export "
              "it as text"), (b"\xff\xd8\xff", "a JPEG image"), (b"GIF8", "a GIF image"),
              (b"PAR1", "a Parquet file"), (b"II*\x00", "a TIFF image"), (b"MM\x00*", "a TIFF image"))
# How much of a data file is looked at before pandas reads it (the rest is checked by the
# decoder pandas uses; on a failure the file is scanned again to find the offset).
SNIFF_BYTES = 1 << 16


def _cause(data: bytes, offset: int) -> str:
    """The likely reason why ``data`` does not decode at ``offset``."""
    for sig, what in SIGNATURES:
        if data.startswith(sig):
            return f"the file is {what}, not text"
    for bom, enc in BOMS:
        if enc is None and data.startswith(bom):
            return "the file is UTF-32 text; save it as UTF-8"
    head = data[:4096]
    if b"\x00" in head:
        if _looks_like_bomless_utf16(head):
            return "the file looks like UTF-16 text without a byte-order mark; save it as UTF-8"
        return "the file holds NUL bytes: it is binary, not text"
    byte = data[offset] if offset < len(data) else None
    if byte is not None and byte >= 0x80:
        guess = bytes([byte]).decode("cp1252", errors="replace")
        return (f"byte 0x{byte:02X} is not UTF-8 (RFC 3629); it reads as {guess!r} in latin-1 or "
                "Windows-1252, so the file was probably saved in one of those: save it as UTF-8")
    return "the file is not UTF-8 text; save it as UTF-8"


def _refuse(path, data: bytes, offset: int, what: str) -> FigkitError:
    return FigkitError(f"{what} {path} cannot be read as text at byte offset {offset}: "
                       f"{_cause(data, offset)}", allowed=_ALLOWED)


_ALLOWED = "UTF-8 (with or without a byte-order mark), or UTF-16 with its byte-order mark"


def text_encoding(head: bytes) -> tuple[str | None, int]:
    """(codec, BOM length) for a file starting with ``head``; codec None for UTF-32."""
    for bom, enc in BOMS:
        if head.startswith(bom):
            return enc, len(bom)
    return "utf-8", 0


def decode_text(data: bytes, path, what: str = "file") -> str:
    """``data`` (a whole file) as text, or a one-line FigkitError naming ``path``, the byte
    offset and the likely cause.  A NUL byte is refused too: it is never in typed text."""
    enc, skip = text_encoding(data[:4])
    for sig, _ in SIGNATURES:
        if data.startswith(sig):
            raise _refuse(path, data, 0, what)
    if enc is None:
        raise _refuse(path, data, 0, what)
    try:
        text = data.decode(enc)
    except UnicodeDecodeError as exc:
        offset = exc.start + (skip if enc == "utf-8-sig" else 0)
        if enc == "utf-16":   # the utf-16 codec counts from the first byte
            raise FigkitError(f"{what} {path} cannot be read as text at byte offset "
                              f"{exc.start}: it starts with a UTF-16 byte-order mark but is "
                              "not valid UTF-16 (cut short, or a lone surrogate)",
                              allowed=_ALLOWED) from None
        raise _refuse(path, data, offset, what) from None
    nul = text.find("\x00")
    if nul >= 0:
        offset = len(text[:nul].encode("utf-16-le" if enc == "utf-16" else "utf-8")) + skip
        raise _refuse(path, data, offset, what)
    return text


def read_text(path, what: str = "file") -> str:
    """A text file typed by people (the sheet, settings, a house style), decoded as
    :func:`decode_text` says."""
    from pathlib import Path
    return decode_text(Path(path).read_bytes(), path, what)


def read_yaml(path, what: str):
    """A YAML file typed by people (settings, a house style), read with libyaml's parser where
    PyYAML has it (the same safe loader, about ten times faster than the pure-Python one: each
    figure job reads two such files) and the pure-Python one where it does not.  Raises
    yaml.YAMLError as yaml.safe_load does; an empty file is None."""
    import yaml
    loader = getattr(yaml, "CSafeLoader", yaml.SafeLoader)
    return yaml.load(read_text(path, what), Loader=loader)  # noqa: S506 - a safe loader


def data_encoding(path, opener=open) -> str:
    """The codec pandas should read the CSV/TSV data file ``path`` with; its first bytes are
    checked here so that an image, an archive or UTF-32 is refused before pandas sees it.
    ``opener`` opens the file for reading bytes (gzip.open for .gz files)."""
    with opener(path, "rb") as fh:
        head = fh.read(SNIFF_BYTES)
    enc, skip = text_encoding(head[:4])
    if enc is None or any(head.startswith(sig) for sig, _ in SIGNATURES):
        raise _refuse(path, head, 0, "data file")
    if enc == "utf-16":
        return "utf-16"
    # A NUL inside a data value is the data's own (shown escaped, see shown()); a head where
    # every other byte is NUL is UTF-16 saved without its byte-order mark.
    if _looks_like_bomless_utf16(head):
        raise _refuse(path, head, head.find(b"\x00"), "data file")
    return enc


def _looks_like_bomless_utf16(head: bytes) -> bool:
    nul = head.count(b"\x00")
    return bool(nul) and nul * 3 >= len(head) and (
        head[1::2].count(0) > nul * 0.8 or head[0::2].count(0) > nul * 0.8)


def locate_bad_byte(path, encoding: str, opener=open) -> FigkitError:
    """After pandas failed to decode ``path``: scan it with an incremental decoder for the
    first undecodable byte and return the one-line error for it."""
    import codecs
    offset = 0
    with opener(path, "rb") as fh:
        if encoding == "utf-8-sig":   # count the mark's three bytes, then plain UTF-8
            encoding, offset = "utf-8", len(fh.read(3))
        decoder = codecs.getincrementaldecoder(encoding)()
        while True:
            chunk = fh.read(1 << 20)
            try:
                decoder.decode(chunk, final=not chunk)
            except UnicodeDecodeError as exc:
                # exc.start counts from the bytes the decoder held back plus this chunk
                at = offset - (len(exc.object) - len(chunk)) + exc.start
                return FigkitError(f"data file {path} cannot be read as text at byte offset "
                                   f"{at}: {_cause(exc.object, exc.start)}", allowed=_ALLOWED)
            if not chunk:
                break
            offset += len(chunk)
    return FigkitError(f"data file {path} cannot be read as {encoding} text")
