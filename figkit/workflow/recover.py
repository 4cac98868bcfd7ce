"""After a build was killed (SIGKILL of Snakemake or of a figure job, a lost node, a power cut):
put the results folder and Snakemake's own records back in a state from which a plain
``snakemake --cores 2`` completes.

Three things a killed build leaves behind, and what is done about each, once per real run at the
first call of an input function (before Snakemake looks at any output, takes its lock or checks
for incomplete files):

* **Incomplete markers** (``.snakemake/incomplete/``): Snakemake marks a job's outputs before it
  runs and unmarks them when it succeeds; on a marked output that exists it stops with
  IncompleteFilesException.  figkit writes a figure's files together and the sidecar last, with
  each other file's SHA-256 in it (``file_sha256``).  A figure whose files all match its
  sidecar is provably whole: its markers are removed.  Otherwise the figure's files are a mix of
  two builds: they are removed (they are figkit's own outputs) and the figure is built again.
  With ``--keep-incomplete`` (the cluster profiles) there are no markers to go by, so every
  figure is checked: see :func:`recover_figures`.
* **Temporary files** (``.<file>.<host>~<pid>.<random>.part``) of processes that no longer run
  (:func:`figkit.provenance.remove_leftovers`).
* **Stale locks** (``.snakemake/locks/``): every figkit run records itself
  (``.snakemake/figkit-runs/<host>~<pid>``, removed when the run ends in any way but a kill).  Locks are stale when a
  recorded run of this host has died and no recorded run is alive and no other Snakemake process
  works in this folder (/proc, Linux); they are then removed.  Otherwise nothing is touched and
  Snakemake's own message (run ``snakemake --unlock``) stands.

Each action is said in one line on stderr.  Snakemake's marker file names are its persistence
layout (``urlsafe_b64encode`` of the output path, split into chunks of at most NAME_MAX - 1
characters, every chunk but the last prefixed '@'; snakemake/persistence/file.py), which
tests/test_hostile_faults.py checks against a real killed run.
"""
from __future__ import annotations

import json
import os
import sys
from base64 import urlsafe_b64encode
from pathlib import Path

SNAKEMAKE_DIR = Path(".snakemake")
RUNS = SNAKEMAKE_DIR / "figkit-runs"


def _say(text: str) -> None:
    sys.stderr.write(f"figkit: {text}\n")


def marker_path(key: str, base: Path = SNAKEMAKE_DIR) -> Path:
    """Where Snakemake keeps the incomplete marker of output ``key`` (see the module docstring)."""
    folder = base / "incomplete"
    try:
        max_len = os.pathconf(folder if folder.is_dir() else ".", "PC_NAME_MAX") or 255
    except (OSError, ValueError):
        max_len = 255
    b64 = urlsafe_b64encode(key.encode()).decode()
    parts = [b64[i:i + max_len - 1] for i in range(0, len(b64), max_len - 1)]
    parts = ["@" + p for p in parts[:-1]] + parts[-1:]
    return folder.joinpath(*parts)


def figure_is_whole(sidecar: Path, outputs: list[Path]) -> bool:
    """Every file in ``outputs`` exists and has the SHA-256 the sidecar records for it."""
    from ..provenance import sha256_file
    try:
        record = json.loads(sidecar.read_text(encoding="utf-8"))
        hashes = record["file_sha256"]
        return isinstance(hashes, dict) and all(
            p.is_file() and hashes.get(p.name) == sha256_file(p) for p in outputs)
    except (OSError, ValueError, KeyError, TypeError):
        return False


def disagrees_with_sidecar(sidecar: Path, outputs: list[Path]) -> bool:
    """The sidecar records a SHA-256 for one of ``outputs`` and that file is missing or differs:
    the figure's files are a mix of two builds.  Files the sidecar records no hash for (a sidecar
    of an older figkit) and a missing or unreadable sidecar count as no evidence (False)."""
    from ..provenance import sha256_file
    try:
        hashes = json.loads(sidecar.read_text(encoding="utf-8"))["file_sha256"]
    except (OSError, ValueError, KeyError, TypeError):
        return False
    if not isinstance(hashes, dict):
        return False
    return any(p.name in hashes and (not p.is_file() or hashes[p.name] != sha256_file(p))
               for p in outputs)


SET_ASIDE = "set-aside"   # under results/figures/: files moved out of the way, never deleted


def _remove(paths) -> None:
    for p in paths:
        try:
            p.unlink()
        except OSError:
            pass


def _set_aside(folder: Path, paths) -> Path:
    """Move files into ``folder/set-aside/`` (replacing what an earlier run put there under the
    same name): files that disagree with their sidecar with no sign of a killed build may be a
    co-author's edit of a figure file, which is not figkit's to delete."""
    dest = folder / SET_ASIDE
    dest.mkdir(exist_ok=True)
    for p in paths:
        try:
            os.replace(p, dest / p.name)
        except OSError:
            pass
    return dest


def recover_figures(results: str, ids, formats, every: bool = False, stale=None) -> list[str]:
    """Markers and files of figures a killed build left (see the module docstring); returns the
    ids whose files were removed (or set aside) to be built again.

    ``every`` (Snakemake's ``--keep-incomplete``, set in the cluster profiles): a failed job's
    files are kept, and Snakemake then records them as finished, with the inputs and settings of
    the job that failed, and removes their markers (``Job.postprocess(error=True)`` calls
    ``persistence.finished``, snakemake/jobs.py).  Two consequences, both handled here:

    * a figure whose job failed or never ran on the node (a cluster job killed for its time, a lost
      node) keeps the previous build's files, which Snakemake now takes as current: every figure
      whose sidecar disagrees with today's row, data, house style or settings (``stale(id)``: what
      changed, as preflight's up-to-date check says it, figkit.preflight.changes_since_built) has
      its files removed at the start of each run, before any job is
      submitted, so that the run builds it again and a job that fails cannot leave them looking
      current (Snakemake itself removes a job's old outputs before it runs it, so nothing is lost
      that a rebuild would have kept);
    * files written outside a job (``figkit render`` by hand, killed while renaming) can be a mix
      of two builds with no marker: every figure whose files disagree with its sidecar's hashes
      is built again, its files moved to ``results/figures/set-aside/`` rather than deleted (they
      may be a co-author's edit).

    About 25 ms for the demo's 16 figures (15 MB) plus one hash per data file."""
    from ..provenance import remove_leftovers
    folder = Path(results) / "figures"
    for p in remove_leftovers(folder):
        _say(f"removed {p.name}, left by a build that was killed while writing")
    remove_leftovers(Path(results) / ".fingerprints")   # stamps' .part files: after 24 hours
    rebuilt = []
    if not every and not (SNAKEMAKE_DIR / "incomplete").is_dir():
        return rebuilt
    for rid in ids:
        keys = [f"{results}/figures/{rid}.{ext}" for ext in ("json", "stats.csv", *formats)]
        markers = [m for m in map(marker_path, keys) if m.is_file()]
        sidecar = Path(keys[0])
        others = [Path(k) for k in keys[1:]] + [folder / f"{rid}.values.csv"]
        present = [p for p in [sidecar, *others] if p.exists()]
        changed = stale(rid) if every and stale and present else None
        if changed:
            _remove(present)
            rebuilt.append(rid)
            _say(f"figure '{rid}': {', '.join(changed)} changed since it was built; its old files are "
                 "removed before it is built again (with keep-incomplete a failed cluster job would "
                 "leave them looking current)")
        elif markers or (every and disagrees_with_sidecar(sidecar, others)):
            if present and not figure_is_whole(sidecar, others):
                rebuilt.append(rid)
                if markers:
                    _remove(present)
                    _say(f"figure '{rid}': its files were left half-written by a build that was "
                         "killed; removed, it is built again")
                else:
                    dest = _set_aside(folder, present)
                    _say(f"figure '{rid}': its files disagree with the SHA-256s its sidecar "
                         f"records (a build killed while writing, or a file edited by hand); moved "
                         f"to {dest}, it is built again")
        _remove(markers)
    return rebuilt


# ------------------------------------------------------------------------------------ locks

def _start_time(pid: int) -> str | None:
    """The process's start time in clock ticks since boot (proc(5), /proc/PID/stat field 22), so
    a reused process id is not taken for the recorded run; None where there is no /proc."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    return stat.rsplit(")", 1)[1].split()[19]


def _record_alive(record: dict) -> bool:
    from ..provenance import _alive
    pid = record.get("pid")
    if not isinstance(pid, int) or not _alive(pid):
        return False
    started = _start_time(pid)
    return started is None or started == record.get("started")


def _other_snakemake_here() -> bool:
    """Another Snakemake process works in this folder (proc(5): cwd link and cmdline)."""
    proc = Path("/proc")
    if not proc.is_dir():
        return True                 # cannot tell: assume so, touch nothing
    here, me = Path.cwd().resolve(), os.getpid()
    for entry in proc.iterdir():
        if not entry.name.isdigit() or int(entry.name) == me:
            continue
        try:
            if Path(os.readlink(entry / "cwd")).resolve() != here:
                continue
            cmd = (entry / "cmdline").read_bytes().replace(b"\0", b" ")
        except OSError:
            continue
        if b"snakemake" in cmd and b"figkit render" not in cmd:
            return True
    return False


def recover_locks() -> bool:
    """Remove Snakemake's locks when the run that took them was killed (module docstring);
    record this run.  True when stale locks were removed."""
    from ..provenance import _HOST
    records = []
    if RUNS.is_dir():
        for path in RUNS.iterdir():
            if path.name.startswith("."):
                continue
            try:
                records.append((path, json.loads(path.read_text(encoding="utf-8"))))
            except (OSError, ValueError):
                continue
    mine = [(p, r) for p, r in records if isinstance(r, dict) and r.get("host") == _HOST]
    dead = [p for p, r in mine if not _record_alive(r)]
    alive = [p for p, r in records if p not in dead]
    locks = [p for p in (SNAKEMAKE_DIR / "locks").glob("*.lock")] if (SNAKEMAKE_DIR / "locks").is_dir() else []
    removed = False
    if locks and dead and not alive and not _other_snakemake_here():
        for p in locks:
            try:
                p.unlink()
                removed = True
            except OSError:
                pass
        if removed:
            _say("removed the locks of a build that was killed (no Snakemake runs here now)")
    for p in dead:
        try:
            p.unlink()
        except OSError:
            pass
    RUNS.mkdir(parents=True, exist_ok=True)
    me = RUNS / f"{_HOST}~{os.getpid()}"
    tmp = me.with_name(f".{me.name}.part")
    tmp.write_text(json.dumps({"host": _HOST, "pid": os.getpid(), "started": _start_time(os.getpid())}),
                   encoding="utf-8")
    tmp.replace(me)
    import atexit
    atexit.register(forget_run)     # any normal end (also "nothing to be done", which skips
    return removed                  # onsuccess); only a killed run leaves its record


def forget_run() -> None:
    """This run ends normally: its record goes (called from onsuccess / onerror)."""
    from ..provenance import _HOST
    try:
        (RUNS / f"{_HOST}~{os.getpid()}").unlink()
    except OSError:
        pass


def recover(results: str, ids, formats, every: bool = False, stale=None) -> None:
    """Everything above, for one real run of the main Snakemake process (``every`` and
    ``stale``: see :func:`recover_figures`)."""
    recover_locks()
    recover_figures(results, ids, formats, every, stale)
