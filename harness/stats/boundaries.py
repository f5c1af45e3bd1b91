"""Group-sequential boundaries: alpha spending and the classical constant-shape designs, computed.

A group-sequential test looks at the data ``K`` times, at information fractions
``0 < t_1 < ... < t_K = 1``, and stops at the first look whose standardised
statistic ``Z_k`` crosses the boundary ``c_k``. Under the canonical joint
distribution (Jennison & Turnbull 2000, §3.1) the ``Z_k`` are normal with
``corr(Z_i, Z_j) = sqrt(t_i / t_j)`` and independent increments of the score
``S_k = Z_k sqrt(t_k)``. The boundaries are chosen so that the probability of
ever crossing under the null hypothesis is ``alpha``.

Crossing probabilities are computed by the recursive numerical integration of
Armitage, McPherson & Rowe (1969) with the grid and Simpson weights of
Jennison & Turnbull (2000, ch. 19), not read from tables.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
from scipy import optimize as _opt
from scipy import special as _sp

from harness.stats._result import fmt
from harness.stats._validate import check_finite_number, check_one_sided_level, check_probability

__all__ = [
    "BOUNDARY_KINDS",
    "SequentialBoundaries",
    "check_kind",
    "exit_probabilities",
    "sequential_boundaries",
    "spending_function",
]

#: Valid ``kind`` values: two Lan–DeMets spending functions and the two classical designs.
BOUNDARY_KINDS: tuple[str, ...] = (
    "obrien-fleming-spending",
    "pocock-spending",
    "obrien-fleming",
    "pocock",
)

_METHODS = {
    "obrien-fleming-spending": "Lan–DeMets alpha spending, O'Brien–Fleming type (Lan & DeMets 1983)",
    "pocock-spending": "Lan–DeMets alpha spending, Pocock type (Lan & DeMets 1983)",
    "obrien-fleming": "O'Brien–Fleming constant-shape boundaries c_k = C / sqrt(t_k) (O'Brien & Fleming 1979)",
    "pocock": "Pocock constant boundaries c_k = C (Pocock 1977)",
}

#: Grid size parameter ``r`` of Jennison & Turnbull (2000, §19.2); about 12 r points per look (16 agrees with 32 to 1e-5).
_GRID_R = 16


@dataclasses.dataclass(frozen=True, slots=True)
class SequentialBoundaries:
    """The boundaries of a group-sequential test on the standard normal (Z) scale.

    Attributes
    ----------
    kind
        One of :data:`BOUNDARY_KINDS`.
    fractions
        Information fractions ``t_1 < ... < t_K = 1`` of the looks.
    alpha
        Overall level: the probability, under the null hypothesis, of crossing at any look.
    sides
        1 for a one-sided test (reject when ``Z_k >= c_k``), 2 for a two-sided
        one (reject when ``|Z_k| >= c_k``).
    critical
        The boundaries ``c_k`` on the Z scale.
    nominal
        The nominal significance level of each look: ``1 - Phi(c_k)`` one-sided,
        ``2 (1 - Phi(c_k))`` two-sided. A look rejects when its p-value is below it.
    spent
        Cumulative probability of crossing by each look under the null
        hypothesis, computed by numerical integration; ``spent[-1]`` is ``alpha``
        up to the integration error (below 1e-6).
    method
        The design's name and source.
    """

    kind: str
    fractions: tuple[float, ...]
    alpha: float
    sides: int
    critical: tuple[float, ...]
    nominal: tuple[float, ...]
    spent: tuple[float, ...]
    method: str

    @property
    def reading(self) -> str:
        """One sentence: the boundaries and what they spend."""
        cs = ", ".join(f"{c:.3f}" for c in self.critical)
        side = "one-sided" if self.sides == 1 else "two-sided"
        return (
            f"{self.method}, {len(self.critical)} looks, {side} alpha = {fmt(self.alpha)}: "
            f"Z boundaries {cs}; probability of a false crossing {fmt(self.spent[-1])}."
        )


def spending_function(kind: str, fractions: object, alpha: float) -> np.ndarray:
    """Cumulative alpha spent by information fraction ``t`` (Lan & DeMets 1983).

    Parameters
    ----------
    kind
        ``"obrien-fleming-spending"``: ``alpha*(t) = 2 - 2 Phi(z_{alpha/2} / sqrt(t))``;
        ``"pocock-spending"``: ``alpha*(t) = alpha ln(1 + (e - 1) t)``.
    fractions
        Information fractions in ``(0, 1]``.
    alpha
        Total level spent at ``t = 1`` (one- or two-sided: the formulas are the same).

    Returns
    -------
    numpy.ndarray
        ``alpha*(t)`` at each fraction.

    References
    ----------
    .. [1] Lan, K. K. G. & DeMets, D. L. (1983). Discrete sequential boundaries
       for clinical trials. Biometrika 70:659–663.

    Examples
    --------
    >>> [round(float(v), 6) for v in spending_function("pocock-spending", [0.5, 1.0], 0.05)]
    [0.031006, 0.05]
    """
    if kind not in ("obrien-fleming-spending", "pocock-spending"):
        raise ValueError(
            f"`kind` must be 'obrien-fleming-spending' or 'pocock-spending' for a spending function, got {kind!r}"
        )
    a = check_probability(alpha, "alpha")
    t = np.asarray(fractions, dtype=np.float64)
    if t.ndim != 1 or t.size == 0 or not np.all((t > 0.0) & (t <= 1.0)):
        raise ValueError(f"`fractions` must be a non-empty 1-D sequence in (0, 1], got {fractions!r}")
    if kind == "pocock-spending":
        return a * np.log1p((math.e - 1.0) * t)
    return 2.0 * _sp.ndtr(-_sp.ndtri(1.0 - a / 2.0) / np.sqrt(t))


# ---------------------------------------------------------------------------------------------
# Recursive numerical integration (Armitage, McPherson & Rowe 1969; Jennison & Turnbull 2000, ch. 19)


def _grid(mean: float, low: float, high: float) -> tuple[np.ndarray, np.ndarray]:
    """Simpson points and weights on ``(low, high)`` for a density centred near ``mean``.

    The 6r - 1 base points of Jennison & Turnbull (2000, §19.2) are dense within
    3 sd of the mean and spread logarithmically to about 3 + 4 ln r sd; points
    outside ``(low, high)`` are replaced by the end points; midpoints are then
    added so that Simpson's rule applies on each pair of intervals.
    """
    r = _GRID_R
    i = np.arange(1, 6 * r, dtype=np.float64)
    x = np.where(
        i < r,
        mean - 3.0 - 4.0 * np.log(r / i),
        np.where(i <= 5 * r, mean - 3.0 + 3.0 * (i - r) / (2.0 * r), mean + 3.0 + 4.0 * np.log(r / (6.0 * r - i))),
    )
    inside = x[(x > low) & (x < high)]
    ends = [v for v, keep in ((low, low > x[0]), (high, high < x[-1])) if keep]
    x = np.unique(np.concatenate([inside, ends]))
    z = np.empty(2 * x.size - 1)
    z[0::2] = x
    z[1::2] = (x[:-1] + x[1:]) / 2.0
    d = np.diff(x)
    w = np.zeros_like(z)
    w[1::2] = 4.0 * d / 6.0
    w[0:-1:2] += d / 6.0
    w[2::2] += d / 6.0
    return z, w


class _Recursion:
    """The sub-density of ``Z_k`` on the continuation region, look by look."""

    def __init__(self, fractions: np.ndarray, drift: float) -> None:
        self.t = fractions
        self.drift = drift
        self.k = 0
        self.z = np.zeros(0)
        self.g = np.zeros(0)  # weighted sub-density: weight * density at z

    def exit(self, low: float, high: float) -> tuple[float, float]:
        """Probabilities of continuing to the current look and then leaving above ``high`` / below ``low``."""
        t = self.t[self.k]
        if self.k == 0:
            m = self.drift * math.sqrt(t)
            return float(_sp.ndtr(m - high)), float(_sp.ndtr(low - m))
        t0 = self.t[self.k - 1]
        dt = t - t0
        centre = (self.z * math.sqrt(t0) + self.drift * dt) / math.sqrt(dt)
        up = float(np.dot(self.g, _sp.ndtr(centre - high * math.sqrt(t / dt))))
        down = float(np.dot(self.g, _sp.ndtr(low * math.sqrt(t / dt) - centre)))
        return up, down

    def advance(self, low: float, high: float) -> None:
        """Condition on continuing at the current look (``low < Z_k < high``) and move to the next."""
        t = self.t[self.k]
        z, w = _grid(self.drift * math.sqrt(t), low, high)
        if self.k == 0:
            dens = _phi(z - self.drift * math.sqrt(t))
        else:
            t0 = self.t[self.k - 1]
            dt = t - t0
            arg = (z[:, None] * math.sqrt(t) - self.z[None, :] * math.sqrt(t0) - self.drift * dt) / math.sqrt(dt)
            dens = (_phi(arg) @ self.g) * math.sqrt(t / dt)
        self.z, self.g = z, w * dens
        self.k += 1


def _phi(x: np.ndarray) -> np.ndarray:
    return np.exp(-0.5 * x * x) / math.sqrt(2.0 * math.pi)


def _bounds(c: float, sides: int) -> tuple[float, float]:
    return (-c if sides == 2 else -math.inf), c


def exit_probabilities(
    critical: object, fractions: object, *, sides: int = 1, drift: float = 0.0
) -> np.ndarray:
    """Probability of stopping at each look of a group-sequential test.

    Parameters
    ----------
    critical
        Z boundaries ``c_1..c_K`` (continue while ``Z_k < c_k``, or ``|Z_k| < c_k`` two-sided).
    fractions
        Information fractions ``t_1 < ... < t_K`` in ``(0, 1]``.
    sides
        1 or 2.
    drift
        ``E[Z_k] = drift * sqrt(t_k)``; 0 is the null hypothesis.

    Returns
    -------
    numpy.ndarray
        The probability of crossing first at look ``k``, for each ``k``; their
        sum is the rejection probability (size under ``drift = 0``, power otherwise).

    References
    ----------
    .. [1] Armitage, P., McPherson, C. K. & Rowe, B. C. (1969). Repeated
       significance tests on accumulating data. JRSS A 132:235–244.
    .. [2] Jennison, C. & Turnbull, B. W. (2000). Group Sequential Methods with
       Applications to Clinical Trials. Chapman & Hall/CRC, ch. 19.

    Examples
    --------
    >>> p = exit_probabilities([2.178, 2.178], [0.5, 1.0], sides=2)
    >>> round(float(p.sum()), 4)
    0.05
    """
    c = np.asarray(critical, dtype=np.float64)
    t = _fractions_iv(fractions, "fractions", normalise=False)
    sides = _sides_iv(sides)
    drift = check_finite_number(drift, "drift")
    if c.shape != t.shape or not np.all(np.isfinite(c)) or (sides == 2 and np.any(c <= 0)):
        raise ValueError(
            f"`critical` must hold one finite boundary per fraction ({t.size}), positive when two-sided, got {critical!r}"
        )
    rec = _Recursion(t, drift)
    out = np.empty(t.size)
    for k in range(t.size):
        low, high = _bounds(float(c[k]), sides)
        out[k] = sum(rec.exit(low, high))
        if k + 1 < t.size:
            rec.advance(low, high)
    return out


# ---------------------------------------------------------------------------------------------
# Designs


def _fractions_iv(information: object, name: str, *, normalise: bool = True) -> np.ndarray:
    if isinstance(information, (str, bytes)) or information is None:
        raise TypeError(f"`{name}` must be a sequence of positive numbers, got {information!r}")
    try:
        v = np.asarray(information, dtype=np.float64)
    except (TypeError, ValueError):
        raise TypeError(f"`{name}` must be a sequence of positive numbers, got {information!r}") from None
    if v.ndim != 1 or v.size == 0:
        raise ValueError(f"`{name}` must be a non-empty 1-D sequence, got {information!r}")
    if not np.all(np.isfinite(v)) or np.any(v <= 0) or np.any(np.diff(v) <= 0):
        raise ValueError(f"`{name}` must be positive and strictly increasing, got {information!r}")
    if normalise:
        return v / v[-1]
    if v[-1] > 1.0 + 1e-12:
        raise ValueError(f"`{name}` must lie in (0, 1], got {information!r}")
    return v


def _sides_iv(sides: object) -> int:
    if sides not in (1, 2) or isinstance(sides, bool):
        raise ValueError(f"`sides` must be 1 or 2, got {sides!r}")
    return int(sides)


def check_kind(kind: object, name: str = "kind") -> str:
    """Return ``kind`` if it is one of :data:`BOUNDARY_KINDS`, else raise ValueError naming ``name``."""
    if kind not in BOUNDARY_KINDS:
        listed = ", ".join(repr(k) for k in BOUNDARY_KINDS)
        raise ValueError(f"`{name}` must be one of {listed}, got {kind!r}")
    return str(kind)


def _sequential_boundaries_iv(information, alpha, kind, sides):
    t = _fractions_iv(information, "information")
    sides = _sides_iv(sides)
    a = check_one_sided_level(alpha, "alpha") if sides == 1 else check_probability(alpha, "alpha")
    return t, a, check_kind(kind), sides


def _spending_critical(t: np.ndarray, alpha: float, kind: str, sides: int) -> list[float]:
    target = np.diff(spending_function(kind, t, alpha), prepend=0.0)
    rec = _Recursion(t, 0.0)
    critical: list[float] = []
    for k in range(t.size):
        inc = float(target[k])

        def excess(c: float) -> float:
            return sum(rec.exit(*_bounds(c, sides))) - inc

        hi = float(_sp.ndtri(1.0 - inc / sides)) + 0.5
        c = _opt.brentq(excess, 0.0 if sides == 2 else -10.0, hi, xtol=1e-10)
        critical.append(float(c))
        if k + 1 < t.size:
            rec.advance(*_bounds(c, sides))
    return critical


def _constant_critical(t: np.ndarray, alpha: float, kind: str, sides: int) -> list[float]:
    shape = np.ones_like(t) if kind == "pocock" else 1.0 / np.sqrt(t)

    def excess(scale: float) -> float:
        return float(exit_probabilities(scale * shape, t, sides=sides).sum()) - alpha

    z_fixed = float(_sp.ndtri(1.0 - alpha / sides))
    scale = _opt.brentq(excess, 0.5 * z_fixed, 2.0 * z_fixed + 2.0, xtol=1e-10)
    return [float(v) for v in scale * shape]


def sequential_boundaries(
    information: object,
    *,
    alpha: float = 0.05,
    kind: str = "obrien-fleming-spending",
    sides: int = 1,
) -> SequentialBoundaries:
    """Compute the boundaries of a group-sequential test.

    Parameters
    ----------
    information
        Information at each look (any positive, strictly increasing numbers: the
        seeds per side, or fractions); they are divided by the last one. For two
        groups of ``n`` seeds each and Welch's statistic the information is
        proportional to ``n``.
    alpha
        Overall level (one-sided below 0.5).
    kind
        ``"obrien-fleming-spending"`` or ``"pocock-spending"``: Lan & DeMets
        (1983) spending functions, each look spending ``alpha*(t_k) - alpha*(t_{k-1})``;
        ``"obrien-fleming"`` (O'Brien & Fleming 1979; boundaries ``C / sqrt(t_k)``,
        i.e. ``C sqrt(K / k)`` for equally spaced looks) or ``"pocock"`` (Pocock
        1977; a constant ``C``), with ``C`` found so that the overall level is ``alpha``.
    sides
        1 (reject for large ``Z``) or 2 (symmetric, reject for large ``|Z|``).

    Returns
    -------
    SequentialBoundaries

    Notes
    -----
    Each crossing probability is computed by the recursive numerical integration
    of Armitage, McPherson & Rowe (1969) on the grid of Jennison & Turnbull
    (2000, §19.2); boundaries are the roots (Brent's method) of "crossing
    probability minus target". The classical designs were tabulated for equally
    spaced looks; for other spacings the same shapes are used (Wang & Tsiatis
    1987 family with Delta = 0.5 and 0).

    References
    ----------
    .. [1] Lan, K. K. G. & DeMets, D. L. (1983). Biometrika 70:659–663.
    .. [2] O'Brien, P. C. & Fleming, T. R. (1979). A multiple testing procedure
       for clinical trials. Biometrics 35:549–556.
    .. [3] Pocock, S. J. (1977). Group sequential methods in the design and
       analysis of clinical trials. Biometrika 64:191–199.
    .. [4] Armitage, P., McPherson, C. K. & Rowe, B. C. (1969). JRSS A 132:235–244.
    .. [5] Jennison, C. & Turnbull, B. W. (2000). Group Sequential Methods with
       Applications to Clinical Trials. Chapman & Hall/CRC, ch. 2, 7 and 19.

    Examples
    --------
    >>> b = sequential_boundaries([1, 2, 3, 4, 5], alpha=0.05, kind="pocock", sides=2)
    >>> round(b.critical[0], 3)
    2.413
    """
    t, alpha, kind, sides = _sequential_boundaries_iv(information, alpha, kind, sides)
    if kind.endswith("-spending"):
        critical = _spending_critical(t, alpha, kind, sides)
    else:
        critical = _constant_critical(t, alpha, kind, sides)
    spent = np.cumsum(exit_probabilities(critical, t, sides=sides))
    nominal = [float(sides * _sp.ndtr(-c)) for c in critical]
    return SequentialBoundaries(
        kind=kind,
        fractions=tuple(float(v) for v in t),
        alpha=alpha,
        sides=sides,
        critical=tuple(critical),
        nominal=tuple(nominal),
        spent=tuple(float(v) for v in spent),
        method=_METHODS[kind],
    )
