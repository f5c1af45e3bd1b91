"""Learning curves: the evaluation returns of one run at each checkpoint."""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Iterable, Sequence

import numpy as np

from harness.core.jsondata import as_int, as_mapping, as_number

__all__ = ["Checkpoint", "LearningCurve"]


@dataclasses.dataclass(frozen=True, slots=True)
class Checkpoint:
    """One evaluation: the environment step it was taken at and each episode's return."""

    step: int
    returns: tuple[float, ...]

    def __post_init__(self) -> None:
        if not self.returns:
            raise ValueError(f"checkpoint at step {self.step} has no evaluation returns")

    @property
    def mean(self) -> float:
        return math.fsum(self.returns) / len(self.returns)

    @property
    def finite(self) -> bool:
        return all(math.isfinite(r) for r in self.returns)


@dataclasses.dataclass(frozen=True, slots=True)
class LearningCurve:
    """The checkpoints of one run, in increasing step order."""

    checkpoints: tuple[Checkpoint, ...]

    def __post_init__(self) -> None:
        steps = [c.step for c in self.checkpoints]
        if any(b <= a for a, b in zip(steps, steps[1:])):
            raise ValueError(f"checkpoint steps must increase strictly, got {steps}")

    @classmethod
    def from_checkpoints(cls, checkpoints: Iterable[Checkpoint]) -> LearningCurve:
        return cls(tuple(checkpoints))

    @property
    def steps(self) -> np.ndarray:
        return np.array([c.step for c in self.checkpoints], dtype=np.int64)

    @property
    def means(self) -> np.ndarray:
        """Mean evaluation return at each checkpoint, shape ``(n_checkpoints,)``."""
        return np.array([c.mean for c in self.checkpoints], dtype=np.float64)

    def to_json(self) -> dict:
        return {
            "steps": [c.step for c in self.checkpoints],
            "returns": [list(c.returns) for c in self.checkpoints],
        }

    @classmethod
    def from_json(cls, data: dict) -> LearningCurve:
        """Read back :meth:`to_json`; ``ValueError`` names a step that is not a non-negative integer
        or a return that is not a finite number (booleans are neither)."""
        data = as_mapping(data, "curve")
        steps: Sequence[int] = data["steps"]
        returns: Sequence[Sequence[float]] = data["returns"]
        if not isinstance(steps, list) or not isinstance(returns, list):
            raise ValueError("[curve.steps] and [curve.returns] must be lists")
        if len(steps) != len(returns):
            raise ValueError(f"curve has {len(steps)} steps but {len(returns)} return lists")
        if not steps:
            raise ValueError("[curve.steps] is empty: a curve has at least one checkpoint")
        checkpoints = []
        for n, (s, rs) in enumerate(zip(steps, returns, strict=True)):
            if not isinstance(rs, list):
                raise ValueError(f"[curve.returns[{n}]] must be a list of numbers, got {type(rs).__name__}")
            checkpoints.append(Checkpoint(as_int(s, f"curve.steps[{n}]", minimum=0),
                                          tuple(as_number(r, f"curve.returns[{n}]") for r in rs)))
        return cls(tuple(checkpoints))
