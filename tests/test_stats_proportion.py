"""Clopper–Pearson intervals of an observed rate (used for calibration's false-alarm rate)."""

from __future__ import annotations

import pytest

from harness.stats import BinomialRate


def test_zero_events_upper_limit_is_the_closed_form():
    # Clopper & Pearson (1934): with 0 events in n trials the upper limit of the two-sided
    # interval solves (1 - p)^n = alpha/2, i.e. p = 1 - (alpha/2)^(1/n); n = 10, 95%: 0.30850.
    rate = BinomialRate.of(0, 10)
    assert rate.estimate == 0.0
    assert rate.interval.low == 0.0
    assert rate.interval.high == pytest.approx(1 - 0.025 ** (1 / 10), rel=1e-9)


def test_all_events_lower_limit_is_the_closed_form_and_interval_is_symmetric_in_labels():
    # Clopper & Pearson (1934): with n events in n trials the lower limit is (alpha/2)^(1/n).
    rate = BinomialRate.of(20, 20, confidence_level=0.9)
    assert rate.interval.high == 1.0
    assert rate.interval.low == pytest.approx(0.05 ** (1 / 20), rel=1e-9)
    a, b = BinomialRate.of(7, 40), BinomialRate.of(33, 40)
    assert a.interval.low == pytest.approx(1 - b.interval.high, rel=1e-9)
    assert "Clopper" in a.method
