"""Multilayer perceptrons over a leading axis of K independent seeds, and Adam.

Everything here works on stacks: the parameters of K networks (one per seed)
live in one fused ``(K, P)`` array, and every forward, backward and optimiser
step is one batched NumPy operation over the leading axis (``np.matmul`` loops
over it and calls the same BLAS kernel on every slice). A seed's numbers are
therefore the same whether it is trained alone (K = 1) or beside others.

Each layer is stored as one ``(fan_in + 1, fan_out)`` block whose last row is
the bias, and every activation buffer carries a trailing column of ones, so
``[a, 1] @ [[W], [b]]`` computes ``a @ W + b`` and the backward matmul
``[a, 1]^T @ delta`` yields the weight and the bias gradients in one call.

All buffers are preallocated; the hot path writes with ``out=`` and allocates
nothing of the network's size.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence

import numpy as np

__all__ = ["Adam", "Layout", "MLP", "huber", "init_params", "relu_mask"]


@dataclasses.dataclass(frozen=True, slots=True)
class Layout:
    """Where each layer's block lives in the fused parameter vector.

    Parameters
    ----------
    sizes
        Widths from input to output, e.g. ``(4, 64, 64, 2)``.
    """

    sizes: tuple[int, ...]

    def __post_init__(self) -> None:
        if len(self.sizes) < 2 or any(
            isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1 for n in self.sizes
        ):
            raise ValueError(f"`sizes` must list at least two positive integers, got {self.sizes!r}")

    @property
    def blocks(self) -> tuple[tuple[int, int, int], ...]:
        """``(offset, fan_in, fan_out)`` of each layer; the block has ``(fan_in + 1) * fan_out`` entries."""
        out, offset = [], 0
        for fan_in, fan_out in zip(self.sizes[:-1], self.sizes[1:]):
            out.append((offset, fan_in, fan_out))
            offset += (fan_in + 1) * fan_out
        return tuple(out)

    @property
    def size(self) -> int:
        """Number of parameters of one network, P."""
        offset, fan_in, fan_out = self.blocks[-1]
        return offset + (fan_in + 1) * fan_out

    def views(self, flat: np.ndarray) -> tuple[np.ndarray, ...]:
        """Per-layer ``(K, fan_in + 1, fan_out)`` views into a fused ``(K, P)`` array (no copies)."""
        if flat.ndim != 2 or flat.shape[1] != self.size:
            raise ValueError(f"`flat` must have shape (K, {self.size}), got {flat.shape}")
        k = flat.shape[0]
        return tuple(
            flat[:, off : off + (fan_in + 1) * fan_out].reshape(k, fan_in + 1, fan_out)
            for off, fan_in, fan_out in self.blocks
        )


def init_params(layout: Layout, rngs: Sequence[np.random.Generator], dtype: np.dtype | str) -> np.ndarray:
    """Initial parameters of ``len(rngs)`` networks, one Generator per seed.

    Weights and biases are uniform on ``(-1/sqrt(fan_in), 1/sqrt(fan_in))``
    (LeCun et al. 1998, "Efficient BackProp", the fan-in scaling), drawn in
    float64 from each seed's own Generator and then rounded to ``dtype``, so a
    seed's initial network does not depend on the others.

    References
    ----------
    LeCun, Bottou, Orr & Müller (1998), Efficient BackProp, in Neural Networks:
    Tricks of the Trade, LNCS 1524, section 4.6.
    """
    flat = np.empty((len(rngs), layout.size), dtype=dtype)
    for k, rng in enumerate(rngs):
        for off, fan_in, fan_out in layout.blocks:
            bound = 1.0 / np.sqrt(fan_in)
            n = (fan_in + 1) * fan_out
            flat[k, off : off + n] = rng.uniform(-bound, bound, size=n)
    return flat


def huber(x: np.ndarray | float, delta: float = 1.0) -> np.ndarray:
    """Huber's loss: ``x**2 / 2`` for ``|x| <= delta``, ``delta * (|x| - delta / 2)`` beyond.

    Its derivative is ``clip(x, -delta, delta)``, which is what the trainers use.

    References
    ----------
    Huber (1964), Robust Estimation of a Location Parameter, Ann. Math.
    Statist. 35(1):73-101, equation (10) (the function rho).
    """
    if not delta > 0:
        raise ValueError(f"`delta` must be positive, got {delta!r}")
    a = np.abs(np.asarray(x, dtype=float))
    return np.where(a <= delta, 0.5 * a * a, delta * (a - 0.5 * delta))


def relu_mask(delta: np.ndarray, activation: np.ndarray, mask: np.ndarray) -> None:
    """Zero ``delta`` where the ReLU ``activation`` is not positive (in place; ``mask`` is scratch)."""
    np.greater(activation, 0, out=mask)
    np.multiply(delta, mask, out=delta)


class MLP:
    """Forward and backward passes of K stacked ReLU networks on ``rows`` inputs each.

    The object owns the activation buffers of one batch shape (a workspace);
    parameters and inputs are passed in, so one workspace serves the online
    and the target network alike.

    Parameters
    ----------
    layout
        The layer widths.
    k
        Number of stacked networks (seeds).
    rows
        Inputs per network per call.
    dtype
        Floating dtype of every buffer.
    backward_step
        Gradients are taken over rows ``0, step, 2 * step, ...`` of the batch
        (0 = forward only). With 2, one forward pass over the interleaved rows
        ``s_0, s'_0, s_1, s'_1, ...`` serves both the loss on ``s`` and the
        values of ``s'``.
    """

    def __init__(self, layout: Layout, *, k: int, rows: int, dtype: np.dtype | str, backward_step: int = 0):
        if backward_step < 0 or (backward_step and rows % backward_step):
            raise ValueError(f"`backward_step` must be 0 or divide rows={rows}, got {backward_step}")
        self.layout = layout
        self.k, self.rows, self.backward_step = k, rows, backward_step
        dt = np.dtype(dtype)
        sizes = layout.sizes
        #: An input buffer ``(K, rows, n_in + 1)`` whose last column is 1, used when
        #: :meth:`forward` is given no input: write inputs into ``x[..., :-1]``.
        self.x = np.ones((k, rows, sizes[0] + 1), dtype=dt)
        # Hidden activations with their trailing ones column, then the output.
        self._acts = [np.ones((k, rows, n + 1), dtype=dt) for n in sizes[1:-1]]
        self.out = np.empty((k, rows, sizes[-1]), dtype=dt)
        b = rows // backward_step if backward_step else 0
        self._deltas = [np.empty((k, b, n), dtype=dt) for n in sizes[1:-1]]
        self._masks = [np.empty((k, b, n), dtype=bool) for n in sizes[1:-1]]

    def forward(self, weights: Sequence[np.ndarray], x: np.ndarray | None = None) -> np.ndarray:
        """Compute the outputs for inputs ``x`` (default ``self.x``); returns ``self.out`` ``(K, rows, n_out)``.

        ``weights`` are the per-layer views of a fused parameter array
        (:meth:`Layout.views`); ``x`` is ``(K, rows, n_in + 1)`` with a last
        column of ones (any strides whose last axis is contiguous).
        """
        inp = self.x if x is None else x
        for w, act in zip(weights[:-1], self._acts):
            np.matmul(inp, w, out=act[..., :-1])
            # ReLU over the whole contiguous buffer: 3x faster than over the strided view,
            # and the ones column stays 1.
            np.maximum(act, 0, out=act)
            inp = act
        np.matmul(inp, weights[-1], out=self.out)
        return self.out

    def backward(self, weights: Sequence[np.ndarray], x: np.ndarray | None, grad_out: np.ndarray,
                 grads: Sequence[np.ndarray]) -> None:
        """Back-propagate ``grad_out`` (dL/d output on the backward rows) into ``grads``.

        Uses the activations of the last :meth:`forward`, whose input ``x``
        (None for ``self.x``) must be passed again. ``grads`` are the per-layer
        views of a fused gradient array and are overwritten.
        """
        step = self.backward_step
        if step == 0:
            raise ValueError("this MLP workspace was built with backward_step=0 (forward only)")
        delta = grad_out
        inputs = [self.x if x is None else x, *self._acts]
        for layer in range(len(weights) - 1, -1, -1):
            a_prev = inputs[layer][:, ::step]
            np.matmul(a_prev.transpose(0, 2, 1), delta, out=grads[layer])
            if layer == 0:
                break
            below = self._deltas[layer - 1]
            np.matmul(delta, weights[layer][:, :-1].transpose(0, 2, 1), out=below)
            relu_mask(below, a_prev[..., :-1], self._masks[layer - 1])
            delta = below


class Adam:
    """Adam over a fused ``(K, P)`` parameter array, keeping subnormal floats out of its moments.

    Implements Algorithm 1 of Kingma & Ba (2015) in the form given at the end
    of their section 2, ``alpha_t = alpha * sqrt(1 - beta2**t) / (1 - beta1**t)``
    and ``theta -= alpha_t * m / (sqrt(v) + eps * sqrt(1 - beta2**t))``, which
    equals the bias-corrected update of Algorithm 1 in real arithmetic. The
    moments are stored pre-divided, ``m / (1 - beta1)`` and ``v / (1 - beta2)``,
    so that their updates are ``beta * x + g`` and the constant factors fold
    into ``alpha_t`` and epsilon: ten array operations per step.

    With ReLU networks, parameters of dead units get gradients that are exactly
    zero, and their moments decay geometrically (by ``beta1`` and ``beta2`` per
    step) through the subnormal range, where every float operation is many
    times slower on common CPUs. Every ``flush_every`` steps, moment entries
    smaller in magnitude than ``FLUSH_BELOW`` are set to exactly zero. Between
    flushes an entry decays by at most ``beta1**flush_every``, which keeps it
    far above the smallest normal float32 (1.2e-38); entries below 1e-30 change
    a parameter by less than ``alpha * 1e-21`` per step, so flushing them does
    not change learning. It is plain arithmetic on the arrays: portable,
    deterministic, and independent of the CPU's flush-to-zero mode.

    References
    ----------
    Kingma & Ba (2015), Adam: A Method for Stochastic Optimization, ICLR,
    Algorithm 1 and section 2.
    """

    #: Moment entries below this magnitude are flushed to zero.
    FLUSH_BELOW = 1e-30

    def __init__(
        self,
        shape: tuple[int, int],
        *,
        dtype: np.dtype | str,
        step_size: float = 1e-3,
        beta1: float = 0.9,
        beta2: float = 0.999,
        eps: float = 1e-8,
        flush_every: int = 64,
    ):
        if not step_size > 0:
            raise ValueError(f"`step_size` must be positive, got {step_size!r}")
        for name, beta in (("beta1", beta1), ("beta2", beta2)):
            if not 0 <= beta < 1:
                raise ValueError(f"`{name}` must be in [0, 1), got {beta!r}")
        if not eps > 0:
            raise ValueError(f"`eps` must be positive, got {eps!r}")
        if isinstance(flush_every, bool) or not isinstance(flush_every, int) or flush_every < 0:
            raise ValueError(f"`flush_every` must be a non-negative integer (0 = never), got {flush_every!r}")
        if flush_every and beta1**flush_every * self.FLUSH_BELOW < 1e3 * np.finfo(dtype).tiny:
            raise ValueError(f"`flush_every`={flush_every} is too long to keep moments normal at beta1={beta1}")
        self.step_size, self.beta1, self.beta2, self.eps = step_size, beta1, beta2, eps
        self.flush_every = flush_every
        self.t = 0
        self._m = np.zeros(shape, dtype=dtype)  # m / (1 - beta1)
        self._v = np.zeros(shape, dtype=dtype)  # v / (1 - beta2)
        self._tmp = np.empty(shape, dtype=dtype)
        self._tmp2 = np.empty(shape, dtype=dtype)
        self._small = np.empty(shape, dtype=bool)

    @property
    def moments(self) -> tuple[np.ndarray, np.ndarray]:
        """The biased first and second moment estimates ``(m_t, v_t)`` of Algorithm 1 (copies)."""
        return (1.0 - self.beta1) * self._m, (1.0 - self.beta2) * self._v

    @property
    def hot_arrays(self) -> tuple[np.ndarray, ...]:
        """The stored moments and scratch arrays (for numerical health checks)."""
        return self._m, self._v, self._tmp, self._tmp2

    def step(self, params: np.ndarray, grads: np.ndarray) -> None:
        """One Adam step: update ``params`` in place from ``grads`` (both ``(K, P)``)."""
        self.t += 1
        t, b1, b2 = self.t, self.beta1, self.beta2
        m, v, tmp, tmp2 = self._m, self._v, self._tmp, self._tmp2
        np.multiply(m, b1, out=m)
        np.add(m, grads, out=m)
        np.multiply(grads, grads, out=tmp)
        np.multiply(v, b2, out=v)
        np.add(v, tmp, out=v)
        # Python floats (not NumPy float64 scalars), so the array loops stay in the arrays' dtype.
        corr2 = math.sqrt(1.0 - b2**t)
        alpha_t = self.step_size * corr2 / (1.0 - b1**t)
        scale2 = math.sqrt(1.0 - b2)
        np.sqrt(v, out=tmp)
        np.add(tmp, self.eps * corr2 / scale2, out=tmp)
        np.divide(m, tmp, out=tmp2)
        np.multiply(tmp2, alpha_t * (1.0 - b1) / scale2, out=tmp2)
        np.subtract(params, tmp2, out=params)
        if self.flush_every and t % self.flush_every == 0:
            self.flush()

    def flush(self) -> None:
        """Set moment entries below :attr:`FLUSH_BELOW` in magnitude to exactly zero."""
        for arr in (self._m, self._v):
            np.abs(arr, out=self._tmp)
            np.less(self._tmp, self.FLUSH_BELOW, out=self._small)
            np.copyto(arr, 0, where=self._small)
