"""Opening figure files a user hands to `figkit info`, `figkit preflight` and `figkit compare`.

Such a file may be anything: truncated, empty, a folder, a named pipe (reading it would wait for
ever), a PNG whose header promises billions of pixels, an SVG whose document type declaration
expands entities a billion times or points at other files and the network.  Every function here
either returns what was asked or raises a one-line :class:`FigkitError`; memory and time are
bounded by the limits below (docs/limits.md), and nothing outside the given file is read.
"""
from __future__ import annotations

import re
import stat
import warnings
from pathlib import Path

from .errors import FigkitError

# A figure file larger than this is not read at all (a 600 dpi full-page PNG is ~10 MB).
MAX_FIGURE_FILE_BYTES = 256 * 2 ** 20
# Pixels an image may declare before it is decoded: Pillow's own default MAX_IMAGE_PIXELS
# (its decompression-bomb threshold, 89,478,485 = 1024 * 1024 * 1024 // 4 // 3); a 176 x 230 mm
# page at 1200 dpi has 88.6 million.
MAX_IMAGE_PIXELS = 89_478_485

# File signatures: PNG (ISO/IEC 15948, 5.2), PDF (ISO 32000-1, 7.5.2), TIFF (TIFF 6.0, section 2:
# "II*\0" little-endian, "MM\0*" big-endian), JPEG (ITU T.81, SOI FF D8), gzip (RFC 1952).
_SIGNATURES = [(b"\x89PNG\r\n\x1a\n", "png"), (b"%PDF-", "pdf"), (b"II*\x00", "tiff"),
               (b"MM\x00*", "tiff"), (b"\xff\xd8\xff", "JPEG"), (b"\x1f\x8b", "gzip"),
               (b"PK\x03\x04", "zip")]
SUFFIXES = {".pdf": "pdf", ".png": "png", ".svg": "svg", ".tif": "tiff", ".tiff": "tiff"}


def checked_file(path: Path | str, what: str = "figure file") -> Path:
    """``path`` if it is a regular, non-empty file within MAX_FIGURE_FILE_BYTES; else one line.
    A named pipe, socket or device is refused before it is opened (opening a pipe blocks)."""
    path = Path(path)
    try:
        st = path.stat()
    except FileNotFoundError:
        raise FigkitError(f"{what} not found", value=str(path)) from None
    except OSError as exc:
        raise FigkitError(f"{what} cannot be read ({exc.strerror or type(exc).__name__})",
                          value=str(path)) from None
    if stat.S_ISDIR(st.st_mode):
        raise FigkitError(f"{what} is a folder", value=str(path), allowed="a file")
    if not stat.S_ISREG(st.st_mode):
        raise FigkitError(f"{what} is not a regular file (a pipe, socket or device)",
                          value=str(path), allowed="a file")
    if st.st_size == 0:
        raise FigkitError(f"{what} is empty (0 bytes)", value=str(path))
    if st.st_size > MAX_FIGURE_FILE_BYTES:
        raise FigkitError(f"{what} is {st.st_size:,} bytes, above figkit's limit of "
                          f"{MAX_FIGURE_FILE_BYTES:,}", value=str(path))
    return path


def sniff(path: Path) -> str:
    """The file's kind from its first bytes: pdf, png, tiff, svg, or the name of another kind."""
    with open(path, "rb") as fh:
        head = fh.read(512)
    for sig, kind in _SIGNATURES:
        if head.startswith(sig):
            return kind
    text = head.lstrip(b"\xef\xbb\xbf").lstrip()
    if text.startswith(b"<"):
        return "svg"
    if head.startswith((b"\xff\xfe", b"\xfe\xff")):
        return "UTF-16 text"
    return "unknown"


def figure_kind(path: Path | str, what: str = "figure file") -> tuple[Path, str]:
    """(checked path, kind) where the name's ending and the content agree on pdf, png, svg or
    tiff; one line otherwise (a PNG renamed .pdf, a text file named .png, ...)."""
    path = checked_file(path, what)
    named = SUFFIXES.get(path.suffix.lower())
    if named is None:
        raise FigkitError(f"not a figure file figkit writes (its name ends '{path.suffix}')",
                          value=path.name, allowed=sorted(SUFFIXES))
    found = sniff(path)
    if found != named:
        raise FigkitError(f"{what} is named .{named} but its first bytes are "
                          f"{'those of ' + found.upper() if found != 'unknown' else 'not ' + named.upper()}",
                          value=path.name)
    return path, named


def open_image(path: Path, *, load: bool = False):
    """A Pillow image of ``path`` (header read; decoded too with ``load``).  Images declaring
    more than MAX_IMAGE_PIXELS are refused before any pixel is decoded; truncated or damaged
    files, and PNG text chunks beyond Pillow's limits, give one line."""
    from PIL import Image
    path = checked_file(path, "image")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            im = Image.open(path)
            w, h = im.size
            if w * h > MAX_IMAGE_PIXELS:
                im.close()
                raise FigkitError(f"image declares {w:,} x {h:,} pixels, above figkit's limit of "
                                  f"{MAX_IMAGE_PIXELS:,} (a decompression bomb or not a figure)",
                                  value=str(path))
            if load:
                im.load()
        return im
    except FigkitError:
        raise
    except Exception as exc:  # noqa: BLE001 - Pillow raises OSError, struct.error, zlib.error ...
        raise open_image_error(exc, path) from None


def open_image_error(exc: BaseException, path: Path) -> FigkitError:
    """The one line for an image Pillow could not open or decode."""
    from PIL import Image, UnidentifiedImageError
    if isinstance(exc, (Image.DecompressionBombError, Image.DecompressionBombWarning)):
        return FigkitError(f"image declares more than {MAX_IMAGE_PIXELS:,} pixels (a "
                           "decompression bomb or not a figure)", value=str(path))
    if isinstance(exc, UnidentifiedImageError):
        return FigkitError("not an image Pillow can read", value=str(path))
    first = (str(exc).splitlines() or [type(exc).__name__])[0][:160]
    return FigkitError(f"image cannot be read ({type(exc).__name__}: {first})", value=str(path))


def parse_svg(path: Path):
    """The root element of an SVG file, parsed without entity declarations: entities (internal
    ones expand exponentially, external ones read other files or the network) are refused before
    parsing, and ElementTree itself fetches nothing (no external DTD, no XInclude, no
    stylesheet).  figkit's own SVG files are UTF-8 and declare no entities."""
    import xml.etree.ElementTree as ET
    path = checked_file(path, "SVG file")
    data = path.read_bytes()
    if data.startswith((b"\xff\xfe", b"\xfe\xff")) or b"\x00" in data[:1024]:
        raise FigkitError("SVG file is not UTF-8 (figkit writes UTF-8)", value=str(path))
    # matplotlib writes a DOCTYPE naming the public SVG 1.1 DTD, which expat never fetches;
    # an internal subset (where entities are declared) is refused.
    if b"<!ENTITY" in data or re.search(rb"<!DOCTYPE[^>\[]*\[", data):
        raise FigkitError("SVG file declares entities (a document type declaration with an "
                          "internal subset); figkit reads SVG without them", value=str(path))
    try:
        return ET.fromstring(data)
    except ET.ParseError as exc:
        raise FigkitError(f"SVG file is not well-formed XML: {exc}", value=str(path)) from None
    except RecursionError:
        raise FigkitError("SVG file nests its elements too deeply", value=str(path)) from None


def read_json_object(path: Path, what: str = "sidecar") -> dict:
    """A JSON object from ``path`` (a sidecar); one line for a folder, a pipe, bad bytes, bad
    JSON, or JSON that is not an object."""
    import json
    path = checked_file(path, what)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except UnicodeDecodeError as exc:
        raise FigkitError(f"{what} is not UTF-8 (byte offset {exc.start})", value=str(path)) from None
    except (ValueError, RecursionError) as exc:   # JSONDecodeError, or an int of 4,300+ digits
        raise FigkitError(f"{what} is not valid JSON: {str(exc)[:120]}", value=str(path)) from None
    except OSError as exc:
        raise FigkitError(f"{what} cannot be read ({exc.strerror or type(exc).__name__})",
                          value=str(path)) from None
    if not isinstance(data, dict):
        raise FigkitError(f"{what} is JSON but not an object", value=str(path))
    return data
