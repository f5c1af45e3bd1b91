"""A rate observed in repeated trials, with its exact (Clopper–Pearson) interval."""

from __future__ import annotations

import dataclasses

from scipy import stats

from harness.stats._result import ConfidenceInterval

__all__ = ["BinomialRate"]


@dataclasses.dataclass(frozen=True, slots=True)
class BinomialRate:
    """A rate observed in repeated trials, with its exact binomial interval.

    Attributes
    ----------
    count, trials
        Events and independent trials.
    estimate
        ``count / trials``.
    interval
        Clopper–Pearson interval at ``confidence_level``.
    confidence_level
        Level of ``interval``.
    method
        How the interval was computed, and why it is approximate here.
    """

    count: int
    trials: int
    estimate: float
    interval: ConfidenceInterval
    confidence_level: float
    method: str

    @classmethod
    def of(cls, count: int, trials: int, *, confidence_level: float = 0.95) -> BinomialRate:
        """The rate of ``count`` events in ``trials`` with a Clopper–Pearson interval.

        References
        ----------
        .. [1] Clopper, C. J. & Pearson, E. S. (1934). The use of confidence or fiducial limits
           illustrated in the case of the binomial. Biometrika 26:404–413.
        """
        ci = stats.binomtest(count, trials).proportion_ci(confidence_level=confidence_level, method="exact")
        return cls(count, trials, count / trials, ConfidenceInterval(float(ci.low), float(ci.high)), confidence_level,
                   "Clopper–Pearson exact binomial interval (Clopper & Pearson 1934), exact for independent trials")
