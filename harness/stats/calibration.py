"""Calibration by simulation: how often each test rejects under its null and against a known shift.

Used by the test suite (small sizes) and ``benchmarks/bench_stats.py`` (full
size). Every simulated experiment calls the public functions of this package,
so the rates describe the code that gates merges, not a re-implementation.
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from collections.abc import Callable, Mapping, Sequence
from types import MappingProxyType

import numpy as np

from harness.core.errors import TooFewSeedsWarning
from harness.stats._validate import check_positive_int, check_probability, make_rng
from harness.stats.bootstrap import bootstrap_mean_difference
from harness.stats.equivalence import equivalence_test
from harness.stats.rank import mann_whitney, permutation_test_means
from harness.stats.welch import welch_test

__all__ = ["CALIBRATION_METHODS", "DISTRIBUTIONS", "CalibrationCell", "Distribution", "calibrate"]


@dataclasses.dataclass(frozen=True, slots=True)
class Distribution:
    """A per-seed score distribution: ``draw(rng, shape)`` and its standard deviation."""

    name: str
    draw: Callable[[np.random.Generator, tuple[int, ...]], np.ndarray]
    sd: float


def _normal(rng: np.random.Generator, shape: tuple[int, ...]) -> np.ndarray:
    return rng.normal(0.0, 1.0, shape)


# Solved seeds score about 480, failed ones about 150: the bimodal, skewed shape of RL returns.
_P_SOLVED, _SOLVED, _FAILED = 0.7, (480.0, 15.0), (150.0, 60.0)


def _mixture(rng: np.random.Generator, shape: tuple[int, ...]) -> np.ndarray:
    solved = rng.random(shape) < _P_SOLVED
    return np.where(solved, rng.normal(*_SOLVED, shape), rng.normal(*_FAILED, shape))


_MIXTURE_SD = math.sqrt(
    _P_SOLVED * _SOLVED[1] ** 2
    + (1 - _P_SOLVED) * _FAILED[1] ** 2
    + _P_SOLVED * (1 - _P_SOLVED) * (_SOLVED[0] - _FAILED[0]) ** 2
)

#: The simulated score distributions by name.
DISTRIBUTIONS: Mapping[str, Distribution] = MappingProxyType({
    "normal": Distribution("normal", _normal, 1.0),
    "solved/failed mixture": Distribution("solved/failed mixture", _mixture, _MIXTURE_SD),
})  # fmt: skip


@dataclasses.dataclass(frozen=True, slots=True)
class _Method:
    """A decision rule: ``decide(a, b, sd, alpha, n_resamples, rng) -> bool`` (True = rejects H0).

    ``null_shift`` and ``alt_shift`` are the true ``mean(a) - mean(b)`` under
    H0 and under the alternative, in standard deviations of the distribution.
    """

    decide: Callable[..., bool]
    null_shift: float
    alt_shift: float


def _welch(a, b, sd, alpha, n_resamples, rng) -> bool:
    return welch_test(a, b).pvalue < alpha


def _mann_whitney(a, b, sd, alpha, n_resamples, rng) -> bool:
    return mann_whitney(a, b).pvalue < alpha


def _permutation(a, b, sd, alpha, n_resamples, rng) -> bool:
    return permutation_test_means(a, b, n_resamples=n_resamples, rng=rng).pvalue < alpha


def _bootstrap(method: str) -> Callable[..., bool]:
    def decide(a, b, sd, alpha, n_resamples, rng) -> bool:
        r = bootstrap_mean_difference(
            a, b, method=method, confidence_level=1 - alpha, n_resamples=n_resamples, rng=rng
        )
        return not r.interval.contains(0.0)

    return decide


def _tost(a, b, sd, alpha, n_resamples, rng) -> bool:
    return equivalence_test(a, b, margin=sd, alpha=alpha).equivalent


#: Decision rules calibrated; TOST's H0 is "the true difference is at the margin (1 sd)".
CALIBRATION_METHODS: Mapping[str, _Method] = MappingProxyType({
    "Welch t": _Method(_welch, 0.0, 1.0),
    "Mann–Whitney U": _Method(_mann_whitney, 0.0, 1.0),
    "permutation (means)": _Method(_permutation, 0.0, 1.0),
    "bootstrap percentile": _Method(_bootstrap("percentile"), 0.0, 1.0),
    "bootstrap BCa": _Method(_bootstrap("bca"), 0.0, 1.0),
    "TOST, margin 1 sd": _Method(_tost, 1.0, 0.0),
})  # fmt: skip


@dataclasses.dataclass(frozen=True, slots=True)
class CalibrationCell:
    """Rejections of one method in ``reps`` simulated experiments of ``n`` vs ``n`` seeds."""

    method: str
    distribution: str
    n: int
    hypothesis: str
    reps: int
    rejections: int

    @property
    def rate(self) -> float:
        return self.rejections / self.reps

    @property
    def standard_error(self) -> float:
        """Monte Carlo standard error of :attr:`rate`."""
        p = self.rate
        return math.sqrt(max(p * (1 - p), 1e-12) / self.reps)


def calibrate(
    methods: Sequence[str],
    distributions: Sequence[str],
    sizes: Sequence[int],
    *,
    hypothesis: str = "null",
    reps: int = 2000,
    alpha: float = 0.05,
    n_resamples: int = 1999,
    rng: object = None,
) -> tuple[CalibrationCell, ...]:
    """Rejection rates of each method, distribution and group size by simulation.

    Parameters
    ----------
    methods, distributions
        Keys of :data:`CALIBRATION_METHODS` and :data:`DISTRIBUTIONS`.
    sizes
        Seeds per group.
    hypothesis
        ``"null"``: the rate is the false-positive rate (should be at most
        ``alpha``); ``"alternative"``: the rate is the power against the method's
        known shift.
    reps, alpha, n_resamples, rng
        Simulated experiments per cell, the level, resamples for the bootstrap
        and permutation tests, and the random source.

    References
    ----------
    .. [1] Colas, C., Sigaud, O. & Oudeyer, P.-Y. (2018). How many random seeds?
       Statistical power analysis in deep reinforcement learning experiments.
       arXiv:1806.08295 (the same design: false positives by simulation).
    """
    unknown = [m for m in methods if m not in CALIBRATION_METHODS]
    unknown += [d for d in distributions if d not in DISTRIBUTIONS]
    if unknown:
        raise ValueError(f"unknown methods or distributions: {unknown}")
    if hypothesis not in ("null", "alternative"):
        raise ValueError(f"`hypothesis` must be 'null' or 'alternative', got {hypothesis!r}")
    reps = check_positive_int(reps, "reps")
    alpha = check_probability(alpha, "alpha")
    gen = make_rng(rng)
    cells = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", TooFewSeedsWarning)
        for dist_name in distributions:
            dist = DISTRIBUTIONS[dist_name]
            for n in sizes:
                a = dist.draw(gen, (reps, n))
                b = dist.draw(gen, (reps, n))
                for name in methods:
                    spec = CALIBRATION_METHODS[name]
                    shift = (spec.null_shift if hypothesis == "null" else spec.alt_shift) * dist.sd
                    hits = sum(
                        spec.decide(a[i] + shift, b[i], dist.sd, alpha, n_resamples, gen)
                        for i in range(reps)
                    )
                    cells.append(CalibrationCell(name, dist_name, n, hypothesis, reps, int(hits)))
    return tuple(cells)
