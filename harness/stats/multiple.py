"""Corrections for a family of p-values: Holm's step-down and Benjamini–Hochberg."""

from __future__ import annotations

import dataclasses

import numpy as np
from scipy import stats as _st

from harness.stats._validate import check_probability

__all__ = ["AdjustedPValues", "HolmResult", "benjamini_hochberg", "holm"]


@dataclasses.dataclass(frozen=True, slots=True)
class AdjustedPValues:
    """Adjusted p-values of a family of checks, in the input order.

    Attributes
    ----------
    adjusted
        The adjusted p-values; check ``i`` is rejected when ``adjusted[i] <= alpha``.
    reject
        Which checks are rejected at ``alpha``.
    alpha
        The family-wise error rate (Holm) or false discovery rate (BH) controlled.
    method
        ``"Holm"`` or ``"Benjamini–Hochberg"``.
    """

    adjusted: tuple[float, ...]
    reject: tuple[bool, ...]
    alpha: float
    method: str

    @property
    def reading(self) -> str:
        """One sentence."""
        k = sum(self.reject)
        return f"{self.method} rejects {k} of {len(self.reject)} checks at {self.alpha:g}."


#: The name the verification layer uses for :func:`holm`'s result.
HolmResult = AdjustedPValues


def _pvalues_iv(pvalues: object) -> np.ndarray:
    try:
        p = np.asarray(pvalues, dtype=np.float64)
    except (TypeError, ValueError):
        raise TypeError(f"`pvalues` must be a sequence of numbers, got {pvalues!r}") from None
    if p.ndim != 1 or p.size == 0:
        raise ValueError(f"`pvalues` must be a non-empty 1-D sequence, got shape {p.shape}")
    bad = np.flatnonzero(~((p >= 0.0) & (p <= 1.0)))
    if bad.size:
        i = int(bad[0])
        raise ValueError(f"`pvalues` must lie in [0, 1], got {p[i]} at index {i}")
    return p


def holm(pvalues: object, *, alpha: float = 0.05) -> AdjustedPValues:
    """Holm's step-down correction: controls the family-wise error rate at ``alpha``.

    With the p-values sorted, ``p_(1) <= ... <= p_(m)``, the adjusted value of
    the ``j``-th is ``max_{i <= j} min(1, (m - i + 1) p_(i))``; the checks with an
    adjusted p-value at most ``alpha`` are rejected. Valid under any dependence.

    References
    ----------
    .. [1] Holm, S. (1979). A simple sequentially rejective multiple test
       procedure. Scandinavian Journal of Statistics 6:65–70.

    Examples
    --------
    >>> r = holm([0.01, 0.03, 0.04, 0.005])
    >>> [round(p, 4) for p in r.adjusted], r.reject
    ([0.03, 0.06, 0.06, 0.02], (True, False, False, True))
    """
    p = _pvalues_iv(pvalues)
    alpha = check_probability(alpha, "alpha")
    m = p.size
    order = np.argsort(p, kind="stable")
    stepped = np.minimum(1.0, np.maximum.accumulate((m - np.arange(m)) * p[order]))
    adjusted = np.empty(m)
    adjusted[order] = stepped
    return AdjustedPValues(
        adjusted=tuple(float(v) for v in adjusted),
        reject=tuple(bool(v) for v in adjusted <= alpha),
        alpha=alpha,
        method="Holm",
    )


def benjamini_hochberg(pvalues: object, *, alpha: float = 0.05) -> AdjustedPValues:
    """Benjamini–Hochberg step-up procedure: controls the false discovery rate at ``alpha``.

    Wraps :func:`scipy.stats.false_discovery_control` (``method="bh"``).
    Valid for independent or positively dependent checks.

    References
    ----------
    .. [1] Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery
       rate: a practical and powerful approach to multiple testing. JRSS B 57:289–300.

    Examples
    --------
    >>> benjamini_hochberg([0.01, 0.02, 0.5]).reject
    (True, True, False)
    """
    p = _pvalues_iv(pvalues)
    alpha = check_probability(alpha, "alpha")
    adjusted = np.asarray(_st.false_discovery_control(p, method="bh"), dtype=np.float64)
    return AdjustedPValues(
        adjusted=tuple(float(v) for v in adjusted),
        reject=tuple(bool(v) for v in adjusted <= alpha),
        alpha=alpha,
        method="Benjamini–Hochberg",
    )
