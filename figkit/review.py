"""The review page of a comparison: ``figkit compare OLD [NEW] --review DIR`` writes
``DIR/index.html`` with its images beside it in ``DIR/img/`` and the result as ``compare.json``.

The page is self-contained and works from a plain ``file://`` open: no script at all (the views
switch with CSS radio buttons), no external style, font or network address.  Every text that
comes from a sheet, a sidecar or a file name is HTML-escaped, never interpreted.

What a reviewer sees, in order: how many figures changed, how many changed a conclusion, which
data files changed (old and new SHA-256), the thresholds in force; then each changed figure, the
ones whose conclusions changed first and the rest by how much they changed, with its conclusion
changes, old and new side by side at the same scale, three views that stay readable when the
axes move (old and new alternating in place, both overlaid in two inks, the difference map), and
the table of changed numbers; then the figures added, removed and unchanged.
"""
from __future__ import annotations

import html
import json
import os
import re
from pathlib import Path

import numpy as np

from .compare import (INK_ADDED, INK_RECOLOURED, INK_REMOVED, Change, FigureComparison, Report,
                      _show, diff_image, load_for_compare, on_common_canvas, overlay_image)
from .errors import FigkitError

PAGE = "index.html"
RESULT = "compare.json"

_CSS = """
:root { --ink: #1d232b; --muted: #5b6570; --rule: #d5dbe1; --warn: #a3360b; --ok: #2f6b3a; }
* { box-sizing: border-box; }
body { font: 15px/1.45 system-ui, -apple-system, "Segoe UI", sans-serif; color: var(--ink);
       margin: 0 auto; max-width: 1320px; padding: 24px 28px 60px; background: #fff; }
h1 { font-size: 24px; margin: 0 0 4px; }
h2 { font-size: 19px; margin: 0; display: flex; gap: 10px; align-items: baseline; flex-wrap: wrap; }
.builds { color: var(--muted); margin: 0 0 14px; }
.counts { display: flex; gap: 10px; flex-wrap: wrap; padding: 0; margin: 0 0 14px; list-style: none; }
.counts li { border: 1px solid var(--rule); border-radius: 6px; padding: 8px 14px; min-width: 120px; }
.counts li b { display: block; font-size: 26px; line-height: 1.1; }
.counts li.conclusion.some { border-color: var(--warn); color: var(--warn); }
table { border-collapse: collapse; margin: 6px 0 12px; font-size: 13px; }
th, td { border-bottom: 1px solid var(--rule); padding: 4px 10px 4px 0; text-align: left;
         vertical-align: top; }
th { color: var(--muted); font-weight: 600; }
code { font: 12px ui-monospace, "DejaVu Sans Mono", monospace; }
.thresholds { color: var(--muted); font-size: 13px; }
nav ol { columns: 2; padding-left: 22px; font-size: 14px; }
.badge { font-size: 12px; font-weight: 600; border-radius: 10px; padding: 1px 8px;
         background: #eef1f4; color: var(--muted); white-space: nowrap; }
.badge.conclusion { background: #fbe3d6; color: var(--warn); }
.badge.same { background: #e3efe5; color: var(--ok); }
section.figure { border-top: 2px solid var(--rule); padding: 18px 0 8px; margin-top: 18px; }
section.figure.conclusion { border-top-color: var(--warn); }
ul.conclusions { margin: 8px 0 10px; padding-left: 20px; color: var(--warn); font-weight: 600; }
.views > input { position: absolute; opacity: 0; pointer-events: none; }
.views > label { display: inline-block; padding: 3px 12px; margin: 6px 4px 8px 0; cursor: pointer;
                 border: 1px solid var(--rule); border-radius: 14px; font-size: 13px; }
.views > input:checked + label { background: var(--ink); color: #fff; border-color: var(--ink); }
.views > input:focus-visible + label { outline: 2px solid #0072b2; }
.view { display: none; }
.views > input.t-side:checked ~ .side { display: flex; }
.views > input.t-flip:checked ~ .flip,
.views > input.t-overlay:checked ~ .overlay,
.views > input.t-diff:checked ~ .diff { display: block; }
.side { gap: 16px; align-items: flex-start; }
.side figure { flex: 1 1 0; margin: 0; min-width: 0; }
figure img, .view img { max-width: 100%; height: auto; border: 1px solid var(--rule); display: block; }
figcaption, .key { color: var(--muted); font-size: 13px; margin: 4px 0; }
.stack { position: relative; display: inline-block; max-width: 100%; }
.stack img.new { position: absolute; left: 0; top: 0; animation: blink 2.4s steps(1) infinite; }
.stack:hover img.new { animation: none; visibility: hidden; }
@keyframes blink { 0% { visibility: visible; } 50% { visibility: hidden; } }
@media (prefers-reduced-motion: reduce) { .stack img.new { animation: none; }
  .stack:hover img.new { visibility: hidden; } }
.swatch { display: inline-block; width: 12px; height: 12px; vertical-align: -1px; margin: 0 4px 0 10px;
          border: 1px solid rgba(0,0,0,.2); }
details { margin: 4px 0 10px; font-size: 13px; }
.pixels { font-size: 13px; color: var(--muted); }
"""


def _e(text) -> str:
    return html.escape(str(text), quote=True)


def _hex(rgb) -> str:
    return "#%02X%02X%02X" % tuple(rgb)


def _save_png(arr: np.ndarray, path: Path) -> None:
    from PIL import Image
    Image.fromarray(arr, mode="RGB").save(path, format="PNG", compress_level=3)


def _numbers_table(changes: list[Change]) -> str:
    if not changes:
        return ""
    rows = "".join(f"<tr><td>{_e(c.what)}</td><td>{_e(_show(c.old))}</td>"
                   f"<td>{_e(_show(c.new))}</td><td>{_e(c.note)}</td></tr>" for c in changes)
    return ("<table class=\"numbers\"><thead><tr><th>what</th><th>old</th><th>new</th>"
            f"<th>note</th></tr></thead><tbody>{rows}</tbody></table>")


def _figure_section(fc: FigureComparison, img_dir: Path, n: int) -> str:
    fid = fc.id
    key = f"f{n}"                        # radio-group name: ids may hold any character
    badge = ('<span class="badge conclusion">conclusion changed</span>' if fc.conclusions
             else '<span class="badge">changed</span>')
    parts = [f'<section class="figure{" conclusion" if fc.conclusions else ""}" '
             f'id="fig-{_e(fid)}" data-figure="{_e(fid)}">',
             f"<h2>{_e(fid)} {badge}</h2>"]
    if fc.conclusions:
        parts.append('<ul class="conclusions">' + "".join(
            f"<li>{_e(c.brief)}</li>" for c in fc.conclusions) + "</ul>")
    if fc.images is not None:
        old, new = fc.images
        stem = f"{n:03d}"
        names = {k: f"img/{stem}.{k}.png" for k in ("old", "new", "overlay", "diff")}
        _save_png(old, img_dir / f"{stem}.old.png")
        _save_png(new, img_dir / f"{stem}.new.png")
        x, y = on_common_canvas(old, new)
        _save_png(overlay_image(x, y), img_dir / f"{stem}.overlay.png")
        diff_image(x, y, img_dir / f"{stem}.diff.png")
        widest = max(old.shape[1], new.shape[1])
        w_old, w_new = old.shape[1] / widest * 100, new.shape[1] / widest * 100
        alt = _e(fid)
        parts.append(
            '<div class="views">'
            f'<input type="radio" class="t-side" name="{key}" id="{key}-side" checked>'
            f'<label for="{key}-side">Side by side</label>'
            f'<input type="radio" class="t-flip" name="{key}" id="{key}-flip">'
            f'<label for="{key}-flip">Old and new in turn</label>'
            f'<input type="radio" class="t-overlay" name="{key}" id="{key}-overlay">'
            f'<label for="{key}-overlay">Overlaid</label>'
            f'<input type="radio" class="t-diff" name="{key}" id="{key}-diff">'
            f'<label for="{key}-diff">Difference</label>'
            '<div class="view side">'
            f'<figure><img src="{names["old"]}" alt="{alt}, old" style="width:{w_old:.2f}%">'
            '<figcaption>old</figcaption></figure>'
            f'<figure><img src="{names["new"]}" alt="{alt}, new" style="width:{w_new:.2f}%">'
            '<figcaption>new</figcaption></figure></div>'
            '<div class="view flip"><div class="stack">'
            f'<img class="old" src="{names["old"]}" alt="{alt}, old">'
            f'<img class="new" src="{names["new"]}" alt="{alt}, new"></div>'
            '<p class="key">Old and new take turns in place (every 1.2 s); hold the pointer on '
            'the figure to keep the old one (with reduced motion set: the new one, the old one '
            'under the pointer).</p></div>'
            '<div class="view overlay">'
            f'<img src="{names["overlay"]}" alt="{alt}, old and new overlaid">'
            f'<p class="key"><span class="swatch" style="background:{_hex(INK_REMOVED)}"></span>'
            f'only in the old<span class="swatch" style="background:{_hex(INK_ADDED)}"></span>'
            'only in the new<span class="swatch" style="background:#1d232b"></span>in both'
            f'<span class="swatch" style="background:{_hex(INK_RECOLOURED)}"></span>'
            'same lightness, colour changed</p>'
            '</div>'
            '<div class="view diff">'
            f'<img src="{names["diff"]}" alt="{alt}, where the pixels differ">'
            f'<p class="key">Grey: the old render.<span class="swatch" style="background:'
            f'{_hex(INK_ADDED)}"></span>ink added<span class="swatch" style="background:'
            f'{_hex(INK_REMOVED)}"></span>ink removed<span class="swatch" style="background:'
            f'{_hex(INK_RECOLOURED)}"></span>colour changed</p></div>'
            '</div>')
    moved = [c for c in fc.details if c.what in ("layout x_range", "layout y_range")]
    if moved:
        parts.append('<p class="key"><b>The axes moved</b> (' + _e("; ".join(
            f"{c.what.split()[-1].replace('_', ' ')} {_show(c.old)} to {_show(c.new)}"
            for c in moved)) + "): in the overlaid and in-turn views a mark can shift because "
            "its axis did; read values by the tick labels.</p>")
    parts.append(f'<p class="pixels">{_e(fc.pixel_text())}</p>')
    parts.append(_numbers_table(fc.conclusions + fc.details))
    if fc.provenance:
        parts.append(f"<details><summary>inputs and versions ({len(fc.provenance)})</summary>"
                     f"{_numbers_table(fc.provenance)}</details>")
    parts.append("</section>")
    return "".join(parts)


def _single(fid: str, build, label: str, img_dir: Path, n: int, dpi: float) -> str:
    """A figure only one build has: its render, when there is one."""
    png = Path(build.figures) / f"{fid}.png"
    body = ""
    if png.is_file():
        try:
            img = load_for_compare(png, None, dpi).image
            _save_png(img, img_dir / f"{n:03d}.only.png")
            body = f'<img src="img/{n:03d}.only.png" alt="{_e(fid)}, {label}" style="max-width:60%">'
        except FigkitError as exc:
            body = f'<p class="key">{_e(exc.message)}</p>'
    return (f'<section class="figure" id="fig-{_e(fid)}" data-figure="{_e(fid)}">'
            f'<h2>{_e(fid)} <span class="badge">{label}</span></h2>{body}</section>')


_OWN_IMAGE = re.compile(r"\d{3,}\.(old|new|overlay|diff|only)\.png")


def check_folder(folder: Path | str) -> Path:
    """The review folder, refused before any work when it is a file or holds files that are not
    a review page's (a page is only ever rewritten over an earlier page, never over a user's
    files)."""
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise FigkitError("--review must be a folder", field="review", value=str(folder))
    if folder.is_dir():
        foreign = [p.name for p in folder.iterdir() if p.name not in (PAGE, RESULT, "img")]
        img = folder / "img"
        if img.is_dir():
            foreign += [f"img/{p.name}" for p in img.iterdir() if not _OWN_IMAGE.fullmatch(p.name)]
        if foreign or ((folder / PAGE).exists() and not (folder / RESULT).exists()):
            raise FigkitError("the review folder holds files that are not an earlier review page; "
                              "give a new or empty folder", field="review", value=str(folder),
                              allowed="a new folder, or one figkit wrote a review page into")
    return folder


def write_review(report: Report, old, new, folder: Path | str) -> Path:
    """Write the review page of ``report`` (made with ``keep_images=True``) into ``folder``;
    ``old`` and ``new`` are the compared :class:`figkit.snapshot.Build`.  Returns the page."""
    from .provenance import atomic_outputs
    folder = check_folder(folder)
    img_dir = folder / "img"
    img_dir.mkdir(parents=True, exist_ok=True)
    for stale in img_dir.iterdir():            # the images of a page written here before
        if _OWN_IMAGE.fullmatch(stale.name):
            stale.unlink()
    counts = report.counts()
    th = report.thresholds
    changed = report.changed
    head = [
        "<!doctype html>", '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>What changed: {_e(report.old_label)} to {_e(report.new_label)}</title>",
        f"<style>{_CSS}</style></head><body>",
        "<header><h1>What changed in the figures</h1>",
        f'<p class="builds">old: <b>{_e(report.old_label)}</b> &middot; new: '
        f'<b>{_e(report.new_label)}</b></p>',
        '<ul class="counts">',
        f'<li class="conclusion{" some" if counts["conclusions_changed"] else ""}" '
        f'data-count="conclusions_changed"><b>'
        f'{counts["conclusions_changed"]}</b>changed a conclusion</li>',
        f'<li data-count="changed"><b>{counts["changed"]}</b>changed</li>',
        f'<li data-count="unchanged"><b>{counts["unchanged"]}</b>unchanged</li>',
        f'<li data-count="added"><b>{counts["added"]}</b>added</li>',
        f'<li data-count="removed"><b>{counts["removed"]}</b>removed</li></ul>']
    if report.data_changes:
        head.append('<table class="data"><thead><tr><th>data file changed</th><th>old SHA-256'
                    '</th><th>new SHA-256</th></tr></thead><tbody>' + "".join(
                        f"<tr><td>{_e(p)}</td><td><code>{_e(a or 'none')}</code></td>"
                        f"<td><code>{_e(b or 'none')}</code></td></tr>"
                        for p, a, b in report.data_changes) + "</tbody></table>")
    else:
        head.append('<p class="thresholds">No data file changed.</p>')
    if report.stale:
        head.append('<p class="conclusions"><b>Caution:</b> the current build has figures older '
                    "than their data files (rebuild first): " + _e(", ".join(report.stale)) + "</p>")
    head.append(
        f'<p class="thresholds">A conclusion changes when a line trend\'s 95% slope interval '
        f"starts or stops excluding 0 or its slope changes sign, the strata test crosses p = "
        f"{th.p_level:g}, panels, groups or categories appear or go, groups change order by "
        f"their value, a share moves by {th.share_points:g} percentage points or more, a "
        f"panel's n moves by {th.n_percent:g}% or more, or a caution appears or goes. Pixels "
        f"are compared at {th.compare_dpi:g} dpi (box-filtered).</p>")
    if changed or report.added or report.removed:
        items = [f'<li><a href="#fig-{_e(f.id)}">{_e(f.id)}</a> '
                 + ('<span class="badge conclusion">conclusion changed</span>' if f.conclusions
                    else '<span class="badge">changed</span>') + "</li>" for f in changed]
        items += [f'<li><a href="#fig-{_e(i)}">{_e(i)}</a> <span class="badge">added</span></li>'
                  for i in report.added]
        items += [f'<li><a href="#fig-{_e(i)}">{_e(i)}</a> <span class="badge">removed</span>'
                  "</li>" for i in report.removed]
        head.append("<nav><ol>" + "".join(items) + "</ol></nav>")
    head.append("</header><main>")
    # PNG encoding runs outside the interpreter lock: write the figures' images in threads
    from concurrent.futures import ThreadPoolExecutor
    with ThreadPoolExecutor(max_workers=min(4, os.cpu_count() or 1)) as pool:
        body = list(pool.map(lambda nf: _figure_section(nf[1], img_dir, nf[0]), enumerate(changed)))
    n = len(changed)
    for fid in report.added:
        body.append(_single(fid, new, "added", img_dir, n, th.compare_dpi))
        n += 1
    for fid in report.removed:
        body.append(_single(fid, old, "removed", img_dir, n, th.compare_dpi))
        n += 1
    if report.unchanged:
        body.append('<section class="figure" id="unchanged"><h2>Unchanged '
                    '<span class="badge same">pixels and numbers equal</span></h2><ul>' + "".join(
                        f"<li>{_e(f.id)}" + (" (numbers equal; pixels not compared: no PNG)"
                                             if f.pixels == "not compared" else "")
                        + (" (its inputs changed: "
                                             + _e(", ".join(c.what for c in f.provenance)) + ")"
                                             if f.provenance else "") + "</li>"
                        for f in report.unchanged) + "</ul></section>")
    page = folder / PAGE
    result = folder / RESULT
    with atomic_outputs([page, result]) as (tmp_page, tmp_result):
        tmp_page.write_text("\n".join(head + body + ["</main></body></html>", ""]),
                            encoding="utf-8")
        tmp_result.write_text(json.dumps(report.as_dict(), indent=2, ensure_ascii=False,
                                         default=str) + "\n", encoding="utf-8")
    return page
