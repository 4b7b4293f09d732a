"""JUnit XML of requirement checks, so any CI system lists every requirement
as a test case: one ``<testsuite>`` per chain spec, one ``<testcase>`` per
requirement, a ``<failure>`` with value, limit and margin when it is not met.
The layout follows the JUnit XML conventions that CI servers read (testsuites
→ testsuite → testcase → failure; common practice, no formal standard)."""
from __future__ import annotations

import xml.etree.ElementTree as ET

from ..spec.numbers import ratio_unit
from ..studies.requirements import ReqResult, show, where_of
from ..spec.safety import safety_notice


def failure_text(r: ReqResult, i: int = 0) -> str:
    """'13.92 dB, needs ≥ 20.00 dB (margin −6.08 dB) at node gain'."""
    text = f"{show(float(r.value[i]), r.unit)}, needs {r.requirement.describe()} " \
           f"(margin {show(float(r.margin[i]), ratio_unit(r.unit))})"
    w = where_of(r, i)
    return text + (f", set by {w}" if w else "")


def junit_xml(suites: list) -> str:
    """``suites``: (chain, [ReqResult]) pairs, nominal results (sample 0)."""
    root = ET.Element("testsuites", name="chainplan check")
    total = failed = 0
    for chain, results in suites:
        fails = sum(1 for r in results if not r.passed[0])
        suite = ET.SubElement(root, "testsuite", name=chain.name, tests=str(len(results)), failures=str(fails),
                              errors="0", skipped="0", time="0")
        if chain.path:
            suite.set("file", chain.path)
        caution = safety_notice(chain.hazards)
        if caution:                           # hazardous chains carry the caution here too
            props = ET.SubElement(suite, "properties")
            ET.SubElement(props, "property", name="caution", value=caution)
        for r in results:
            case = ET.SubElement(suite, "testcase", classname=f"chainplan.{chain.name}",
                                 name=r.name, time="0")
            if chain.path:
                case.set("file", chain.path)
            if r.requirement.line is not None:
                case.set("line", str(r.requirement.line))
            if not r.passed[0]:
                f = ET.SubElement(case, "failure", message=failure_text(r), type="requirement")
                f.text = f"{chain.path or chain.name}: requirement '{r.name}' {failure_text(r)}"
        total += len(results)
        failed += fails
    root.set("tests", str(total))
    root.set("failures", str(failed))
    root.set("errors", "0")
    ET.indent(root)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"
