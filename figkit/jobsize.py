"""How big one figure job is, from what it will read: the memory (``mem_mb``) and time
(``runtime``, minutes) the workflow asks of a cluster for it, and the memory ceiling check.

Memory is a fixed start-up cost plus the cells the job holds: rows (estimated from the file,
see :func:`estimate_rows`) times the columns the row reads (:meth:`FigureSpec.columns_needed`)
times bytes per cell for the chart kind.  A streamed figure (``data.should_stream``) holds one
chunk of rows at a time, so its memory does not grow with the file.  The coefficients were
measured: peak resident memory of ``figkit render`` on the demo data at 210,240 and 2,102,400
readings (GNU time's maximum RSS), growth per extra row and column read, times 1.5 for headroom.
"""
from __future__ import annotations

import gzip
import math
from dataclasses import dataclass
from pathlib import Path

from .errors import FigkitError

BASE_MB = 400            # measured: small demo figures peak at 200-300 MB (interpreter, libraries)
# Measured growth per row and column read (bytes): scatter/hexbins 45, density 52, histogram 89,
# box 119; x1.5 headroom.  Counts charts, unmeasured, take the histogram's; means and lines, the box's.
BYTES_PER_CELL = {"scatter": 72, "hexbins": 72, "density": 80, "histogram": 135,
                  "count-bars": 135, "shares": 135, "tiles": 135, "box": 180, "violin": 180, "means": 180, "lines": 180}
LOESS_BYTES_PER_CELL = 180
# Measured seconds per million rows beyond the start-up (same runs): scatter/hexbins 0.5,
# histogram 0.7, box 1.3, LOESS 4.3; a cluster node may be slower and busier, so x10.
SECONDS_PER_MILLION = {"scatter": 5, "hexbins": 5, "density": 10, "histogram": 7, "count-bars": 7,
                       "shares": 7, "tiles": 7, "box": 13, "violin": 13, "means": 13, "lines": 13}
LOESS_SECONDS_PER_MILLION = 45
MIN_RUNTIME = 5          # minutes; start-up alone is a few seconds, queues round up anyway
UNKNOWN_ROWS = 10_000_000   # a dataset a rule of the workflow has not made yet
HEAD_BYTES = 1 << 18     # bytes read from the top of a text file to estimate its rows


@dataclass(frozen=True)
class JobSize:
    mem_mb: int
    runtime: int          # minutes
    rows: int             # estimated rows of the dataset
    columns: int          # columns the row reads
    streamed: bool
    rows_known: bool      # False: the file did not exist yet, UNKNOWN_ROWS was assumed

    def record(self) -> dict:
        return {"mem_mb": self.mem_mb, "runtime_min": self.runtime, "threads": 1,
                "rows_estimated": self.rows, "columns_read": self.columns,
                "streamed": self.streamed}


_ROWS: dict = {}


def estimate_rows(path: Path) -> int | None:
    """Rows of a dataset file without reading it: Parquet's footer holds the count; for CSV/TSV
    (gzip too) the file's size over the mean line length of its first 256 KiB.  None if the file
    does not exist.  Cached per file size and modification time."""
    path = Path(path)
    try:
        st = path.stat()
    except OSError:
        return None
    key = (str(path), st.st_size, st.st_mtime_ns)
    if key in _ROWS:
        return _ROWS[key]
    name = path.name.lower()
    if name.endswith(".parquet"):
        try:
            import pyarrow.parquet as pq
            rows = int(pq.read_metadata(path).num_rows)
        except Exception:   # unreadable or no pyarrow: the job itself says so in one line
            rows = None
    else:
        with (gzip.open(path, "rb") if name.endswith(".gz") else path.open("rb")) as fh:
            head = fh.read(HEAD_BYTES)
            used = fh.fileobj.tell() if name.endswith(".gz") else len(head)
        lines = head.count(b"\n")
        if len(head) < HEAD_BYTES or lines < 2:          # the whole file was read
            rows = max(lines - 1 + (not head.endswith(b"\n") and bool(head)), 0)
        else:
            first = head.index(b"\n") + 1                # the header line is not a row
            per_line = (len(head) - first) / (lines - 1)
            whole = st.st_size * (len(head) / max(used, 1))   # uncompressed size, roughly
            if name.endswith(".gz"):
                whole = _gzip_size(path, whole)
            rows = int((whole - first) / per_line)
    _ROWS[key] = rows
    return rows


def _gzip_size(path: Path, rough: float) -> float:
    """Uncompressed size of a gzip file: its trailer's ISIZE (RFC 1952, 2.3.1: the size modulo
    2^32), lifted by the multiple of 2^32 that lands nearest the rough estimate."""
    with path.open("rb") as fh:
        fh.seek(-4, 2)
        isize = int.from_bytes(fh.read(4), "little")
    k = max(round((rough - isize) / 2 ** 32), 0)
    return isize + k * 2 ** 32


def job_size(spec, stream_above_bytes: int) -> JobSize:
    """The memory and time one figure job needs (see the module docstring)."""
    from .data import CHUNK_ROWS, should_stream
    rows = estimate_rows(spec.data_path)
    known = rows is not None
    rows = rows if known else UNKNOWN_ROWS
    cols = max(len(spec.columns_needed()), 1)
    streamed = known and should_stream(spec, stream_above_bytes)
    chart = spec.chart.name
    loess = spec.trend == "loess"
    per_cell = LOESS_BYTES_PER_CELL if loess else BYTES_PER_CELL.get(chart, 180)
    held = min(rows, CHUNK_ROWS) if streamed else rows
    mem = BASE_MB + held * cols * per_cell / 2 ** 20
    per_million = LOESS_SECONDS_PER_MILLION if loess else SECONDS_PER_MILLION.get(chart, 13)
    seconds = 60 + rows / 1e6 * per_million * (2 if streamed else 1)   # streamed: two passes
    return JobSize(mem_mb=int(math.ceil(mem / 100) * 100), runtime=max(MIN_RUNTIME, math.ceil(seconds / 60)),
                   rows=int(rows), columns=cols, streamed=streamed, rows_known=known)


def check_ceiling(spec, size: JobSize, ceiling_mb) -> None:
    """Refuse, in one line, a figure that would need more memory than ``max_mem_mb``."""
    if ceiling_mb is None or size.mem_mb <= ceiling_mb:
        return
    remedy = ("stream_above_mb below the file's size streams it" if spec.chart.name in ("hexbins", "histogram")
              and spec.trend != "loess" and not size.streamed else "a filter, or a larger ceiling")
    raise FigkitError(f"the job needs about {size.mem_mb} MB ({size.rows:,} rows x {size.columns} "
                      f"columns), over the memory ceiling max_mem_mb: {ceiling_mb:g}",
                      row=spec.row, figure=spec.id, field="dataset", value=spec.dataset,
                      allowed=f"figures within {ceiling_mb:g} MB ({remedy})")
