"""JUnit XML for CI systems: one test case per variant.

Layout as the common JUnit XML convention that CI systems read (testsuites > testsuite > testcase
with failure / error / skipped children; counts as attributes — common practice, there is no
single formal standard). Unstable → ``failure``; indeterminate or failed → ``error``; cancelled
→ ``skipped``; the message names the first offending frequency and node.
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from collections.abc import Mapping, Sequence
from datetime import datetime
from typing import Any

from service.reports.outcomes import (
    details_text,
    failed_message,
    indeterminate_message,
    state_of,
    unstable_message,
)


def _seconds(check: Mapping[str, Any] | None) -> float:
    if not check or not check.get("started_at") or not check.get("finished_at"):
        return 0.0
    try:
        start = datetime.fromisoformat(str(check["started_at"]).replace("Z", "+00:00"))
        end = datetime.fromisoformat(str(check["finished_at"]).replace("Z", "+00:00"))
    except ValueError:
        return 0.0
    return max(0.0, (end - start).total_seconds())


def _class_name(suite: str) -> str:
    return "ballast." + (re.sub(r"[^A-Za-z0-9_]+", "_", suite).strip("_") or "batch")


def junit_xml(suite_name: str, items: Sequence[Mapping[str, Any]],
              checks: Mapping[str, Mapping[str, Any]], suite_id: str | None = None) -> bytes:
    """The XML document (UTF-8 bytes). ``checks`` maps check ids to full check JSON, needed for the
    messages of checks that are not stable (missing entries give shorter messages)."""
    root = ET.Element("testsuites", name="ballast")
    suite = ET.SubElement(root, "testsuite", name=suite_name)
    if suite_id:
        props = ET.SubElement(suite, "properties")
        ET.SubElement(props, "property", name="ballast.id", value=suite_id)
    counts = {"tests": 0, "failures": 0, "errors": 0, "skipped": 0}
    total_time = 0.0
    classname = _class_name(suite_name)
    for item in items:
        check = checks.get(str(item.get("id")))
        seconds = _seconds(check)
        total_time += seconds
        case = ET.SubElement(suite, "testcase", classname=classname,
                             name=str(item.get("label") or item.get("id")),
                             time=f"{seconds:.3f}")
        counts["tests"] += 1
        state = state_of(item)
        if state == "unstable":
            counts["failures"] += 1
            node = ET.SubElement(case, "failure", type="unstable",
                                 message=unstable_message(item, check))
            node.text = details_text(item, check)
        elif state in ("indeterminate", "failed", "queued", "running", "unknown"):
            counts["errors"] += 1
            message = (indeterminate_message(check) if state == "indeterminate"
                       else failed_message(check) if state == "failed"
                       else f"no verdict: the check is {state}")
            node = ET.SubElement(case, "error", type=state, message=message)
            node.text = details_text(item, check)
        elif state == "cancelled":
            counts["skipped"] += 1
            ET.SubElement(case, "skipped", message="cancelled before it finished")
        out = ET.SubElement(case, "system-out")
        out.text = f"ballast check {item.get('id')}: {state}"
    for element in (root, suite):
        for key, value in counts.items():
            element.set(key, str(value))
        element.set("time", f"{total_time:.3f}")
    ET.indent(root)
    return ET.tostring(root, encoding="utf-8", xml_declaration=True)
