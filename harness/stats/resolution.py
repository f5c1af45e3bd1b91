"""What the data and the seeds can resolve: rounding noise, and the fewest seeds a test can decide with.

Two limits that no test can see past:

* **Floating-point resolution.** Means of the same constant computed over
  different numbers of values can differ in their last bits (the sum of ten
  0.74 is not ten times 0.74), and the sample variance of a constant group can
  come out as 1e-33 instead of 0. Such differences and spreads are rounding
  noise, not evidence: :func:`rounding_tolerance` is the size below which they
  count as zero.
* **Too few seeds.** A rank or permutation test has a smallest attainable
  p-value fixed by the number of seeds: with 2 against 2 seeds an exact
  permutation test cannot go below 1/6, so it can never reject at 0.05, and
  "no significant difference" then says nothing. :func:`minimum_seeds` gives the
  fewest seeds per side for which a test *can* reach a level.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from harness.stats._validate import check_alternative, check_positive_int, check_probability

__all__ = [
    "ROUNDING_ULPS",
    "minimum_seeds",
    "rounding_tolerance",
    "smallest_pvalue_permutation",
    "smallest_pvalue_rank",
]

#: Units in the last place, per value, within which differences and spreads count as zero.
ROUNDING_ULPS = 8

#: minimum_seeds searches up to this many seeds per side.
_MAX_SEEDS = 1000


def rounding_tolerance(scale: float, n: int) -> float:
    """The rounding noise of a mean (or a spread) of ``n`` values of magnitude ``scale``.

    ``ROUNDING_ULPS * eps * |scale| * n`` with ``eps`` the double-precision
    machine epsilon (2.2e-16): a difference of two means, or a standard error,
    no larger than this is indistinguishable from rounding and counts as zero.

    Parameters
    ----------
    scale
        The magnitude of the data (e.g. the larger absolute mean of the two groups).
    n
        The number of values summed (both groups together).

    Notes
    -----
    Summing ``n`` values of magnitude ``s`` in double precision errs by at most
    about ``(n - 1) eps s`` (recursive summation; pairwise summation, which
    numpy uses, errs less), so a mean errs by at most ``eps s`` per value, and
    the variance of a constant group computed around such a mean is of order
    ``(n eps s)^2``. The factor ``ROUNDING_ULPS = 8`` leaves room for the
    subtraction and the variance: real differences between RL returns are
    many orders of magnitude larger (a return of 500 gives a tolerance of
    about 2e-11 with 20 seeds).

    References
    ----------
    .. [1] Higham, N. J. (2002). Accuracy and Stability of Numerical Algorithms,
       2nd ed., section 4.2 (error bound of recursive summation). SIAM.

    Examples
    --------
    >>> bool(rounding_tolerance(0.74, 34) > abs(np.mean([0.74] * 10) - np.mean([0.74] * 24)))
    True
    """
    return ROUNDING_ULPS * float(np.finfo(np.float64).eps) * abs(float(scale)) * int(n)


def smallest_pvalue_permutation(n_a: int, n_b: int, *, n_resamples: int, alternative: str = "less") -> float:
    """The smallest p-value a permutation test over ``n_a`` and ``n_b`` seeds can give.

    Exact enumeration (when the ``C(n_a + n_b, n_a)`` relabellings are at most
    ``n_resamples``) counts the observed labelling among all, so its smallest
    one-sided p-value is ``1 / C(n_a + n_b, n_a)`` (twice that two-sided); random
    relabellings give at least ``1 / (1 + n_resamples)`` (Phipson & Smyth 2010).

    References
    ----------
    .. [1] Fisher, R. A. (1935). The Design of Experiments, section 21.
    .. [2] Phipson, B. & Smyth, G. K. (2010). Statistical Applications in
       Genetics and Molecular Biology 9(1).

    Examples
    --------
    >>> smallest_pvalue_permutation(2, 2, n_resamples=2000)
    0.16666666666666666
    """
    n_a = check_positive_int(n_a, "n_a", minimum=1)
    n_b = check_positive_int(n_b, "n_b", minimum=1)
    n_resamples = check_positive_int(n_resamples, "n_resamples", minimum=1)
    sides = 2.0 if check_alternative(alternative) == "two-sided" else 1.0
    distinct = math.comb(n_a + n_b, n_a)
    if distinct <= n_resamples:
        return min(1.0, sides / distinct)
    return min(1.0, sides / (1.0 + n_resamples))


def smallest_pvalue_rank(n_a: int, n_b: int, *, alternative: str = "less", ties: bool = False) -> float:
    """The smallest p-value of the Mann–Whitney / Gehan test with ``n_a`` and ``n_b`` seeds.

    Computed by the test itself (:func:`harness.stats.mann_whitney`) on two
    completely separated groups, the most extreme data there is. With
    ``ties=True`` it is the normal approximation the censored (Gehan) test uses,
    with one tie (two censored seeds) in the larger group.

    References
    ----------
    .. [1] Mann, H. B. & Whitney, D. R. (1947). Annals of Mathematical Statistics 18:50–60.
    .. [2] Gehan, E. A. (1965). Biometrika 52:203–223.

    Examples
    --------
    >>> round(smallest_pvalue_rank(3, 3), 4)
    0.05
    """
    from harness.stats.rank import mann_whitney

    n_a = check_positive_int(n_a, "n_a", minimum=2)
    n_b = check_positive_int(n_b, "n_b", minimum=2)
    alternative = check_alternative(alternative)
    a = np.arange(n_a, dtype=np.float64)
    b = np.arange(n_b, dtype=np.float64)
    if alternative == "greater":
        a += n_b
    else:
        b += n_a
    if ties:  # two censored seeds tie at the top of the higher group
        top = a if alternative == "greater" else b
        top[-1] = top[-2]
    method = "asymptotic" if ties else "auto"
    return float(mann_whitney(a, b, alternative=alternative, method=method).pvalue)


def minimum_seeds(smallest_pvalue: Callable[[int], float], alpha: float, *, start: int = 2) -> int | None:
    """The fewest seeds per side (equal sides) at which a test can reach ``p <= alpha``.

    Parameters
    ----------
    smallest_pvalue
        ``smallest_pvalue(n)``: the smallest p-value the test can give with ``n`` seeds per side.
    alpha
        The level the test must be able to reach (for a Holm-corrected family of
        ``k`` checks, ``alpha / k`` lets the check decide on its own).
    start
        The fewest seeds the test accepts at all.

    Returns
    -------
    int or None
        ``None`` if no number up to 1000 seeds per side suffices.

    Examples
    --------
    >>> minimum_seeds(lambda n: smallest_pvalue_permutation(n, n, n_resamples=2000), 0.05)
    3
    """
    alpha = check_probability(alpha, "alpha")
    for n in range(check_positive_int(start, "start", minimum=1), _MAX_SEEDS + 1):
        if smallest_pvalue(n) <= alpha:
            return n
    return None
