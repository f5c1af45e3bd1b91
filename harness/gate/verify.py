"""Verification: a candidate set of curves against its baseline (or published numbers) -> Verdict.

Layers, each reported:

1. **Provenance** — are the config hashes equal, and if not which resolved keys
   differ; which installed versions differ between the runs (drift).
2. **Exact check** — when config and versions match, every seed's curve must be
   bitwise identical; a mismatch names the first seed and checkpoint that
   differ. If the trainer's source changed too, that is a numerics change and
   the statistics decide; if it did not, it is nondeterminism, a
   reproducibility failure that fails the gate unless the policy allows it
   (``allow_nondeterminism``). Skipped, and said why, otherwise: with other
   library versions the statistics decide.
3. **Statistical checks** per metric and per published reference, Holm-corrected
   (see :mod:`harness.gate.compare`).
4. **Where the curves part** — the first checkpoint range where the candidate is
   significantly below (family-wise error controlled).

The **gate** is a policy over those verdicts (:class:`harness.manifest.policy.GatePolicy`,
applied by :func:`harness.gate.decision.decide`): it fails on nondeterminism (unless
``allow_nondeterminism``), under its ``rule`` (by default ``drop-beyond-margin``: a drop
significantly larger than the margin fails; ``any-drop``: any significant drop fails) and, in
``strict`` mode, when a check is inconclusive. Every report names the rule that decided.
"""

from __future__ import annotations

import dataclasses
import os
from collections.abc import Sequence
from typing import Any

import numpy as np

from harness.core.errors import BaselineError, ResultsError
from harness.core.spec import TaskSpec, config_changes
from harness.gate.compare import Family, MetricCheck, compare_sets
from harness.gate.decision import GateDecision
from harness.gate.divergence import Divergence
from harness.gate.curveset import CurveSet, task_from_data
from harness.gate.margins import GateScale, task_scale
from harness.gate.preflight import baseline_for, check_gate_policy, check_grid
from harness.manifest.policy import GatePolicy, PublishedReference
from harness.store.baseline import Baseline
from harness.store.history import BaselineHistory
from harness.store.results import TRAINER_SOURCE

__all__ = [
    "WHAT_A_PASS_MEANS",
    "compare_results",
    "rerun_and_verify",
    "ConfigChange",
    "VersionChange",
    "ExactCheck",
    "Provenance",
    "Verdict",
    "exact_check",
    "provenance",
    "verify_manifest",
    "verify_sets",
    "with_exact",
]

#: The sentence every report carries.
WHAT_A_PASS_MEANS = (
    "A pass means no check found the candidate worse than its reference under the gate's rule at the chosen "
    "error rate (by default: no drop significantly larger than the margin; a drop inside the margin may "
    "remain); it does not prove the code correct, and an inconclusive check is not evidence of equivalence."
)


@dataclasses.dataclass(frozen=True, slots=True)
class ConfigChange:
    """One resolved configuration key whose value differs (``None`` where a side lacks the key)."""

    key: str
    baseline: Any
    candidate: Any


@dataclasses.dataclass(frozen=True, slots=True)
class VersionChange:
    """One installed component whose version differs between baseline and candidate."""

    name: str
    baseline: str | None
    candidate: str | None


@dataclasses.dataclass(frozen=True, slots=True)
class Provenance:
    """Where the two sides came from and how their configurations and versions differ."""

    baseline_label: str
    candidate_label: str
    baseline_hash: str | None
    candidate_hash: str
    changes: tuple[ConfigChange, ...]
    drift: tuple[VersionChange, ...]
    source_changed: bool = False
    mixed: tuple[str, ...] = ()
    """One line per side and component whose seeds ran under different versions."""

    @property
    def same_config(self) -> bool:
        return self.baseline_hash == self.candidate_hash

    @property
    def reading(self) -> str:
        if self.baseline_hash is None:
            return "checked against published summary statistics: no configuration or versions to compare."
        if self.same_config:
            config = "config hash equal"
        elif not self.changes:
            config = "config hash differs, but no resolved key differs (the hashes were taken of other resolutions)"
        else:
            config = (f"config hash differs ({len(self.changes)} key{'s' if len(self.changes) != 1 else ''} changed: "
                      + ", ".join(c.key for c in self.changes[:5]) + (", ..." if len(self.changes) > 5 else "") + ")")
        versions = ("same installed versions" if not self.drift else
                    "version drift in " + ", ".join(d.name for d in self.drift))
        source = ("; the trainer's source code changed since the baseline (the exact check tells whether "
                  "its numbers did)" if self.source_changed else "")
        mixed = "".join(f"; {line}" for line in self.mixed)
        return f"{config}; {versions}{source}{mixed}."


@dataclasses.dataclass(frozen=True, slots=True)
class ExactCheck:
    """The bitwise comparison of every seed's curve.

    ``status`` is ``"identical"``, ``"differs"`` or ``"skipped"``; ``reason`` says why it was
    skipped; on a difference ``seed``/``step`` name the first seed (manifest order) and
    checkpoint that differ, with both sides' evaluation returns there, and ``cause`` says
    what explains it: ``"source changed"`` (a numerics change), ``"source unknown"`` (no
    source fingerprint on one side) or ``"nondeterminism"`` (configuration, installed
    versions and trainer source all unchanged: a reproducibility failure).
    """

    status: str
    reason: str
    seed: str | None = None
    step: int | None = None
    baseline_returns: tuple[float, ...] | None = None
    candidate_returns: tuple[float, ...] | None = None
    cause: str | None = None

    @property
    def nondeterministic(self) -> bool:
        """The curves differ although nothing that could explain it changed."""
        return self.status == "differs" and self.cause == "nondeterminism"

    @property
    def reading(self) -> str:
        if self.status == "identical":
            return "every seed's curve is bitwise identical to the baseline."
        if self.status == "skipped":
            return f"skipped: {self.reason}."
        where = f"first difference at seed {self.seed}, checkpoint step {self.step}"
        if self.nondeterministic:
            return ("curves are not bitwise identical although the configuration, the installed versions and the "
                    f"trainer's source are unchanged: {where} — nondeterminism, a reproducibility failure.")
        if self.cause == "source changed":
            return (f"curves are not bitwise identical: {where} — the trainer's source changed since the baseline, "
                    "so its numerics did; the statistical checks decide.")
        return (f"curves are not bitwise identical: {where} — the trainer's source is not fingerprinted on both "
                "sides, so a numerics change cannot be told from nondeterminism; the statistical checks decide.")


@dataclasses.dataclass(frozen=True, slots=True)
class Verdict:
    """Everything verification found, and the gate's decision (with the curves it was computed from)."""

    manifest: str
    provenance: Provenance
    exact: ExactCheck
    checks: tuple[MetricCheck, ...]
    divergence: Divergence | None
    gate: GateDecision
    policy: GatePolicy
    scale: GateScale
    baseline_set: CurveSet | None = dataclasses.field(default=None, repr=False)
    candidate_set: CurveSet | None = dataclasses.field(default=None, repr=False)
    history: BaselineHistory | None = None

    @property
    def passed(self) -> bool:
        return self.gate.passed

    @property
    def floor(self) -> float | None:
        """The random-policy return the margins were sized from (``None`` if none was needed)."""
        return self.scale.floor

    @property
    def threshold(self) -> float | None:
        """The reward threshold used (margins and steps-to-threshold)."""
        return self.scale.threshold

    @property
    def tally(self) -> str:
        """The count of each verdict and the exact check's outcome, without the gate's outcome."""
        counts = {v: sum(c.verdict == v for c in self.checks) for v in ("equivalent", "better", "worse", "inconclusive")}
        listed = ", ".join(f"{n} {v}" for v, n in counts.items() if n)
        exact = {"identical": "; curves bitwise identical", "differs": "; curves not bitwise identical"}
        note = " (nondeterminism)" if self.exact.nondeterministic else ""
        return f"{listed or 'no checks'}{exact.get(self.exact.status, '')}{note}."

    @property
    def summary(self) -> str:
        """One line: the gate's outcome and the count of each verdict."""
        return f"gate {'PASSED' if self.passed else 'FAILED'} for {self.manifest}: {self.tally}"

    def explain(self) -> str:
        """A plain-text explanation: the summary, each layer's reading and the gate's reasons."""
        lines = [self.history.headline] if self.history is not None and self.history.changed else []
        lines += [self.summary, "provenance: " + self.provenance.reading, self.exact.reading]
        lines += [c.reading for c in self.checks]
        if self.divergence is not None:
            lines.append(self.divergence.reading)
        lines += [f"gate: {r}" for r in self.gate.reasons]
        lines.append(WHAT_A_PASS_MEANS)
        return "\n".join(lines)


def provenance(baseline: CurveSet | None, candidate: CurveSet) -> Provenance:
    """Compare configurations (key by key) and installed versions of the two sides."""
    mixed = tuple(
        f"{side} seeds ran under different versions of {name}: "
        + "; ".join(f"{version} (seed{'s' if len(seeds) != 1 else ''} {', '.join(seeds)})" for version, seeds in mix.items())
        for side, curves in (("baseline", baseline), ("candidate", candidate)) if curves is not None
        for name, mix in curves.mixed_versions.items()
    )
    if baseline is None:
        return Provenance("published references", candidate.label, None, candidate.config_hash, (), (), mixed=mixed)
    changes = tuple(ConfigChange(*change) for change in config_changes(baseline.config, candidate.config))
    # The trainer's source fingerprint is not an installed version: a refactor changes it, and
    # a refactor is exactly where the exact check must run.
    drift = tuple(VersionChange(k, baseline.versions.get(k), candidate.versions.get(k))
                  for k in sorted(baseline.versions.keys() | candidate.versions.keys())
                  if k != TRAINER_SOURCE and baseline.versions.get(k) != candidate.versions.get(k))
    source_changed = baseline.versions.get(TRAINER_SOURCE) != candidate.versions.get(TRAINER_SOURCE)
    return Provenance(baseline.label, candidate.label, baseline.config_hash, candidate.config_hash, changes, drift,
                      source_changed, mixed)


def exact_check(baseline: CurveSet | None, candidate: CurveSet, prov: Provenance, policy: GatePolicy) -> ExactCheck:
    """Bitwise comparison of every seed's curve, when the configuration and versions match."""
    if baseline is None:
        return ExactCheck("skipped", "the reference is published summary statistics, not curves")
    if not policy.bitwise:
        return ExactCheck("skipped", "turned off by the policy (bitwise = false)")
    if not prov.same_config:
        return ExactCheck("skipped", "the configuration differs, so the curves are not expected to be identical")
    if prov.drift:
        names = ", ".join(f"{d.name} {d.baseline} -> {d.candidate}" for d in prov.drift)
        return ExactCheck("skipped", f"installed versions differ ({names}); the statistical checks decide")
    if prov.source_changed:
        cause = "source changed"
    elif TRAINER_SOURCE not in baseline.versions or TRAINER_SOURCE not in candidate.versions:
        cause = "source unknown"
    else:
        cause = "nondeterminism"
    base = {r.seed: r.curve for r in baseline.runs}
    for run in candidate.runs:
        old = base.get(run.seed)
        if old is None:
            return ExactCheck("skipped", f"seed {run.seed.label} is not in the baseline")
        for a, b in zip(old.checkpoints, run.curve.checkpoints, strict=True):
            if a.step != b.step or np.asarray(a.returns).tobytes() != np.asarray(b.returns).tobytes():
                return ExactCheck("differs", "", run.seed.label, b.step, a.returns, b.returns, cause)
    return ExactCheck("identical", "")


def with_exact(gate: GateDecision, exact: ExactCheck, policy: GatePolicy) -> GateDecision:
    """The statistical gate decision with the exact check's verdict on nondeterminism added."""
    if not exact.nondeterministic:
        return gate
    if policy.allow_nondeterminism:
        return dataclasses.replace(gate, reasons=(*gate.reasons, "nondeterminism allowed by the policy "
                                                  "(allow_nondeterminism = true): the statistical checks decide alone"))
    reason = (f"the curves are not bitwise identical (first at seed {exact.seed}, step {exact.step}) although "
              "configuration, installed versions and trainer source are unchanged: a reproducibility failure; "
              "make training deterministic, or set allow_nondeterminism = true in [check] to let the "
              "statistical checks decide")
    reasons = (reason, *gate.reasons) if not gate.passed else (reason,)
    return dataclasses.replace(gate, passed=False, reasons=reasons, failing=("exact", *gate.failing))


def verify_sets(
    baseline: CurveSet | None,
    candidate: CurveSet,
    policy: GatePolicy,
    *,
    references: Sequence[PublishedReference] = (),
    scale: GateScale | None = None,
    family: Family | None = None,
) -> Verdict:
    """Every verification layer for two curve sets (or one and published references).

    ``scale`` (floor, threshold, margins) and ``family`` (how p-values are adjusted) as in
    :func:`harness.gate.compare.compare_sets`.
    """
    prov = provenance(baseline, candidate)
    exact = exact_check(baseline, candidate, prov, policy)
    stats = compare_sets(baseline, candidate, policy, references=references, scale=scale, family=family)
    return Verdict(
        manifest=candidate.manifest, provenance=prov, exact=exact, checks=stats.checks,
        divergence=stats.divergence, gate=with_exact(stats.gate, exact, policy), policy=policy, scale=stats.scale,
        baseline_set=baseline, candidate_set=candidate,
    )


def compare_results(reference: Any, candidate: Any, policy: GatePolicy, *, labels: tuple[str, str],
                    manifest_task: TaskSpec | None = None) -> Verdict:
    """Verify one stored result set against another (``rlharness compare``), sized on the candidate's task.

    The task is read from data, so it is checked first (:func:`~harness.gate.curveset.task_from_data`):
    a registered gymnasium id or ``manifest_task``'s, and no options from the file reach an environment.

    Raises
    ------
    RunFailedError
        Some runs of either side failed.
    ConfigError
        A margin cannot be sized, or steps-to-threshold has no threshold.
    """
    sides = [CurveSet.from_results(results, label=label, expected=len(results.records))
             for results, label in zip((reference, candidate), labels, strict=True)]
    spec = candidate.records[0].spec
    needs_floor = policy.floor is None and any(policy.needs_span(m) for m in policy.metrics)
    task = task_from_data(spec.task, where=labels[1], manifest_task=manifest_task, environment=needs_floor)
    scale = task_scale(policy, task=task, evaluation=spec.evaluation, budget=sides[1].budget)
    return verify_sets(sides[0], sides[1], policy, scale=scale)


def verify_manifest(
    manifest: Any,
    results: Any,
    *,
    baseline: Baseline | None,
    policy: GatePolicy | None = None,
    candidate_label: str | None = None,
    history: BaselineHistory | None = None,
    scale: GateScale | None = None,
    family: Family | None = None,
) -> Verdict:
    """Verify a manifest's results against its baseline and its published references.

    Parameters
    ----------
    manifest
        The ``harness.manifest.loader.Manifest``.
    results
        Its ``harness.store.results.ResultSet`` (the rerun).
    baseline
        The recorded baseline, or ``None`` to use the manifest's ``[[reference]]`` tables only.
    policy
        The gate policy; the manifest's ``[check]`` by default.
    candidate_label
        How reports name the rerun.
    history
        How the baseline differs from its version at a git ref
        (:func:`harness.store.history.baseline_history`); reports show a change first.
    scale
        The floor, threshold and margins if already resolved (:func:`~harness.gate.preflight.check_gate_policy`).
    family
        Adjusts the checks' p-values; ``None``: Holm over this manifest's checks
        (a suite adjusts over every task's checks, :mod:`harness.gate.suite`).

    Raises
    ------
    BaselineError
        The baseline belongs to another manifest, has another checkpoint grid, or there is
        neither a baseline nor a published reference.
    RunFailedError, ResultsError
        Seeds failed or are missing: never verified silently on fewer seeds than asked.
    """
    policy = policy or manifest.check
    if results.config_hash != manifest.config_hash:
        raise ResultsError(
            f"the results of {results.manifest!r} have config hash {results.config_hash}, but the manifest has "
            f"{manifest.config_hash}: they are not a rerun of this manifest; run it (`rlharness verify` without --no-run)"
        )
    if baseline is not None:
        if baseline.manifest != manifest.name:
            raise BaselineError(f"{baseline.path}: [manifest] is {baseline.manifest!r}, not {manifest.name!r}: "
                                f"pass the baseline of {manifest.name!r}")
        check_grid(manifest, baseline)
    candidate = CurveSet.from_results(results, label=candidate_label or f"rerun of {manifest.name}",
                                      config=manifest.resolved_config(), expected=len(manifest.seeds))
    references = tuple(manifest.references)
    if scale is None:
        scale = task_scale(policy, task=manifest.task, evaluation=manifest.evaluation, budget=manifest.budget,
                           references=references, path=None if manifest.path is None else str(manifest.path))
    verdict = verify_sets(None if baseline is None else CurveSet.from_baseline(baseline), candidate, policy,
                          references=references, scale=scale, family=family)
    return verdict if history is None else dataclasses.replace(verdict, history=history)


def rerun_and_verify(
    manifest: Any,
    *,
    baseline_path: str | os.PathLike,
    policy: GatePolicy | None = None,
    results_dir: str | os.PathLike | None = None,
    **run_options: Any,
) -> Verdict:
    """Check the baseline, rerun the manifest (reusing results that match) and verify it.

    ``run_options`` go to :func:`harness.execute.runner.run_manifest` (``workers``, ``use_cache``, ...).

    Raises
    ------
    BaselineError
        As :func:`~harness.gate.preflight.baseline_for`; nothing is run then.
    ConfigError
        As :func:`~harness.gate.preflight.check_gate_policy`; nothing is run then.
    RunFailedError
        If any run failed.
    """
    from harness.execute.runner import run_manifest

    baseline = baseline_for(manifest, baseline_path)
    scale = check_gate_policy(manifest, policy, baseline=baseline)
    outcome = run_manifest(manifest, results_dir=results_dir, **run_options)
    return verify_manifest(manifest, outcome.results, baseline=baseline, policy=policy, scale=scale,
                           candidate_label=f"rerun of {manifest.name} ({outcome.folder})")
