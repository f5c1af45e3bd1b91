"""DQN training throughput against the raw environment rate and the matmul floor (issue 6).

Prints, all measured in this one run, with BLAS pinned to one thread:

* the raw CartPole-v1 stepping rate (gymnasium's wrapped env and our LeanEnv);
* solo training env-steps/s at 4-128-128-2 and 4-64-64-2 (one gradient update
  per environment step after the first 64, minibatch 64, epsilon decaying over
  the first tenth of the run, evaluation at the start and the end only) and the
  ratio to the raw rate;
* microseconds per update next to the matmul floor computed from the shapes
  (FLOPs of every matmul of one update, and the time those matmuls take alone);
* lockstep totals and per-seed rates for K = 1, 4, 8, 16;
* the cost of subnormal Adam moments (flushing off vs on);
* peak memory per seed (tracemalloc: NumPy buffers and Python objects).

Rates are per second of this process's CPU time (``time.process_time``), the
per-core figure on a machine shared with other jobs; training rates also show
wall-clock seconds. Default is a short run (other people share the cores);
``--full`` trains longer.

    python benchmarks/bench_dqn.py            # ~1-2 minutes
    python benchmarks/bench_dqn.py --full     # several minutes
"""

from __future__ import annotations

import argparse
import statistics
import time
import tracemalloc

import numpy as np
from threadpoolctl import threadpool_info, threadpool_limits

from harness.core.config import to_json
from harness.core.seeding import plan_seeds
from harness.core.spec import EvaluationPlan, RunSpec, TaskSpec
from harness.trainers import dqn
from harness.trainers.envs import LeanEnv, make_env
from harness.trainers.nn import Adam, Layout
from harness.trainers.replay import ReplayMemory

TASK = TaskSpec("CartPole-v1")
MINIBATCH = 64
WARMUP = 64  # updates start once one minibatch is stored: one update per env step after that


def runs(k: int, hidden: tuple[int, ...], budget: int, **extra) -> list[RunSpec]:
    config = to_json(dqn.DQNSettings(hidden=hidden, minibatch=MINIBATCH, warmup_steps=WARMUP,
                                     explore_decay_steps=budget // 10, **extra))
    return [
        RunSpec("bench", TASK, "dqn", config, budget, EvaluationPlan(budget, 1, 7), seed, i, "bench")
        for i, seed in enumerate(plan_seeds(count=k, root=20261201))
    ]


def training_rate(k: int, hidden: tuple[int, ...], steps: int, **extra) -> tuple[float, float]:
    """Total env-steps/s of K seeds in lockstep, timed from the first checkpoint to the last.

    Returns the rate per wall-clock second and per second of this process's CPU time (on a
    shared machine the second is the per-core figure; they agree on an idle one).
    """
    it = iter(dqn.train_lockstep(runs(k, hidden, steps, **extra)))
    next(it)  # step-0 evaluation
    t0, c0 = time.perf_counter(), time.process_time()
    for _ in it:
        pass
    return k * steps / (time.perf_counter() - t0), k * steps / (time.process_time() - c0)


def raw_rate(steps: int) -> tuple[float, float]:
    """Env-steps per CPU-second of CartPole-v1 under random actions: gymnasium.make'd env, and LeanEnv."""
    actions = np.random.default_rng(0).integers(0, 2, size=steps).tolist()
    env = make_env(TASK)
    env.reset(seed=0)
    c0 = time.process_time()
    for a in actions:
        _, _, term, trunc, _ = env.step(a)
        if term or trunc:
            env.reset()
    wrapped = steps / (time.process_time() - c0)
    lean = LeanEnv(TASK)
    lean.reset(seed=0)
    c0 = time.process_time()
    for a in actions:
        _, _, term, trunc = lean.step(a)
        if term or trunc:
            lean.reset()
    return wrapped, steps / (time.process_time() - c0)


def update_cost(hidden: tuple[int, ...], n: int, *, double_q: bool) -> tuple[float, float, float]:
    """(CPU µs per update, matmul FLOPs per update, CPU µs the update's matmuls take alone)."""
    settings = dqn.DQNSettings(hidden=hidden, minibatch=MINIBATCH, double_q=double_q)
    rng = np.random.default_rng(1)
    agent = dqn._Agent(settings, 4, 2, [rng])
    memory = ReplayMemory(k=1, capacity=4096, obs_dim=4, dtype="float32")
    for _ in range(4096):
        memory.put(0, rng.standard_normal(4), int(rng.integers(2)), 1.0, bool(rng.random() < 0.05),
                   rng.standard_normal(4))
        memory.advance()
    rngs = [np.random.default_rng(2)]
    for _ in range(50):
        agent.update(memory, rngs)
    c0 = time.process_time()
    for _ in range(n):
        agent.update(memory, rngs)
    per_update = (time.process_time() - c0) / n * 1e6
    shapes = matmul_shapes(Layout((4, *hidden, 2)), MINIBATCH, joint=agent.joint)
    flops = sum(2 * m * kk * nn for m, kk, nn in shapes)
    alone = 0.0
    for m, kk, nn in shapes:
        a = rng.standard_normal((1, m, kk)).astype(np.float32)
        b = rng.standard_normal((1, kk, nn)).astype(np.float32)
        out = np.empty((1, m, nn), np.float32)
        reps = 2000
        np.matmul(a, b, out=out)
        c0 = time.process_time()
        for _ in range(reps):
            np.matmul(a, b, out=out)
        alone += (time.process_time() - c0) / reps * 1e6
    return per_update, flops, alone


def matmul_shapes(layout: Layout, b: int, *, joint: bool) -> list[tuple[int, int, int]]:
    """(m, k, n) of every matmul in one update (bias folded in as an extra input row)."""
    online_rows = 2 * b if joint else b
    shapes = []
    blocks = layout.blocks
    for _, fan_in, fan_out in blocks:
        shapes.append((online_rows, fan_in + 1, fan_out))  # online forward
        shapes.append((b, fan_in + 1, fan_out))  # target forward on s'
    for i, (_, fan_in, fan_out) in enumerate(blocks):
        shapes.append((fan_in + 1, b, fan_out))  # weight gradient
        if i > 0:
            shapes.append((b, fan_out, fan_in))  # delta to the layer below
    return shapes


def subnormal_cost(n: int) -> tuple[float, float]:
    """µs per Adam step at P = 17,410 with half the moments decaying (dead units): unflushed vs flushed."""
    out = []
    for flush_every in (0, 64):
        p = np.zeros((1, 17_410), np.float32)
        g = np.random.default_rng(3).standard_normal(p.shape).astype(np.float32) * 1e-3
        adam = Adam(p.shape, dtype="float32", flush_every=flush_every)
        adam.step(p, g)
        g[:, ::2] = 0.0  # dead units: exactly zero gradients from now on
        for _ in range(810):  # |m| ~ 1e-3 * 0.9**810 < 1.2e-38: the dead half is subnormal for ~140 steps
            adam.step(p, g)
        c0 = time.process_time()
        for _ in range(n):
            adam.step(p, g)
        out.append((time.process_time() - c0) / n * 1e6)
    return out[0], out[1]


def peak_memory_per_seed(k: int, hidden: tuple[int, ...], steps: int) -> float:
    """Peak traced bytes per seed while K seeds train (default memory_size)."""
    tracemalloc.start()
    for _ in dqn.train_lockstep(runs(k, hidden, steps)):
        pass
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak / k


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--full", action="store_true", help="longer runs (several minutes)")
    parser.add_argument("--steps", type=int, default=None, help="training steps per measurement")
    parser.add_argument("--repeats", type=int, default=None, help="repeats of each solo measurement (median)")
    args = parser.parse_args()
    steps = args.steps or (20_000 if args.full else 3_000)
    repeats = args.repeats or (3 if args.full else 1)
    with threadpool_limits(1):
        blas = [(i["internal_api"], i.get("architecture"), i["num_threads"]) for i in threadpool_info()
                if i["user_api"] == "blas"]
        print(f"BLAS (pinned): {blas}; steps per measurement {steps}, median of {repeats}")
        wrapped, lean = raw_rate(50_000)
        print(f"raw CartPole-v1 env-steps per CPU-second: gymnasium.make {wrapped:,.0f}, LeanEnv {lean:,.0f}")
        print()
        print("solo (K=1), one update per env step, minibatch 64, hard target sync")
        for hidden, double_q in (((128, 128), True), ((128, 128), False), ((64, 64), True)):
            rates = [training_rate(1, hidden, steps, double_q=double_q) for _ in range(repeats)]
            wall = statistics.median(r[0] for r in rates)
            rate = statistics.median(r[1] for r in rates)
            us, flops, alone = update_cost(hidden, 1000, double_q=double_q)
            name = "-".join(map(str, (4, *hidden, 2))) + (", Double DQN" if double_q else ", plain DQN")
            print(f"  {name}: {rate:,.0f} env-steps per CPU-second ({wall:,.0f} per wall second) = "
                  f"{rate / lean:.3f} x LeanEnv raw rate ({rate / wrapped:.3f} x gymnasium.make)")
            print(f"    update {us:.0f} µs; matmul floor: {flops / 1e6:.2f} MFLOP/update, those matmuls alone "
                  f"{alone:.0f} µs ({flops / alone / 1e3:.0f} GFLOP/s) -> update = {us / alone:.2f} x floor")
        print()
        print("lockstep: K seeds in one process (total and per-seed env-steps per CPU-second)")
        for hidden in ((128, 128), (64, 64)):
            name = "-".join(map(str, (4, *hidden, 2)))
            base = None
            for k in (1, 4, 8, 16):
                wall, total = training_rate(k, hidden, steps)
                base = base or total
                print(f"  {name} K={k:2d}: total {total:7,.0f}/s  per seed {total / k:7,.0f}/s  "
                      f"({total / base:.2f} x K=1; wall {wall:7,.0f}/s)")
        print()
        flushed_off, flushed_on = subnormal_cost(100)
        print(f"Adam step, P=17,410, half the moments subnormal: {flushed_off:.0f} µs unflushed vs "
              f"{flushed_on:.0f} µs flushed ({flushed_off / flushed_on:.1f}x)")
        print()
        for hidden in ((128, 128), (64, 64)):
            name = "-".join(map(str, (4, *hidden, 2)))
            solo = peak_memory_per_seed(1, hidden, 1000)
            many = peak_memory_per_seed(8, hidden, 1000)
            print(f"peak memory per seed {name} (memory_size 50,000): solo {solo / 2**20:.1f} MiB, "
                  f"K=8 {many / 2**20:.1f} MiB")


if __name__ == "__main__":
    main()
