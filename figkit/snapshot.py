"""Snapshots of a build: the figures as they stood at one data version, kept for comparison.

``figkit snapshot NAME`` records every figure file of the sheet's rows (PDF, PNG, SVG, TIFF,
sidecar, stats file) under ``<results>/snapshots/NAME/figures/`` with ``manifest.json`` beside
it: when, by which figkit, the SHA-256 of the sheet, the settings, every style file and every
dataset, and of each file recorded.  File contents live once in a content-addressed store
(``<results>/snapshots/.store/<first two hex digits>/<rest of the SHA-256>``, read-only); a
snapshot's files are hard links into it, so a figure unchanged across ten snapshots is stored
once.  Where the file system refuses hard links the file is copied and the manifest says so.

A snapshot is made in a hidden temporary folder and renamed into place when complete, so a
killed command leaves no half snapshot; an existing name is never overwritten unless asked.

``manifest.json`` and the command names are a contract that other tools read: add fields,
never rename one.
"""
from __future__ import annotations

import json
import os
import re
import shutil
from glob import escape as glob_escape
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

from . import __version__
from .errors import FigkitError
from .provenance import dumps, sha256_file

SNAPSHOTS = "snapshots"
STORE = ".store"
MANIFEST = "manifest.json"
MANIFEST_FORMAT = 1
NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$")
NAME_RULE = "1-64 letters, digits, '.', '_' or '-', starting with a letter or digit"


def snapshots_dir(project) -> Path:
    return project.config.results / SNAPSHOTS


def _rel(path: Path, root: Path) -> str:
    try:
        return path.resolve().relative_to(root.resolve()).as_posix()
    except ValueError:
        return str(path)


def project_hashes(project) -> dict:
    """SHA-256 of what a build reads besides the sheet rows' figures: the sheet, the settings,
    every file of the styles folder and every dataset (a missing one is recorded as missing)."""
    from .sheet import CONFIG_FILE
    root = project.root
    out = {"sheet": {"path": _rel(project.config.sheet_path, root),
                     "sha256": sha256_file(project.config.sheet_path)},
           "settings": {"path": CONFIG_FILE, "sha256": sha256_file(root / CONFIG_FILE)},
           "styles": {}, "datasets": {}}
    styles = root / project.config["styles_dir"]
    for p in sorted(styles.iterdir()) if styles.is_dir() else []:
        if p.is_file() and not p.name.startswith("."):
            out["styles"][p.name] = sha256_file(p)
    for name, rel in sorted((project.config.get("datasets") or {}).items()):
        path = root / rel
        out["datasets"][name] = ({"path": str(rel), "sha256": sha256_file(path),
                                  "bytes": path.stat().st_size} if path.is_file()
                                 else {"path": str(rel), "sha256": None, "missing": True})
    return out


def inputs_differ(recorded: dict, now: dict) -> list[str]:
    """What differs between two :func:`project_hashes` records, as short phrases."""
    out = []
    for key in ("sheet", "settings"):
        if (recorded.get(key) or {}).get("sha256") != (now.get(key) or {}).get("sha256"):
            out.append(key)
    rs, ns = recorded.get("styles") or {}, now.get("styles") or {}
    out += [f"style {n}" for n in sorted(set(rs) | set(ns)) if rs.get(n) != ns.get(n)]
    rd, nd = recorded.get("datasets") or {}, now.get("datasets") or {}
    for n in sorted(set(rd) | set(nd)):
        a, b = (rd.get(n) or {}).get("sha256"), (nd.get(n) or {}).get("sha256")
        if a != b:
            out.append(f"data {n}" + (" (gone)" if n not in nd else " (new)" if n not in rd else ""))
    return out


def check_name(name: str) -> str:
    if not isinstance(name, str) or not NAME.match(name):
        raise FigkitError("bad snapshot name", field="NAME", value=name, allowed=NAME_RULE)
    return name


def _figure_files(folder: Path, fid: str) -> list[Path]:
    """The files of one built figure: ``<id>.<anything>`` (figure files, sidecar, stats and
    values files; an id holds no '.', so the prefix is the figure's own), none while a build's
    temporary ``.part`` files are about; [] when the figure has no readable sidecar."""
    sidecar = folder / f"{fid}.json"
    if not sidecar.is_file():
        return []
    try:
        json.loads(sidecar.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise FigkitError(f"cannot read sidecar {sidecar}: {exc}", figure=fid) from None
    return sorted(p for p in folder.glob(f"{glob_escape(fid)}.*")
                  if p.is_file() and not p.name.endswith(".part"))


def _clear_abandoned(root: Path) -> None:
    """Temporary folders of snapshot commands that were killed (their process is gone)."""
    for p in root.iterdir():
        m = re.fullmatch(r"\..+\.(\d+)\.(part|old)", p.name)
        if not m or not p.is_dir():
            continue
        try:
            os.kill(int(m.group(1)), 0)
            continue                                   # still running: not ours to touch
        except ProcessLookupError:
            shutil.rmtree(p, ignore_errors=True)
        except (PermissionError, OverflowError, ValueError):
            continue


def _store(src: Path, store: Path, digest: str) -> tuple[Path, bool]:
    """The store's read-only copy of ``src`` (made now when missing): (path, newly stored)."""
    obj = store / digest[:2] / digest[2:]
    if obj.is_file():
        return obj, False
    obj.parent.mkdir(parents=True, exist_ok=True)
    tmp = obj.with_name(f".{obj.name}.{os.getpid()}.part")
    shutil.copyfile(src, tmp)
    os.chmod(tmp, 0o444)
    os.replace(tmp, obj)
    return obj, True


def take_snapshot(project, name: str, *, replace: bool = False, note: str | None = None) -> dict:
    """Record the current build of every sheet row as snapshot ``name``; returns the manifest
    (with a ``stored`` summary: files, bytes newly stored, files shared with earlier snapshots)."""
    check_name(name)
    root = snapshots_dir(project)
    target = root / name
    if target.exists() and not replace:
        taken = (read_manifest(target).get("created") if (target / MANIFEST).is_file() else None)
        raise FigkitError(f"snapshot '{name}' exists" + (f" (taken {taken})" if taken else "")
                          + "; choose another name, or pass --replace to overwrite it",
                          field="NAME", value=name)
    folder = project.config.results / "figures"
    ids = [row.id for row in project.rows]
    built = {fid: _figure_files(folder, fid) for fid in ids}
    missing = [fid for fid, files in built.items() if not files]
    if len(missing) == len(ids):
        raise FigkitError(f"no built figures in {folder}; build them first (snakemake --cores 2)",
                          field="NAME", value=name)
    hashes = project_hashes(project)
    current = {d["path"]: d["sha256"] for d in hashes["datasets"].values()}
    stale = []
    root.mkdir(parents=True, exist_ok=True)
    _clear_abandoned(root)
    store = root / STORE
    work = root / f".{name}.{os.getpid()}.part"
    shutil.rmtree(work, ignore_errors=True)
    (work / "figures").mkdir(parents=True)
    files, new_bytes, shared, copied = {}, 0, 0, 0
    try:
        for fid, paths in built.items():
            for src in paths:
                digest = sha256_file(src)
                obj, fresh = _store(src, store, digest)
                size = src.stat().st_size
                new_bytes += size if fresh else 0
                shared += not fresh
                dest = work / "figures" / src.name
                try:
                    os.link(obj, dest)
                    how = "link"
                except OSError:               # no hard links here: a plain copy, said so
                    shutil.copyfile(obj, dest)
                    how, copied = "copy", copied + 1
                files[f"figures/{src.name}"] = {"sha256": digest, "bytes": size, "stored": how}
            if paths:
                record = json.loads((folder / f"{fid}.json").read_text(encoding="utf-8"))
                used = {i.get("path"): i.get("sha256") for i in record.get("inputs") or []}
                if any(current.get(p, sha) != sha for p, sha in used.items()):
                    stale.append(fid)
        manifest = {
            "format": MANIFEST_FORMAT, "name": name,
            "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
            "figkit": __version__, "note": note, "project": hashes,
            "figures": [fid for fid in ids if fid not in missing],
            "not_built": missing, "older_than_data": stale, "files": files,
        }
        (work / MANIFEST).write_text(dumps(manifest), encoding="utf-8")
        if target.exists() and not replace:    # another snapshot of this name came meanwhile
            raise FigkitError(f"snapshot '{name}' was taken meanwhile by another command; "
                              "choose another name, or pass --replace", field="NAME", value=name)
        if target.exists():
            trash = root / f".{name}.{os.getpid()}.old"
            os.replace(target, trash)
            os.replace(work, target)
            shutil.rmtree(trash, ignore_errors=True)
        else:
            os.replace(work, target)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    manifest["stored"] = {"files": len(files), "new_bytes": new_bytes, "shared_files": shared,
                          "copied": copied}
    return manifest


def read_manifest(folder: Path) -> dict:
    path = Path(folder) / MANIFEST
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise FigkitError("not a snapshot: no manifest.json", value=str(folder)) from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise FigkitError(f"cannot read {path}: {exc}") from None
    if not isinstance(data, dict) or not isinstance(data.get("files"), dict):
        raise FigkitError(f"{path} is not a figkit snapshot manifest", value=str(path))
    return data


def list_snapshots(project) -> list[dict]:
    """Every snapshot's manifest, oldest first (a folder without a readable manifest is named
    with ``error``)."""
    root = snapshots_dir(project)
    out = []
    for folder in sorted(root.iterdir()) if root.is_dir() else []:
        if folder.name.startswith(".") or not folder.is_dir():
            continue
        try:
            out.append(read_manifest(folder))
        except FigkitError as exc:
            out.append({"name": folder.name, "created": "", "error": exc.message})
    return sorted(out, key=lambda m: (m.get("created") or "", m.get("name")))


# ----------------------------------------------------------------------------- builds to compare

@dataclass
class Build:
    """One side of a comparison: a snapshot, the current build, or a plain folder of figures."""
    label: str                       # how the review names it
    figures: Path                    # the folder holding <id>.json, <id>.png, ...
    name: str | None = None          # the snapshot's name
    created: str | None = None
    manifest: dict | None = None
    ids: list[str] | None = None     # only these figures (the sheet's rows, for the current build)
    datasets: dict = field(default_factory=dict)   # path -> SHA-256, where known
    current: bool = False            # the project's live results folder (it may be stale)

    def reduced_cache(self, png: Path | None, dpi: float) -> Path | None:
        """Where a snapshot keeps the comparison-resolution copy of one of its renders (files
        of a snapshot never change, so the copy stays valid); None for other builds."""
        if png is None or not self.manifest:
            return None
        store = Path(self.figures).parent.parent / STORE
        if not store.is_dir():                  # a snapshot folder copied elsewhere: no cache
            return None
        rec = (self.manifest.get("files") or {}).get(f"figures/{Path(png).name}") or {}
        digest = rec.get("sha256")
        if not isinstance(digest, str) or not re.fullmatch(r"[0-9a-f]{64}", digest):
            return None
        # "box1": the reduction method (a box filter); a new method gets new cache names
        return store / "reduced" / f"{digest}.{dpi:g}dpi.box1.png"


def current_build(project) -> Build:
    hashes = project_hashes(project)
    return Build("current build", project.config.results / "figures",
                 ids=[row.id for row in project.rows],
                 datasets={d["path"]: d["sha256"] for d in hashes["datasets"].values()},
                 current=True)


def snapshot_build(folder: Path) -> Build:
    m = read_manifest(folder)
    name = str(m.get("name") or Path(folder).name)
    created = m.get("created")
    return Build(f"snapshot '{name}'" + (f" ({created})" if created else ""),
                 Path(folder) / "figures", name=name, created=created, manifest=m,
                 datasets={d.get("path"): d.get("sha256")
                           for d in ((m.get("project") or {}).get("datasets") or {}).values()
                           if isinstance(d, dict)})


def resolve_build(text: str | None, project) -> Build:
    """A snapshot name (of ``project``), a snapshot folder, a results or figures folder, or (None)
    the project's current build."""
    if text is None:
        if project is None:
            raise FigkitError("no project here to take the current build from; give two folders "
                              "or run in the manuscript folder")
        return current_build(project)
    if project is not None and NAME.match(text):
        folder = snapshots_dir(project) / text
        if (folder / MANIFEST).is_file():
            return snapshot_build(folder)
    path = Path(text)
    if (path / MANIFEST).is_file():
        return snapshot_build(path)
    if path.is_dir():
        if not any(path.glob("*.json")) and (path / "figures").is_dir():
            path = path / "figures"             # a results folder was given
        return Build(str(path), path)
    known = [m["name"] for m in list_snapshots(project)] if project is not None else []
    raise FigkitError("no snapshot or folder of that name", value=text,
                      allowed=known or "a folder of built figures (take a snapshot with "
                      "'figkit snapshot NAME')")
