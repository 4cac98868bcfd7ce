"""figkit's own two-line labels (a colour bar's title) keep their line break: control characters
in data values are escaped where labels are made, but a line break figkit puts in its own text is
drawn as a break, never as the two characters '\\n' (checked in the SVG text, W3C SVG 1.1
<text>/<tspan> elements read with Python's xml.etree)."""
from __future__ import annotations

import xml.etree.ElementTree as ET

SVG = "{http://www.w3.org/2000/svg}"


def test_no_demo_svg_draws_a_backslash_n(built_demo):
    checked = 0
    for svg in sorted((built_demo / "results" / "figures").glob("*.svg")):
        texts = ["".join(el.itertext()) for el in ET.parse(svg).getroot().iter(f"{SVG}text")]
        assert texts, svg.name
        assert not [t for t in texts if "\\n" in t], svg.name
        checked += 1
    rows = (built_demo / "config" / "figures.tsv").read_text(encoding="utf-8").splitlines()[1:]
    assert checked == sum(1 for r in rows if r.strip() and not r.startswith("#"))   # every figure
