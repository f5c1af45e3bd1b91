"""The drop rules of the gate (harness.stats.drop_rules): each rule's definition on hand-made cases."""

from __future__ import annotations

import pytest

from harness.stats import ConfidenceInterval
from harness.stats.drop_rules import DEFAULT_RULE, DROP_RULES, drop_fails


def _fails(rule, *, significant, beyond, drop, low, high, margin=1.0):
    return drop_fails(rule, significant=significant, beyond_margin=beyond, drop=drop,
                      drop_interval=ConfidenceInterval(low, high), margin=margin)


def test_rule_names_and_default():
    assert DEFAULT_RULE == "drop-beyond-margin" and DEFAULT_RULE in DROP_RULES
    assert set(DROP_RULES) == {"drop-beyond-margin", "estimate-beyond-margin", "interval-past-margin", "any-drop"}


@pytest.mark.parametrize(("case", "expected"), [
    # significant, beyond, drop, interval -> fails under (beyond, estimate, interval, any)
    ((True, False, 0.3, 0.1, 0.5), (False, False, False, True)),   # small drop, interval inside margin
    ((True, False, 0.6, 0.1, 1.1), (False, False, True, True)),    # interval reaches past the margin
    ((True, False, 1.2, 0.1, 2.3), (False, True, True, True)),     # estimate beyond, not significantly
    ((True, True, 2.0, 1.5, 2.5), (True, True, True, True)),       # significantly beyond the margin
    ((False, False, 0.5, -0.5, 1.5), (False, False, False, False)),  # nothing significant
])
def test_each_rule_on_hand_made_cases(case, expected):
    # The definitions of non-inferiority margins (ICH E10 2000, Walker & Nowacki 2011, figure 1):
    # the interval's position relative to 0 and to the margin decides.
    significant, beyond, drop, low, high = case
    got = tuple(_fails(r, significant=significant, beyond=beyond, drop=drop, low=low, high=high)
                for r in ("drop-beyond-margin", "estimate-beyond-margin", "interval-past-margin", "any-drop"))
    assert got == expected


def test_unknown_rule_is_refused():
    with pytest.raises(ValueError, match="`rule` must be one of 'drop-beyond-margin'"):
        _fails("lenient", significant=True, beyond=True, drop=1.0, low=0.0, high=2.0)
