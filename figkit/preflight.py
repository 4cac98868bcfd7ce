"""Preflight: read a figure's output files back and check them against journal artwork rules.

Every check here opens the written file (PDF objects, SVG elements, raster headers) rather than
trusting what figkit noted while drawing, so a file edited, re-saved or copied in by hand is judged
on what it actually holds.

Limits and where they come from (section and table numbers from memory):

* PDF user space: 1 unit = 1/72 inch (ISO 32000-1:2008, 8.3.2.3), times the page's /UserUnit
  (ISO 32000-1, Table 30).
* A font is embedded when its font descriptor holds /FontFile (Type 1), /FontFile2 (TrueType) or
  /FontFile3 (CFF / OpenType) (ISO 32000-1, 9.8 Table 122 and 9.9 Table 126); a composite (Type0)
  font keeps its descriptor in its descendant CIDFont (9.7.4).  A font of /Subtype /Type3 defines
  its glyphs as content streams in the file (9.6.5): embedded, but refused by some production
  systems, so it is reported on its own.
* SVG lengths: the user unit is the CSS px, 1 in = 96 px = 72 pt (CSS Values and Units Level 3,
  5.2); matplotlib writes ``width="...pt"`` with an equal viewBox, so there one user unit is 1 pt.
  Transforms scale strokes and text by sqrt(|det|) of their linear part (SVG 1.1, 7.4-7.6).
* An image inside a PDF fills the unit square mapped by the current transformation matrix
  (ISO 32000-1, 8.9.4), an SVG <image> its width x height in user units (SVG 1.1, 5.7): pixels
  over that size on the page are the resolution a raster layer (rasterised points) prints at.
* PNG resolution is stored as whole pixels per metre in pHYs (ISO/IEC 15948:2004, 11.3.5.3), so a
  600 dpi file reads back as 599.9988 dpi; a tolerance of one pixel per metre (0.0254 dpi) allows it.
* Resolution by artwork kind, common practice in journal author guides: 300 dpi halftone, 500-600
  combination (text and lines over tone), 1000-1200 line art.  Files under about 10 MB (common
  practice).  RGB unless the journal asks otherwise (common practice).
"""
from __future__ import annotations

import math
import re
from pathlib import Path

from .errors import FigkitError

MM_PER_INCH = 25.4
MM_PER_PT = MM_PER_INCH / 72.0           # ISO 32000-1, 8.3.2.3
WIDTH_TOLERANCE_MM = 0.1
PIXEL_TOLERANCE = 1.0                    # renderers round the canvas to whole pixels
DPI_TOLERANCE = 0.03                     # pHYs stores whole pixels per metre (0.0254 dpi steps)

# Common practice in journal author guides (no single source).
DPI_BY_ARTWORK = {"halftone": 300, "combination": 500, "line art": 1000}
DEFAULT_MIN_DPI = DPI_BY_ARTWORK["combination"]   # plots are text and lines over filled areas
DEFAULT_MAX_BYTES = 10_000_000
# Colour-vision conditions judged for separability.  Greyscale is reported but not judged:
# palettes chosen for hue at similar lightness (Okabe & Ito 2008) are not meant to survive it.
JUDGED_VISION = ("normal", "protan", "deutan", "tritan")

FORMATS = {"pdf": "pdf", "png": "png", "svg": "svg", "tif": "tiff", "tiff": "tiff"}

_SVG_NS = "{http://www.w3.org/2000/svg}"
# CSS absolute units in px (CSS Values and Units Level 3, 5.2: 1in = 96px = 72pt = 2.54cm).
_PX_PER = {"": 1.0, "px": 1.0, "pt": 96 / 72, "pc": 16.0, "in": 96.0, "cm": 96 / 2.54,
           "mm": 96 / 25.4, "q": 96 / 101.6}
_LENGTH = re.compile(r"^\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([a-zA-Z%]*)\s*$")
_TRANSFORM = re.compile(r"(matrix|translate|scale|rotate|skewX|skewY)\s*\(([^)]*)\)")
_SHAPES = {"path", "line", "polyline", "polygon", "rect", "circle", "ellipse", "use"}
_NOT_DRAWN = {"clipPath", "mask", "metadata", "title", "desc", "style", "script", "symbol", "marker"}


def _check(name: str, passed: bool, value, limit, message: str, *, file: str | None = None,
           level: str = "error") -> dict:
    return {"name": name, "passed": bool(passed), "value": value, "limit": limit,
            "message": message, "file": file, "level": level}


# --------------------------------------------------------------------------------------------- PDF

def pdf_facts(path: Path) -> dict:
    """Page sizes (mm) and fonts of a PDF, read with pypdf.

    width_mm = (x1 - x0) * UserUnit * 25.4 / 72 of the MediaBox (ISO 32000-1, 8.3.2.3, Table 30),
    with width and height swapped for /Rotate 90 or 270.  Fonts are collected from every page's
    resources and, recursively, from form XObjects, patterns and Type 3 fonts' own resources.
    """
    try:
        from pypdf import PdfReader
        from pypdf.generic import IndirectObject
    except ImportError:  # pragma: no cover - pypdf is a runtime dependency
        raise FigkitError("preflight of PDF files needs pypdf (pip install pypdf)") from None

    reader = PdfReader(str(path))
    pages, fonts, seen = [], {}, set()

    def key(ref):
        return (ref.idnum, ref.generation) if isinstance(ref, IndirectObject) else ("direct", id(ref))

    def font_entry(font) -> dict:
        subtype = str(font.get("/Subtype", ""))
        name = str(font.get("/BaseFont", font.get("/Name", "(unnamed)"))).lstrip("/")
        if subtype == "/Type3":
            return {"name": name, "subtype": "Type3", "embedded": True}
        descriptor = font.get("/FontDescriptor")
        if subtype == "/Type0":
            descendants = font.get("/DescendantFonts") or []
            if len(descendants):
                descriptor = descendants[0].get_object().get("/FontDescriptor")
        descriptor = descriptor.get_object() if descriptor is not None else None
        embedded = descriptor is not None and any(
            k in descriptor for k in ("/FontFile", "/FontFile2", "/FontFile3"))
        return {"name": name, "subtype": subtype.lstrip("/"), "embedded": bool(embedded)}

    def walk(resources) -> None:
        resources = resources.get_object() if resources is not None else None
        if not resources:
            return
        for ref in (resources.get("/Font") or {}).values():
            k = key(ref)
            if k in seen:
                continue
            seen.add(k)
            font = ref.get_object()
            fonts[k] = font_entry(font)
            if str(font.get("/Subtype")) == "/Type3":
                walk(font.get("/Resources"))
        for group in ("/XObject", "/Pattern"):
            for ref in (resources.get(group) or {}).values():
                k = key(ref)
                if k in seen:
                    continue
                seen.add(k)
                obj = ref.get_object()
                if hasattr(obj, "get") and obj.get("/Resources") is not None:
                    walk(obj.get("/Resources"))

    for page in reader.pages:
        box = page.mediabox
        unit = float(page.get("/UserUnit", 1.0))
        w = float(box.width) * unit * MM_PER_PT
        h = float(box.height) * unit * MM_PER_PT
        if int(page.get("/Rotate", 0) or 0) % 180:
            w, h = h, w
        pages.append({"width_mm": w, "height_mm": h})
        walk(page.get("/Resources"))
    return {"pages": pages, "fonts": list(fonts.values())}


def _concat(m: list[float], ctm: list[float]) -> list[float]:
    """M x CTM for PDF matrices [a b c d e f] = [[a b 0] [c d 0] [e f 1]] (ISO 32000-1, 8.3.3-8.3.4:
    the ``cm`` operator and a form's /Matrix are applied before the current matrix)."""
    a, b, c, d, e, f = m
    A, B, C, D, E, F = ctm
    return [a * A + b * C, a * B + b * D, c * A + d * C, c * B + d * D, e * A + f * C + E, e * B + f * D + F]


# Content streams (ISO 32000-1, 7.8.2) are read as white-space separated tokens, after literal
# strings (7.3.4.2) and inline images (8.9.7, binary data) are taken out, so neither can read as
# an operator.  Only q, Q, cm, Do and the inline images matter here; a split in C and one loop
# over the tokens is ~50 times faster than parsing every operator into objects (0.3-0.8 s per
# figure, measured with pypdf's parser, which the tests use as the reference).
_LITERAL_STRING = re.compile(rb"\((?:\\.|[^\\()]|\((?:\\.|[^\\()])*\))*\)", re.S)
_INLINE_IMAGE = re.compile(rb"\bBI\b(.*?)\bID\s.*?\sEI\b", re.S)
_INLINE_SIZE = re.compile(rb"/(W|Width|H|Height)\s+(\d+)")
_DELIMITERS = re.compile(rb"([\[\]<>{}/])")   # glued to their neighbours in compact streams


def _content_tokens(data: bytes) -> tuple[list[bytes], list[tuple[float, float]]]:
    """The stream's tokens, each inline image replaced by the token b"\\inline<k>", and the
    inline images' (width, height) in pixels."""
    inline = []

    def take(m):
        size = {k.decode()[0]: float(v) for k, v in _INLINE_SIZE.findall(m.group(1))}
        inline.append((size.get("W", 0.0), size.get("H", 0.0)))
        return b" \\inline%d " % (len(inline) - 1)
    data = _INLINE_IMAGE.sub(take, _LITERAL_STRING.sub(b" () ", data))
    return _DELIMITERS.sub(rb" \1", data).split(), inline


def pdf_images(path: Path) -> list[dict]:
    """Every image painted on the pages of a PDF, with its resolution on the page.

    An image is painted into the unit square of user space mapped by the current transformation
    matrix [a b c d e f] (ISO 32000-1, 8.9.4 and 8.3.4), so its sides are |(a, b)| and |(c, d)|
    user units long; times /UserUnit they are points, and dpi = pixels * 72 / points along each
    side.  The content stream is followed through q/Q, cm and Do, into form XObjects (with their
    /Matrix) and inline images (BI/ID/EI, 8.9.7).  Tested against a walk over pypdf's parsed
    operators.
    """
    from pypdf import PdfReader

    reader = PdfReader(str(path))
    found = []

    def paint(name, w_px, h_px, ctm, unit):
        side_x = math.hypot(ctm[0], ctm[1]) * unit
        side_y = math.hypot(ctm[2], ctm[3]) * unit
        if side_x > 0 and side_y > 0:
            found.append({"name": name, "pixels": [int(w_px), int(h_px)],
                          "dpi": min(w_px * 72.0 / side_x, h_px * 72.0 / side_y)})

    def run(data: bytes, resources, ctm, unit, depth):
        resources = resources.get_object() if resources is not None else {}
        xobjects = resources.get("/XObject")
        xobjects = xobjects.get_object() if xobjects is not None else {}
        saved, seen = [], {}
        tokens, inline = _content_tokens(data)
        wanted = {b"q", b"Q", b"cm", b"Do"}
        for i, tok in enumerate(tokens):
            if tok not in wanted:
                if tok.startswith(b"\\inline"):
                    w, h = inline[int(tok[7:])]
                    if w and h:
                        paint("inline image", w, h, ctm, unit)
                continue
            if tok == b"q":
                saved.append(ctm)
            elif tok == b"Q":
                if saved:
                    ctm = saved.pop()
            elif tok == b"cm" and i >= 6:
                try:
                    ctm = _concat([float(v) for v in tokens[i - 6:i]], ctm)
                except ValueError:
                    continue            # not six numbers: not a cm this reader can follow
            elif tok == b"Do" and i >= 1 and tokens[i - 1].startswith(b"/"):
                # Point markers are forms painted thousands of times: each name is looked up,
                # and each form looked inside, once.
                name = tokens[i - 1]
                if name not in seen:
                    ref = xobjects.get(name.decode("latin-1"))
                    obj = ref.get_object() if ref is not None else None
                    kind = obj.get("/Subtype") if obj is not None else None
                    data_ = obj.get_data() if kind == "/Form" else b""
                    if kind == "/Form" and b"Do" not in data_ and b"BI" not in data_:
                        kind = None             # paints no image
                    seen[name] = (kind, obj, data_)
                kind, obj, data_ = seen[name]
                if kind == "/Image":
                    paint(name.decode("latin-1").lstrip("/"), float(obj["/Width"]), float(obj["/Height"]),
                          ctm, unit)
                elif kind == "/Form" and depth < 16:
                    mat = [float(v) for v in obj.get("/Matrix", [1, 0, 0, 1, 0, 0])]
                    run(data_, obj.get("/Resources") or resources, _concat(mat, ctm), unit, depth + 1)

    for page in reader.pages:
        contents = page.get_contents()
        if contents is not None:
            run(contents.get_data(), page.get("/Resources"), [1.0, 0.0, 0.0, 1.0, 0.0, 0.0],
                float(page.get("/UserUnit", 1.0)), 0)
    return found


def _embedded_raster_check(images: list[dict], min_dpi: float, file: str,
                           unmeasured: list | None = None) -> dict:
    """Rasterised layers inside a vector file (dense points, colour bar) meet the raster floor;
    an image that cannot be measured (a linked file: it would not travel with the SVG either)
    is a warning."""
    if unmeasured:
        return _check("embedded raster resolution", False, None, min_dpi,
                      f"{len(unmeasured)} image(s) linked or without a size, not measured "
                      f"({', '.join(unmeasured[:3])}); embed them", file=file, level="warning")
    if not images:
        return _check("embedded raster resolution", True, None, min_dpi, "no raster layers", file=file)
    low = min(images, key=lambda im: im["dpi"])
    ok = low["dpi"] >= min_dpi - DPI_TOLERANCE
    return _check("embedded raster resolution", ok, round(low["dpi"], 2), min_dpi,
                  f"{len(images)} raster layer(s), the coarsest {low['dpi']:.0f} dpi "
                  f"({low['name']}, {low['pixels'][0]} x {low['pixels'][1]} px)" +
                  ("" if ok else f", below {min_dpi:g} dpi"), file=file)


def _pdf_checks(path: Path, sizes_mm: dict, file: str, min_dpi: float) -> list[dict]:
    import logging
    import warnings
    # pypdf logs and warns about what it repairs in a damaged file; the verdict is ours to say
    # ("readable"), not a stack of library messages on the user's terminal.
    logging.getLogger("pypdf").setLevel(logging.ERROR)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            facts = pdf_facts(path)
            images = pdf_images(path)
    except FigkitError:
        raise
    except Exception as exc:  # noqa: BLE001 - any parser failure means the file cannot be judged
        return [_check("readable", False, None, "a PDF pypdf can open",
                       f"cannot read the PDF: {exc}".splitlines()[0], file=file)]
    out = [_embedded_raster_check(images, min_dpi, file)]
    loose = sorted({f["name"] for f in facts["fonts"] if not f["embedded"]})
    out.append(_check(
        "fonts embedded", not loose, loose, "FontFile, FontFile2 or FontFile3 for every font "
        "(ISO 32000-1, 9.8-9.9)",
        f"fonts not embedded: {', '.join(loose)}" if loose
        else f"all {len(facts['fonts'])} fonts embedded", file=file))
    type3 = sorted({f["name"] for f in facts["fonts"] if f["subtype"] == "Type3"})
    out.append(_check(
        "no Type 3 fonts", not type3, type3, "no font of /Subtype /Type3 (ISO 32000-1, 9.6.5)",
        f"Type 3 fonts (refused by some production systems; use pdf.fonttype 42): "
        f"{', '.join(type3)}" if type3 else "no Type 3 fonts", file=file))
    for i, page in enumerate(facts["pages"], start=1):
        out.append(_width_check(page["width_mm"], sizes_mm, file,
                                what="page" if len(facts["pages"]) == 1 else f"page {i}"))
    return out


def _width_check(width_mm: float, sizes_mm: dict, file: str, what: str) -> dict:
    name, best = min(sizes_mm.items(), key=lambda kv: abs(width_mm - float(kv[1])))
    ok = abs(width_mm - float(best)) <= WIDTH_TOLERANCE_MM
    limit = {k: float(v) for k, v in sizes_mm.items()}
    msg = (f"{what} is {width_mm:.1f} mm wide, preset '{name}'" if ok else
           f"{what} is {width_mm:.1f} mm wide, no preset within {WIDTH_TOLERANCE_MM} mm "
           f"(nearest '{name}' {float(best):g} mm)")
    return _check("width matches a preset", ok, round(width_mm, 3), limit, msg, file=file)


# --------------------------------------------------------------------------------------------- SVG

def _length(text: str, font_px: float | None = None) -> float | None:
    """A CSS length in px (SVG user units); em and % relative to ``font_px``; None if unreadable."""
    m = _LENGTH.match(text or "")
    if not m:
        return None
    number, unit = float(m.group(1)), m.group(2).lower()
    if unit in _PX_PER:
        return number * _PX_PER[unit]
    if unit == "em" and font_px is not None:
        return number * font_px
    if unit == "%" and font_px is not None:
        return number / 100 * font_px
    return None


def _declarations(style: str) -> list[tuple[str, str]]:
    out = []
    for part in (style or "").split(";"):
        if ":" in part:
            k, v = part.split(":", 1)
            out.append((k.strip().lower(), v.strip()))
    return out


def _font_shorthand_size(value: str, parent_px: float) -> float | None:
    """The size in a CSS ``font`` shorthand: [style variant weight] size[/line-height] family
    (CSS Fonts Level 3, 3.7).  A unitless number before the size is a weight, so the size is the
    first token with a unit, or else the last number before the family."""
    tokens = re.findall(r"'[^']*'|\"[^\"]*\"|[^\s,]+", value)
    numbers = []
    for tok in tokens:
        head = tok.split("/", 1)[0]
        m = _LENGTH.match(head)
        if m and m.group(2):
            return _length(head, parent_px)
        if m:
            numbers.append(float(m.group(1)))
        elif tok.lower() not in {"normal", "italic", "oblique", "small-caps", "bold", "bolder",
                                 "lighter"}:
            break
    return numbers[-1] if numbers else None


def _transform_det(text: str) -> float:
    """|det| of the linear part of an SVG transform list (SVG 1.1, 7.6): the area scale."""
    det = 1.0
    for op, args in _TRANSFORM.findall(text or ""):
        v = [float(a) for a in re.split(r"[\s,]+", args.strip()) if a]
        if op == "matrix" and len(v) == 6:
            det *= v[0] * v[3] - v[1] * v[2]
        elif op == "scale" and v:
            det *= v[0] * (v[1] if len(v) > 1 else v[0])
        # translate, rotate, skewX and skewY keep areas
    return abs(det)


def _pt_per_user_unit(root) -> float:
    vb = (root.get("viewBox") or "").replace(",", " ").split()
    width_px = _length(root.get("width", ""))
    if len(vb) == 4 and width_px is not None and float(vb[2]) > 0:
        return width_px * 0.75 / float(vb[2])      # 1 px = 0.75 pt (CSS 96 px per inch)
    return 0.75


def svg_facts(path: Path) -> dict:
    """Width (pt), smallest text (pt) and thinnest drawn stroke (pt) of an SVG file.

    size_pt = size_user * sqrt(|det T|) * pt_per_user, with T the product of the element's and its
    ancestors' transforms and pt_per_user = width / viewBox width (SVG 1.1, 7.2 and 7.5).  stroke,
    stroke-width and font-size inherit (SVG 1.1, chapter 6 and its property index); the style attribute
    overrides presentation attributes (SVG 1.1, 6.4).  Strokes that are none, of width 0 or fully
    transparent are not drawn and are ignored; so is content of clip paths, masks and metadata.
    """
    from .files import parse_svg
    root = parse_svg(path)          # no DTD, no entities, nothing fetched (figkit.files)
    scale = _pt_per_user_unit(root)
    width_px = _length(root.get("width", ""))
    smallest, thinnest, n_text, images, unmeasured = None, None, 0, [], []
    state0 = {"stroke": "none", "stroke-width": 1.0, "stroke-opacity": 1.0, "font": 16.0,
              "det": 1.0, "hidden": False, "where": ""}
    stack = [(root, state0)]
    while stack:
        el, parent = stack.pop()
        tag = el.tag.rsplit("}", 1)[-1] if isinstance(el.tag, str) else ""
        if tag in _NOT_DRAWN or not tag:
            continue
        st = dict(parent)
        st["where"] = el.get("id") or parent["where"]
        st["det"] = parent["det"] * _transform_det(el.get("transform", ""))
        decls = [(k, el.get(k)) for k in ("stroke", "stroke-width", "stroke-opacity", "font-size",
                                           "opacity", "display", "visibility") if el.get(k) is not None]
        decls += _declarations(el.get("style", ""))
        opacity = 1.0
        skip = False
        for k, v in decls:
            if k == "stroke":
                st["stroke"] = v.lower()
            elif k == "stroke-width":
                # a percentage is of the viewport diagonal (SVG 1.1, 7.10): not used by matplotlib
                w = None if v.strip().endswith("%") else _length(v, st["font"])
                if w is not None:
                    st["stroke-width"] = w
            elif k == "stroke-opacity":
                st["stroke-opacity"] = _number(v, 1.0)
            elif k == "font-size":
                s = _length(v, parent["font"])
                if s is not None:
                    st["font"] = s
            elif k == "font":
                s = _font_shorthand_size(v, parent["font"])
                if s is not None:
                    st["font"] = s
            elif k == "opacity":
                opacity = _number(v, 1.0)
            elif k == "display" and v.strip() == "none":
                skip = True
            elif k == "visibility":
                st["hidden"] = v.strip() in ("hidden", "collapse")
        if skip or opacity <= 0:
            continue
        factor = math.sqrt(st["det"]) * scale
        if tag in _SHAPES and not st["hidden"]:
            width = st["stroke-width"] * factor
            if st["stroke"] not in ("none", "transparent") and st["stroke-opacity"] > 0 and width > 0:
                if thinnest is None or width < thinnest[0]:
                    thinnest = (width, f"{tag} in {st['where']}" if st["where"] else tag)
        if tag == "image" and not st["hidden"]:
            shown = _image_pixels(el)
            w, h = _length(el.get("width", "")), _length(el.get("height", ""))
            if shown and w and h:       # factor: points on the page per user unit here
                images.append({"name": el.get("id") or "image", "pixels": list(shown),
                               "dpi": min(shown[0] * 72.0 / (w * factor), shown[1] * 72.0 / (h * factor))})
            else:                       # a linked file, or no size given: cannot be judged
                unmeasured.append(el.get("id") or "image")
        if tag in ("text", "tspan") and not st["hidden"]:
            own = (el.text or "") + "".join(child.tail or "" for child in el)
            if own.strip():
                n_text += 1
                size = st["font"] * factor
                if smallest is None or size < smallest[0]:
                    smallest = (size, " ".join(own.split())[:40])
        for child in reversed(list(el)):
            stack.append((child, st))
    return {"width_pt": width_px * 0.75 if width_px is not None else None,
            "smallest_text": smallest, "thinnest_stroke": thinnest, "n_text": n_text, "images": images,
            "images_unmeasured": unmeasured}


def _image_pixels(el) -> tuple[int, int] | None:
    """Pixel size of an SVG <image> embedded as a data: URL (RFC 2397), read with Pillow;
    None for linked files (not judged here)."""
    import base64
    import binascii
    import io
    href = el.get("{http://www.w3.org/1999/xlink}href") or el.get("href") or ""
    if not href.startswith("data:") or ";base64," not in href:
        return None
    import warnings
    from PIL import Image
    data = href.split(",", 1)[1]
    try:
        # The pixel size is in the image's header: a PNG's IHDR ends at byte 24 (PNG spec,
        # 5.2-5.3), so 64 base64 characters (48 bytes) are decoded instead of the whole layer.
        start = "".join(data[:128].split())[:64]     # matplotlib starts the data on a new line
        head = base64.b64decode(start) if len(start) == 64 else b""
        if head[:8] == b"\x89PNG\r\n\x1a\n" and head[12:16] == b"IHDR":
            return int.from_bytes(head[16:20], "big"), int.from_bytes(head[20:24], "big")
        with warnings.catch_warnings():   # a bomb's size is read from its header, never decoded
            warnings.simplefilter("ignore", Image.DecompressionBombWarning)
            with Image.open(io.BytesIO(base64.b64decode(data))) as im:
                return im.width, im.height
    except (binascii.Error, OSError, ValueError, SyntaxError, Image.DecompressionBombError):
        return None


def _number(text: str, default: float) -> float:
    try:
        return float(text)
    except (TypeError, ValueError):
        return default


def _svg_checks(path: Path, sizes_mm: dict, min_text_pt: float, min_line_pt: float,
                file: str, min_dpi: float) -> list[dict]:
    try:
        facts = svg_facts(path)
    except FigkitError as exc:      # not well-formed, a DTD, not UTF-8 (figkit.files.parse_svg)
        return [_check("readable", False, None, "well-formed SVG", exc.message, file=file)]
    out = []
    small = facts["smallest_text"]
    if small is None:
        out.append(_check("smallest text", True, None, min_text_pt,
                          "no text elements (text drawn as outlines cannot be measured)", file=file))
    else:
        ok = small[0] >= min_text_pt - 1e-6
        out.append(_check("smallest text", ok, round(small[0], 3), min_text_pt,
                          f"smallest text is {small[0]:.2f} pt ('{small[1]}')"
                          + ("" if ok else f", below {min_text_pt:g} pt"), file=file))
    thin = facts["thinnest_stroke"]
    if thin is None:
        out.append(_check("thinnest line", True, None, min_line_pt, "no stroked lines", file=file))
    else:
        ok = thin[0] >= min_line_pt - 1e-6
        out.append(_check("thinnest line", ok, round(thin[0], 4), min_line_pt,
                          f"thinnest line is {thin[0]:.3g} pt ({thin[1]})"
                          + ("" if ok else f", below {min_line_pt:g} pt"), file=file))
    if facts["width_pt"] is not None:
        out.append(_width_check(facts["width_pt"] * MM_PER_PT, sizes_mm, file, what="drawing"))
    out.append(_embedded_raster_check(facts["images"], min_dpi, file, facts["images_unmeasured"]))
    return out


# ------------------------------------------------------------------------------------------ raster

def raster_facts(path: Path) -> dict:
    """Pixel size, mode and resolution (dpi as Pillow reads pHYs or the TIFF resolution tags)."""
    from .files import open_image
    with open_image(path) as im:     # header only; a bomb or a damaged file is one line
        dpi = im.info.get("dpi")
        return {"format": im.format, "mode": im.mode, "width_px": im.width, "height_px": im.height,
                "dpi": (float(dpi[0]), float(dpi[1])) if dpi else None}


def _raster_checks(path: Path, sizes_mm: dict, min_dpi: float, file: str) -> list[dict]:
    try:
        facts = raster_facts(path)
    except Exception as exc:  # noqa: BLE001 - Pillow raises several types for damaged files
        return [_check("readable", False, None, "an image Pillow can open",
                       f"cannot read the image: {exc}".splitlines()[0], file=file)]
    out = []
    dpi = min(facts["dpi"]) if facts["dpi"] else None
    if dpi is None or dpi <= 0:
        out.append(_check("raster resolution", False, None, min_dpi,
                          "the file records no resolution (no pHYs / resolution tags)", file=file))
    else:
        ok = dpi >= min_dpi - DPI_TOLERANCE
        out.append(_check("raster resolution", ok, round(dpi, 2), min_dpi,
                          f"{dpi:.0f} dpi" + ("" if ok else f", below {min_dpi:g} dpi (common "
                                               "practice: 300 halftone, 500-600 combination, "
                                               "1000-1200 line art)"), file=file))
    ok = facts["mode"] in ("RGB", "RGBA")
    out.append(_check("RGB colour space", ok, facts["mode"], ["RGB", "RGBA"],
                      f"image mode {facts['mode']}" + ("" if ok else ", not RGB"), file=file))
    if dpi:
        expected = {k: float(v) * dpi / MM_PER_INCH for k, v in sizes_mm.items()}
        name, px = min(expected.items(), key=lambda kv: abs(facts["width_px"] - kv[1]))
        ok = abs(facts["width_px"] - px) <= PIXEL_TOLERANCE
        width_mm = facts["width_px"] / dpi * MM_PER_INCH
        out.append(_check(
            "width matches a preset", ok, facts["width_px"], {k: round(v, 1) for k, v in expected.items()},
            f"{facts['width_px']} px at {dpi:.0f} dpi = {width_mm:.1f} mm, " +
            (f"preset '{name}'" if ok else f"no preset within {PIXEL_TOLERANCE:g} px "
                                           f"(nearest '{name}' {px:.1f} px)"), file=file))
    return out


# ------------------------------------------------------------------------------------------ colour

def _colour_check(min_delta_e: dict, threshold: float, strict: bool,
                  conditions: tuple[str, ...]) -> dict:
    level = "error" if strict else "warning"
    judged = {k: v for k, v in min_delta_e.items() if k in conditions and v is not None}
    others = {k: v for k, v in min_delta_e.items() if k not in conditions and v is not None}
    note = "".join(f"; {k} {v:.1f} (not judged)" for k, v in others.items())
    limit = f"CIEDE2000 >= {threshold:g} (common practice)"
    if not judged:
        return _check("colour separability", True, None, limit,
                      "fewer than two categorical colours: nothing to tell apart", level=level)
    worst = min(judged, key=judged.get)
    ok = judged[worst] >= threshold
    summary = ", ".join(f"{k} {v:.1f}" for k, v in judged.items())
    return _check("colour separability", ok, {k: round(v, 3) for k, v in judged.items()}, limit,
                  (f"closest colour pair {judged[worst]:.1f} under {worst} vision" if ok else
                   f"colours too close under {worst} vision: {judged[worst]:.1f} < {threshold:g}")
                  + f" ({summary}{note})", level=level)


# --------------------------------------------------------------------------------------- public API

def _positive(name: str, value, *, integer: bool = False) -> None:
    kinds = (int,) if integer else (int, float)
    if isinstance(value, bool) or not isinstance(value, kinds) or not math.isfinite(value) or value <= 0:
        raise FigkitError("preflight: must be a positive number", field=name, value=value,
                          allowed="a number above 0")


def preflight(files: dict, *, sizes_mm: dict, min_text_pt: float, min_line_pt: float,
              min_dpi: int, max_bytes: int = DEFAULT_MAX_BYTES, min_delta_e: dict | None = None,
              delta_e_threshold: float = 10.0, strict: bool = False,
              judged_vision: tuple[str, ...] = JUDGED_VISION, names: dict | None = None) -> dict:
    """Check written figure files against artwork rules by reading them back.

    ``names`` (format -> file name) labels the checks when the files are still under temporary
    names, so the verdict recorded in the sidecar does not depend on them.

    ``files`` maps a format (pdf, png, svg, tiff; otherwise the file suffix decides) to a path.
    Checks: PDF fonts embedded and no Type 3 (ISO 32000-1, 9.6.5, 9.8-9.9); page, drawing and
    raster width equal to a preset, |w - preset| <= 0.1 mm with w = width_pt * 25.4 / 72, or for a
    raster |px - preset_mm * dpi / 25.4| <= 1 px; SVG smallest text and thinnest stroke in pt;
    raster dpi and RGB mode, and the resolution on the page of every raster layer inside a PDF
    or SVG (>= ``min_dpi``); size of every file <= ``max_bytes``; colour separability: the smallest
    CIEDE2000 difference (computed upstream, ``min_delta_e``) under each judged vision condition
    >= ``delta_e_threshold``, a warning unless ``strict``.

    Returns {"passed": bool, "checks": [{name, passed, value, limit, message, file, level}]};
    "passed" is False when any check of level "error" failed.  Nothing raises on a failed check;
    in strict mode the caller raises.
    """
    if not isinstance(files, dict):
        raise FigkitError("preflight: files must map a format to a path", field="files",
                          value=type(files).__name__)
    if not isinstance(sizes_mm, dict) or not sizes_mm:
        raise FigkitError("preflight: sizes_mm must map preset names to widths in mm",
                          field="sizes_mm", value=sizes_mm)
    for k, v in sizes_mm.items():
        _positive(f"sizes_mm.{k}", v)
    for name, value in (("min_text_pt", min_text_pt), ("min_line_pt", min_line_pt),
                        ("min_dpi", min_dpi), ("delta_e_threshold", delta_e_threshold)):
        _positive(name, value)
    _positive("max_bytes", max_bytes, integer=True)
    if min_delta_e is not None and not isinstance(min_delta_e, dict):
        raise FigkitError("preflight: min_delta_e must map vision conditions to numbers",
                          field="min_delta_e", value=min_delta_e)

    checks = []
    for fmt, raw in files.items():
        path = Path(raw)
        kind = FORMATS.get(str(fmt).lower().lstrip(".")) or FORMATS.get(path.suffix.lower().lstrip("."))
        label = (names or {}).get(fmt) or (
            path.name if FORMATS.get(path.suffix.lower().lstrip(".")) else f"{fmt} ({path.name})")
        if not path.is_file():
            checks.append(_check("file exists", False, None, None, "file not found", file=label))
            continue
        size = path.stat().st_size
        checks.append(_check("file size", size <= max_bytes, size, max_bytes,
                             f"{size / 1e6:.2f} MB" + ("" if size <= max_bytes else
                                                        f", above {max_bytes / 1e6:g} MB"),
                             file=label))
        from .files import MAX_FIGURE_FILE_BYTES
        if size == 0 or size > MAX_FIGURE_FILE_BYTES:   # not parsed at all: nothing to judge
            checks.append(_check("readable", False, size, MAX_FIGURE_FILE_BYTES,
                                 "empty file" if size == 0 else
                                 f"above figkit's reading limit of {MAX_FIGURE_FILE_BYTES:,} bytes",
                                 file=label))
            continue
        if kind == "pdf":
            checks += _pdf_checks(path, sizes_mm, label, min_dpi)
        elif kind == "svg":
            checks += _svg_checks(path, sizes_mm, min_text_pt, min_line_pt, label, min_dpi)
        elif kind in ("png", "tiff"):
            checks += _raster_checks(path, sizes_mm, min_dpi, label)
    if min_delta_e is not None:
        checks.append(_colour_check(min_delta_e, delta_e_threshold, strict, tuple(judged_vision)))
    return {"passed": all(c["passed"] for c in checks if c["level"] == "error"), "checks": checks}


def preflight_figure(sidecar_path: Path, style, *, strict: bool | None = None,
                     min_dpi: int | None = None, max_bytes: int = DEFAULT_MAX_BYTES,
                     delta_e_threshold: float = 10.0) -> dict:
    """Re-check the files a sidecar lists (in the sidecar's folder) with a house style's limits.

    Besides :func:`preflight`, each figure file must agree with the record: PDF page and raster
    size equal to the sidecar's size_mm (0.1 mm; 1 px at the file's dpi), and the provenance
    embedded in the file names the same id and row hash.  ``strict`` defaults to the style's.
    """
    from .provenance import read_file_metadata
    sidecar_path = Path(sidecar_path)
    if not sidecar_path.exists():
        raise FigkitError("no sidecar; build the figure first", value=str(sidecar_path))
    record = sidecar_record(sidecar_path)
    strict = bool(style.strict) if strict is None else bool(strict)
    folder = sidecar_path.parent
    # File names only: a sidecar naming '../../x' or '/etc/x' must not make preflight read there.
    files = {fmt: folder / Path(name).name for fmt, name in record["files"].items()}
    result = preflight(files, sizes_mm=style.sizes, min_text_pt=style.min_text_pt,
                       min_line_pt=style.min_line_pt,
                       min_dpi=min_dpi or getattr(style, "min_dpi", None) or DEFAULT_MIN_DPI,
                       max_bytes=max_bytes, min_delta_e=(record.get("colours") or {}).get("min_delta_e"),
                       delta_e_threshold=delta_e_threshold, strict=strict)
    checks = result["checks"]
    size_mm = record.get("size_mm")
    for fmt, path in files.items():
        if not path.is_file():
            continue
        kind = FORMATS.get(fmt)
        if size_mm and kind in ("pdf", "png", "tiff"):
            checks.append(_record_size_check(path, kind, size_mm))
        if kind:
            checks.append(_record_provenance_check(path, record, read_file_metadata))
    return {"passed": all(c["passed"] for c in checks if c["level"] == "error"), "checks": checks}


def sidecar_record(path: Path) -> dict:
    """A sidecar read for preflight: a JSON object whose ``files`` maps formats to file names
    and whose ``size_mm`` (when given) is two numbers; one line otherwise."""
    from .files import read_json_object
    record = read_json_object(path)
    files = record.get("files") or {}
    if not isinstance(files, dict) or not all(isinstance(k, str) and isinstance(v, str) and v
                                              for k, v in files.items()):
        raise FigkitError("sidecar's 'files' is not a map of formats to file names",
                          value=str(path))
    size = record.get("size_mm")
    if size is not None and not (isinstance(size, list) and len(size) == 2 and all(
            isinstance(v, (int, float)) and not isinstance(v, bool) for v in size)):
        record["size_mm"] = None        # judged by nothing rather than by a damaged record
    record["files"] = files
    return record


def _record_size_check(path: Path, kind: str, size_mm: list) -> dict:
    try:
        if kind == "pdf":
            page = pdf_facts(path)["pages"][0]
            got = [page["width_mm"], page["height_mm"]]
            ok = all(abs(g - float(s)) <= WIDTH_TOLERANCE_MM for g, s in zip(got, size_mm))
            value = [round(g, 3) for g in got]
            msg = f"{got[0]:.1f} x {got[1]:.1f} mm"
        else:
            facts = raster_facts(path)
            dpi = min(facts["dpi"]) if facts["dpi"] else None
            if not dpi:
                return _check("size matches the record", False, None, size_mm,
                              "no resolution recorded in the file", file=path.name)
            got = [facts["width_px"], facts["height_px"]]
            want = [float(s) * dpi / MM_PER_INCH for s in size_mm]
            ok = all(abs(g - w) <= PIXEL_TOLERANCE for g, w in zip(got, want))
            value = got
            msg = f"{got[0]} x {got[1]} px at {dpi:.0f} dpi (record: {want[0]:.1f} x {want[1]:.1f} px)"
    except Exception as exc:  # noqa: BLE001 - reported by the format's own "readable" check
        return _check("size matches the record", False, None, size_mm, f"cannot read: {exc}",
                      file=path.name)
    return _check("size matches the record", ok, value, size_mm,
                  msg + ("" if ok else f", record says {size_mm[0]:g} x {size_mm[1]:g} mm"),
                  file=path.name)


def _record_provenance_check(path: Path, record: dict, reader) -> dict:
    want = {"id": record.get("id"), "row_sha256": record.get("row_sha256")}
    try:
        meta = reader(path)
    except FigkitError as exc:
        return _check("provenance matches the record", False, None, want, exc.message, file=path.name)
    got = {k: meta.get(k) for k in want}
    ok = got == want
    return _check("provenance matches the record", ok, got, want,
                  "file names the same figure and row" if ok else
                  f"file names figure '{got['id']}' (row hash {str(got['row_sha256'])[:12]}), "
                  f"record '{want['id']}' ({str(want['row_sha256'])[:12]}): a stale or foreign file",
                  file=path.name)


def preflight_project(project, ids=(), *, strict: bool = False) -> list[tuple[str, dict]]:
    """(id, result) for each figure id (default: every sheet row) of a loaded project.

    A figure whose row cannot be read or that is not built yet gets one failed check saying so.
    ``strict`` forces strict mode; otherwise each figure's style decides.
    """
    known = [row.id for row in project.rows]
    for fid in ids:
        if fid not in known:
            raise FigkitError("no such figure in the sheet", figure=fid, allowed=known or "no rows yet")
    out = []
    for fid in ids or known:
        try:
            spec = project.spec(fid)
            style = spec.style
        except FigkitError as exc:
            out.append((fid, {"passed": False, "strict": strict, "checks": [
                _check("sheet row", False, None, None, exc.message)]}))
            continue
        use_strict = strict or bool(style.strict)
        sidecar = project.config.results / "figures" / f"{fid}.json"
        if not sidecar.is_file():
            out.append((fid, {"passed": False, "strict": use_strict, "checks": [
                _check("built", False, None, None, f"no {sidecar.name}; build the figure first")]}))
            continue
        try:
            result = preflight_figure(sidecar, style, strict=use_strict)
            result["checks"].append(_up_to_date_check(sidecar, project, spec))
        except FigkitError as exc:      # a damaged sidecar fails this figure, not the command
            out.append((fid, {"passed": False, "strict": use_strict, "checks": [
                _check("sidecar readable", False, None, None, exc.message, file=sidecar.name)]}))
            continue
        result["passed"] = result["passed"] and result["checks"][-1]["passed"]
        result["strict"] = use_strict
        out.append((fid, result))
    if not ids:     # figure files whose row is gone: still in the folder, in no build
        folder = project.config.results / "figures"
        for sidecar in sorted(folder.glob("*.json")) if folder.is_dir() else []:
            if sidecar.stem not in known:
                out.append((sidecar.stem, {"passed": True, "strict": False, "checks": [_check(
                    "in the sheet", False, sidecar.stem, known, f"{sidecar.stem}.* are from a "
                    "figure no longer in the sheet; delete them if they are not wanted",
                    level="warning")]}))
    return out


def _up_to_date_check(sidecar: Path, project, spec) -> dict:
    """The figure was built from the data file, sheet row, style files and settings as they are
    now (:func:`changes_since_built`), so a figure left behind by a failed or partial build is
    caught here."""
    changed = changes_since_built(sidecar_record(sidecar), project, spec)
    return _check("up to date", not changed, changed or None, "inputs and row as built",
                  ("changed since the figure was built: " + ", ".join(changed) + "; rebuild it")
                  if changed else "data files and sheet row unchanged since the build")


def changes_since_built(record: dict, project, spec, input_record=None) -> list[str]:
    """What changed since the figure of sidecar ``record`` was built: its data files, its sheet
    row (and its parts' rows), its house style's files, the settings it reads (the row's
    fingerprint, figkit's version in it).  Empty when it was built from them as they are now.
    ``input_record``: figkit.data.input_record, or a caching stand-in for it (the workflow asks
    for every figure at once, and several read the same file)."""
    from .compose import parts_fingerprint
    from .provenance import row_sha256
    from .sheet import find_row
    from .spec import fingerprint
    if input_record is None:
        from .data import input_record
    row = find_row(project.rows, spec.id)
    changed = []
    paths = spec.data_paths if hasattr(spec, "parts") else [spec.data_path]   # parts: every part's
    now_inputs = []
    for path in paths:
        if not path.is_file():
            changed.append(f"{path.name} (missing)")
            continue
        now = input_record(path, project.config.root)   # hashes the file once
        now_inputs.append(now)
        if now not in (record.get("inputs") or []):
            changed.append(now["path"])
    if not changed and len(now_inputs) != len(record.get("inputs") or []):
        changed.append("its data files (another set)")
    if row_sha256(row.cells) != record.get("row_sha256"):
        changed.append("its sheet row")
    for part, now_row in zip(record.get("parts") or [], getattr(spec, "part_rows", ())):
        if part.get("id") != now_row.id or part.get("row_sha256") != row_sha256(now_row.cells):
            changed.append(f"the sheet row of its part '{now_row.id}'")
    style = record.get("style") or {}
    if style.get("name") != spec.style.name:
        changed.append(f"its house style ({style.get('name')} -> {spec.style.name})")
    else:
        changed += [f"style file {name}" for name, digest in spec.style.digest().items()
                    if (style.get("files") or {}).get(name) != digest]
    # The fingerprint also holds the row: settings are named only when the row is unchanged.
    if (not any("sheet row" in c for c in changed) and record.get("fingerprint") is not None
            and record["fingerprint"] != (parts_fingerprint(row, project.config, project.rows)
                                          if hasattr(spec, "parts") else fingerprint(row, project.config))):
        changed.append("settings it reads in config.yaml (or figkit's version)")
    return changed


def failure_lines(figure_id: str, result: dict) -> list[str]:
    """One line per failed check: ``<id>: <file>: <check>: <message>`` (warnings marked)."""
    lines = []
    for c in result["checks"]:
        if not c["passed"]:
            where = f"{c['file']}: " if c.get("file") else ""
            tag = " (warning)" if c["level"] == "warning" else ""
            lines.append(f"{figure_id}: {where}{c['name']}: {c['message']}{tag}")
    return lines
