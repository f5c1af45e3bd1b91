"""The curve-file format (rlharness-curve 1): exactly what docs/your-training.md specifies, nothing else."""

from __future__ import annotations

import math

import pytest

from harness.core.curvefile import CurveAssembler, CurveFileError, LineParser, curve_file_text, parse_curve_text
from harness.core.curves import Checkpoint

STEPS = (0, 50, 100)
GOOD = b"# rlharness-curve 1\nstep,episode,return\n0,0,-1.5\n0,1,2\n50,0,1e-3\n50,1,.5\n100,0,3.25\n100,1,-0.0\n"


def parse(data: bytes, **kw):
    return parse_curve_text(data, "c.csv", steps=STEPS, episodes=2, **kw)


def test_the_documented_example_reads_back_to_its_numbers():
    (curve,) = parse(GOOD).values()
    assert curve == (Checkpoint(0, (-1.5, 2.0)), Checkpoint(50, (0.001, 0.5)), Checkpoint(100, (3.25, -0.0)))
    # CRLF line ends and a last line without a line break are the same file
    assert parse(GOOD.replace(b"\n", b"\r\n").rstrip(b"\r\n")) == parse(GOOD)


def test_written_files_read_back_bit_for_bit():
    # repr gives the shortest string that round-trips a double (Python docs, "Floating Point Arithmetic")
    checkpoints = [Checkpoint(s, (0.1 + s / 3, -1 / 7, 1e-300, 2.0**60)) for s in STEPS]
    text = curve_file_text({None: checkpoints}).encode()
    (back,) = parse_curve_text(text, "w.csv", steps=STEPS, episodes=4).values()
    assert [c.returns for c in back] == [c.returns for c in checkpoints]
    seeded = curve_file_text({"3": checkpoints, "2026/1": checkpoints}).encode()
    both = parse_curve_text(seeded, "s.csv", steps=STEPS, episodes=4, seeds=["3", "2026/1"])
    assert both == {"3": tuple(checkpoints), "2026/1": tuple(checkpoints)}


@pytest.mark.parametrize(
    ("data", "line", "column", "words"),
    [
        (b"step,episode,return\n", 1, 1, "first line must be exactly '# rlharness-curve 1'"),
        (b"# rlharness-curve 2\n", 1, 1, "first line"),
        (b"# rlharness-curve 1\nstep,ep,return\n", 2, 1, "header must be exactly 'step,episode,return'"),
        (b"# rlharness-curve 1\nstep,episode,return\n0,0,nan\n", 3, 5, "non-finite evaluation return (nan)"),
        (b"# rlharness-curve 1\nstep,episode,return\n0,0,-Infinity\n", 3, 5, "non-finite"),
        (b"# rlharness-curve 1\nstep,episode,return\n0,0, 1.5\n", 3, 5, "decimal number"),
        (b"# rlharness-curve 1\nstep,episode,return\n0,0,1e999\n", 3, 5, "overflows"),
        (b"# rlharness-curve 1\nstep,episode,return\n-1,0,1\n", 3, 1, "non-negative integer"),
        (b"# rlharness-curve 1\nstep,episode,return\n0,0,1,7\n", 3, 7, "expected 3 fields"),
        (b"# rlharness-curve 1\nstep,episode,return\n0,0,1\n\n", 4, 1, "an empty line"),
        (b"# rlharness-curve 1\nstep,episode,return\n0,1,1\n", 3, 3, "episode 1 at step 0, expected episode 0"),
        (b"# rlharness-curve 1\nstep,episode,return\n10,0,1\n", 3, 1, "step 10 is not the next planned checkpoint 0"),
        (b"# rlharness-curve 1\nstep,episode,return\n0,0,1\n50,0,1\n", 4, 1, "step 0 has 1 evaluation episodes"),
        (b"# rlharness-curve 1\nstep,episode,return\n0,0,1\n0,1,1\n", 5, 1, "ends after 1 of 3 planned checkpoints"),
        (b"# rlharness-curve 1\n", 2, 1, "ends before line 2"),
        (GOOD + b"150,0,1\n", 9, 1, "after the last planned checkpoint"),
        (GOOD + b"100,2,1\n", 9, 1, "step 100 has more than 2 evaluation episodes"),
        (GOOD.replace(b"50,0,1e-3", b"0,2,1e-3"), 5, 1, "step 0 has more than 2 evaluation episodes"),
        (b"# rlharness-curve 1\nstep,episode,return\n0,0,\xff\n", 3, 5, "not UTF-8"),
    ],
)
def test_every_violation_names_the_file_line_and_column(data, line, column, words):
    with pytest.raises(CurveFileError) as err:
        parse(data)
    assert (err.value.file, err.value.line, err.value.column) == ("c.csv", line, column)
    assert str(err.value).startswith(f"c.csv:{line}:{column}: ") and words in str(err.value)


def test_a_seed_column_is_accepted_only_where_seeds_are_expected():
    seeded = b"# rlharness-curve 1\nseed,step,episode,return\n1,0,0,1\n"
    with pytest.raises(CurveFileError, match="header must be exactly 'step,episode,return'"):
        parse(seeded)
    with pytest.raises(CurveFileError, match="seed '1' is not planned") as err:
        parse(seeded, seeds=["2"])
    assert (err.value.line, err.value.column) == (3, 1)


def test_a_growing_file_gives_each_checkpoint_once_its_last_episode_line_is_complete():
    parser, assembler = LineParser("g.csv"), CurveAssembler("g.csv", STEPS, 2)
    got = []
    for i in range(0, len(GOOD), 7):  # arbitrary chunks, cutting lines and numbers
        for row in parser.feed(GOOD[i:i + 7]):
            cp = assembler.add(row)
            if cp is not None:
                got.append((i + 7, cp.step))
    assert [step for _, step in got] == [0, 50, 100]
    # step 0 is complete only once "0,1,2\n" (ending at byte 53) has arrived
    assert got[0][0] >= GOOD.index(b"0,1,2\n") + 6
    assert parser.close() == [] and len(assembler.finish()) == 3 and math.isclose(assembler.done[1].mean, 0.2505)
