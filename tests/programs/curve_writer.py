"""A stand-in training program for the command-trainer tests; it knows nothing of rl-harness.

Writes a curve file (format "rlharness-curve 1") for one seed, one checkpoint at a time,
with returns drawn from ``random.Random(seed)`` (standard library only, so it starts fast).
``--fail SEED=MODE`` makes that seed misbehave: exit1, nan, offplan, nofile, fewer (one episode
short at the second checkpoint), hang (sleeps; with a grandchild process, their pids written to
the run folder's ``pids`` file), replace (after the first checkpoint, waits a second and replaces
the file by a new one with the same lines).
If the file ``slow`` exists in the working folder, the program sleeps its content (seconds)
times ``--index`` before each checkpoint (writing the pid file first); it is not part of
the command, so a rerun without it has the same configuration.
``--shift X`` adds X to every return (a second group for comparisons).
"""

import argparse
import os
import random
import subprocess
import sys
import time

parser = argparse.ArgumentParser()
parser.add_argument("--seed", type=int, required=True)
parser.add_argument("--steps", type=int, required=True)
parser.add_argument("--every", type=int, required=True)
parser.add_argument("--episodes", type=int, required=True)
parser.add_argument("--out", required=True)
parser.add_argument("--fail", action="append", default=[])
parser.add_argument("--index", type=int, default=0)
parser.add_argument("--shift", type=float, default=0.0)
args = parser.parse_args()

folder = os.environ["RLHARNESS_RUN_FOLDER"]
pause = float(open("slow").read()) * args.index if os.path.exists("slow") else 0.0
mode = dict(f.split("=") for f in args.fail).get(str(args.seed), "")
if pause or mode == "hang":
    child = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(600)"])
    with open(os.path.join(folder, "pids"), "w") as f:
        f.write(f"{os.getpid()} {child.pid}\n")
print(f"training seed {args.seed} for {args.steps} steps")
if mode == "nofile":
    sys.exit(0)
rng = random.Random(args.seed)
steps = list(range(0, args.steps + 1, args.every))
if steps[-1] != args.steps:
    steps.append(args.steps)
with open(args.out, "w") as out:
    out.write("# rlharness-curve 1\nstep,episode,return\n")
    for n, step in enumerate(steps):
        time.sleep(pause)
        if n == 1 and mode == "exit1":
            print("something broke in the update", file=sys.stderr)
            sys.exit(1)
        if n == 1 and mode == "hang":
            time.sleep(600)
        if n == 1 and mode == "offplan":
            step += 1
        for episode in range(args.episodes - (n == 1 and mode == "fewer")):
            value = step / args.steps + rng.gauss(0.0, 0.5) + args.shift
            if n == 1 and mode == "nan" and episode == 0:
                value = float("nan")
            out.write(f"{step},{episode},{value!r}\n")
        out.flush()
        if n == 0 and mode == "replace":
            time.sleep(1.0)
            with open(args.out, "rb") as f:
                data = f.read()
            with open(args.out + ".new", "wb") as f:
                f.write(data)
            os.replace(args.out + ".new", args.out)
print("done")
