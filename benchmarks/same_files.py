"""Do a change's figures come out byte for byte as before?  Renders every figure of a project's
sheet in one process and records each output file's SHA-256 (PDF, PNG, SVG, TIFF and the values and
stats tables; the sidecar is left out, since it records times and versions):

    python benchmarks/same_files.py PROJECT --save /tmp/before.json     # before the change
    python benchmarks/same_files.py PROJECT --against /tmp/before.json  # after it: exit 1 if any differ

PROJECT is a figkit project with its data (the repository itself once the demo is built, or a copy
of it).  A speed change should leave every file identical; where pixels change on purpose, the
commit says why (DEVELOPERS.md).
"""
from __future__ import annotations

import argparse
import hashlib
import json
import logging
import sys
from pathlib import Path

KINDS = (".pdf", ".png", ".svg", ".tiff", ".csv")


def figure_hashes(root: Path) -> dict[str, str]:
    import matplotlib
    matplotlib.use("Agg")
    from figkit.render import load_project, render
    logging.disable(logging.WARNING)          # cautions are not the question here
    out = {}
    figures = load_project(root).config.results / "figures"
    for row in load_project(root).rows:
        render(load_project(root), row.id)
        for f in sorted(figures.glob(f"{row.id}.*")):
            if f.suffix in KINDS and f.name.split(".")[0] == row.id:
                out[f.name] = hashlib.sha256(f.read_bytes()).hexdigest()
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("project", type=Path)
    group = ap.add_mutually_exclusive_group(required=True)
    group.add_argument("--save", type=Path, help="write the hashes here")
    group.add_argument("--against", type=Path, help="compare with hashes saved before")
    args = ap.parse_args(argv)
    now = figure_hashes(args.project.resolve())
    if args.save:
        args.save.write_text(json.dumps(now, indent=1, sort_keys=True), encoding="utf-8")
        print(f"{len(now)} files hashed into {args.save}")
        return 0
    before = json.loads(args.against.read_text(encoding="utf-8"))
    differ = sorted(k for k in before.keys() | now.keys() if before.get(k) != now.get(k))
    for name in differ:
        what = "new" if name not in before else "gone" if name not in now else "differs"
        print(f"{name}: {what}")
    print(f"{len(now)} files, {len(differ)} differ from {args.against}")
    return 1 if differ else 0


if __name__ == "__main__":
    sys.exit(main())
