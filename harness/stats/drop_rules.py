"""When does a drop matter? The decision rules a gate can apply to a worsening and its margin.

A gate compares a candidate with a reference and must say whether the candidate
got worse. "Significantly worse" alone fails on drops too small to matter once
enough seeds (or a lucky reference draw) make them significant. The rules here
add the margin ``m`` (the largest drop that does not matter) in different ways.
Every rule sees the same numbers of one check: whether the drop is significant
(the one-sided test of ``H0: no drop``), whether it is significantly larger than
the margin (the one-sided test of ``H0: drop <= m``), the drop's point estimate
and its ``1 - 2 alpha`` interval, all oriented so that a positive drop is worse.

``drop-beyond-margin`` (the default)
    Fails when the drop is significantly larger than the margin: the one-sided
    test of ``H0: drop <= m`` rejects. This is the non-inferiority test of
    clinical trials (ICH E9 1998, ICH E10 2000, Wellek 2010 ch. 2) with the
    roles of the hypotheses exchanged: there the new treatment must prove it is
    not worse by ``m``; here the alarm must prove that the candidate is. Its
    false-alarm rate is at most ``alpha`` for every true drop up to the margin,
    whatever the number of seeds; its price is power near the margin (a drop of
    exactly ``m`` is caught with probability ``alpha``).
``estimate-beyond-margin``
    Fails when the drop is significant and its point estimate exceeds ``m``.
``interval-past-margin``
    Fails when the drop is significant and its ``1 - 2 alpha`` interval is not
    inside ``(-m, m)``: a significant difference is forgiven only when
    equivalence is also shown (Schuirmann 1987). With few seeds the interval is
    wide, so this is nearly ``any-drop``.
``any-drop``
    Fails on any significant drop, however small (the classical superiority
    test of Welch 1947 / Holm 1979, margin ignored).

References
----------
.. [1] ICH E9 (1998). Statistical Principles for Clinical Trials, section 3.3.2.
.. [2] ICH E10 (2000). Choice of Control Group and Related Issues in Clinical Trials, section 1.5.1.
.. [3] Wellek, S. (2010). Testing Statistical Hypotheses of Equivalence and
   Noninferiority, 2nd ed. Chapman & Hall/CRC.
.. [4] Schuirmann, D. J. (1987). J. Pharmacokinetics and Biopharmaceutics 15:657–680.
.. [5] Walker, E. & Nowacki, A. S. (2011). Understanding equivalence and
   noninferiority testing. J. General Internal Medicine 26(2):192–196.
"""

from __future__ import annotations

import dataclasses
from types import MappingProxyType

from harness.stats._result import ConfidenceInterval

__all__ = ["DEFAULT_RULE", "DROP_RULES", "DropRule", "drop_fails"]


@dataclasses.dataclass(frozen=True, slots=True)
class DropRule:
    """A named rule: when it fails, in one phrase, and the published source of its test."""

    name: str
    fails_when: str
    source: str


#: The rules by name, the default first.
DROP_RULES = MappingProxyType({
    rule.name: rule for rule in (
        DropRule("drop-beyond-margin", "the drop is significantly larger than the margin",
                 "one-sided Welch test of H0: drop <= margin (non-inferiority, roles exchanged; Wellek 2010)"),
        DropRule("estimate-beyond-margin", "the drop is significant and its estimate exceeds the margin",
                 "one-sided Welch test of H0: no drop (Welch 1947), estimate compared with the margin"),
        DropRule("interval-past-margin", "the drop is significant and its interval is not inside the margin",
                 "one-sided Welch test of H0: no drop, TOST interval (Schuirmann 1987)"),
        DropRule("any-drop", "the drop is significant, however small",
                 "one-sided Welch test of H0: no drop (Welch 1947)"),
    )
})  # fmt: skip

#: The rule a gate uses unless told otherwise.
DEFAULT_RULE = "drop-beyond-margin"


def drop_fails(
    rule: str,
    *,
    significant: bool,
    beyond_margin: bool,
    drop: float,
    drop_interval: ConfidenceInterval,
    margin: float,
) -> bool:
    """Whether ``rule`` fails one check.

    Parameters
    ----------
    rule
        A name from :data:`DROP_RULES`.
    significant
        The test of ``H0: no drop`` rejected (after any multiplicity correction).
    beyond_margin
        The test of ``H0: drop <= margin`` rejected (after any multiplicity correction).
    drop, drop_interval
        The drop's estimate and its ``1 - 2 alpha`` interval, positive when worse.
    margin
        The largest drop that does not matter (positive).

    Examples
    --------
    >>> ci = ConfidenceInterval(0.2, 0.6)
    >>> [drop_fails(r, significant=True, beyond_margin=False, drop=0.4, drop_interval=ci, margin=0.5)
    ...  for r in DROP_RULES]
    [False, False, True, True]
    """
    if rule not in DROP_RULES:
        raise ValueError(f"`rule` must be one of {', '.join(repr(r) for r in DROP_RULES)}, got {rule!r}")
    if rule == "drop-beyond-margin":
        return bool(beyond_margin)
    if not significant:
        return False
    if rule == "estimate-beyond-margin":
        return drop > margin
    if rule == "interval-past-margin":
        return not drop_interval.inside(-margin, margin)
    return True
