"""The generic TOML-table -> frozen-dataclass resolver."""

from __future__ import annotations

import dataclasses
import datetime
import json
from collections.abc import Mapping
from typing import Any, Literal

import numpy as np
import pytest

from harness.core import config
from harness.core.config import check_json_value, resolve, to_json
from harness.core.errors import ConfigError, ManifestError


@dataclasses.dataclass(frozen=True, slots=True)
class Inner:
    width: int = 4

    def __post_init__(self) -> None:
        if self.width < 1:
            raise ConfigError(f"must be at least 1, got {self.width}", key="width")


@dataclasses.dataclass(frozen=True, slots=True)
class Schema:
    rate: float
    layers: tuple[int, ...] = (8, 8)
    kind: Literal["hard", "soft"] = "hard"
    flag: bool = False
    label: str = "x"
    limit: int | None = None
    weights: Mapping[str, float] = dataclasses.field(default_factory=dict)
    extra: Any = None
    inner: Inner = Inner()

    def __post_init__(self) -> None:
        if not 0.0 <= self.rate <= 1.0:
            raise ConfigError(f"must be in [0, 1], got {self.rate!r}", key="rate")


def test_fills_defaults_and_converts():
    got = resolve(Schema, {"rate": 1, "layers": [3, 5], "weights": {"a": 2}, "inner": {"width": 2}})
    assert got == Schema(rate=1.0, layers=(3, 5), weights={"a": 2.0}, inner=Inner(2))
    assert isinstance(got.rate, float) and isinstance(got.layers, tuple)


def test_unknown_key_names_file_key_path_and_suggests():
    with pytest.raises(ConfigError) as info:
        resolve(Schema, {"rate": 0.5, "lables": "y"}, path="m.toml", key="trainer.settings")
    message = str(info.value)
    assert message.startswith("m.toml [trainer.settings.lables]: unknown key 'lables'. Did you mean 'label'?")
    assert "Remove it or fix its spelling" in message
    assert info.value.path == "m.toml" and info.value.key == "trainer.settings.lables"
    assert isinstance(info.value, ManifestError) and isinstance(info.value, ValueError)


@pytest.mark.parametrize(
    ("data", "key", "pattern"),
    [
        ({"rate": "fast"}, "t.rate", r"must be a number, got a string \('fast'\)"),
        ({"rate": True}, "t.rate", r"must be a number, got a boolean"),
        ({"rate": 0.5, "flag": 1}, "t.flag", r"must be true or false"),
        ({"rate": 0.5, "layers": 8}, "t.layers", r"must be an array.*\[a, b, \.\.\.\]"),
        ({"rate": 0.5, "layers": [8, "9"]}, "t.layers[1]", r"must be an integer, got a string"),
        ({"rate": 0.5, "layers": [8, 9.0]}, "t.layers[1]", r"write 9 without the decimal point"),
        ({"rate": 0.5, "kind": "hadr"}, "t.kind", r"must be one of.*Did you mean 'hard'"),
        ({"rate": 0.5, "weights": [1]}, "t.weights", r"must be a table"),
        ({"rate": 0.5, "weights": {"a": "b"}}, "t.weights.a", r"must be a number"),
        ({"rate": 0.5, "inner": {"width": 0}}, "t.inner.width", r"must be at least 1, got 0"),
        ({"rate": 0.5, "inner": {"widht": 2}}, "t.inner.widht", r"Did you mean 'width'"),
        ({"rate": 0.5, "extra": {"when": datetime.date(2026, 1, 1)}}, "t.extra.when", r"dates and times"),
        ({"rate": float("inf")}, "t.rate", r"must be a finite number"),
        ({"rate": 2.0}, "t.rate", r"must be in \[0, 1\], got 2.0"),
        ({}, "t.rate", r"is required: add `rate = \.\.\.`"),
    ],
)
def test_bad_values_are_reported_with_their_full_key(data, key, pattern):
    with pytest.raises(ConfigError, match=pattern) as info:
        resolve(Schema, data, path="f.toml", key="t")
    assert info.value.key == key
    assert str(info.value).startswith(f"f.toml [{key}]: ")


def test_a_non_table_is_rejected():
    with pytest.raises(ConfigError, match=r"^f.toml \[t\]: must be a table, got an integer"):
        resolve(Schema, 3, path="f.toml", key="t")


def test_to_json_round_trips_through_json_and_back():
    value = resolve(Schema, {"rate": 0.25, "layers": [1, 2], "extra": {"k": [1, 2]}})
    data = to_json(value)
    assert data["layers"] == (1, 2) and data["inner"] == {"width": 4}
    again = json.loads(json.dumps(data))
    assert again["layers"] == [1, 2]
    assert resolve(Schema, again) == value


def test_check_json_value_turns_arrays_into_tuples():
    assert check_json_value({"a": [1, [2]]}, path=None, key="k") == {"a": (1, (2,))}


@pytest.mark.parametrize(
    ("value", "bounds", "message"),
    [
        (1.5, dict(low=0, high=1), r"\[k\]: must be a number in \[0, 1\], got 1.5"),
        (0.0, dict(low=0, high=1, open_low=True), r"must be a number in \(0, 1\], got 0.0"),
        (1.0, dict(low=0, high=1, open_high=True), r"must be a number in \[0, 1\), got 1.0"),
        (0.5, dict(low=0, high=0.5, open_low=True, open_high=True), r"must be a number strictly between 0 and 0.5"),
        (0, dict(low=0, open_low=True), r"must be a positive finite number, got 0"),
        (-1.0, dict(low=0), r"must be a non-negative finite number, got -1.0"),
        (2, dict(low=2, open_low=True), r"must be a finite number above 2, got 2"),
        (3.5, dict(high=3), r"must be a finite number of at most 3, got 3.5"),
        (float("nan"), {}, r"must be a finite number, got nan"),
        (True, {}, r"must be a finite number, got True"),
        ("1", {}, r"must be a finite number, got '1'"),
        (0, dict(low=1, integer=True), r"must be a positive integer, got 0"),
        (-1, dict(low=0, integer=True), r"must be a non-negative integer, got -1"),
        (98, dict(low=99, integer=True), r"must be an integer of at least 99, got 98"),
        (2.0, dict(low=1, integer=True), r"must be a positive integer, got 2.0"),
    ],
)
def test_check_number_names_the_key_the_interval_and_the_value(value, bounds, message):
    with pytest.raises(ConfigError, match=message) as info:
        config.check_number(value, "k", **bounds)
    assert info.value.key == "k"


def test_check_number_accepts_the_ends_it_closes_and_numpy_scalars():
    assert config.check_number(0, "k", low=0, high=1) == 0.0 and config.check_number(1, "k", low=0, high=1) == 1.0
    assert type(config.check_number(np.float32(0.25), "k", low=0, high=1)) is float
    assert config.check_number(np.int64(3), "k", low=1, integer=True) == 3
