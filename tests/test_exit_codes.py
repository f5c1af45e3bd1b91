"""Issue 13 item 1: a crash is not a failed gate; the known crashes are clear errors or right results.

Exit codes are the public contract of ``harness.cli.ExitCode``: 0 passed, 1 gate failed, 2 bad
input, 3 runs failed, 70 internal error (BSD sysexits.h ``EX_SOFTWARE``, as Python's
``os.EX_SOFTWARE`` gives it), 130 interrupted. Each test here failed on the code before the fix.
"""

from __future__ import annotations

import os

import pytest
from crafting import TOY
from crafting import cli as _cli

from harness.cli import ExitCode
from harness.core.errors import ManifestError
from harness.core.seeding import MAX_SEEDS, plan_seeds


def _manifest(tmp_path, use="runner_toys:toy", seeds="count = 3\nroot = 7"):
    path = tmp_path / "m.toml"
    path.write_text(TOY.replace('use = "runner_toys:toy"', f'use = "{use}"').replace("count = 3\nroot = 7", seeds))
    return path


def test_internal_error_code_is_sysexits_software_and_distinct_from_the_verdicts():
    assert ExitCode.INTERNAL_ERROR == 70
    if hasattr(os, "EX_SOFTWARE"):  # sysexits.h (4.3BSD): EX_SOFTWARE "internal software error"
        assert ExitCode.INTERNAL_ERROR == os.EX_SOFTWARE
    assert len({int(c) for c in ExitCode}) == len(ExitCode)


def test_a_crash_exits_70_and_names_the_file_holding_its_traceback(tmp_path, monkeypatch):
    import harness.manifest.loader as loader

    def broken(path):
        raise ZeroDivisionError("a bug on purpose")

    monkeypatch.setattr(loader, "load_manifest", broken)
    monkeypatch.setenv("RLHARNESS_CRASH_DIR", str(tmp_path / "crashes"))
    code, text = _cli("run", str(_manifest(tmp_path)))
    assert code == ExitCode.INTERNAL_ERROR
    [report] = (tmp_path / "crashes").glob("crash-*.txt")
    assert f"traceback written to {report}" in text and "ZeroDivisionError: a bug on purpose" in text
    assert "Traceback (most recent call last)" not in text
    body = report.read_text()
    assert "Traceback (most recent call last)" in body and "raise ZeroDivisionError" in body and "command: rlharness run" in body


@pytest.mark.parametrize(
    ("module", "source", "expected"),
    [
        ("broken_syntax", "def train(run:\n", "raised SyntaxError while being imported"),
        ("broken_runtime", "raise RuntimeError('boom at import')\n", "raised RuntimeError while being imported: boom at import"),
        ("broken_file", "open('no-such-file.txt')\n", "raised FileNotFoundError while being imported"),
        ("quits_green", "import sys\nsys.exit(0)\n", "raised SystemExit while being imported: 0"),
    ],
)
def test_a_trainer_module_that_fails_or_exits_on_import_is_bad_input_naming_module_and_error(
    tmp_path, module, source, expected
):
    (tmp_path / f"{module}.py").write_text(source)
    for command in ("run", "verify"):
        code, text = _cli(command, str(_manifest(tmp_path, use=f"{module}:train")), "--no-cache",
                          "--results", str(tmp_path / "res"))
        assert code == ExitCode.BAD_INPUT, text  # before: 1 with a traceback, and 0 (a green gate) for sys.exit(0)
        assert "[trainer.use]" in text and f"module {module!r} {expected}" in text
        assert "Traceback" not in text


def test_a_trainer_without_a_source_file_is_bad_input(tmp_path):
    code, text = _cli("run", str(_manifest(tmp_path, use="builtins:print")), "--no-cache")
    assert code == ExitCode.BAD_INPUT  # before: AttributeError (module 'builtins' has no attribute '__file__')
    assert "[trainer.use]" in text and "no Python source file" in text


@pytest.mark.parametrize("count", [MAX_SEEDS + 1, 10**5, 10**9])
def test_a_huge_seed_count_is_refused_at_once(tmp_path, count):
    code, text = _cli("run", str(_manifest(tmp_path, seeds=f"count = {count}\nroot = 7")), "--no-cache")
    assert code == ExitCode.BAD_INPUT  # before: planning 10^9 seeds hung before training
    assert "[seeds.count]" in text and f"at most {MAX_SEEDS} seeds" in text
    with pytest.raises(ValueError, match="at most"):
        plan_seeds(seeds=list(range(MAX_SEEDS + 1)))
    assert len(plan_seeds(count=MAX_SEEDS, root=1)) == MAX_SEEDS


def test_verify_with_every_steps_to_threshold_censored_is_a_result_not_a_crash(tmp_path):
    """No toy seed reaches CartPole's registered threshold of 475 (gymnasium), so every value is censored."""
    manifest = _manifest(tmp_path, seeds="count = 5\nroot = 7")  # Gehan's test needs 4 or more per side
    common = ("--results", str(tmp_path / "res"), "--baselines", str(tmp_path / "bl"), "--no-cache")
    code, text = _cli("record", str(manifest), *common)
    assert code == ExitCode.OK, text
    code, text = _cli("verify", str(manifest), *common, "--no-run", "--metrics", "steps-to-threshold")
    assert code == ExitCode.OK, text  # before: ValueError from the power calculation (exit 1)
    assert "inconclusive" in text and "no power figure exists" in text


def test_manifest_error_class_is_what_trainer_import_failures_raise(tmp_path):
    from harness.trainers.registry import resolve_trainer

    (tmp_path / "quits_green2.py").write_text("import sys\nsys.exit(0)\n")
    with pytest.raises(ManifestError, match="quits_green2"):
        resolve_trainer("quits_green2:train", search_path=tmp_path)
