"""Learn when to water an orchard: tabular Q-learning on an invented soil-moisture model.

A standalone training script (NumPy only) that knows nothing of rl-harness. Each day of
a 30-day season the grower reads the soil moisture (0 = dust .. 9 = flooded) and opens
the tap for 0-3 units of water. Hot days dry the soil by 2, mild days by 1, and a
shower (one day in five) adds 3. Trees grow best at moisture 4-6 (reward 1), so-so
at 3 or 7 (0.3) and suffer outside (-0.5); every unit of water costs 0.05.

Every --eval-every days of training the greedy policy plays --eval-episodes seasons
whose weather comes from --eval-seed, and one line per season is appended to the
--curve file:

    # rlharness-curve 1
    step,episode,return
    0,0,-9.35
    ...

    python irrigate.py --seed 3 --days 30000 --eval-every 3000 --eval-episodes 10 \\
        --eval-seed 5 --curve curve.csv
"""

import argparse

import numpy as np

LEVELS, TAPS, SEASON = 10, 4, 30


def growth(moisture):
    if 4 <= moisture <= 6:
        return 1.0
    return 0.3 if moisture in (3, 7) else -0.5


def day(moisture, water, rng):
    """One day: the new moisture and the reward."""
    change = water - (2 if rng.random() < 0.5 else 1) + (3 if rng.random() < 0.2 else 0)
    after = min(LEVELS - 1, max(0, moisture + change))
    return after, growth(after) - 0.05 * water


def season_return(table, rng):
    moisture, total = int(rng.integers(2, 8)), 0.0
    for _ in range(SEASON):
        moisture, reward = day(moisture, int(np.argmax(table[moisture])), rng)
        total += reward
    return total


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seed", type=int, required=True, help="seeds all training randomness")
    parser.add_argument("--days", type=int, default=30000, help="training days (environment steps)")
    parser.add_argument("--eval-every", type=int, default=3000)
    parser.add_argument("--eval-episodes", type=int, default=10)
    parser.add_argument("--eval-seed", type=int, default=0)
    parser.add_argument("--curve", required=True, help="file the learning curve is written to")
    parser.add_argument("--step-size", type=float, default=0.1)
    parser.add_argument("--discount", type=float, default=0.95)
    args = parser.parse_args()

    rng = np.random.default_rng(args.seed)
    table = np.zeros((LEVELS, TAPS))
    checkpoints = list(range(0, args.days + 1, args.eval_every))
    if checkpoints[-1] != args.days:
        checkpoints.append(args.days)
    with open(args.curve, "w") as out:
        out.write("# rlharness-curve 1\nstep,episode,return\n")
        moisture, today = int(rng.integers(2, 8)), 0
        for step in range(args.days + 1):
            if step == checkpoints[0]:
                checkpoints.pop(0)
                for episode in range(args.eval_episodes):
                    weather = np.random.default_rng([args.eval_seed, episode])
                    out.write(f"{step},{episode},{season_return(table, weather)!r}\n")
                out.flush()
            if step == args.days:
                break
            explore = max(0.05, 1.0 - step / (0.5 * args.days))
            water = int(rng.integers(TAPS)) if rng.random() < explore else int(np.argmax(table[moisture]))
            after, reward = day(moisture, water, rng)
            today += 1
            last = today == SEASON
            target = reward + (0.0 if last else args.discount * table[after].max())
            table[moisture, water] += args.step_size * (target - table[moisture, water])
            moisture = int(rng.integers(2, 8)) if last else after
            today = 0 if last else today


if __name__ == "__main__":
    main()
