"""Stage 8, provenance: the sidecar JSON, versions, hashes, and atomic writing of every output.

Outputs are written to hidden temporary files beside their targets and renamed into place only
when all of them are complete, so a failed render never leaves a half-written figure.
"""
from __future__ import annotations

import hashlib
import json
import math
import os
import platform
import re
import tempfile
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from . import __version__

SIDECAR_VERSION = 1
_UMASK = os.umask(0)
os.umask(_UMASK)


def versions() -> dict:
    import matplotlib
    import pandas
    import PIL
    out = {"figkit": __version__, "python": platform.python_version(),
           "matplotlib": matplotlib.__version__, "numpy": np.__version__, "pandas": pandas.__version__,
           "pillow": PIL.__version__}
    try:
        from importlib.metadata import version
        out["snakemake"] = version("snakemake")
    except Exception:  # noqa: BLE001 - snakemake absent in a notebook-only install
        out["snakemake"] = None
    return out


def font_file(family: str) -> str:
    """The font file matplotlib resolves for ``family`` (its name only: no absolute paths)."""
    from matplotlib import font_manager
    path = font_manager.findfont(font_manager.FontProperties(family=family), fallback_to_default=True)
    return Path(path).name


def sha256_file(path: Path, chunk: int = 1 << 20) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(chunk), b""):
            h.update(block)
    return h.hexdigest()


def sha256_text(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def row_sha256(cells: dict) -> str:
    """The sidecar's ``row_sha256``: SHA-256 of the row's cells as sorted JSON."""
    return sha256_text(json.dumps(cells, sort_keys=True, ensure_ascii=False))


def settings_sha256(settings: dict) -> str:
    """The sidecar's ``settings.sha256``: SHA-256 of the settings (defaults filled) as sorted JSON."""
    return sha256_text(json.dumps(settings, sort_keys=True, ensure_ascii=False, default=str))


def clean(value):
    """JSON-ready copy: numpy scalars to Python, NaN/inf to None, floats rounded to 10 significant
    digits so the sidecar is stable across platforms' last-bit differences."""
    if isinstance(value, dict):
        return {str(k): clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [clean(v) for v in value]
    if isinstance(value, np.ndarray):
        return [clean(v) for v in value.tolist()]
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (float, np.floating)):
        f = float(value)
        if not math.isfinite(f):
            return None
        return float(f"{f:.10g}")
    if isinstance(value, Path):
        return value.as_posix()
    return value


def dumps(record: dict) -> str:
    return json.dumps(clean(record), indent=2, ensure_ascii=False, sort_keys=False) + "\n"


# Temporary files are named .<target>.<host>~<pid>.<random>.part: a later build can tell those of
# a process that died on this host (killed mid-write) from those of one still writing.
_HOST = re.sub(r"[^A-Za-z0-9_-]", "-", platform.node() or "host")[:40]
_PART = re.compile(r"^\.(?P<target>.+)\.(?P<host>[A-Za-z0-9_-]+)~(?P<pid>\d+)\.[^.]+\.part$")
# A temporary file in figkit's older naming (no host or process) is removed once this old.
LEFTOVER_AGE_S = 24 * 3600


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)             # signal 0: existence check only (POSIX kill(2))
    except ProcessLookupError:
        return False
    except PermissionError:
        return True                 # someone else's process
    return True


def remove_leftovers(folder: Path, names=None) -> list[Path]:
    """Delete the ``.part`` files a killed build left in ``folder`` (for targets in ``names``
    only, when given): those of a process of this host that no longer runs, and unmarked ones
    older than LEFTOVER_AGE_S.  Those of a live process or another host are kept.  Returns the
    files removed."""
    import time
    removed = []
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return removed
    for e in entries:
        if not (e.name.startswith(".") and e.name.endswith(".part")) or not e.is_file(follow_symlinks=False):
            continue
        m = _PART.match(e.name)
        if names is not None and not any(e.name.startswith(f".{n}.") for n in names):
            continue
        if m:
            stale = m["host"] == _HOST and not _alive(int(m["pid"]))
        else:
            try:
                stale = time.time() - e.stat(follow_symlinks=False).st_mtime > LEFTOVER_AGE_S
            except OSError:
                stale = False
        if stale:
            try:
                os.unlink(e.path)
                removed.append(Path(e.path))
            except OSError:
                pass
    return removed


@contextmanager
def atomic_outputs(targets: list[Path]):
    """Yield temporary paths for ``targets``; rename them into place only if the block succeeds.
    The last target is renamed last (figkit puts the sidecar there), so a sidecar never
    describes files that are not yet in place; leftovers of killed builds for the same targets
    are removed first (:func:`remove_leftovers`)."""
    temps = []
    try:
        for folder in dict.fromkeys(t.parent for t in targets):
            remove_leftovers(folder, [t.name for t in targets if t.parent == folder])
        for t in targets:
            t.parent.mkdir(parents=True, exist_ok=True)
            fd, tmp = tempfile.mkstemp(prefix=f".{t.name}.{_HOST}~{os.getpid()}.", suffix=".part",
                                       dir=t.parent)
            os.close(fd)
            os.chmod(tmp, 0o666 & ~_UMASK)   # mkstemp makes 0600; outputs get the usual mode
            temps.append(Path(tmp))
        yield temps
        for tmp, t in zip(temps, targets):
            os.replace(tmp, t)
        temps = []
    finally:
        for tmp in temps:
            try:
                tmp.unlink()
            except FileNotFoundError:
                pass


def file_metadata(record: dict) -> dict:
    """The essentials embedded in each figure file, so a file found alone still says where it came
    from: id, inputs with hashes, versions, row hash and the rebuild command."""
    keep = {k: record.get(k) for k in ("id", "inputs", "row_sha256", "rebuild", "versions")}
    return clean(keep)


# The provenance text embedded in a file is read up to this many bytes (figkit writes ~2 kB).
MAX_PROVENANCE_BYTES = 2 ** 20
# Trailers of a complete file: PDF ends with %%EOF (ISO 32000-1, 7.5.5), PNG with its IEND chunk,
# length 0, type IEND, CRC AE 42 60 82 (ISO/IEC 15948, 11.2.5).
_PDF_END = b"%%EOF"
_PNG_END = b"\x00\x00\x00\x00IEND\xaeB`\x82"


def _check_complete(path: Path, kind: str) -> None:
    """A PDF or PNG cut short (a copy or download that stopped) is refused, not half-read."""
    from .errors import FigkitError
    if kind not in ("pdf", "png"):
        return
    with open(path, "rb") as fh:
        fh.seek(max(0, path.stat().st_size - 1024))
        tail = fh.read().rstrip(b"\r\n\t\f\x00 ")
    if not tail.endswith(_PDF_END if kind == "pdf" else _PNG_END):
        raise FigkitError(f"{kind.upper()} file is cut short (it does not end with "
                          f"{'%%EOF' if kind == 'pdf' else 'the IEND chunk'})", value=path.name)


def _pdf_literal(data: bytes, start: int) -> str:
    """Decode a PDF literal string starting just after its '(' (ISO 32000-1, 7.3.4.2).  A file
    cut short inside the string ends it there; bytes that are not UTF-16 are replaced."""
    out, depth, i = bytearray(), 1, start
    end = min(len(data), start + MAX_PROVENANCE_BYTES)    # figkit's own text is a few kB
    escapes = {ord("n"): b"\n", ord("r"): b"\r", ord("t"): b"\t", ord("b"): b"\b", ord("f"): b"\f"}
    while i < end:
        c = data[i]
        if c == ord("\\"):
            if i + 1 >= end:
                break
            nxt = data[i + 1]
            if nxt in escapes:
                out += escapes[nxt]
                i += 2
            elif ord("0") <= nxt <= ord("7"):
                j = i + 1
                while j < min(i + 4, end) and ord("0") <= data[j] <= ord("7"):
                    j += 1
                out.append(int(data[i + 1:j], 8) & 0xFF)
                i = j
            else:
                out.append(nxt)
                i += 2
            continue
        if c == ord("("):
            depth += 1
        elif c == ord(")"):
            depth -= 1
            if depth == 0:
                break
        out.append(c)
        i += 1
    if out[:2] == b"\xfe\xff":
        return out[2:].decode("utf-16-be", errors="replace")
    return out.decode("latin-1")


def read_file_metadata(path: Path) -> dict:
    """The provenance embedded in a figure file (PNG text chunk, PDF document information, SVG
    metadata, TIFF description), as a dict.  Works on a file copied away from its project.
    Hostile files (truncated, empty, a folder, a renamed file, an image bomb, an SVG with
    entities) give one line (figkit.files); nothing but the file itself is read."""
    from .errors import FigkitError
    from .files import figure_kind, open_image, open_image_error, parse_svg
    path, kind = figure_kind(path)
    _check_complete(path, kind)
    text = None
    if kind in ("png", "tiff"):
        im = open_image(path)
        try:
            with im:
                text = im.text.get("figkit") if kind == "png" else im.tag_v2.get(270)
        except Exception as exc:  # noqa: BLE001 - a damaged chunk or tag: Pillow's many types
            raise open_image_error(exc, path) from None
    elif kind == "pdf":
        data = path.read_bytes()
        at = data.rfind(b"/Subject (")
        if at >= 0:
            text = _pdf_literal(data, at + len(b"/Subject ("))
    else:
        node = parse_svg(path).find(".//{http://purl.org/dc/elements/1.1/}description")
        text = node.text if node is not None else None
    if not isinstance(text, str) or not text:
        raise FigkitError("this file carries no figkit provenance", value=path.name)
    try:
        meta = json.loads(text)
    except (ValueError, RecursionError):
        raise FigkitError("this file's figkit provenance is damaged", value=path.name) from None
    if not isinstance(meta, dict):
        raise FigkitError("this file's figkit provenance is damaged", value=path.name)
    return meta
