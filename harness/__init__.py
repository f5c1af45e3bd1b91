"""rl-harness: rerun RL training from a manifest and verify the results against baselines."""

from harness.curves import Checkpoint, LearningCurve
from harness.errors import HarnessError, ManifestError
from harness.spec import EvaluationPlan, RunSpec, TaskSpec

__version__ = "0.1.0"

__all__ = [
    "Checkpoint",
    "EvaluationPlan",
    "HarnessError",
    "LearningCurve",
    "ManifestError",
    "RunSpec",
    "TaskSpec",
    "__version__",
]
