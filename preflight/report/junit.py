"""JUnit XML: every check as a test case, so CI dashboards show what failed.

One ``<testsuite>`` per variable, per pair and for the whole table, plus a
suite ``preflight.conclusion`` with one case that fails when the gate fails.
Checks whose ``passed`` is ``None`` are evidence, not guards: they are
reported as passing cases with a ``<system-out>`` line saying so, never as
skipped (a skipped case reads as "not run", which would be false).
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from collections.abc import Sequence
from typing import Any

from preflight.report.prose import fmt_number, fmt_p
from preflight.report.text import headline

EVIDENCE_LINE = "evidence, not a guard"

# XML 1.0 forbids most control characters even when escaped; a column name
# or note carrying one must not make the whole file unreadable.
_NOT_XML = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ufffe\uffff]")


def _clean(text: Any) -> str:
    return _NOT_XML.sub("\ufffd", str(text))


def _numbers(check: dict[str, Any]) -> str:
    parts = [f"statistic={fmt_number(check['statistic'])}", f"p={fmt_p(check['p_value'])}",
             f"adjusted p={fmt_p(check['p_adjusted'])}"]
    effect = fmt_number(check["effect"])
    if check["effect"] is not None and check.get("effect_name"):
        effect += f" ({check['effect_name']})"
    parts += [f"effect={effect}", f"n={check['n']}"]
    return ", ".join(parts)


def _suite(parent: ET.Element, name: str, checks: Sequence[dict[str, Any]]) -> tuple[int, int]:
    failures = sum(1 for c in checks if c["passed"] is False)
    suite = ET.SubElement(parent, "testsuite", {
        "name": _clean(name), "tests": str(len(checks)), "failures": str(failures),
        "errors": "0", "skipped": "0", "time": "0"})
    for check in checks:
        case = ET.SubElement(suite, "testcase", {"classname": _clean(name), "name": _clean(check["name"]),
                                                 "time": "0"})
        numbers = _numbers(check)
        note = check.get("note") or ""
        if check["passed"] is False:
            message = f"{check['name']}: {numbers}" + (f"; {note}" if note else "")
            failure = ET.SubElement(case, "failure", {"message": _clean(message), "type": "assumption-check"})
            failure.text = _clean(message)
        out = ET.SubElement(case, "system-out")
        lines = ([EVIDENCE_LINE] if check["passed"] is None else []) + [numbers] + ([note] if note else [])
        out.text = _clean("\n".join(lines))
    return len(checks), failures


def render_junit(report_dict: dict[str, Any]) -> str:
    """The report as JUnit XML text (UTF-8, with an XML declaration)."""
    data = report_dict
    root = ET.Element("testsuites", {"name": "preflight"})
    total = failed = 0
    for variable in data["variables"]:
        t, f = _suite(root, f"preflight.variables.{variable['name']}", variable["checks"])
        total, failed = total + t, failed + f
    for pair in data["pairs"]:
        t, f = _suite(root, f"preflight.pairs.{pair['x']}__{pair['y']}", pair["checks"])
        total, failed = total + t, failed + f
    t, f = _suite(root, "preflight.global", data["global"]["checks"])
    total, failed = total + t, failed + f

    conclusion = data["conclusion"]
    passed = bool(conclusion["passed"])
    suite = ET.SubElement(root, "testsuite", {"name": "preflight.conclusion", "tests": "1",
                                              "failures": "0" if passed else "1", "errors": "0",
                                              "skipped": "0", "time": "0"})
    case = ET.SubElement(suite, "testcase", {"classname": "preflight.conclusion", "name": "conclusion",
                                             "time": "0"})
    summary = headline(data)
    reasons = conclusion["reasons"]
    if not passed:
        message = summary + (" " + " ".join(reasons) if reasons else "")
        failure = ET.SubElement(case, "failure", {"message": _clean(message), "type": "conclusion"})
        failure.text = _clean("\n".join([summary] + [f"- {r}" for r in reasons]))
    out = ET.SubElement(case, "system-out")
    out.text = _clean("\n".join([summary] + [f"- {r}" for r in reasons]))
    total, failed = total + 1, failed + (0 if passed else 1)

    root.set("tests", str(total))
    root.set("failures", str(failed))
    root.set("errors", "0")
    root.set("skipped", "0")
    root.set("time", "0")
    ET.indent(root, space="  ")
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"
