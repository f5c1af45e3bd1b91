"""Runner: determinism across workers, order, resumption and cache; lockstep; events; interrupts; input checks."""

from __future__ import annotations

import multiprocessing as mp
import random
from pathlib import Path

import pytest
from runner_toys import folder_bytes, toy_specs

from harness.store.cache import RunCache
from harness.core.errors import ManifestError
from harness.execute import Task, WorkerResult
from harness.execute.work import lockstep_size, run_task
from harness.manifest.loader import parse_manifest
from harness.execute.dispatch import lockstep_tasks
from harness.execute.runner import RunPlan, run_manifest, run_plans, run_specs
from harness.store.results import read_results, record_text

TABULAR = """
name = "tiny-taxi"
[task]
id = "Taxi-v4"
[trainer]
use = "tabular-q"
[trainer.settings]
explore_decay_steps = 2000
[budget]
env_steps = 3000
[evaluation]
every = 1000
episodes = 5
episode_seed = 3
[seeds]
count = 4
root = 11
"""

DQN = """
name = "tiny-dqn"
[task]
id = "CartPole-v1"
[trainer]
use = "dqn"
[trainer.settings]
hidden = [16]
warmup_steps = 50
minibatch = 16
memory_size = 500
[budget]
env_steps = 300
[evaluation]
every = 150
episodes = 2
[seeds]
count = 3
root = 5
"""


def _manifest(text, tmp_path):
    path = tmp_path / "m.toml"
    path.write_text(text)
    return parse_manifest(text, path=path)


def _det_check(manifest, tmp_path):
    """Same manifest: 1 worker, 2 workers in shuffled order, resumed from a partial folder, from the cache."""
    one = run_manifest(manifest, results_dir=tmp_path / "one", workers=1, use_cache=False)
    assert one.ok, [r.failure for r in one.results.failed()]
    specs = list(manifest.runs())
    random.Random(0).shuffle(specs)
    run_specs(specs, results_dir=tmp_path / "two", workers=2, use_cache=False)
    expected = folder_bytes(tmp_path / "one")
    assert len(expected) == len(specs)
    assert folder_bytes(tmp_path / "two") == expected
    # Resumed: start from a folder holding only the first seed's file.
    partial = tmp_path / "partial"
    partial.mkdir()
    first = sorted(expected)[0]
    (partial / first).write_bytes(expected[first])
    resumed = run_manifest(manifest, results_dir=partial, workers=2, use_cache=False)
    assert sorted(resumed.sources.values()).count("resumed") == 1
    assert folder_bytes(partial) == expected
    # Cached: a second results folder answered from the cache the first run filled.
    cache = RunCache(tmp_path / "cache")
    run_manifest(manifest, results_dir=tmp_path / "c1", workers=2, cache=cache)
    hit = run_manifest(manifest, results_dir=tmp_path / "c2", workers=2, cache=cache)
    assert set(hit.sources.values()) == {"cache"}
    assert folder_bytes(tmp_path / "c2") == expected
    # Read back, the records are the ones trained (compared as JSON: settings tuples come back as lists).
    assert [record_text(r) for r in read_results(tmp_path / "c2").records] == [record_text(r) for r in one.results.records]
    return one


def test_tabular_results_are_byte_identical_whatever_workers_order_resume_or_cache(tmp_path):
    _det_check(_manifest(TABULAR, tmp_path), tmp_path)


def test_short_dqn_in_lockstep_is_byte_identical_whatever_workers_order_resume_or_cache(tmp_path):
    manifest = _manifest(DQN, tmp_path)
    spec = manifest.runs()[1]
    assert lockstep_size(spec) > len(manifest.runs())  # hidden=[16]: all three seeds train in one group
    one = _det_check(manifest, tmp_path)
    # The runner's lockstep group gives seed 1 the curve it gets trained alone.
    solo = WorkerResult.from_plain(run_task(Task((spec,)).payload()))
    assert solo[0].curve == one.results.records[1].curve


def test_events_follow_each_run_through_its_life(tmp_path):
    events = []
    run_specs(toy_specs(2), results_dir=tmp_path, workers=1, use_cache=False, on_event=events.append)
    for index in (0, 1):
        kinds = [e.kind for e in events if e.index == index]
        assert kinds == ["planned", "started"] + ["checkpoint"] * 5 + ["finished"]
    checkpoints = [e.step for e in events if e.index == 0 and e.kind == "checkpoint"]
    assert checkpoints == [0, 25, 50, 75, 100]
    assert events[0].budget == 100


def test_plans_share_one_pool_and_write_what_each_writes_alone(tmp_path):
    a, b = toy_specs(3, name="toy-a"), toy_specs(2, name="toy-b", budget=50)
    events = []
    outs = run_plans([RunPlan(a, tmp_path / "a"), RunPlan(b, tmp_path / "b")], workers=2, use_cache=False,
                     on_event=events.append)
    assert [o.results.manifest for o in outs] == ["toy-a", "toy-b"] and all(o.ok for o in outs)
    run_specs(a, results_dir=tmp_path / "a1", workers=1, use_cache=False)
    run_specs(b, results_dir=tmp_path / "b1", workers=1, use_cache=False)
    assert folder_bytes(tmp_path / "a") == folder_bytes(tmp_path / "a1") and len(folder_bytes(tmp_path / "a")) == 3
    assert folder_bytes(tmp_path / "b") == folder_bytes(tmp_path / "b1") and len(folder_bytes(tmp_path / "b")) == 2
    assert read_results(tmp_path / "b").manifest == "toy-b"
    # Events come back with each plan's own run index and its manifest.
    finished = sorted((e.manifest, e.index) for e in events if e.kind == "finished")
    assert finished == [("toy-a", 0), ("toy-a", 1), ("toy-a", 2), ("toy-b", 0), ("toy-b", 1)]


def test_plans_hand_each_trainer_its_own_run_index(tmp_path):
    # The executor reports indices shifted per plan, but a trainer (a command trainer passes
    # {seed_index} to its program) must see the index of the run in its own manifest.
    plans = [RunPlan(toy_specs(2, name=n, trainer="runner_toys:indexed"), tmp_path / n) for n in ("p", "q")]
    outs = run_plans(plans, workers=2, use_cache=False)
    for out in outs:
        assert [r.curve.checkpoints[-1].returns for r in out.results.records] == [(0.0,), (1.0,)]


def test_plans_start_longest_first(tmp_path):
    # One worker, single-run tasks: the tasks start in decreasing order of estimated cost
    # (longest processing time first, Graham 1969), a plan's own runs in seed order.
    cheap, dear = toy_specs(2, name="cheap"), toy_specs(2, name="dear")
    events = []
    run_plans([RunPlan(cheap, tmp_path / "c", run_cost=1.0), RunPlan(dear, tmp_path / "d", run_cost=10.0)],
              workers=1, use_cache=False, on_event=events.append)
    started = [(e.manifest, e.index) for e in events if e.kind == "started"]
    assert started == [("dear", 0), ("dear", 1), ("cheap", 0), ("cheap", 1)]
    with pytest.raises(ValueError, match="the plans' manifest names must differ"):
        run_plans([RunPlan(cheap, tmp_path / "x"), RunPlan(cheap, tmp_path / "y")], use_cache=False)
    with pytest.raises(ValueError, match="`run_cost` must be a positive number or None, got 0"):
        RunPlan(cheap, tmp_path / "x", run_cost=0)


def test_interrupted_plans_resume_each_in_its_own_folder(tmp_path):
    def stop_after_first(event):
        if event.kind == "finished":
            raise KeyboardInterrupt

    plans = [RunPlan(toy_specs(2, name=n, config={"pause": 0.05}), tmp_path / n) for n in ("p", "q")]
    with pytest.raises(KeyboardInterrupt):
        run_plans(plans, workers=2, use_cache=False, on_event=stop_after_first)
    assert mp.active_children() == []
    kept = {n: folder_bytes(tmp_path / n) for n in ("p", "q")}
    assert 1 <= sum(map(len, kept.values())) < 4
    outs = run_plans(plans, workers=2, use_cache=False)
    assert sum(list(o.sources.values()).count("resumed") for o in outs) == sum(map(len, kept.values()))
    assert all(folder_bytes(tmp_path / n)[k] == v for n in kept for k, v in kept[n].items())


def test_interrupt_stops_workers_and_keeps_finished_runs(tmp_path):
    def stop_after_first(event):
        if event.kind == "finished":
            raise KeyboardInterrupt

    specs = toy_specs(4, config={"pause": 0.05})
    with pytest.raises(KeyboardInterrupt):
        run_specs(specs, results_dir=tmp_path, workers=2, use_cache=False, on_event=stop_after_first)
    assert mp.active_children() == []
    kept = folder_bytes(tmp_path)
    assert 1 <= len(kept) < 4 and not (tmp_path / "index.json").exists()
    out = run_specs(specs, results_dir=tmp_path, workers=2, use_cache=False)
    assert list(out.sources.values()).count("resumed") == len(kept)
    assert all(folder_bytes(tmp_path)[k] == v for k, v in kept.items())


def test_changed_config_drops_the_old_index_and_retrains(tmp_path):
    run_specs(toy_specs(2), results_dir=tmp_path, workers=1, use_cache=False)
    changed = toy_specs(2, config={"pause": 0.0})
    out = run_specs(changed, results_dir=tmp_path, workers=1, use_cache=False)
    assert set(out.sources.values()) == {"trained"}
    assert read_results(tmp_path).config_hash == changed[0].config_hash


def test_trainer_that_skips_a_checkpoint_fails_with_the_plan(tmp_path):
    out = run_specs(toy_specs(1, trainer="runner_toys:skipping"), results_dir=tmp_path, workers=1, use_cache=False)
    assert out.results.records[0].failure == (
        "trainer yielded a checkpoint at step 50, expected step 25 (plan [0, 25, 50, 75, 100])"
    )


def test_input_validation_names_the_parameter(tmp_path):
    specs = toy_specs(3)
    with pytest.raises(ValueError, match="`specs` must hold at least one RunSpec"):
        run_specs([], results_dir=tmp_path)
    with pytest.raises(ValueError, match=r"complete plan with indices 0..1, got indices \[0, 2\]"):
        run_specs([specs[0], specs[2]], results_dir=tmp_path)
    with pytest.raises(TypeError, match="`specs` must hold RunSpec values, got str"):
        run_specs(["x"], results_dir=tmp_path)
    with pytest.raises(ValueError, match="`time_limit` must be a positive number of seconds or None, got 0"):
        run_specs(specs, results_dir=tmp_path, time_limit=0)
    with pytest.raises(ValueError, match="`executor` must be one of .*Did you mean 'dask'"):
        run_specs(specs, results_dir=tmp_path, executor="dsak", use_cache=False)
    with pytest.raises(ValueError, match="`workers` must be a positive integer, got 0"):
        run_specs(specs, results_dir=tmp_path, workers=0, use_cache=False)
    with pytest.raises(TypeError, match="`results_dir` must be a path, got int 5"):
        run_specs(specs, results_dir=5)
    with pytest.raises(TypeError, match="`cache` must be a RunCache, a folder or None, got bool True"):
        run_specs(specs, results_dir=tmp_path, cache=True)
    with pytest.raises(TypeError, match="`on_event` must be callable or None, got list"):
        run_specs(specs, results_dir=tmp_path, on_event=[])
    with pytest.raises(ManifestError, match="unknown trainer 'nope'"):
        run_specs(toy_specs(1, trainer="nope"), results_dir=tmp_path / "n", use_cache=False)


@pytest.mark.parametrize(
    ("n", "k", "slots", "sizes"),
    [(10, 4, 2, [3, 3, 2, 2]), (10, 1, 2, [1] * 10), (10, 8, 2, [5, 5]), (3, 8, 2, [2, 1]), (2, 4, 8, [1, 1])],
)
def test_lockstep_groups_are_balanced_across_workers_in_seed_order(n, k, slots, sizes):
    # Balanced partitioning so that workers finish together: common practice in static load balancing.
    tasks = lockstep_tasks(toy_specs(n), k, slots, None, None)
    assert [len(t.specs) for t in tasks] == sizes
    assert [s.index for t in tasks for s in t.specs] == list(range(n))


def test_default_folders_are_results_by_name_and_a_marked_cache(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    monkeypatch.delenv("RLHARNESS_CACHE_DIR", raising=False)
    out = run_manifest(_manifest(TABULAR, tmp_path), workers=1)
    assert out.folder == Path("results") / "tiny-taxi" and (tmp_path / "results" / "tiny-taxi" / "index.json").is_file()
    assert (tmp_path / ".rlharness-cache" / "CACHEDIR.TAG").is_file()
