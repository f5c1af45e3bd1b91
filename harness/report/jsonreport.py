"""The JSON report of a verdict: a versioned schema holding everything the verdict used."""

from __future__ import annotations

import dataclasses
import json
from typing import Any

from harness.gate.verify import WHAT_A_PASS_MEANS, Provenance, Verdict

__all__ = ["VERDICT_SCHEMA", "json_text", "outcome_json", "provenance_json", "verdict_json", "verdict_text"]

#: Schema tag of the JSON report; bumped on any incompatible change.
VERDICT_SCHEMA = "rlharness.verdict/1"


def _check(c: Any) -> dict:
    data = {f.name: getattr(c, f.name) for f in dataclasses.fields(c)}
    data["interval"] = {"low": c.interval.low, "high": c.interval.high}
    for key in ("baseline_values", "candidate_values"):
        data[key] = None if data[key] is None else list(data[key])
    data["reading"] = c.reading
    return data


def _mix(curves: Any) -> dict:
    """``{component: {version: [seed labels]}}`` of a side whose seeds ran under different versions."""
    mixed = getattr(curves, "mixed_versions", None) or {}
    return {name: {version: list(seeds) for version, seeds in mix.items()} for name, mix in mixed.items()}


def provenance_json(prov: Provenance, baseline_set: Any = None, candidate_set: Any = None) -> dict:
    """The provenance layer as a JSON-compatible dict (shared with the staged gate's report)."""
    return {
        "baseline": prov.baseline_label,
        "candidate": prov.candidate_label,
        "baseline_config_hash": prov.baseline_hash,
        "candidate_config_hash": prov.candidate_hash,
        "same_config": prov.same_config,
        "changes": [dataclasses.asdict(c) for c in prov.changes],
        "drift": [dataclasses.asdict(d) for d in prov.drift],
        "trainer_source_changed": prov.source_changed,
        "mixed_versions": {"baseline": _mix(baseline_set), "candidate": _mix(candidate_set)},
        "reading": prov.reading,
    }


def outcome_json(verdict: Any) -> dict:
    """The keys every verdict's JSON opens with: manifest, passed, summary, what a pass means, the gate.

    ``verdict`` is a fixed (:class:`Verdict`) or staged verdict: anything with ``manifest``,
    ``passed``, ``summary`` and ``gate`` (a ``GateDecision``).
    """
    gate = verdict.gate
    return {
        "manifest": verdict.manifest,
        "passed": verdict.passed,
        "summary": verdict.summary,
        "what_a_pass_means": WHAT_A_PASS_MEANS,
        "gate": {"passed": gate.passed, "rule": gate.rule, "reasons": list(gate.reasons), "failing": list(gate.failing)},
    }


def verdict_json(verdict: Verdict) -> dict:
    """The verdict as a JSON-compatible dict (``schema`` = :data:`VERDICT_SCHEMA`).

    It carries the gate's outcome and reasons, the policy, the task's floor and threshold
    used for the margin, provenance (hashes, changed keys, drift), the exact check, every
    statistical check with the per-seed values it used, and where the curves part.
    """
    v = verdict
    prov = v.provenance
    exact = dataclasses.asdict(v.exact)
    for key in ("baseline_returns", "candidate_returns"):
        exact[key] = None if exact[key] is None else list(exact[key])
    return {
        "schema": VERDICT_SCHEMA,
        "baseline_history": None if v.history is None else v.history.to_json(),
        **outcome_json(v),
        "margins": [dataclasses.asdict(m) for m in v.scale.margins],
        "policy": v.policy.to_json(),
        "floor": v.floor,
        "threshold": v.threshold,
        "provenance": provenance_json(prov, v.baseline_set, v.candidate_set),
        "exact": {**exact, "nondeterministic": v.exact.nondeterministic, "reading": v.exact.reading},
        "checks": [_check(c) for c in v.checks],
        "divergence": None if v.divergence is None else {
            **dataclasses.asdict(v.divergence), "reading": v.divergence.reading},
    }


def verdict_text(verdict: Verdict) -> str:
    """:func:`verdict_json` as indented text (infinite interval ends written as strings)."""
    return json_text(verdict_json(verdict))


def json_text(data: dict) -> str:
    """A report dict as indented JSON text: infinities written as ``"inf"``/``"-inf"``, NaN refused."""
    def fix(x: Any) -> Any:
        if isinstance(x, float) and x != x:  # NaN never appears in a verdict; refuse loudly if it does
            raise ValueError("a verdict value is NaN")
        if isinstance(x, float) and x in (float("inf"), float("-inf")):
            return "inf" if x > 0 else "-inf"
        if isinstance(x, dict):
            return {k: fix(val) for k, val in x.items()}
        if isinstance(x, (list, tuple)):
            return [fix(val) for val in x]
        return x

    return json.dumps(fix(data), indent=2, allow_nan=False) + "\n"
