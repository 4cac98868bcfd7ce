"""The regression gate: does the current build still match an approved snapshot?

``figkit check NAME`` compares the current build with snapshot NAME (:mod:`figkit.compare`) and
judges each figure:

* pixels: the renders, box-filtered to ``compare_dpi``, must have a mean SSIM (Wang et al. 2004)
  of at least ``ssim_min`` and an RMS difference of at most ``rms_max`` (0-255 scale); a figure
  whose size changed fails;
* numbers: every panel's n and n_dropped exactly, every statistic the sidecar records within the
  relative tolerance ``stats_rel_tol``, the same panels, groups and cautions;
* a figure missing from the current build, or new in it, fails (approve it with a new snapshot);
* a figure of the current build older than its data files fails (the build is not current).

Changed inputs and versions alone never fail a figure: the figure is what is approved.  Exit
status 0 when every figure passes, 1 when any fails, 2 on bad input (the CLI's rule).  A JUnit
XML report (one test case per figure, the reason as the failure message) lets a CI server show
the verdict per figure.
"""
from __future__ import annotations

import xml.etree.ElementTree as ET
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

from .compare import FigureComparison, Report, Thresholds, compare_builds


@dataclass
class Verdict:
    id: str
    passed: bool
    reasons: list[str] = field(default_factory=list)
    seconds: float = 0.0


def judge(fc: FigureComparison, th: Thresholds, stale=()) -> Verdict:
    """One figure's verdict from its comparison (the rules in the module docstring)."""
    reasons = []
    if fc.id in stale:
        reasons.append("older than its data files: rebuild before checking")
    if fc.pixels == "missing":
        reasons.append(fc.note)
    elif fc.size_change:
        reasons.append(f"size changed: {fc.size_change}")
    elif fc.pixels not in ("identical",):
        if fc.ssim is not None and fc.ssim < th.ssim_min:
            reasons.append(f"pixels: SSIM {fc.ssim:.4f} < {th.ssim_min:g}")
        if fc.rms is not None and fc.rms > th.rms_max:
            reasons.append(f"pixels: RMS {fc.rms:.3g} > {th.rms_max:g}")
    reasons += [c.detail for c in fc.conclusions]
    reasons += [c.detail for c in fc.details]
    return Verdict(fc.id, not reasons, reasons)


@dataclass
class GateResult:
    snapshot: str
    report: Report
    verdicts: list[Verdict]

    @property
    def passed(self) -> bool:
        return all(v.passed for v in self.verdicts)

    @property
    def failed(self) -> list[Verdict]:
        return [v for v in self.verdicts if not v.passed]

    def lines(self) -> list[str]:
        out = []
        for v in self.verdicts:
            if v.passed:
                out.append(f"figkit: check: ok      {v.id}")
            else:
                out.append(f"figkit: check: CHANGED {v.id}: {v.reasons[0]}"
                           + (f" (+{len(v.reasons) - 1} more)" if len(v.reasons) > 1 else ""))
        th = self.report.thresholds
        unseen = [f.id for f in self.report.figures if f.pixels == "not compared"]
        if unseen:
            out.append("figkit: caution: no PNG to compare, numbers checked only: "
                       + ", ".join(unseen))
        out.append(f"figkit: check: {len(self.verdicts)} figures against snapshot "
                   f"'{self.snapshot}': {len(self.verdicts) - len(self.failed)} match, "
                   f"{len(self.failed)} differ (SSIM >= {th.ssim_min:g}, RMS <= {th.rms_max:g} "
                   f"at {th.compare_dpi:g} dpi; n exact; statistics within "
                   f"{th.stats_rel_tol:g} relative)")
        return out


def check_against(old, new, th: Thresholds, snapshot: str) -> GateResult:
    """Compare the builds ``old`` (the approved snapshot) and ``new`` (the current build) and
    judge every figure of either."""
    report = compare_builds(old, new, thresholds=th, rel_tol=th.stats_rel_tol)
    per = report.seconds / max(1, len(report.figures))
    verdicts = [judge(fc, th, report.stale) for fc in sorted(report.figures, key=lambda f: f.id)]
    for v in verdicts:
        v.seconds = per
    verdicts += [Verdict(fid, False, [f"missing from the current build (in snapshot "
                                      f"'{snapshot}')"]) for fid in report.removed]
    verdicts += [Verdict(fid, False, [f"not in snapshot '{snapshot}': approve it by taking a "
                                      "new snapshot"]) for fid in report.added]
    return GateResult(snapshot, report, sorted(verdicts, key=lambda v: v.id))


def junit_xml(result: GateResult) -> bytes:
    """The verdicts as JUnit XML: one ``testsuite`` named after the snapshot, one ``testcase``
    per figure (``classname`` figkit.figures, ``name`` the figure id), a ``failure`` element with
    the first reason as ``message`` and all reasons as its text.  The thresholds in force are
    the suite's ``properties``.  Element and attribute names are those of the JUnit XML
    reports that CI servers read (as written by Apache Ant's junitreport task and by pytest's
    ``--junitxml``)."""
    th = result.report.thresholds
    suites = ET.Element("testsuites", name="figkit check")
    suite = ET.SubElement(suites, "testsuite", {
        "name": _xml_text(f"figures against snapshot '{result.snapshot}'"),
        "tests": str(len(result.verdicts)), "failures": str(len(result.failed)),
        "errors": "0", "skipped": "0", "time": f"{result.report.seconds:.3f}",
        "timestamp": datetime.now(timezone.utc).isoformat(timespec="seconds")})
    props = ET.SubElement(suite, "properties")
    for k, v in [("snapshot", result.snapshot), ("old", result.report.old_label),
                 ("new", result.report.new_label)] + list(th.as_dict().items()):
        ET.SubElement(props, "property", name=_xml_text(k), value=_xml_text(v))
    for v in result.verdicts:
        case = ET.SubElement(suite, "testcase", classname="figkit.figures", name=_xml_text(v.id),
                             time=f"{v.seconds:.3f}")
        if not v.passed:
            fail = ET.SubElement(case, "failure", message=_xml_text(v.reasons[0]),
                                 type="FigureChanged")
            fail.text = _xml_text("\n".join(v.reasons))
    suites.set("tests", suite.get("tests"))
    suites.set("failures", suite.get("failures"))
    ET.indent(suites)
    return ET.tostring(suites, encoding="utf-8", xml_declaration=True) + b"\n"


def _xml_text(text: str) -> str:
    """XML 1.0 allows tab, newline, carriage return and U+0020-U+D7FF, U+E000-U+FFFD,
    U+10000-U+10FFFF (XML 1.0, section 2.2 "Characters"): any other is shown as U+FFFD."""
    return "".join(c if c in "\t\n\r" or (0x20 <= ord(c) < 0xD800 or 0xE000 <= ord(c) < 0xFFFE
                                           or ord(c) > 0xFFFF) else "\ufffd" for c in str(text))


def write_junit(result: GateResult, path: Path) -> Path:
    from .provenance import atomic_outputs
    path = Path(path)
    with atomic_outputs([path]) as (tmp,):
        tmp.write_bytes(junit_xml(result))
    return path

