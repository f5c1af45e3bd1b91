"""The linear exploration schedule (common practice; Mnih et al. 2015, Extended Data Table 1:
epsilon from 1.0 to 0.1 over the first million frames, then constant)."""

from __future__ import annotations

import doctest

from harness.trainers import schedule
from harness.trainers.schedule import linear_decay


def test_the_published_atari_schedule_at_its_landmarks():
    # Mnih et al. (2015): 1.0 at frame 0, 0.1 from frame 1,000,000 on; halfway 0.55.
    assert linear_decay(1.0, 0.1, 1_000_000, 0) == 1.0
    assert abs(linear_decay(1.0, 0.1, 1_000_000, 500_000) - 0.55) < 1e-12
    assert linear_decay(1.0, 0.1, 1_000_000, 1_000_000) == 0.1
    assert linear_decay(1.0, 0.1, 1_000_000, 5_000_000) == 0.1  # exactly the end value


def test_docstring_examples():
    assert doctest.testmod(schedule).failed == 0
