"""The gate policy ([check]) and published references ([[reference]])."""

from __future__ import annotations

import math

import gymnasium
import pytest

from harness.core.config import resolve
from harness.core.errors import ConfigError, ManifestError
from harness.manifest.loader import parse_manifest
from harness.manifest.policy import DEFAULT_MARGIN_SHARE, GatePolicy, PublishedReference

MANIFEST = """
name = "p"
[task]
id = "CartPole-v1"
[trainer]
use = "dqn"
[budget]
env_steps = 1000
[evaluation]
every = 500
[seeds]
count = 2
root = 1
"""


def test_defaults():
    p = GatePolicy()
    # alpha = 0.05 and power = 0.8 are common practice (Cohen 1988 uses both as conventions).
    assert (p.metrics, p.alpha, p.power) == (("final", "auc"), 0.05, 0.8)
    assert (p.margin, p.margin_share, p.strict, p.rule) == (None, None, False, "drop-beyond-margin")
    assert DEFAULT_MARGIN_SHARE == 0.1


def test_share_margin_spans_random_return_to_registered_threshold():
    # Thresholds read from gymnasium's registry; the floors are stand-ins for measured random returns.
    cartpole = gymnasium.spec("CartPole-v1").reward_threshold
    assert GatePolicy().margin_for("final", floor=22.0, threshold=cartpole, budget=1) == pytest.approx(45.3)
    acrobot = gymnasium.spec("Acrobot-v1").reward_threshold
    assert GatePolicy().margin_for("final", floor=-500.0, threshold=acrobot, budget=1) == pytest.approx(40.0)
    car = gymnasium.spec("MountainCar-v0").reward_threshold
    assert GatePolicy(margin_share=0.2).margin_for("auc", floor=-200.0, threshold=car, budget=1) == pytest.approx(18.0)


def test_margin_precedence_and_steps_metric():
    p = GatePolicy(margin=5.0, margins={"auc": 2.0})
    assert p.margin_for("final", floor=None, threshold=None, budget=10) == 5.0
    assert p.margin_for("auc", floor=None, threshold=None, budget=10) == 2.0
    assert GatePolicy().margin_for("steps-to-threshold", floor=None, threshold=None, budget=50_000) == 5_000.0
    # The policy's own floor and threshold win over the task's.
    assert GatePolicy(floor=0.0, threshold=10.0).margin_for("final", floor=-99.0, threshold=99.0, budget=1) == 1.0


def test_share_margin_needs_floor_and_threshold():
    with pytest.raises(ConfigError, match=r"\[margin\]: cannot size the margin of 'final'.*give `margin`"):
        GatePolicy().margin_for("final", floor=0.0, threshold=None, budget=1)


@pytest.mark.parametrize(
    ("table", "match"),
    [
        ({"alpah": 0.1}, r"\[check.alpah\]: unknown key 'alpah'. Did you mean 'alpha'\?"),
        ({"alpha": 0.7}, r"\[check.alpha\]: must be a number strictly between 0 and 0.5, got 0.7"),
        ({"alpha": True}, r"\[check.alpha\]"),
        ({"metrics": ["fnal"]}, r"\[check.metrics\]: unknown metric 'fnal'. Did you mean 'final'\?"),
        ({"metrics": []}, r"\[check.metrics\]: must be a non-empty list"),
        ({"metrics": ["final", "final"]}, r"lists a metric twice"),
        ({"margin": 1.0, "margin_share": 0.2}, r"\[check.margin\]: give either `margin` \(absolute\) or `margin_share`"),
        ({"margin": -1.0}, r"\[check.margin\]: must be a positive finite number, got -1.0"),
        ({"margin_share": 1.5}, r"\[check.margin_share\]"),
        ({"margins": {"aucc": 1.0}}, r"\[check.margins\]: unknown metric 'aucc'"),
        ({"strict": "yes"}, r"\[check.strict\]: must be true or false"),
        ({"permutations": 10}, r"\[check.permutations\]: must be an integer of at least 99"),
        ({"final_share": 0.0}, r"\[check.final_share\]"),
    ],
)
def test_bad_check_tables(table, match):
    # Read as the manifest loader reads [check]: through the settings resolver.
    with pytest.raises(ConfigError, match=match):
        resolve(GatePolicy, table, key="check")


def test_overrides_from_the_command_line():
    p = GatePolicy(margin_share=0.2).with_overrides(margin=3.0, strict=None)
    assert (p.margin, p.margin_share, p.strict) == (3.0, None, False)
    assert GatePolicy(margin=3.0).with_overrides(margin_share=0.3).margin is None
    with pytest.raises(ConfigError, match=r"unknown policy setting 'strickt'. Did you mean 'strict'\?"):
        GatePolicy().with_overrides(strickt=True)
    with pytest.raises(ConfigError, match=r"\[alpha\]"):
        GatePolicy().with_overrides(alpha=2.0)


def test_reference_sd_or_se():
    by_sd = PublishedReference(metric="final", mean=-120.0, sd=15.0, seeds=9, source="X et al. 2020, Table 2")
    by_se = PublishedReference(metric="final", mean=-120.0, se=5.0, seeds=9, source="X et al. 2020, Table 2")
    # The standard error of a mean is sd / sqrt(n) (common practice).
    assert by_se.std == pytest.approx(15.0) == by_sd.std
    with pytest.raises(ConfigError, match=r"\[sd\]: give exactly one of `sd`"):
        PublishedReference(metric="final", mean=1.0, sd=1.0, se=1.0, seeds=5, source="s")
    with pytest.raises(ConfigError, match=r"\[seeds\]: must be an integer of at least 2, got 1"):
        PublishedReference(metric="final", mean=1.0, sd=1.0, seeds=1, source="s")
    with pytest.raises(ConfigError, match=r"\[source\]: must name where"):
        PublishedReference(metric="final", mean=1.0, sd=1.0, seeds=5, source=" ")
    with pytest.raises(ConfigError, match=r"\[se\]: must be a non-negative finite number, got -1.0"):
        PublishedReference(metric="final", mean=1.0, se=-1.0, seeds=5, source="s")
    with pytest.raises(ConfigError, match=r"\[reference.seeds\]: is required"):
        resolve(PublishedReference, {"metric": "final", "mean": 1.0, "sd": 1.0, "source": "s"}, key="reference")
    assert math.isfinite(resolve(PublishedReference,
                                 {"metric": "auc", "mean": 1.0, "sd": 0.0, "seeds": 3, "source": "s"}).std)


def test_manifest_tables_resolve_to_policy_and_references():
    text = MANIFEST + """
[check]
metrics = ["final"]
margin = 25.0
strict = true

[[reference]]
metric = "final"
mean = 500.0
sd = 0.0
seeds = 5
source = "a test"
"""
    m = parse_manifest(text, path="m.toml")
    assert m.check == GatePolicy(metrics=("final",), margin=25.0, strict=True)
    assert m.references == (PublishedReference(metric="final", mean=500.0, sd=0.0, seeds=5, source="a test"),)
    plain = parse_manifest(MANIFEST, path="m.toml")
    assert plain.check == GatePolicy() and plain.config_hash == m.config_hash  # [check] is not hashed


def test_manifest_errors_name_file_and_key():
    with pytest.raises(ManifestError, match=r"m.toml \[check.alpha\]"):
        parse_manifest(MANIFEST + "\n[check]\nalpha = 0.9\n", path="m.toml")
    with pytest.raises(ManifestError, match=r"m.toml \[reference\[0\]\.se"):
        parse_manifest(MANIFEST + '\n[[reference]]\nmetric="final"\nmean=1.0\nse=-2.0\nseeds=3\nsource="s"\n',
                       path="m.toml")


@pytest.mark.parametrize("module", ["harness.manifest.policy", "harness.report.plot"])
def test_docstring_examples(module):
    import doctest
    import importlib

    result = doctest.testmod(importlib.import_module(module))
    assert result.attempted > 0 and result.failed == 0
