"""Per-seed metrics of learning curves."""

from __future__ import annotations

import gymnasium
import numpy as np
import pytest

from harness.core.curves import Checkpoint, LearningCurve
from harness.gate.metrics import (
    METRICS,
    ThresholdResult,
    area_under_curve,
    final_return,
    normalised_score,
    steps_to_threshold,
)


def curve(points):
    return LearningCurve(tuple(Checkpoint(s, tuple(float(r) for r in rs)) for s, rs in points))


RISING = curve([(0, [10, 30]), (1000, [100, 120]), (2000, [300, 340]), (3000, [480, 490]), (4000, [500, 500])])


def test_final_return_over_the_last_fraction():
    # Mean of the checkpoint means (each the mean over its episodes): last 2 of 5 at fraction 0.4.
    assert final_return(RISING, fraction=0.4) == pytest.approx((485 + 500) / 2)
    assert final_return(RISING, fraction=0.1) == pytest.approx(500.0)  # at least one checkpoint
    assert final_return(RISING, fraction=1.0) == pytest.approx(np.mean([20, 110, 320, 485, 500]))


def test_area_under_curve_is_the_trapezoid_over_the_step_span():
    # Trapezoid rule (definition) divided by the span of 4000 steps.
    expected = 1000 * ((20 + 110) / 2 + (110 + 320) / 2 + (320 + 485) / 2 + (485 + 500) / 2) / 4000
    assert area_under_curve(RISING) == pytest.approx(expected)
    uneven = curve([(0, [0]), (100, [100]), (1000, [100])])
    assert area_under_curve(uneven) == pytest.approx((50 * 100 + 100 * 900) / 1000)
    assert area_under_curve(curve([(500, [7.0])])) == 7.0


def test_steps_to_threshold_with_the_registered_reward_threshold():
    # gymnasium's registry: CartPole-v1 reward_threshold = 475.0 (read from the registry itself).
    threshold = gymnasium.spec("CartPole-v1").reward_threshold
    assert threshold == 475.0
    assert steps_to_threshold(RISING, threshold) == ThresholdResult(3000, True, 475.0)


def test_steps_to_threshold_censors_runs_that_never_reach_it():
    # A run that never reaches the threshold is censored at its last checkpoint, not dropped
    # (Gehan 1965); the flag carries that, the value is the censoring time.
    r = steps_to_threshold(RISING, 600.0)
    assert r == ThresholdResult(4000, False, 600.0)
    # Acrobot-v1's threshold is negative (-100, gymnasium registry): "reaches" means >=.
    acro = curve([(0, [-500]), (100, [-150]), (200, [-99])])
    assert steps_to_threshold(acro, gymnasium.spec("Acrobot-v1").reward_threshold).value == 200


def test_normalised_score():
    # (x - random) / (threshold - random) (Agarwal et al. 2021): 0 at random, 1 at the threshold.
    assert normalised_score(22.0, 22.0, 475.0) == 0.0
    assert normalised_score(475.0, 22.0, 475.0) == 1.0
    np.testing.assert_allclose(normalised_score(np.array([-500.0, -100.0]), -500.0, -100.0), [0.0, 1.0])
    with pytest.raises(ValueError, match=r"`threshold` equals `random_return` \(5.0\)"):
        normalised_score(1.0, 5.0, 5.0)
    with pytest.raises(ValueError, match=r"`x` must be finite"):
        normalised_score(float("nan"), 0.0, 1.0)


def test_registry():
    assert set(METRICS) == {"final", "auc", "steps-to-threshold"}
    assert METRICS["final"].compute(RISING, fraction=0.4) == final_return(RISING, fraction=0.4)
    assert METRICS["auc"].higher_is_better and not METRICS["steps-to-threshold"].higher_is_better
    assert METRICS["steps-to-threshold"].censored
    with pytest.raises(TypeError):
        METRICS["new"] = METRICS["auc"]  # read-only


def test_metrics_iv():
    with pytest.raises(ValueError, match=r"`fraction` must lie in \(0, 1\], got 0"):
        final_return(RISING, fraction=0)
    with pytest.raises(TypeError, match=r"`curve` must be a harness.core.curves.LearningCurve, got list"):
        area_under_curve([1.0, 2.0])
    with pytest.raises(ValueError, match=r"`curve` has no checkpoints"):
        final_return(LearningCurve(()))
    with pytest.raises(ValueError, match=r"non-finite evaluation return at step 1000"):
        area_under_curve(curve([(0, [1.0]), (1000, [float("nan")])]))
    with pytest.raises(ValueError, match=r"`threshold` must be finite, got inf"):
        steps_to_threshold(RISING, float("inf"))
    with pytest.raises(TypeError, match=r"`threshold` must be a real number, got True"):
        steps_to_threshold(RISING, True)
