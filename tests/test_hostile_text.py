"""Sheet text never becomes markup or script, and control characters never reach a file, a page
or a terminal raw.

Outside references:
* reStructuredText: docutils, the reference implementation of the reStructuredText Markup
  Specification (its "Escaping Mechanism": a backslash makes the next character itself);
* HTML: Python's ``html.parser`` reads docutils' output; headless Chromium (Debian's package,
  through W3C WebDriver) shows Snakemake's report to a reader;
* XML well-formedness: Python's ``xml.etree`` (XML 1.0, section 2.2: most C0 controls are not
  characters of an XML document);
* control characters: Unicode general category Cc (``unicodedata``) and the bidirectional
  embedding, override and isolate controls of Unicode Standard Annex #9 (U+202A-U+202E,
  U+2066-U+2069); their expected escapes are what Python's ``repr`` writes for them;
* open data: Palmer penguins (Gorman, Williams & Fraser 2014) as the report project's dataset.
"""
from __future__ import annotations

import csv
import json
import random
import re
import shutil
import subprocess
import sys
import unicodedata
import xml.etree.ElementTree as ET
from html.parser import HTMLParser
from pathlib import Path

import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st

from browser import visit
from conftest import REPO, copy_project, make_demo_data, snakemake
from figkit.sheet import check_row, validate_config
from figkit.text import ReportText, rst_text

BIDI = set("\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069")   # Unicode UAX #9


def is_control(ch: str) -> bool:
    return unicodedata.category(ch) == "Cc" or ch in BIDI


def escaped(text: str) -> str:
    """Control characters as Python's repr writes them (\\x1b, \\u202e)."""
    return "".join(repr(ch)[1:-1] if is_control(ch) else ch for ch in text)


def one_line(text: str) -> str:
    return re.sub(r"\s+", " ", text).strip()   # HTML shows any whitespace run as one space


# Pieces of hostile sheet text: HTML, event attributes, javascript: links, reStructuredText
# directives (raw HTML, file inclusion), roles, references, substitutions, script-element breakers.
HOSTILE = [
    '<script>window.__pwned = "script"</script>',
    '<img src=x onerror="window.__pwned = \'onerror\'">',
    '<svg onload="window.__pwned=\'svg\'"></svg>',
    '<a href="javascript:window.__pwned=\'href\'">read me</a>',
    "javascript:window.__pwned='bare'",
    "`read me <javascript:window.__pwned='rst-link'>`_",
    ".. raw:: html\n\n   <img src=x onerror=\"window.__pwned='raw'\">",
    "\n\n.. raw:: html\n\n   <script>window.__pwned='raw-script'</script>\n\n",
    ".. role:: h(raw)\n   :format: html\n\n:h:`<img src=x onerror=\"window.__pwned='role'\">`",
    ".. include:: /etc/hostname",
    "</script><script>window.__pwned='breakout'</script>",
    "<!--<script>",
    "|sub| [1]_ *emph* **strong** ``code`` :math:`x` _`target` http://example.org a@b.org",
    "Title\n=====\n\n- item\n\n1. first\n\n::\n\n    block",
    "&lt;b&gt; &amp; &#60;i&#62; <b>bold?</b> <style>body{display:none}</style>",
    "<div style=\"position:fixed;inset:0\" onmouseover=\"window.__pwned='hover'\">x</div>",
    "{{ 7*7 }} {% if 1 %}jinja{% endif %}",
]
WORDS = ["Dissolved", "oxygen", "µS/cm", "m³/s", "(Tukey 1977)", "naïve", "—", "n = 12;", "50%",
         "\\", "'quoted'", '"double"', "a_b", "x*y", "[note]", "co-author's"]


def hostile_captions(n: int, seed: int) -> list[str]:
    """``n`` captions, each two or three hostile pieces among ordinary words, with line breaks
    and indentation between them (a quoted multi-line cell)."""
    rng = random.Random(seed)
    out = []
    for _ in range(n):
        parts = rng.sample(HOSTILE, rng.randint(2, 3)) + rng.sample(WORDS, 3)
        rng.shuffle(parts)
        out.append("".join(p + rng.choice([" ", "\n", "\n\n   ", "  "]) for p in parts).strip())
    return out


class _Tags(HTMLParser):
    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags, self.attrs, self.text = [], [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs += attrs

    def handle_data(self, data):
        self.text.append(data)


def html_of(rst: str) -> _Tags:
    from docutils.core import publish_parts
    parsed = _Tags()
    parsed.feed(publish_parts(rst, writer="html")["body"])
    return parsed


# -------------------------------------------------------------- captions as reStructuredText

sheet_text = st.lists(st.one_of(st.text(), st.sampled_from(HOSTILE), st.sampled_from(WORDS),
                                st.sampled_from(["\n", "\n\n", "   ", "\t", "\\", "`", "::"])),
                      max_size=8).map("".join)


@settings(max_examples=300, deadline=None)
@given(sheet_text)
def test_caption_text_is_literal_in_docutils(text):
    """Whatever a cell holds, docutils (the reference reStructuredText implementation) turns the
    caption into one paragraph of exactly that text: no other element, no attribute, no
    link, no inclusion."""
    parsed = html_of(rst_text(text))
    expected = escaped(one_line(text))
    assert parsed.tags == (["p"] if expected else [])
    assert parsed.attrs == []
    assert "".join(parsed.text).strip() == expected


@settings(max_examples=300, deadline=None)
@given(sheet_text)
def test_report_param_text_cannot_end_a_script_element(text):
    """What Snakemake embeds in a <script> of its page (str of the param) has no '<' (HTML
    Living Standard, "script data state": only '</' or '<!--' can end or confuse the script),
    no control character, and reads back as the cell's text (JSON, RFC 8259)."""
    s = str(ReportText(text))
    assert "<" not in s and ">" not in s and "&" not in s
    assert not any(is_control(ch) for ch in s)
    assert json.loads(s) == text


# ---------------------------------------------------------------- the report in a browser

def penguins_project(root: Path, captions: list[str]) -> Path:
    """A small manuscript over the Palmer penguins: one histogram per caption, PNG only."""
    palmerpenguins = pytest.importorskip("palmerpenguins")
    (root / "config").mkdir(parents=True)
    (root / "data").mkdir()
    shutil.copytree(REPO / "figkit" / "styles", root / "styles")
    palmerpenguins.load_penguins().to_csv(root / "data" / "penguins.csv", index=False)
    (root / "config" / "config.yaml").write_text(
        "datasets: {penguins: data/penguins.csv}\nformats: [png]\n", encoding="utf-8")
    with (root / "config" / "figures.tsv").open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, delimiter="\t", lineterminator="\n")
        w.writerow(["id", "dataset", "chart", "x", "strata", "caption"])
        for i, caption in enumerate(captions):
            w.writerow([f"bill-{i}", "penguins", "histogram", "bill_length_mm", "species", caption])
    (root / "Snakefile").write_text(
        'import figkit.workflow\nconfigfile: "config/config.yaml"\n'
        'include: figkit.workflow.rules()\n\n'
        'rule all:\n    input: rules.all_figures.input\n', encoding="utf-8")
    return root


# Open every figure's entry as a reader would (the report's own app and its showResultInfo),
# read the Description shown, let any planted handler fire, then report.
WALK_REPORT = """
const done = arguments[arguments.length - 1];
const seen = {};
for (const path of Object.keys(results)) {
    ReactDOM.flushSync(() => app.showResultInfo(path));
    const box = document.querySelector('.prose');
    const caption = box ? box.querySelector('p') : null;
    seen[path] = {text: caption ? caption.textContent : null,
                  caption_tags: caption ? Array.from(caption.querySelectorAll('*')).map(e => e.tagName) : null,
                  tags: box ? Array.from(box.querySelectorAll('*')).map(e => e.tagName) : null,
                  attrs: box ? Array.from(box.querySelectorAll('*')).flatMap(
                      e => Array.from(e.attributes).map(a => a.name)) : null};
}
setTimeout(() => done(seen), 1500);
"""


def test_report_shows_hostile_captions_as_text(tmp_path):
    """`snakemake --report`: every caption, built from hostile cells, is shown literally in
    headless Chromium; no planted script runs (window.__pwned stays unset) and the browser logs
    no error."""
    captions = hostile_captions(6, seed=18)
    project = penguins_project(tmp_path / "p", captions)
    snakemake(project)
    snakemake(project, "--report", "report.html")
    page = visit(project / "report.html", script=WALK_REPORT, hooks=("__pwned",),
                 screenshot=tmp_path / "report.png")
    assert page.hooks == {"__pwned": None}
    assert page.errors == []
    seen = page.script_result
    assert len(seen) == len(captions)
    for i, caption in enumerate(captions):
        (entry,) = [v for k, v in seen.items() if k.endswith(f"bill-{i}.png")]
        assert one_line(entry["text"]) == one_line(f"bill-{i} (histogram). {escaped(one_line(caption))}")
        assert set(entry["caption_tags"]) <= {"STRONG"}, entry["caption_tags"]
        # the rest is figkit's own table of numbers, list of cautions (docutils' HTML)
        assert set(entry["tags"]) <= {"P", "STRONG", "TABLE", "COLGROUP", "COL", "THEAD", "TBODY",
                                      "TR", "TH", "TD", "UL", "LI"}, entry["tags"]
        assert set(entry["attrs"]) <= {"class", "border", "width", "valign"}, entry["attrs"]


# ------------------------------------------------------------------- control characters

controls = st.sampled_from([chr(c) for c in [*range(0, 9), 0x0b, 0x0c, *range(0x0e, 0x20),
                                               *range(0x7f, 0xa0)]] + sorted(BIDI))


@settings(max_examples=200, deadline=None)
@given(st.sampled_from(["caption", "x", "filter", "options", "strata", "dataset"]),
       st.text(max_size=10), controls, st.text(max_size=10))
def test_control_character_in_a_cell_is_refused_in_one_line(field, before, control, after):
    value = before + control + after
    row = check_row(7, {"id": "fig-a", "dataset": "d", "chart": "histogram", field: value})
    assert row.error is not None
    message = str(row.error)
    assert "\n" not in message and not any(is_control(ch) for ch in message)
    for part in ("sheet row 7", "figure 'fig-a'", f"field '{field}'", repr(control)[1:-1],
                 "allowed:"):
        assert part in message, (part, message)


def test_control_character_in_settings_is_refused(tmp_path):
    from figkit.errors import FigkitError
    with pytest.raises(FigkitError) as err:
        validate_config({"datasets": {"d": "d.csv"}, "fields": {"site": {"label": "Site\x1b[2J"}}},
                        tmp_path)
    message = str(err.value)
    assert "fields.site.label" in message and "\\x1b" in message and "\x1b" not in message


def test_render_refuses_a_control_character_without_traceback_or_files(tmp_path):
    project = penguins_project(tmp_path / "p", ["Bill length\x1b]0;pwned\x07 by species"])
    proc = subprocess.run([sys.executable, "-m", "figkit", "render", "--id", "bill-0"], cwd=project,
                          capture_output=True, text=True)
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in proc.stderr
    assert not any(is_control(ch) for ch in proc.stderr.strip())
    for part in ("sheet row 2", "figure 'bill-0'", "field 'caption'", "\\x1b", "allowed:"):
        assert part in lines[0]
    assert not (project / "results" / "figures").exists() or \
        not any((project / "results" / "figures").iterdir())


# Control characters planted in category values of the demo data: an ANSI colour sequence, NUL,
# a right-to-left override, NEL (C1), DEL, vertical tab, BEL and a line break.
PLANTED = {"land_use": {"forest": "for\x1b[31mest", "pasture": "past\x00ure",
                        "arable": "ara\u202eble", "urban": "ur\x85b\x7fan"},
           "taxon_group": None, "site": None}


def _plant(path: Path) -> dict:
    frame = pd.read_csv(path, low_memory=False)
    planted = {}
    for col, mapping in PLANTED.items():
        if col not in frame:
            continue
        if mapping is None:   # every other value gets one of these
            values = sorted(frame[col].dropna().unique())
            marks = ["\x0b", "\x07", "\n", "\x01"]
            mapping = {v: f"{v}{marks[i % len(marks)]}" for i, v in enumerate(values)}
        frame[col] = frame[col].map(lambda v: mapping.get(v, v))
        planted.update(mapping)
    frame.to_csv(path, index=False)
    return planted


def test_demo_with_control_characters_in_categories_writes_well_formed_files(tmp_path):
    project = copy_project(tmp_path / "demo")
    # Rows whose filter names a category value this test rewrites would rightly keep no rows
    # (mayfly-means, and the multi-part figure it is a part of): left out here.
    sheet_path = project / "config" / "figures.tsv"
    kept = [ln for ln in sheet_path.read_text(encoding="utf-8").splitlines()
            if not ln.startswith(("mayfly-means\t", "river-overview\t"))]
    sheet_path.write_text("\n".join(kept) + "\n", encoding="utf-8")
    make_demo_data(project)
    planted = {}
    for name in ("readings.csv", "surveys.csv", "sites.csv"):
        planted.update(_plant(project / "data" / name))
    proc = snakemake(project, "--keep-going")
    assert "\x1b[31m" not in proc.stdout + proc.stderr
    figures = project / "results" / "figures"
    sheet = pd.read_csv(project / "config" / "figures.tsv", sep="\t", dtype=str)
    svgs = sorted(figures.glob("*.svg"))
    assert sorted(p.stem for p in svgs) == sorted(sheet["id"])
    shown_texts = []
    for svg in svgs:
        root = ET.parse(svg).getroot()          # raises on an ill-formed document
        shown_texts += ["".join(t.itertext()) for t in root.iter("{http://www.w3.org/2000/svg}text")]
    everything = "\n".join(shown_texts)
    assert not any(is_control(ch) for ch in everything.replace("\n", ""))
    assert escaped("for\x1b[31mest") in everything          # a panel title or legend entry
    for path in figures.glob("*.stats.csv"):
        text = path.read_text(encoding="utf-8")
        assert not any(is_control(ch) for ch in text.replace("\n", ""))
    labels = [p["label"] for f in figures.glob("*.json")
              for p in json.loads(f.read_text())["panels"]]
    assert escaped("ara\u202eble") in labels
    cautions = [c for f in figures.glob("*.json") for c in json.loads(f.read_text())["cautions"]]
    assert any(escaped("past\x00ure") in c for c in cautions)
    assert not any(is_control(ch) for c in cautions for ch in c)
    pre = subprocess.run([sys.executable, "-m", "figkit", "preflight"], cwd=project,
                         capture_output=True, text=True)
    assert "Traceback" not in pre.stderr and pre.returncode in (0, 1), pre.stderr
    assert f"{len(svgs)} figures" in pre.stdout, pre.stdout
    assert not any(is_control(ch) for ch in (pre.stdout + pre.stderr).replace("\n", ""))
