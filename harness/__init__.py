"""rl-harness: rerun RL training from a manifest and verify the results against baselines.

The library API behind the ``rlharness`` command::

    manifest = harness.load_manifest("manifests/frozenlake-q.toml")
    outcome = harness.run_manifest(manifest)                   # train every seed (or reuse)
    baseline = harness.baseline_from_results(manifest, outcome.results)
    verdict = harness.rerun_and_verify(manifest, baseline_path="baselines/frozenlake-q.json")
    print(verdict.explain())

A trainer of your own is a function ``train(run: RunSpec) -> Iterable[Checkpoint]``
(see ``harness.trainers`` and ``examples/hill_climb.py``).
"""

__version__ = "0.1.0"

import importlib

# Loaded on first use (PEP 562), so that ``rlharness --help`` and worker processes do not
# import scipy and the verification layer before they need them.
_EXPORTS = {
    "Checkpoint": "harness.core.curves",
    "EvaluationPlan": "harness.core.spec",
    "HarnessError": "harness.core.errors",
    "LearningCurve": "harness.core.curves",
    "Manifest": "harness.manifest.loader",
    "ManifestError": "harness.core.errors",
    "RunSpec": "harness.core.spec",
    "Suite": "harness.manifest.suite",
    "SuiteVerdict": "harness.gate.suite",
    "TaskSpec": "harness.core.spec",
    "Verdict": "harness.gate.verify",
    "adopt_curves": "harness.store.adopt",
    "baseline_from_results": "harness.store.baseline",
    "load_manifest": "harness.manifest.loader",
    "load_suite": "harness.manifest.suite",
    "read_baseline": "harness.store.baseline",
    "read_results": "harness.store.results",
    "rerun_and_verify": "harness.gate.verify",
    "run_manifest": "harness.execute.runner",
    "run_suite": "harness.execute.suite",
    "verify_sets": "harness.gate.verify",
    "verify_suite": "harness.gate.suite",
    "write_baseline": "harness.store.baseline",
}


def __getattr__(name: str):
    if name in _EXPORTS:
        return getattr(importlib.import_module(_EXPORTS[name]), name)
    raise AttributeError(f"module 'harness' has no attribute {name!r}")


def __dir__():
    return sorted(__all__)


__all__ = [
    "Checkpoint",
    "EvaluationPlan",
    "HarnessError",
    "LearningCurve",
    "Manifest",
    "ManifestError",
    "RunSpec",
    "Suite",
    "SuiteVerdict",
    "TaskSpec",
    "Verdict",
    "__version__",
    "adopt_curves",
    "baseline_from_results",
    "load_manifest",
    "load_suite",
    "read_baseline",
    "read_results",
    "rerun_and_verify",
    "run_manifest",
    "run_suite",
    "verify_sets",
    "verify_suite",
    "write_baseline",
]
