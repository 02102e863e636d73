"""JUnit XML of ``dagmill check``: one test case per spec, a failure element where the
gate failed, the report's text as the case's output."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from collections.abc import Mapping, Sequence
from typing import Any


def report_text(report: Mapping[str, Any]) -> str:
    """The plain-text body of one check report (the JUnit failure text and output)."""
    lines = [f"{report['spec']}: {report['status'].upper()}  run {report['run_id']}  "
             f"baseline {report['baseline_run_id'] or '-'}"
             + (f"  verdict {report['verdict']}" if report.get("verdict") else "")]
    lines += [f"  FAIL {f}" for f in report["failures"]]
    lines += [f"  note {n}" for n in report["notes"]]
    lines += [f"  change {c}" for c in report["changes"]]
    return "\n".join(lines)


def junit_xml(reports: Sequence[Mapping[str, Any]], seconds: Mapping[str, float]) -> str:
    """A JUnit XML document: one test case per spec, a failure element where it failed."""
    failures = sum(1 for r in reports if not r["ok"])
    suites = ET.Element("testsuites", name="dagmill check", tests=str(len(reports)),
                        failures=str(failures))
    suite = ET.SubElement(suites, "testsuite", name="dagmill check", tests=str(len(reports)),
                          failures=str(failures), errors="0")
    for r in reports:
        case = ET.SubElement(suite, "testcase", classname="dagmill.check", name=r["spec"],
                             time=f"{seconds.get(r['spec'], 0.0):.3f}")
        text = report_text(r)
        if not r["ok"]:
            failure = ET.SubElement(case, "failure", message="; ".join(r["failures"]),
                                    type=r["status"])
            failure.text = text
        out = ET.SubElement(case, "system-out")
        out.text = text
    ET.indent(suites)
    return ET.tostring(suites, encoding="unicode", xml_declaration=True) + "\n"


def junit_error_xml(specs: Sequence[str], problems: Sequence[str]) -> str:
    """The JUnit XML of a check that could not run (bad input, exit 2): one test case per
    spec given, each with an ``error`` element listing every problem, so a CI page shows
    why instead of no report at all."""
    names = list(specs) or ["dagmill check"]
    suites = ET.Element("testsuites", name="dagmill check", tests=str(len(names)),
                        failures="0", errors=str(len(names)))
    suite = ET.SubElement(suites, "testsuite", name="dagmill check", tests=str(len(names)),
                          failures="0", errors=str(len(names)))
    text = "\n".join(problems)
    for name in names:
        case = ET.SubElement(suite, "testcase", classname="dagmill.check", name=name,
                             time="0.000")
        error = ET.SubElement(case, "error", message=problems[0] if problems else "bad input",
                              type="bad-input")
        error.text = text
    ET.indent(suites)
    return ET.tostring(suites, encoding="unicode", xml_declaration=True) + "\n"
