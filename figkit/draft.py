"""The warm loop for designing figures: ``figkit draft [ID ...]``.

One process stays running with matplotlib, pandas and the style sheets loaded.  It watches the
sheet, the settings, the house styles and the datasets (modification time and size, polled),
and re-renders only the figures whose row, the settings they read, their data file or their
style changed: first a quick preview PNG at screen resolution, shown at once, then the print
files (``figkit render``'s PDF/PNG/SVG, sidecar and checks).  The previews are shown in
``<results>/draft/index.html``, a page that reloads itself every two seconds when opened from
disk (no server, no network).  A mistake in the sheet or settings shows its one-line error on
the page and in the terminal, and the last good preview stays.  Ctrl-C stops it cleanly (every
file is written atomically, so a stop never leaves half a file).
"""
from __future__ import annotations

import html
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

from .errors import FigkitError

PREVIEW_DPI = 110          # about a laptop screen's pixel density at 100 % zoom
PAGE = "index.html"
RELOAD_S = 2


@dataclass
class Entry:
    id: str
    key: tuple | None = None        # what the figure was last drawn from
    version: int = 0                # bumps with each new preview (defeats the browser's cache)
    preview: str | None = None      # file name of the last good preview
    error: str | None = None
    seconds: dict = field(default_factory=dict)


def _stat(path: Path) -> tuple:
    try:
        st = path.stat()
        return (str(path), st.st_mtime_ns, st.st_size)
    except OSError:
        return (str(path), None, None)


def watched_files(project) -> list[Path]:
    """Everything a figure can depend on besides figkit itself."""
    from .sheet import CONFIG_FILE
    root = project.root
    files = [project.config.sheet_path, root / CONFIG_FILE]
    styles = root / project.config["styles_dir"]
    files += sorted(p for p in styles.iterdir() if p.is_file()) if styles.is_dir() else []
    files += [root / p for p in (project.config.get("datasets") or {}).values()]
    return files


def figure_key(project, row) -> tuple:
    """What one figure is drawn from: its fingerprint (row and the settings it reads), its
    data file and its style files as they stand (modification time and size)."""
    from .compose import build_parts_spec, is_parts, parts_fingerprint
    from .spec import build_spec, fingerprint
    if row.error is None and is_parts(row):   # a figure made of parts: every part's inputs
        spec = build_parts_spec(row, project.config, project.rows)
        return (parts_fingerprint(row, project.config, project.rows),
                tuple(_stat(p) for p in spec.data_paths), tuple(_stat(p) for p in spec.style.files))
    spec = build_spec(row, project.config)
    return (fingerprint(row, project.config), _stat(spec.data_path),
            tuple(_stat(p) for p in spec.style.files))


def _save_preview(project, fid: str, path: Path) -> None:
    import matplotlib as mpl
    from .provenance import atomic_outputs
    from .render import figure
    fig = figure(fid, project)
    try:
        with atomic_outputs([path]) as (tmp,):
            with mpl.rc_context({"savefig.dpi": PREVIEW_DPI}):
                fig.savefig(tmp, format="png", dpi=PREVIEW_DPI)
    finally:
        import matplotlib.pyplot as plt
        plt.close(fig)


def write_page(folder: Path, entries: list[Entry], problem: str | None, project_root: Path) -> Path:
    """The page: one card per figure with its newest preview (or its error over the last good
    one), and a banner for a sheet or settings mistake.  Every text is escaped."""
    from .provenance import atomic_outputs
    e = lambda t: html.escape(str(t), quote=True)   # noqa: E731
    cards = []
    for ent in entries:
        img = (f'<img src="{e(ent.preview)}?v={ent.version}" alt="{e(ent.id)}">'
               if ent.preview else '<p class="none">no preview yet</p>')
        err = f'<p class="error">{e(ent.error)}</p>' if ent.error else ""
        took = ", ".join(f"{k} {v:.1f} s" for k, v in ent.seconds.items())
        cards.append(f'<section data-figure="{e(ent.id)}"><h2>{e(ent.id)}</h2>{err}{img}'
                     f'<p class="took">{e(took)}</p></section>')
    banner = f'<p class="error banner">{e(problem)}</p>' if problem else ""
    page = folder / PAGE
    stamp = time.strftime("%H:%M:%S")
    text = f"""<!doctype html>
<html lang="en"><head><meta charset="utf-8">
<meta http-equiv="refresh" content="{RELOAD_S}">
<title>figkit draft: {e(project_root.name)}</title>
<style>
body {{ font: 14px/1.4 system-ui, sans-serif; margin: 18px 24px; color: #1d232b; }}
h1 {{ font-size: 18px; margin: 0 0 8px; }} h2 {{ font-size: 15px; margin: 14px 0 6px; }}
section {{ border-top: 1px solid #d5dbe1; padding-bottom: 8px; }}
img {{ max-width: 100%; border: 1px solid #d5dbe1; }}
.error {{ color: #a3360b; font-weight: 600; background: #fbe3d6; padding: 6px 10px; }}
.took, .stamp {{ color: #5b6570; font-size: 12px; }}
</style></head><body>
<h1>figkit draft &middot; {e(project_root)}</h1>
<p class="stamp">updated {stamp}; this page reloads every {RELOAD_S} s; previews at {PREVIEW_DPI} dpi,
print files in results/figures/</p>
{banner}{''.join(cards)}
</body></html>
"""
    with atomic_outputs([page]) as (tmp,):
        tmp.write_text(text, encoding="utf-8")
    return page


def draft(root: Path | str = ".", ids: list[str] | None = None, *, interval: float = 0.5,
          print_files: bool = True, rounds: int | None = None, log=print) -> None:
    """Run the loop (``rounds`` bounds it, for tests; None: until interrupted)."""
    from .render import render
    from .sheet import load_project
    root = Path(root).resolve()
    entries: dict[str, Entry] = {}
    folder: Path | None = None
    seen: tuple | None = None
    problem: str | None = None
    n = 0
    while rounds is None or n < rounds:
        n += 1
        try:
            project = load_project(root)
            problem = None
        except FigkitError as exc:
            if str(exc) != problem:
                log(f"figkit: error: {exc}")
            problem = str(exc)
            if folder is not None:
                write_page(folder, list(entries.values()), problem, root)
            time.sleep(interval)
            continue
        folder = project.config.results / "draft"
        folder.mkdir(parents=True, exist_ok=True)
        state = tuple(_stat(p) for p in watched_files(project))
        if state == seen and problem is None:
            time.sleep(interval)
            continue
        seen = state
        known = [r.id for r in project.rows]
        wanted = ids or known
        for fid in wanted:
            entries.setdefault(fid, Entry(fid))
        for fid in list(entries):
            if fid not in wanted:
                del entries[fid]
        for k, fid in enumerate(wanted):
            ent = entries[fid]
            if fid not in known:
                ent.error = f"figure '{fid}' is not in the sheet (ids: {', '.join(known)})"
                continue
            row = next(r for r in project.rows if r.id == fid)
            try:
                key = figure_key(project, row)
            except FigkitError as exc:
                ent.error = str(exc.at(row=row.number, figure=fid))
                log(f"figkit: error: {ent.error}")
                continue
            if key == ent.key and ent.error is None:
                continue
            name = f"{k:03d}.png"
            try:
                t0 = time.perf_counter()
                _save_preview(project, fid, folder / name)
                ent.preview, ent.version, ent.error = name, ent.version + 1, None
                ent.seconds = {"preview": time.perf_counter() - t0}
                write_page(folder, [entries[i] for i in wanted], None, root)
                if print_files:
                    t1 = time.perf_counter()
                    render(project, fid)
                    ent.seconds["print files"] = time.perf_counter() - t1
                ent.key = key
                log(f"figkit: draft: {fid}: " + ", ".join(
                    f"{a} {b:.1f} s" for a, b in ent.seconds.items()))
            except FigkitError as exc:
                ent.error = str(exc.at(row=row.number, figure=fid))
                ent.key = None
                log(f"figkit: error: {ent.error}")
        write_page(folder, [entries[i] for i in wanted], None, root)
        if n == 1:
            log(f"figkit: draft: open {folder / PAGE} in a browser; Ctrl-C stops")
        time.sleep(interval)


def main_loop(root, ids, interval, print_files) -> int:
    try:
        draft(root, ids, interval=interval, print_files=print_files)
    except KeyboardInterrupt:
        print("figkit: draft: stopped", file=sys.stderr)
    return 0

