"""The JUnit XML report of a verdict: one test case per check, so CI systems show it natively.

Test cases: ``baseline history`` (with ``verify --baseline-ref``; ``<skipped>`` with the
change as its message when the baseline changed since the ref, so that CI lists it),
``provenance``, ``exact``, one per statistical check and ``divergence``.
A check that makes the gate fail (nondeterminism in ``exact``, a significantly
worse metric) is a ``<failure>``; an inconclusive check that
does not (non-strict policy) and a skipped exact check are ``<skipped>``; every
case carries its one-sentence reading in ``<system-out>``.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET

from harness.gate.verify import WHAT_A_PASS_MEANS, Verdict
from harness.report._rows import policy_line

__all__ = ["junit_document", "render_junit"]


def render_junit(verdict: Verdict) -> str:
    """The verdict as a JUnit XML document (one ``<testsuite>``)."""
    v = verdict
    suite = ET.Element("testsuite", name=f"rlharness.verify.{v.manifest}")
    cases: list[tuple[str, str, str | None, str | None]] = []  # name, reading, failure, skipped
    if v.history is not None:
        cases.append(("baseline history", v.history.reading, None, v.history.headline if v.history.changed else None))
    cases.append(("provenance", v.provenance.reading, None, None))
    failing = set(v.gate.failing)
    cases.append(("exact", v.exact.reading, v.exact.reading if "exact" in failing else None,
                  v.exact.reason if v.exact.status == "skipped" else None))
    for c in v.checks:
        failure = c.reading if c.name in failing else None
        skipped = "inconclusive: " + c.reading if failure is None and c.verdict == "inconclusive" else None
        cases.append((f"check {c.name}", c.reading, failure, skipped))
    if v.divergence is not None:
        cases.append(("divergence", v.divergence.reading, None, None))
    return junit_document(suite, v.manifest, cases, {"gate": "passed" if v.passed else "failed",
                                                     "rule": v.gate.rule, "policy": policy_line(v)})


def junit_document(suite: ET.Element, manifest: str, cases: list[tuple[str, str, str | None, str | None]],
                   properties: dict[str, str]) -> str:
    """Fill ``suite`` with test cases ``(name, reading, failure, skipped)`` and properties; the XML text.

    A case with a failure message is a ``<failure>``, one with a skip message ``<skipped>``; every
    case carries its reading in ``<system-out>``. :data:`WHAT_A_PASS_MEANS` is always a property.
    """
    failures = skipped_count = 0
    for name, reading, failure, skipped in cases:
        case = ET.SubElement(suite, "testcase", classname=f"rlharness.{manifest}", name=name)
        if failure is not None:
            failures += 1
            ET.SubElement(case, "failure", message=failure).text = failure
        elif skipped is not None:
            skipped_count += 1
            ET.SubElement(case, "skipped", message=skipped)
        ET.SubElement(case, "system-out").text = reading
    suite.set("tests", str(len(cases)))
    suite.set("failures", str(failures))
    suite.set("errors", "0")
    suite.set("skipped", str(skipped_count))
    props = ET.Element("properties")
    for name, value in {"what_a_pass_means": WHAT_A_PASS_MEANS, **properties}.items():
        ET.SubElement(props, "property", name=name, value=value)
    suite.insert(0, props)
    ET.indent(suite)
    return '<?xml version="1.0" encoding="utf-8"?>\n' + ET.tostring(suite, encoding="unicode") + "\n"
