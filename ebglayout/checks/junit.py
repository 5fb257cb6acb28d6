"""JUnit XML for CI gates: one test suite per filter, one test case per rule."""
from __future__ import annotations

from xml.etree import ElementTree as ET


def junit_xml(reports, strict: bool = False) -> str:
    """A rule fails on any error finding (and on warnings with ``strict``); skipped when it checked nothing."""
    suites = ET.Element("testsuites", name="ebglayout")
    for report in reports:
        failures = 0
        suite = ET.SubElement(suites, "testsuite", name=report.name)
        for result in report.results:
            case = ET.SubElement(suite, "testcase", classname=f"ebglayout.{report.name}", name=result.rule)
            bad = [f for f in result.findings if f.severity == "error" or strict]
            if bad:
                failures += 1
                failure = ET.SubElement(case, "failure", message=bad[0].message, type=bad[0].severity)
                failure.text = "\n".join(f"{f.severity}: {f.message} at ({f.at[0]:.4f}, {f.at[1]:.4f})" for f in bad)
            elif result.checked == 0:
                ET.SubElement(case, "skipped", message=result.note or "nothing to check")
        suite.set("tests", str(len(report.results)))
        suite.set("failures", str(failures))
        suite.set("errors", "0")
    ET.indent(suites)
    return ET.tostring(suites, encoding="unicode", xml_declaration=True) + "\n"
