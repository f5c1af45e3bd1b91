"""pytest plugin of rl-harness (registered through the ``pytest11`` entry point).

It lets a project gate learning performance inside its own test suite. A test
marked with a manifest gets the verdict through the ``rlharness_verdict``
fixture; the test fails, with the verdict's explanation, when the gate fails::

    import pytest

    @pytest.mark.rlharness("manifests/frozenlake-q.toml")
    def test_frozenlake_still_learns(rlharness_verdict):   # the fixture is optional
        assert rlharness_verdict.exact.status == "identical"   # optional extra assertions

    def test_taxi_strict(rlharness_verify):
        rlharness_verify("manifests/taxi-q.toml", strict=True)

Keyword arguments of the marker or of ``rlharness_verify`` override the
manifest's ``[check]`` policy (``strict``, ``alpha``, ``margin``, ...), plus
``baseline=`` for another baseline file. Relative paths are taken from pytest's
root directory. A missing or damaged baseline or failed runs also fail the
test, with the message saying the fix. The terminal summary lists every
verdict and what a pass does and does not prove.

Options: ``--rlharness-baselines DIR`` (ini ``rlharness_baselines``, default
``baselines``), ``--rlharness-results DIR`` (default ``results``),
``--rlharness-workers N`` and ``--rlharness-no-cache``. Heavy modules are
imported only when a verification runs.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

__all__ = ["MARKER", "OPTION_BASELINES", "OPTION_NO_CACHE", "OPTION_RESULTS", "OPTION_WORKERS"]

MARKER = "rlharness"
OPTION_BASELINES = "--rlharness-baselines"
OPTION_RESULTS = "--rlharness-results"
OPTION_WORKERS = "--rlharness-workers"
OPTION_NO_CACHE = "--rlharness-no-cache"
_INI_BASELINES = "rlharness_baselines"

_VERDICTS = pytest.StashKey[list]()


def pytest_addoption(parser: pytest.Parser) -> None:
    group = parser.getgroup("rlharness", "rl-harness learning-performance gates")
    group.addoption(OPTION_BASELINES, metavar="DIR", default=None,
                    help="folder of baselines (default: ini rlharness_baselines, else baselines/)")
    group.addoption(OPTION_RESULTS, metavar="DIR", default="results",
                    help="folder under which each manifest's results are kept (default: results/)")
    group.addoption(OPTION_WORKERS, metavar="N", type=int, default=None, help="worker processes for the runs")
    group.addoption(OPTION_NO_CACHE, action="store_true", default=False, help="neither read nor write the run cache")
    parser.addini(_INI_BASELINES, "folder of rl-harness baselines", default="baselines")


def pytest_configure(config: pytest.Config) -> None:
    config.addinivalue_line(
        "markers",
        f"{MARKER}(manifest, **policy): verify the manifest against its baseline through the "
        "rlharness_verdict fixture; the test fails when the gate fails",
    )
    config.stash[_VERDICTS] = []


def _under_root(config: pytest.Config, path: str | Path) -> Path:
    path = Path(path)
    return path if path.is_absolute() else config.rootpath / path


def _verify(config: pytest.Config, nodeid: str, manifest: str | Path, *, baseline: str | Path | None = None,
            **policy: Any) -> Any:
    """Rerun and verify one manifest; fail the running test unless the gate passes."""
    from harness.store.baseline import default_baseline_path
    from harness.core.errors import HarnessError
    from harness.manifest.loader import load_manifest
    from harness.gate.verify import rerun_and_verify

    manifest_path = _under_root(config, manifest)
    problem = None
    try:
        loaded = load_manifest(manifest_path)
        folder = config.getoption(OPTION_BASELINES) or config.getini(_INI_BASELINES)
        baseline_path = (_under_root(config, baseline) if baseline is not None
                         else default_baseline_path(loaded.name, _under_root(config, folder)))
        verdict = rerun_and_verify(
            loaded,
            baseline_path=baseline_path,
            policy=loaded.check.with_overrides(**policy),
            results_dir=_under_root(config, config.getoption(OPTION_RESULTS)) / loaded.name,
            workers=config.getoption(OPTION_WORKERS),
            use_cache=not config.getoption(OPTION_NO_CACHE),
        )
    except HarnessError as exc:
        problem = f"rl-harness could not verify {manifest_path}: {exc}"
    if problem is not None:  # failed outside the except block: the report shows the message alone
        pytest.fail(problem, pytrace=False)
    config.stash[_VERDICTS].append((nodeid, verdict))
    if not verdict.passed:
        pytest.fail(verdict.explain(), pytrace=False)
    return verdict


@pytest.fixture
def rlharness_verify(request: pytest.FixtureRequest) -> Callable[..., Any]:
    """A function ``verify(manifest, *, baseline=None, **policy)`` that reruns and verifies a manifest.

    It returns the :class:`harness.gate.verify.Verdict` when the gate passes and fails the test
    with the verdict's explanation otherwise.
    """

    def verify(manifest: str | Path, **options: Any) -> Any:
        return _verify(request.config, request.node.nodeid, manifest, **options)

    return verify


@pytest.fixture
def rlharness_verdict(request: pytest.FixtureRequest) -> Any:
    """The verdict for the manifest named by the test's ``@pytest.mark.rlharness(...)`` marker.

    The verification runs when the test is called (not while fixtures are set up), so a failed
    gate is a failed test; until then this fixture holds a placeholder.
    """
    marker = request.node.get_closest_marker(MARKER)
    if marker is None or not marker.args:
        raise pytest.UsageError(
            f"{request.node.nodeid}: the rlharness_verdict fixture needs a marker naming the manifest, "
            f"e.g. @pytest.mark.{MARKER}('manifests/frozenlake-q.toml')"
        )
    return _PENDING


_PENDING = object()


@pytest.hookimpl(tryfirst=True)
def pytest_pyfunc_call(pyfuncitem: pytest.Function) -> None:
    """Verify the manifest of a marked test before its body runs, and hand it the verdict."""
    marker = pyfuncitem.get_closest_marker(MARKER)
    if marker is None or not marker.args:
        return None
    verdict = _verify(pyfuncitem.config, pyfuncitem.nodeid, *marker.args, **marker.kwargs)
    if pyfuncitem.funcargs.get("rlharness_verdict") is _PENDING:
        pyfuncitem.funcargs["rlharness_verdict"] = verdict
    return None


def pytest_terminal_summary(terminalreporter: Any, exitstatus: int, config: pytest.Config) -> None:
    verdicts = config.stash.get(_VERDICTS, [])
    if not verdicts:
        return
    from harness.gate.verify import WHAT_A_PASS_MEANS

    terminalreporter.section("rl-harness verdicts")
    for nodeid, verdict in verdicts:
        terminalreporter.write_line(f"{nodeid}: {verdict.summary}")
    terminalreporter.write_line(WHAT_A_PASS_MEANS)
