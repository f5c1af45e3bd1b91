"""Deep Q-learning in NumPy, for tasks with a flat observation vector and discrete actions.

The agent follows Mnih et al. (2015): an MLP action-value network, a replay
memory sampled uniformly, epsilon-greedy exploration with a linear schedule,
and the Bellman target ``r + discount * (1 - terminated) * max_a' Q(s', a')``
computed from a target network (hard copies every N steps, or Polyak
averaging), optionally with the Double DQN target of van Hasselt et al.
(2016). Huber or squared loss, gradient-norm clipping and Adam.

Episodes that end by the time limit (truncated) are bootstrapped from their
last observation; only terminal states (terminated) are not.

K seeds of one configuration train in lockstep (:func:`train_lockstep`): each
forward, backward and Adam step is one batched operation over the K stacked
networks, while every random draw and every environment step stays per seed,
so a seed's curve is byte-identical whatever batch it is trained in.

References
----------
Mnih et al. (2015), Human-level control through deep reinforcement learning,
Nature 518:529-533.
van Hasselt, Guez & Silver (2016), Deep Reinforcement Learning with Double
Q-learning, AAAI.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterator, Sequence

import gymnasium as gym
import numpy as np
from threadpoolctl import threadpool_limits

from harness.core import config
from harness.core.curves import Checkpoint
from harness.core.errors import ConfigError, did_you_mean
from harness.core.spec import RunSpec
from harness.trainers.envs import LeanEnv, evaluate_stacked
from harness.trainers.nn import MLP, Adam, Layout, init_params
from harness.trainers.replay import ReplayMemory
from harness.trainers.schedule import linear_decay

__all__ = ["DQNSettings", "bellman_targets", "lockstep_size", "train", "train_lockstep"]


_TARGETS = ("hard", "none", "polyak")
_LOSSES = ("huber", "squared")
_DTYPES = ("float32", "float64")


@dataclasses.dataclass(frozen=True, slots=True)
class DQNSettings:
    """The DQN trainer's configuration: the keys of a manifest's ``[trainer.settings]``.

    Attributes
    ----------
    hidden
        Widths of the hidden ReLU layers.
    discount
        The discount factor gamma of the Bellman target, in [0, 1].
    step_size, adam_beta1, adam_beta2, adam_eps
        Adam's alpha, beta1, beta2 and epsilon (Kingma & Ba 2015).
    step_size_end
        If set, alpha falls linearly from ``step_size`` at the first gradient
        step to this value at the end of the budget (None: constant alpha).
    memory_size
        Transitions kept in the replay memory (oldest overwritten first).
    minibatch
        Transitions per gradient step, sampled uniformly from the memory.
    warmup_steps
        Environment steps before the first gradient step.
    update_every
        Environment steps between gradient steps (one gradient step each time).
    explore_start, explore_end, explore_decay_steps
        Epsilon-greedy schedule: epsilon falls linearly from ``explore_start``
        to ``explore_end`` over the first ``explore_decay_steps`` steps, then stays.
    target
        ``"hard"``: copy the online network into the target network every
        ``target_sync_every`` environment steps; ``"polyak"``: after each
        gradient step move the target a fraction ``polyak_rate`` of the way to
        the online network; ``"none"``: bootstrap from the online network.
    double_q
        Select ``a*`` with the online network and evaluate it with the target
        network (van Hasselt et al. 2016).
    loss, huber_delta
        ``"huber"`` (Huber 1964, quadratic within ``huber_delta``, linear
        beyond) or ``"squared"`` (half the squared TD error).
    max_grad_norm
        Rescale each gradient to at most this Euclidean norm (0 = never).
    dtype
        Floating type of networks, optimiser and replay memory.
    """

    hidden: tuple[int, ...] = (64, 64)
    discount: float = 0.99
    step_size: float = 1e-3
    adam_beta1: float = 0.9
    adam_beta2: float = 0.999
    adam_eps: float = 1e-8
    step_size_end: float | None = None
    memory_size: int = 50_000
    minibatch: int = 64
    warmup_steps: int = 1_000
    update_every: int = 1
    explore_start: float = 1.0
    explore_end: float = 0.05
    explore_decay_steps: int = 10_000
    target: str = "hard"
    target_sync_every: int = 500
    polyak_rate: float = 0.005
    double_q: bool = True
    loss: str = "huber"
    huber_delta: float = 1.0
    max_grad_norm: float = 10.0
    dtype: str = "float32"

    def __post_init__(self) -> None:
        hidden = self.hidden
        if isinstance(hidden, (list, tuple)):
            hidden = tuple(hidden)
            object.__setattr__(self, "hidden", hidden)
        if not isinstance(hidden, tuple) or not hidden or not all(_is_int(h) and h >= 1 for h in hidden):
            raise ConfigError(f"must be a non-empty list of positive integers, got {self.hidden!r}", key="hidden")
        for name in ("memory_size", "minibatch", "update_every", "target_sync_every"):
            config.check_number(getattr(self, name), name, low=1, integer=True)
        for name in ("warmup_steps", "explore_decay_steps"):
            config.check_number(getattr(self, name), name, low=0, integer=True)
        if self.minibatch > self.memory_size:
            raise ConfigError(
                f"must not exceed memory_size={self.memory_size}, got {self.minibatch}; "
                "lower minibatch or raise memory_size", key="minibatch")
        ranges = {name: {"high": 1} for name in ("discount", "explore_start", "explore_end", "polyak_rate")}
        ranges |= {name: {"high": 1, "open_high": True} for name in ("adam_beta1", "adam_beta2")}
        ranges |= {name: {"open_low": True} for name in ("step_size", "adam_eps", "huber_delta")}
        ranges["max_grad_norm"] = {}
        for name, bounds in ranges.items():
            object.__setattr__(self, name, config.check_number(getattr(self, name), name, low=0, **bounds))
        if self.step_size_end is not None:
            end = config.check_number(self.step_size_end, "step_size_end", low=0, high=self.step_size)
            object.__setattr__(self, "step_size_end", end)
        if self.target == "polyak" and self.polyak_rate == 0:
            raise ConfigError("must be positive with target = 'polyak', got 0", key="polyak_rate")
        if not isinstance(self.double_q, bool):
            raise ConfigError(f"must be true or false, got {self.double_q!r}", key="double_q")
        for name, choices in (("target", _TARGETS), ("loss", _LOSSES), ("dtype", _DTYPES)):
            value = getattr(self, name)
            if value not in choices:
                raise ConfigError(f"unknown value {value!r}.{did_you_mean(str(value), choices)}", key=name)



def _is_int(value: object) -> bool:
    return isinstance(value, (int, np.integer)) and not isinstance(value, bool)


def bellman_targets(
    reward: np.ndarray,
    terminated: np.ndarray,
    q_next: np.ndarray,
    *,
    discount: float,
    q_next_select: np.ndarray | None = None,
) -> np.ndarray:
    """One-step Q-learning targets ``r + discount * (1 - terminated) * Q(s', a*)``.

    Parameters
    ----------
    reward, terminated
        Shape ``(..., B)``; ``terminated`` is 1 where ``s'`` is a terminal state
        (a time-limit truncation is 0: its ``s'`` is bootstrapped).
    q_next
        ``(..., B, A)`` action values of ``s'`` used for evaluation (the target network).
    discount
        The discount factor gamma.
    q_next_select
        ``(..., B, A)`` action values of ``s'`` used to select ``a*``. None:
        ``a* = argmax q_next`` (Mnih et al. 2015); the online network's values:
        Double DQN (van Hasselt et al. 2016, equation 4).

    Returns
    -------
    targets
        ``(..., B)``, in the dtype of ``q_next``.
    """
    if q_next_select is None:
        best = q_next.max(axis=-1)
    else:
        best = _pick(q_next, np.argmax(q_next_select, axis=-1))
    not_terminal = 1.0 - np.asarray(terminated, dtype=q_next.dtype)
    return (reward + discount * not_terminal * best).astype(q_next.dtype, copy=False)


def _pick(values: np.ndarray, index: np.ndarray) -> np.ndarray:
    """``values[..., index]`` along the last axis, computed exactly as a sum over one entry."""
    onehot = index[..., None] == np.arange(values.shape[-1])
    return np.sum(values, axis=-1, where=onehot)


def lockstep_size(settings: DQNSettings) -> int:
    """How many seeds one worker should train in lockstep for this network size.

    Stacking pays while per-call NumPy overhead is large next to the matmuls.
    Measured with ``benchmarks/bench_dqn.py`` on the development machine (2
    cores, OpenBLAS SkylakeX kernel): total env-steps/s against K = 1 was
    1.64x / 1.81x / 2.03x at K = 4 / 8 / 16 for 4-64-64-2, and 1.40x / 1.52x /
    1.56x for 4-128-128-2. The runner treats this as the largest group and
    balances group sizes across its workers. Wider networks (unmeasured, and
    closer to compute-bound) train solo.
    """
    widest = max(settings.hidden)
    if widest <= 64:
        return 16
    if widest <= 128:
        return 8
    return 1


def train(run: RunSpec) -> Iterator[Checkpoint]:
    """Train one seed; yield one :class:`Checkpoint` per step of ``run.checkpoint_steps()``."""
    for (checkpoint,) in train_lockstep([run]):
        yield checkpoint


def train_lockstep(runs: Sequence[RunSpec]) -> Iterator[tuple[Checkpoint, ...]]:
    """Train several seeds of one configuration together; yield a tuple of checkpoints per step.

    All runs must share task, trainer, config, budget and evaluation plan
    (they differ in their seeds only). Seed ``k``'s checkpoints are the same as
    :func:`train` gives it alone.
    """
    runs = tuple(runs)
    if not runs:
        raise ValueError("`runs` must hold at least one RunSpec, got none")
    first = runs[0]
    settings = config.resolve(DQNSettings, first.config, key="trainer.settings")
    for r in runs[1:]:
        same = (r.task, r.trainer, config.resolve(DQNSettings, r.config, key="trainer.settings"), r.budget,
                r.evaluation)
        if same != (first.task, first.trainer, settings, first.budget, first.evaluation):
            raise ValueError(
                f"`runs` must differ only in their seeds; run {r.index} ({r.seed.label}) differs "
                f"from run {first.index} ({first.seed.label}) in task, config, budget or evaluation"
            )
    return _Lockstep(runs, settings).run()


class _Lockstep:
    """The training loop of K seeds: environments, exploration, replay, updates, evaluation."""

    def __init__(self, runs: tuple[RunSpec, ...], settings: DQNSettings):
        self.runs, self.s = runs, settings
        k = self.k = len(runs)
        streams = [r.streams() for r in runs]
        self.explore_rngs = [st.explore for st in streams]
        self.replay_rngs = [st.replay for st in streams]
        self.env_seeds = [st.env_seed for st in streams]
        self.envs = [LeanEnv(runs[0].task) for _ in range(k)]
        space = self.envs[0].observation_space
        if not isinstance(self.envs[0].action_space, gym.spaces.Discrete) or not isinstance(space, gym.spaces.Box):
            raise ValueError(
                f"task {runs[0].task.id!r}: the DQN trainer needs Box observations and Discrete actions, "
                f"got {space} and {self.envs[0].action_space}; use the 'tabular-q' trainer for discrete observations"
            )
        self.obs_dim = int(np.prod(space.shape))
        self.n_actions = int(self.envs[0].action_space.n)
        self.action_start = int(self.envs[0].action_space.start)
        self.agent = _Agent(settings, self.obs_dim, self.n_actions, [st.init for st in streams])
        self.memory = ReplayMemory(k=k, capacity=settings.memory_size, obs_dim=self.obs_dim, dtype=settings.dtype)
        ev = runs[0].evaluation
        self.episode_seeds = ev.episode_seeds()
        self.eval_envs = [[LeanEnv(runs[0].task) for _ in self.episode_seeds] for _ in range(k)]
        self.eval_net = MLP(self.agent.layout, k=k, rows=len(self.episode_seeds), dtype=settings.dtype)
        self._actions = np.zeros(k, dtype=np.intp)
        self._obs: list[np.ndarray] = []

    def epsilon(self, step: int) -> float:
        """Exploration probability before environment step ``step + 1`` (linear schedule)."""
        s = self.s
        return linear_decay(s.explore_start, s.explore_end, s.explore_decay_steps, step)

    def step_size(self, step: int, budget: int) -> float:
        """Adam's alpha at environment step ``step``: linear from the first update to the budget's end."""
        s = self.s
        first = max(s.warmup_steps, s.minibatch, 1)
        frac = min(1.0, max(0.0, (step - first) / max(1, budget - first)))
        return s.step_size + frac * (s.step_size_end - s.step_size)

    def evaluate(self) -> list[tuple[float, ...]]:
        net, weights = self.eval_net, self.agent.weights

        def act(_obs: np.ndarray) -> np.ndarray:
            return np.argmax(net.forward(weights), axis=-1)

        returns = evaluate_stacked(
            act, self.eval_envs, self.episode_seeds, obs=net.x[..., :-1], epsilon=self.runs[0].evaluation.epsilon
        )
        return list(returns)

    def run(self) -> Iterator[tuple[Checkpoint, ...]]:
        """Train to each checkpoint step in turn and yield the evaluation there.

        BLAS is limited to one thread while this code runs (not while the caller
        holds a checkpoint): a multi-threaded BLAS on these small matrices is many
        times slower on a busy machine (issue 6), whoever calls the trainer.
        """
        budget = self.runs[0].budget
        done = 0
        for target in self.runs[0].checkpoint_steps():
            with threadpool_limits(limits=1, user_api="blas"):
                if done == 0:
                    self._obs = [env.reset(seed=seed) for env, seed in zip(self.envs, self.env_seeds)]
                for step in range(done + 1, target + 1):
                    self._step(step, budget)
                returns = self.evaluate()
            done = target
            yield tuple(Checkpoint(target, r) for r in returns)

    def _step(self, step: int, budget: int) -> None:
        """Environment step ``step`` (1-based) of every seed, then the update and target sync it calls for."""
        s, agent, memory, obs = self.s, self.agent, self.memory, self._obs
        actions = self._actions
        eps = self.epsilon(step - 1)
        greedy = []
        for i, rng in enumerate(self.explore_rngs):
            if rng.random() < eps:
                actions[i] = rng.integers(self.n_actions)
            else:
                greedy.append(i)
        if greedy:
            chosen = agent.greedy(obs)
            for i in greedy:
                actions[i] = chosen[i]
        for i, env in enumerate(self.envs):
            a = int(actions[i])
            nxt, reward, terminated, truncated = env.step(a + self.action_start)
            memory.put(i, obs[i], a, reward, terminated, nxt)
            obs[i] = env.reset() if (terminated or truncated) else nxt
        memory.advance()
        if step >= s.warmup_steps and step % s.update_every == 0 and memory.size >= s.minibatch:
            if s.step_size_end is not None:
                agent.adam.step_size = self.step_size(step, budget)
            agent.update(memory, self.replay_rngs)
        if s.target == "hard" and step % s.target_sync_every == 0:
            agent.sync_target()


class _Agent:
    """K stacked online networks, their targets, Adam and the update's preallocated buffers."""

    def __init__(self, s: DQNSettings, obs_dim: int, n_actions: int, init_rngs: Sequence[np.random.Generator]):
        self.s = s
        k = self.k = len(init_rngs)
        b = s.minibatch
        dt = np.dtype(s.dtype)
        self.layout = Layout((obs_dim, *s.hidden, n_actions))
        self.params = init_params(self.layout, init_rngs, dt)
        self.weights = self.layout.views(self.params)
        has_target = s.target != "none"
        self.target_params = self.params.copy() if has_target else self.params
        self.target_weights = self.layout.views(self.target_params)
        self.grads = np.zeros_like(self.params)
        self.grad_views = self.layout.views(self.grads)
        self.adam = Adam(self.params.shape, dtype=dt, step_size=s.step_size, beta1=s.adam_beta1,
                         beta2=s.adam_beta2, eps=s.adam_eps)
        # When s' needs the online network's values (Double DQN, or no target network), the
        # online network takes the interleaved rows s_0, s'_0, s_1, s'_1, ... in one pass.
        self.joint = s.double_q or not has_target
        self.online = MLP(self.layout, k=k, rows=2 * b if self.joint else b, dtype=dt,
                          backward_step=2 if self.joint else 1)
        self.target_net = MLP(self.layout, k=k, rows=b, dtype=dt) if has_target else None
        self.actor = MLP(self.layout, k=k, rows=1, dtype=dt)
        self._index = np.empty((k, b), dtype=np.intp)
        self._pairs = np.ones((k, b, 2, obs_dim + 1), dtype=dt)
        self._scalars = np.empty((k, b, 3), dtype=dt)
        self._action_ids = np.arange(n_actions, dtype=dt)
        self._onehot = np.empty((k, b, n_actions), dtype=bool)
        self._grad_out = np.empty((k, b, n_actions), dtype=dt)
        self._sq_norm = np.empty((k, 1, 1), dtype=dt)
        self._diff = np.empty_like(self.params) if s.target == "polyak" else None

    def greedy(self, obs: Sequence[np.ndarray]) -> np.ndarray:
        """The online networks' greedy action for each seed's observation."""
        x = self.actor.x
        for i, o in enumerate(obs):
            x[i, 0, :-1] = o
        return np.argmax(self.actor.forward(self.weights)[:, 0], axis=-1)

    def sync_target(self) -> None:
        np.copyto(self.target_params, self.params)

    def update(self, memory: ReplayMemory, rngs: Sequence[np.random.Generator]) -> None:
        """One gradient step per seed on a minibatch drawn from its own replay memory."""
        s, k, b = self.s, self.k, self.s.minibatch
        pairs, scalars = self._pairs, self._scalars
        memory.sample(rngs, index=self._index, pairs=pairs, scalars=scalars)
        if self.joint:
            x = pairs.reshape(k, 2 * b, -1)
            q_all = self.online.forward(self.weights, x)
            q, q_next_online = q_all[:, 0::2], q_all[:, 1::2]
        else:
            x = pairs[:, :, 0]
            q = self.online.forward(self.weights, x)
        if self.target_net is None:
            q_next, select = q_next_online, None
        else:
            q_next = self.target_net.forward(self.target_weights, pairs[:, :, 1])
            select = q_next_online if s.double_q else None
        y = bellman_targets(scalars[..., ReplayMemory.REWARD], scalars[..., ReplayMemory.TERMINATED], q_next,
                            discount=s.discount, q_next_select=select)
        onehot = self._onehot
        np.equal(scalars[..., ReplayMemory.ACTION, None], self._action_ids, out=onehot)
        td = np.sum(q, axis=-1, where=onehot)  # Q(s, a), exactly
        td -= y
        if s.loss == "huber":
            np.clip(td, -s.huber_delta, s.huber_delta, out=td)
        td *= 1.0 / b  # d(mean loss) / dQ(s, a)
        np.multiply(onehot, td[..., None], out=self._grad_out)
        self.online.backward(self.weights, x, self._grad_out, self.grad_views)
        if s.max_grad_norm > 0:
            self._clip_gradient(s.max_grad_norm)
        self.adam.step(self.params, self.grads)
        if s.target == "polyak":
            # target <- target + rate * (online - target)
            np.subtract(self.params, self.target_params, out=self._diff)
            self._diff *= s.polyak_rate
            self.target_params += self._diff

    def _clip_gradient(self, max_norm: float) -> None:
        """Scale each seed's whole gradient to norm ``max_norm`` when it is longer (per seed)."""
        g = self.grads
        np.matmul(g[:, None, :], g[:, :, None], out=self._sq_norm)
        sq = self._sq_norm[:, 0, 0]
        if (sq > max_norm * max_norm).any():
            norms = np.sqrt(sq.astype(np.float64))
            scale = np.where(norms > max_norm, max_norm / norms, 1.0).astype(g.dtype)
            g *= scale[:, None]
