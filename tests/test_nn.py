"""Tests of harness.trainers.nn: stacked MLP gradients, Adam, Huber, subnormal safety."""

from __future__ import annotations

import numpy as np
import pytest

from harness.trainers.nn import MLP, Adam, Layout, huber, init_params


def _net(sizes, k, rows, seed=0, dtype="float64", backward_step=1):
    layout = Layout(sizes)
    rngs = [np.random.default_rng([seed, i]) for i in range(k)]
    params = init_params(layout, rngs, dtype)
    mlp = MLP(layout, k=k, rows=rows, dtype=dtype, backward_step=backward_step)
    mlp.x[..., :-1] = np.random.default_rng(seed + 100).standard_normal((k, rows, sizes[0]))
    return layout, params, mlp


@pytest.mark.parametrize("backward_step", [1, 2])
def test_gradient_matches_central_differences(backward_step):
    # Check against central finite differences, (f(p + h) - f(p - h)) / 2h, in float64
    # (common practice). Loss: L = sum over backward rows of c * output, so dL/d output = c.
    layout, params, mlp = _net((3, 5, 4, 2), k=2, rows=16, backward_step=backward_step)
    weights = layout.views(params)
    c = np.random.default_rng(7).standard_normal((2, 16 // backward_step, 2))

    def loss(p):
        out = mlp.forward(layout.views(p))
        return np.sum(out[:, ::backward_step] * c, axis=(1, 2))  # one loss per seed

    grads = np.zeros_like(params)
    mlp.forward(weights)
    mlp.backward(weights, None, c, layout.views(grads))
    h = 1e-6
    numeric = np.zeros_like(params)
    for j in range(layout.size):
        plus, minus = params.copy(), params.copy()
        plus[:, j] += h
        minus[:, j] -= h
        numeric[:, j] = (loss(plus) - loss(minus)) / (2 * h)
    np.testing.assert_allclose(grads, numeric, rtol=1e-6, atol=1e-8)
    assert np.count_nonzero(grads) > grads.size // 2  # a real gradient, not mostly zeros


def test_stacked_forward_is_bytewise_the_solo_forward():
    # The lockstep contract: network k's outputs do not depend on K (np.matmul over a leading axis).
    layout, params, mlp = _net((4, 32, 32, 2), k=5, rows=64, dtype="float32")
    stacked = mlp.forward(layout.views(params)).copy()
    for k in range(5):
        solo = MLP(layout, k=1, rows=64, dtype="float32")
        solo.x[...] = mlp.x[k : k + 1]
        out = solo.forward(layout.views(params[k : k + 1].copy()))
        assert out.tobytes() == stacked[k : k + 1].tobytes()


def test_bias_is_the_last_row_of_each_block():
    # [x, 1] @ [[W], [b]] = x @ W + b, the textbook affine layer (common practice).
    layout, params, mlp = _net((3, 2), k=1, rows=4)
    (w,) = layout.views(params)
    x = mlp.x[0, :, :-1]
    np.testing.assert_allclose(mlp.forward(layout.views(params))[0], x @ w[0, :3] + w[0, 3], rtol=1e-12)


def test_init_params_per_seed_independent():
    layout = Layout((4, 8, 2))
    both = init_params(layout, [np.random.default_rng(1), np.random.default_rng(2)], "float32")
    alone = init_params(layout, [np.random.default_rng(2)], "float32")
    assert both[1].tobytes() == alone[0].tobytes()
    bound = 1 / np.sqrt(4)  # fan-in scaling (LeCun et al. 1998) for the first block
    assert np.all(np.abs(both[:, : 5 * 8]) <= bound)


def test_layout_iv():
    with pytest.raises(ValueError, match="`sizes` must list at least two positive integers"):
        Layout((4,))
    with pytest.raises(ValueError, match="`sizes` must list"):
        Layout((4, 0, 2))
    with pytest.raises(ValueError, match=r"`flat` must have shape \(K, 16\)"):
        Layout((4, 2, 2)).views(np.zeros((1, 5)))


def test_adam_first_steps_match_algorithm_1_by_hand():
    # Kingma & Ba (2015), Algorithm 1, worked by hand (in exact decimal arithmetic) for
    # alpha=0.1, beta1=0.9, beta2=0.999, eps=1e-8, theta0=1 and gradients 2, -1, 0.5:
    # t=1: m=0.2, v=0.004, m_hat=2, v_hat=4, theta=1 - 0.1*2/(2+1e-8) = 0.9000000004999999975
    # t=2: m=0.08, v=0.004996, m_hat=0.08/0.19=0.42105263157894737, v_hat=0.004996/0.001999
    #      =2.4992496248124062, theta=0.87336629670243136
    # t=3: m=0.122, v=0.005241004, m_hat=0.45018450184501845, v_hat=1.7487494999167501,
    #      theta=0.83932338213894247
    # The second parameter's gradient is always 0 and must not move.
    adam = Adam((1, 2), dtype="float64", step_size=0.1, beta1=0.9, beta2=0.999, eps=1e-8)
    theta = np.array([[1.0, 3.0]])
    expected = [0.9000000004999999975, 0.87336629670243136, 0.83932338213894247]
    moments = [(0.2, 0.004), (0.08, 0.004996), (0.122, 0.005241004)]
    for g, want, (m, v) in zip((2.0, -1.0, 0.5), expected, moments):
        adam.step(theta, np.array([[g, 0.0]]))
        np.testing.assert_allclose(theta[0, 0], want, rtol=1e-13)
        np.testing.assert_allclose([a[0, 0] for a in adam.moments], [m, v], rtol=1e-13)
        assert theta[0, 1] == 3.0


def test_adam_iv():
    with pytest.raises(ValueError, match="`beta2` must be in"):
        Adam((1, 3), dtype="float32", beta2=1.0)
    with pytest.raises(ValueError, match="`step_size` must be positive"):
        Adam((1, 3), dtype="float32", step_size=0.0)
    with pytest.raises(ValueError, match="`flush_every` must be a non-negative integer"):
        Adam((1, 3), dtype="float32", flush_every=-1)


def test_huber_values():
    # Huber (1964), eq. (10): rho(t) = t^2/2 for |t| <= k, k|t| - k^2/2 beyond.
    # Worked by hand: t=0.5,k=1 -> 0.125; t=1,k=1 -> 0.5 (the knot); t=2,k=1 -> 1.5;
    # t=-3,k=1.5 -> 4.5 - 1.125 = 3.375; t=0 -> 0.
    assert huber(0.5, 1.0) == 0.125
    assert huber(1.0, 1.0) == 0.5
    assert huber(2.0, 1.0) == 1.5
    assert huber(-3.0, 1.5) == 3.375
    assert huber(0.0) == 0.0
    with pytest.raises(ValueError, match="`delta` must be positive"):
        huber(1.0, 0.0)


def _subnormal_count(arrays):
    tiny = np.finfo(np.float32).tiny
    return sum(int(np.count_nonzero((a != 0) & (np.abs(a) < tiny))) for a in arrays)


def _train_with_dead_units(flush_every, updates=1100):
    """Train a 4-32-32-2 net by Adam on a fixed regression; kill half the units after 20 steps.

    Returns the largest number of subnormal entries seen in the hot arrays over the updates.
    """
    layout, params, mlp = _net((4, 32, 32, 2), k=1, rows=32, dtype="float32")
    weights = layout.views(params)
    grads = np.zeros_like(params)
    adam = Adam(params.shape, dtype="float32", step_size=1e-3, flush_every=flush_every)
    target = np.random.default_rng(5).standard_normal((1, 32, 2)).astype(np.float32)
    worst = 0
    for t in range(updates):
        if t == 20:
            weights[0][0, -1, ::2] = -1e3  # bias of half the first-layer units: dead from now on
        out = mlp.forward(weights)
        mlp.backward(weights, None, (out - target) / 32, layout.views(grads))
        adam.step(params, grads)
        if t >= 600:  # m of the dead units falls through the subnormal range around t = 800-950
            worst = max(worst, _subnormal_count([params, grads, *adam.hot_arrays, mlp.out]))
    return worst


def test_no_subnormals_after_many_updates_with_dead_units():
    # Trap (1) of issue 6: with exactly-zero gradients, Adam's first moments decay by beta1 per
    # step into subnormal floats (below 1.18e-38 in float32, IEEE 754) and every operation on
    # them slows down. With the periodic flush no subnormal may appear in the hot arrays ...
    assert _train_with_dead_units(flush_every=64) == 0
    # ... and the check can fail: without the flush, subnormals do appear in the same run.
    assert _train_with_dead_units(flush_every=0) > 0
