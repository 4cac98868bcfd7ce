"""Generated hostile input (issue 17): well over 1,000 bad inputs from a seeded generator, each
run in-process through the command line's ``main`` (as a user runs it, without 1,000 new
interpreters).  For every case: exit status 2 and exactly one line starting ``figkit: error:``,
no traceback, nothing under results/ changed, nothing written outside the project.  Where the
documented verdict is another (preflight fails a damaged file with exit 1, as a linter does) the
case says so.  Bad sheet rows are also built: lint's verdict must equal the build's.

Hang cases (a named pipe where a file belongs, an image declaring 2^31 pixels, exponential
entities, a megabyte of nested parentheses) run under a wall-clock alarm of a few seconds.

Outside references, beside each generator: PNG (ISO/IEC 15948: signature, chunk layout, CRC-32
of ISO 3309 as computed by Python's zlib.crc32, IEND last), PDF (ISO 32000-1, 7.5.5: a file ends
with %%EOF), XML 1.0 (section 4.2: entity declarations; the 'billion laughs' is the textbook
exponential case, from memory), POSIX mkfifo(3) (opening a pipe for reading blocks until a
writer comes), IEEE 754 (inf in a weight), ISO 8601 dates.
"""
from __future__ import annotations

import contextlib
import io
import logging
import os
import random
import shutil
import signal
import struct
import sys
import time
import zlib
from collections import Counter
from pathlib import Path

import pytest

from figkit.cli import main

SEED = 20261203
COUNTS: Counter = Counter()        # cases per class, printed at the end (the report's numbers)


# ------------------------------------------------------------------------------ running a case

class Hang(Exception):
    pass


def _alarm(signum, frame):
    raise Hang()


def run(argv: list[str], limit_s: float = 20.0) -> tuple[int, str, str]:
    """``figkit ARGV`` in this process: (exit status, stdout, stderr).  An exception that escapes
    main is a traceback a user would have seen; the alarm turns a hang into a failure."""
    out, err = io.StringIO(), io.StringIO()
    logging.getLogger().handlers.clear()          # main's basicConfig binds to this call's stderr
    old = signal.signal(signal.SIGALRM, _alarm)
    signal.setitimer(signal.ITIMER_REAL, limit_s)
    try:
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            try:
                code = main(argv)
            except SystemExit as exc:            # argparse's own refusals
                code = exc.code
    except Hang:
        raise AssertionError(f"figkit {' '.join(argv)[:200]} took over {limit_s} s") from None
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)
    return code, out.getvalue(), err.getvalue()


def tree_state(*roots: Path) -> dict:
    """path -> (size, mtime_ns) of every file under ``roots`` (what a case must not change)."""
    state = {}
    for root in roots:
        for dirpath, dirnames, files in os.walk(root):
            for name in files + [d for d in dirnames if Path(dirpath, d).is_symlink()]:
                p = Path(dirpath, name)
                try:
                    st = p.lstat()
                except OSError:
                    continue
                state[str(p)] = (st.st_size, st.st_mtime_ns)
    return state


def expect_one_error(argv, code, out, err, *, must=()) -> str:
    assert "Traceback" not in err + out, (argv, err[-2000:])
    assert code == 2, (argv, code, err[-1000:])
    lines = [ln for ln in err.splitlines() if ln.startswith("figkit: error:")]
    assert len(lines) == 1, (argv, err[-1000:])
    for word in must:
        assert word in lines[0], (argv, word, lines[0])
    return lines[0]


# ------------------------------------------------------------------------------ the project

@pytest.fixture(scope="module")
def world(tmp_path_factory):
    """A starter project (figkit init) with its two figures built, a table of awkward columns,
    and a folder beside it that no case may write into."""
    base = tmp_path_factory.mktemp("hostile")
    root = base / "proj"
    code, _, err = run(["init", str(root), "--scale", "0.02"])
    assert code == 0, err
    with _chdir(root):
        code, _, err = run(["render", "--id", "oxygen-by-land-use", "--id", "taxa-by-season"], 120)
    assert code == 0, err
    outside = base / "outside"
    outside.mkdir()
    (outside / "keep.txt").write_text("untouched\n", encoding="utf-8")
    return root, outside


@contextlib.contextmanager
def _chdir(path: Path):
    here = os.getcwd()
    os.chdir(path)
    try:
        yield
    finally:
        os.chdir(here)


# ------------------------------------------------------------------------------ hostile files

def png_chunk(kind: bytes, data: bytes) -> bytes:
    """One PNG chunk: length, type, data, CRC-32 over type and data (ISO/IEC 15948, 5.3)."""
    return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))


def png_bomb(width: int, height: int) -> bytes:
    """A PNG whose header declares width x height pixels of 8-bit RGB and whose data is a few
    bytes: decoding it would need width*height*3 bytes."""
    ihdr = struct.pack(">IIBBBBB", width, height, 8, 2, 0, 0, 0)
    idat = zlib.compress(b"\x00" * 1024)
    return (b"\x89PNG\r\n\x1a\n" + png_chunk(b"IHDR", ihdr) + png_chunk(b"IDAT", idat)
            + png_chunk(b"IEND", b""))


def laughs(depth: int) -> bytes:
    """The exponential entity case: each entity ten of the one before (XML 1.0, 4.2)."""
    ents = ['<!ENTITY l0 "lol">'] + [f'<!ENTITY l{i} "{("&l" + str(i - 1) + ";") * 10}">'
                                     for i in range(1, depth)]
    return (f'<?xml version="1.0"?>\n<!DOCTYPE svg [{"".join(ents)}]>\n'
            f'<svg xmlns="http://www.w3.org/2000/svg"><text>&l{depth - 1};</text></svg>').encode()


def external_entity(target: str) -> bytes:
    return (f'<?xml version="1.0"?>\n<!DOCTYPE svg [<!ENTITY x SYSTEM "{target}">]>\n'
            '<svg xmlns="http://www.w3.org/2000/svg"><desc>&x;</desc></svg>').encode()


def hostile_figure_files(rng: random.Random, good: dict[str, bytes]) -> list[tuple[str, str, bytes | str]]:
    """(class, file name, content or a kind of non-file) for the figure-file classes."""
    cases = []
    for kind in ("pdf", "png", "svg"):
        data = good[kind]
        for _ in range(40):                                  # cut short anywhere
            cases.append(("truncated", f"t.{kind}", data[:rng.randrange(0, len(data) - 40)]))
        for _ in range(10):                                  # bytes of another kind
            other = rng.choice([k for k in good if k != kind])
            cases.append(("wrong extension", f"w.{kind}", good[other]))
        for _ in range(8):                                   # random bytes
            cases.append(("random bytes", f"r.{kind}",
                          bytes(rng.randrange(256) for _ in range(rng.randrange(1, 3000)))))
        cases.append(("empty", f"e.{kind}", b""))
        cases.append(("directory", f"d.{kind}", "dir"))
        cases.append(("named pipe", f"p.{kind}", "fifo"))
    for _ in range(25):                                      # decompression bombs
        w, h = rng.randrange(10_000, 2 ** 31 - 1), rng.randrange(10_000, 2 ** 31 - 1)
        cases.append(("png bomb", "b.png", png_bomb(w, h)))
    for _ in range(15):
        cases.append(("svg entities", "x.svg", laughs(rng.randrange(3, 12))))
    for target in ("file:///etc/passwd", "http://example.invalid/x", "/etc/hostname",
                   "../../../outside/keep.txt") * 3:
        cases.append(("svg external reference", "x.svg", external_entity(target)))
    for _ in range(10):                                      # a subject string a megabyte deep
        cut = good["pdf"].rfind(b"/Subject (") + len(b"/Subject (")
        cases.append(("pdf nested string", "n.pdf",
                      good["pdf"][:cut] + b"(" * rng.randrange(500_000, 2_000_000) + b"\n%%EOF\n"))
    for name in ("f.txt", "f.jpg", "f", "f.PDFX"):
        cases.append(("wrong extension", name, good["png"]))
    return cases


def place(folder: Path, name: str, content) -> Path:
    path = folder / name
    if content == "dir":
        path.mkdir()
    elif content == "fifo":
        os.mkfifo(path)
    else:
        path.write_bytes(content)
    return path


def remove(path: Path) -> None:
    if path.is_dir() and not path.is_symlink():
        shutil.rmtree(path)
    elif path.exists() or path.is_symlink():
        path.unlink()


def test_hostile_figure_files_info_and_compare(world, tmp_path):
    """figkit info FILE and figkit compare OLD NEW on hostile files: one line, exit 2."""
    root, outside = world
    figures = root / "results" / "figures"
    good = {k: (figures / f"taxa-by-season.{k}").read_bytes() for k in ("pdf", "png", "svg")}
    rng = random.Random(SEED)
    cases = hostile_figure_files(rng, good)
    before = tree_state(root, outside)
    box = tmp_path / "files"
    box.mkdir()
    for cls, name, content in cases:
        path = place(box, name, content)
        try:
            start = time.monotonic()
            argv = ["info", str(path)]
            expect_one_error(argv, *run(argv, limit_s=5))     # hang cases: a few seconds each
            assert time.monotonic() - start < 5
            COUNTS[f"info: {cls}"] += 1
        finally:
            remove(path)
    # compare: a build folder whose render is hostile (the other side the good build)
    png_cases = [c for c in cases if c[1].endswith(".png") and c[0] != "wrong extension"][:60]
    old = tmp_path / "old"
    shutil.copytree(figures, old)
    for cls, _, content in png_cases:
        target = old / "taxa-by-season.png"
        remove(target)
        place(old, "taxa-by-season.png", content)
        argv = ["compare", str(old), str(figures), "--project", str(root)]
        code, out, err = run(argv, limit_s=30)
        if cls in ("directory", "named pipe"):   # not a file: no PNG on that side
            assert code == 0 and "Traceback" not in err, err
        else:
            expect_one_error(argv, code, out, err)
        COUNTS[f"compare: {cls}"] += 1
    # compare: a build folder whose sidecar has shapes figkit never writes
    import json
    record = json.loads((figures / "taxa-by-season.json").read_text(encoding="utf-8"))
    damaged = []
    for key in ("panels", "inputs", "files", "layout", "colours", "size_mm", "cautions"):
        for bad in (5, "text", [1, 2], {"a": 1}, None, True):
            changed = dict(record, **{key: bad})
            if bad is None or type(bad) is type(record.get(key)) and key != "panels":
                continue
            damaged.append((f"sidecar '{key}' of another kind", json.dumps(changed).encode()))
    for cut in rng.sample(range(10, len(json.dumps(record))), 10):
        damaged.append(("sidecar cut short", json.dumps(record).encode()[:cut]))
    for cls, content in damaged:
        (old / "taxa-by-season.json").write_bytes(content)
        argv = ["compare", str(old), str(figures), "--project", str(root)]
        expect_one_error(argv, *run(argv, limit_s=30))
        COUNTS[f"compare: {cls.split(' of ')[0] if 'of another' in cls else cls}"] += 1
    assert tree_state(root, outside) == before


def test_hostile_files_in_a_build_fail_preflight_checks_not_the_command(world, tmp_path):
    """figkit preflight over a results folder whose files were replaced by hostile ones: the
    figure fails its 'readable' (or 'sidecar readable') check, exit 1, no traceback; the
    sidecar may be hostile too."""
    root, _ = world
    figures = root / "results" / "figures"
    saved = {p.name: p.read_bytes() for p in figures.iterdir() if p.is_file()}
    good = {k: saved[f"taxa-by-season.{k}"] for k in ("pdf", "png", "svg")}
    rng = random.Random(SEED + 1)
    cases = [c for c in hostile_figure_files(rng, good)
             if c[0] in ("truncated", "png bomb", "svg entities", "svg external reference",
                         "random bytes", "empty", "directory", "named pipe")][::3]
    sidecar_cases = [b"", b"[1, 2]", b"{" * 100_000, b'{"files": 5}', b'{"files": {"pdf": 7}}',
                     b'{"files": {"pdf": "../../../etc/passwd"}, "size_mm": "x"}', b"\xff\xfe{",
                     b'{"id": "' + b"9" * 5000 + b'"}', b"1e999999", b'"just a string"']
    try:
        for cls, name, content in cases + [("sidecar", "s.json", c) for c in sidecar_cases]:
            kind = name.rsplit(".", 1)[1]
            target = figures / f"taxa-by-season.{kind}"
            remove(target)
            place(figures, target.name, content)
            argv = ["preflight", "taxa-by-season", "--project", str(root)]
            code, out, err = run(argv, limit_s=15)
            assert "Traceback" not in out + err, err
            assert code == 1, (cls, code, out, err)
            assert "taxa-by-season" in out
            COUNTS[f"preflight: {cls}"] += 1
    finally:
        for p in list(figures.iterdir()):
            if p.name.startswith("taxa-by-season"):
                remove(p)
        for name, data in saved.items():
            (figures / name).write_bytes(data)


# ------------------------------------------------------------------------------ bad rows

def awkward_table(rng: random.Random, n: int = 360):
    """Columns each made to trip one check (see bad_rows)."""
    import pandas as pd
    numbers = [str(i * 7) for i in range(n)]
    frame = pd.DataFrame({
        "site": [f"S{i % 6}" for i in range(n)],
        "temp": [rng.uniform(0, 25) for _ in range(n)],
        "count": [rng.randrange(0, 50) for _ in range(n)],
        "mixed": [numbers[i] if i % 9 else "none" for i in range(n)],       # >50 numbers + text
        "when": [f"2024-{1 + i // 28 % 12:02d}-{1 + i % 28:02d}" for i in range(n)],  # ISO 8601
        "wt": ["inf" if i % 17 == 3 else "2" for i in range(n)],           # IEEE 754 +inf
        "gone": [""] * n,                                                  # every value missing
        "many": [f"u{i}" for i in range(n)],                               # one level per row
        "neg": [-1.0 if i % 5 == 0 else 1.0 for i in range(n)],
    })
    return frame


COLUMNS = ["id", "dataset", "chart", "x", "y", "colour", "weight", "strata", "trend", "size",
           "height_mm", "filter", "options"]


def bad_rows(rng: random.Random, k: int) -> list[tuple[str, dict]]:
    """(class, cells) of rows each wrong in one way the build refuses before drawing."""
    words = ["scater", "histo", "bars", "pie", "heat", "boxes", "Scatter", "line", "x", "ölçü"]
    makers = {
        "unknown chart": lambda: dict(chart=rng.choice(words), x="temp"),
        "unknown column": lambda: dict(chart="histogram", x=rng.choice(["tmp", "Temp", "temp_c",
                                                                           "temperature", "t"])),
        "text where a number belongs": lambda: dict(chart=rng.choice(["histogram", "density"]),
                                                    x=rng.choice(["site", "mixed", "when"])),
        "numbers mixed with text on a category axis": lambda: dict(
            chart=rng.choice(["box", "violin"]), x="mixed", y="temp"),
        "dates as text on a category axis": lambda: dict(chart=rng.choice(["box", "violin"]),
                                                         x="when", y="temp"),
        "infinite weights": lambda: rng.choice([dict(chart="count-bars", x="site", weight="wt"),
                                                dict(chart="tiles", x="site", y="when", weight="wt")]),
        "negative weights": lambda: dict(chart="count-bars", x="site", weight="neg"),
        "panels draw no data": lambda: dict(chart="scatter", x="temp", y="gone",
                                            strata=rng.choice(["", "site"])),
        "too many categories": lambda: dict(chart="count-bars", x="many"),
        "too many panels": lambda: dict(chart="histogram", x="temp", strata="many"),
        "filter keeps nothing": lambda: dict(chart="histogram", x="temp",
                                             filter=f"temp > {rng.randrange(100, 10**6)}"),
        "filter names no column": lambda: dict(chart="histogram", x="temp",
                                               filter=f"{rng.choice(['tmp', 'sites', 'x'])} > 1"),
        "filter syntax": lambda: dict(chart="histogram", x="temp", filter=rng.choice(
            ["temp >", "(temp > 1", "temp >> 2", "temp in [1,", "and temp", "temp ≥ 3", "temp > ٣"])),
        "unknown option": lambda: dict(chart="histogram", x="temp",
                                       options=f"{rng.choice(['bin', 'colour', 'spam'])}=3"),
        "option not a finite number": lambda: dict(chart="box", x="site", y="temp",
                                                   options=f"whisker={rng.choice(['inf', 'nan', '-1', 'x'])}"),
        "unknown size": lambda: dict(chart="histogram", x="temp",
                                     size=rng.choice(["huge", "A4", "single-column", "0"])),
        "bad height": lambda: dict(chart="histogram", x="temp",
                                   height_mm=rng.choice(["-5", "0", "3", "tall", "1e999", "5000"])),
        "trend where none is drawn": lambda: dict(chart="histogram", x="temp", trend="line"),
        "y given to a one-field chart": lambda: dict(chart="histogram", x="temp", y="count"),
        "colour field too many values": lambda: dict(chart="scatter", x="temp", y="count",
                                                     colour="many"),
        "colour centre outside its range": lambda: dict(
            chart="scatter", x="count", y="count", colour="temp",
            options=f"centre={rng.choice(['-3', '0', '25', '400', '1e300'])}"),
    }
    names = sorted(makers)
    out = []
    for i in range(k):
        cls = names[i % len(names)]
        cells = dict(dataset="t", **makers[cls]())
        cells["id"] = f"bad-{i:04d}"
        out.append((cls, cells))
    return out


def test_bad_rows_lint_agrees_with_the_build(world):
    """Generated bad rows: `figkit lint` names each row as a problem, and `figkit render` of each
    fails with one line naming the same row; nothing is written under results/."""
    root, outside = world
    rng = random.Random(SEED + 2)
    awkward_table(rng).to_csv(root / "data" / "t.csv", index=False)
    config = root / "config" / "config.yaml"
    sheet = root / "config" / "figures.tsv"
    saved_config, saved_sheet = config.read_bytes(), sheet.read_bytes()
    rows = bad_rows(rng, 400)
    try:
        config.write_text(saved_config.decode().replace("datasets:\n", "datasets:\n  t: data/t.csv\n"),
                          encoding="utf-8")
        sheet.write_text("\t".join(COLUMNS) + "\n" + "".join(
            "\t".join(cells.get(c, "") for c in COLUMNS) + "\n" for _, cells in rows),
            encoding="utf-8")
        before = tree_state(root / "results", outside)
        code, out, err = run(["lint", "--project", str(root)], limit_s=300)
        assert "Traceback" not in err and code == 2
        lint_bad = {ln.split("figure '")[1].split("'")[0] for ln in err.splitlines()
                    if ln.startswith("figkit: error:") and "figure '" in ln}
        ids = [cells["id"] for _, cells in rows]
        assert lint_bad == set(ids), sorted(set(ids) - lint_bad)[:10]
        for chunk in range(0, len(ids), 50):      # one interpreter, 50 figures a call
            part = ids[chunk:chunk + 50]
            argv = ["render", "--project", str(root), *[a for fid in part for a in ("--id", fid)]]
            code, out, err = run(argv, limit_s=300)
            assert "Traceback" not in err and code == 2, err[-2000:]
            errors = [ln for ln in err.splitlines() if ln.startswith("figkit: error:")]
            assert len(errors) == len(part), err[-2000:]
            for fid, line in zip(part, errors):   # in order, each naming its own row
                assert f"figure '{fid}'" in line, (fid, line)
        for cls, _ in rows:
            COUNTS[f"bad row (lint = build): {cls}"] += 1
        assert tree_state(root / "results", outside) == before
    finally:
        config.write_bytes(saved_config)
        sheet.write_bytes(saved_sheet)


# ------------------------------------------------------------------------------ bad project files

def bad_settings(rng: random.Random, base: str, k: int) -> list[tuple[str, str, bytes]]:
    """(class, which file, bytes) of broken settings, sheets and data files."""
    sig = [b"\x89PNG\r\n\x1a\n", b"%PDF-1.7\n", b"\x1f\x8b\x08", b"PK\x03\x04", b"\xff\xfe\x00\x00"]
    out = []
    for i in range(k):
        c = i % 8
        if c == 0:
            out.append(("settings not UTF-8", "config/config.yaml",
                        base.replace("Season", "S\xe4son").encode("latin-1")))
        elif c == 1:
            out.append(("settings not YAML", "config/config.yaml",
                        rng.choice([b"a: [1, 2", b"datasets: {x: }: :", b"\tkey: 1\n  - x"])))
        elif c == 2:
            out.append(("results folder refused", "config/config.yaml", base.replace(
                "results: results", "results: " + rng.choice(["/proc/x", "/etc", "Snakefile",
                                                              "Snakefile/x", "a" * 300])).encode()))
        elif c == 3:
            out.append(("unknown style", "config/config.yaml", base.replace(
                "style: house", f"style: {rng.choice(['hous', 'journal', '../x'])}").encode()))
        elif c == 4:
            out.append(("sheet is binary", "config/figures.tsv",
                        rng.choice(sig) + bytes(rng.randrange(256) for _ in range(50))))
        elif c == 5:
            out.append(("sheet not UTF-8", "config/figures.tsv",
                        "id\tdataset\tchart\tx\nf\treadings\thistogram\twat\xe9r\n".encode("latin-1")))
        elif c == 6:
            out.append(("sheet without its columns", "config/figures.tsv",
                        rng.choice([b"", b"\n", b"name\tkind\nf\tscatter\n", b"id\nf\n"])))
        else:
            out.append(("settings of the wrong shape", "config/config.yaml", rng.choice(
                [b"[1, 2, 3]", b"datasets: 5", b"formats: [gif]", b"sizes: {full: -3}",
                 b"datasets: {readings: data/readings.csv}\nstream_above_mb: x"])))
    return out


def test_broken_settings_and_sheets_give_one_line(world):
    root, outside = world
    config = root / "config" / "config.yaml"
    saved = {p: (root / p).read_bytes() for p in ("config/config.yaml", "config/figures.tsv")}
    rng = random.Random(SEED + 3)
    cases = bad_settings(rng, saved["config/config.yaml"].decode(), 160)
    before = tree_state(root / "results", root / "data", outside)   # config/ is the case itself
    try:
        for cls, which, data in cases:
            (root / which).write_bytes(data)
            for argv in (["lint", "--project", str(root)],
                         ["render", "--id", "oxygen-by-land-use", "--project", str(root)]):
                expect_one_error(argv, *run(argv, limit_s=30))
            (root / which).write_bytes(saved[which])
            COUNTS[f"project files: {cls}"] += 2
    finally:
        for p, data in saved.items():
            (root / p).write_bytes(data)
    assert config.read_bytes() == saved["config/config.yaml"]
    assert tree_state(root / "results", root / "data", outside) == before


def test_bad_data_files_give_one_line(world):
    root, outside = world
    data = root / "data" / "readings.csv"
    saved = data.read_bytes()
    rng = random.Random(SEED + 4)
    before = tree_state(root / "results", outside)
    kinds = ["latin-1 byte", "utf-16 without BOM", "binary", "empty", "header only", "folder",
             "named pipe", "gzip cut short"]
    try:
        for i in range(80):
            cls = kinds[i % len(kinds)]
            remove(data)
            if cls == "latin-1 byte":    # inside a value the figure reads (a land use)
                starts = [i for i in range(len(saved) // 2, len(saved) - 10)
                          if saved.startswith(b",forest", i)]
                at = rng.choice(starts) + 3
                data.write_bytes(saved[:at] + b"\xe9" + saved[at:])
            elif cls == "utf-16 without BOM":
                data.write_bytes(saved[:4000].decode("utf-8", "ignore").encode("utf-16-le"))
            elif cls == "binary":
                data.write_bytes(b"\x89PNG\r\n\x1a\n" + bytes(rng.randrange(256) for _ in range(200)))
            elif cls == "empty":
                data.write_bytes(b"")
            elif cls == "header only":
                data.write_bytes(saved.split(b"\n", 1)[0] + b"\n")
            elif cls == "folder":
                data.mkdir()
            elif cls == "named pipe":
                os.mkfifo(data)
            else:
                data.write_bytes(zlib.compress(saved)[:rng.randrange(10, 200)])
            argv = ["render", "--id", "oxygen-by-land-use", "--project", str(root)]
            expect_one_error(argv, *run(argv, limit_s=15))
            COUNTS[f"data file: {cls}"] += 1
    finally:
        remove(data)
        data.write_bytes(saved)
    assert tree_state(root / "results", outside) == before


def test_failed_init_leaves_nothing(tmp_path):
    rng = random.Random(SEED + 5)
    before = tree_state(tmp_path)
    for i in range(60):
        target = tmp_path / f"new-{i}"
        scale = rng.choice(["0", "-1", "nan", "inf", "-inf", "20.5", "1e308", "-0", "abc", ""])
        argv = ["init", str(target), f"--scale={scale}"]
        expect_one_error(argv, *run(argv), must=("scale",))
        assert not target.exists()
        COUNTS["init: bad scale"] += 1
    (tmp_path / "afile").write_text("x", encoding="utf-8")
    (tmp_path / "full").mkdir()
    (tmp_path / "full" / "x").write_text("x", encoding="utf-8")
    before = tree_state(tmp_path)
    for name in ["afile", "full", "afile/below"] * 5:
        argv = ["init", str(tmp_path / name)]
        expect_one_error(argv, *run(argv))
        COUNTS["init: target taken"] += 1
    assert tree_state(tmp_path) == before
    assert not [p for p in tmp_path.iterdir() if ".init-" in p.name]


def test_zz_counts(capsys):
    """The counts per class (at least 1,000 cases in all when the module runs whole)."""
    total = sum(COUNTS.values())
    with capsys.disabled():
        print("\nhostile cases per class:", file=sys.stderr)
        for cls, n in sorted(COUNTS.items()):
            print(f"  {n:5d}  {cls}", file=sys.stderr)
        print(f"  {total:5d}  in all", file=sys.stderr)
    if len(COUNTS) > 40:               # the whole module ran (not a -k selection)
        assert total >= 1000
