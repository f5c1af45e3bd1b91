"""The declared dependency floors are true (issue 13 item 11).

Each row names an API or id the code relies on, the first release that has it (with where
that is documented) and a pattern that finds the use, so that a floor is raised when a newer
API comes in and may be lowered when the use goes. CI (``.ci/run``) also installs exactly
these floors (``.ci/floors.py`` writes the constraints) and runs the whole suite there.
"""

from __future__ import annotations

import re
import subprocess
import sys
import tomllib
from pathlib import Path

import pytest
from packaging.requirements import Requirement

ROOT = Path(__file__).resolve().parents[1]
PYPROJECT = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))

# (package, first release with it, what uses it, where that is documented, files, pattern of the use)
NEEDS = [
    ("numpy", "2.0", "np.trapezoid (the area under a curve)",
     "NumPy 2.0.0 release notes: np.trapz deprecated in favour of the new np.trapezoid",
     "harness/**/*.py", r"np\.trapezoid\("),
    ("scipy", "1.15", "the rng= keyword of scipy.stats.permutation_test",
     "SciPy 1.15.0 release notes: rng= added (SPEC 7), random_state before",
     "harness/stats/rank.py", r"permutation_test\((?s:.)*?\brng="),
    ("gymnasium", "1.3", "the Taxi-v4 id of the shipped Taxi manifest",
     "gymnasium/envs/__init__.py: 1.2.3 registers Taxi-v3 only, 1.3.0 registers Taxi-v4 (read in both wheels)",
     "manifests/*.toml", r'id = "Taxi-v4"'),
    ("gymnasium", "1.2", "the CliffWalking-v1 id",
     "gymnasium/envs/__init__.py: 1.1.1 registers CliffWalking-v0, 1.2.0 CliffWalking-v1 (read in both wheels)",
     "tests/*.py", r"CliffWalking-v1"),
    ("threadpoolctl", "3.5", "threadpool_info() finding NumPy 2's BLAS (libscipy_openblas) to limit and report it",
     "tried in a scratch venv with numpy 2.0.0: threadpoolctl 3.4.0 finds no BLAS, 3.5.0 finds openblas 0.3.27",
     "harness/manifest/pins.py", r"threadpoolctl\.threadpool_info\("),
    ("matplotlib", "3.8.4", "plots with NumPy >= 2 installed",
     "matplotlib 3.8.0-3.8.3 wheels require numpy<2, 3.8.4 numpy>=1.21 (their METADATA)",
     "harness/report/plot.py", r"import matplotlib"),
]


def _floors() -> dict[str, str]:
    """Each requirement's ``>=`` version, parsed by ``packaging`` (pip's own requirement parser)."""
    project = PYPROJECT["project"]
    requirements = list(project["dependencies"]) + [r for extra in project["optional-dependencies"].values() for r in extra]
    floors: dict[str, str] = {}
    for text in requirements:
        requirement = Requirement(text)
        lows = [spec.version for spec in requirement.specifier if spec.operator == ">="]
        assert len(lows) == 1, f"pyproject.toml: {text!r} must declare one floor as `name>=version` (CI installs it)"
        floors[requirement.name.lower()] = lows[0]
    return floors


def _version(text: str) -> tuple[int, ...]:
    return tuple(int(p) for p in text.split("."))


@pytest.mark.parametrize(("package", "needed", "what", "source", "files", "pattern"), NEEDS,
                         ids=[f"{n[0]}>={n[1]}" for n in NEEDS])
def test_floor_admits_what_the_code_uses(package, needed, what, source, files, pattern):
    used = any(re.search(pattern, p.read_text(encoding="utf-8")) for p in ROOT.glob(files))
    assert used, f"{what} is no longer used ({files}): the {package} floor may be lowered; update this table"
    floor = _floors()[package]
    assert _version(floor) >= _version(needed), (
        f"pyproject.toml declares {package}>={floor}, but the code uses {what}, which needs {package}>={needed} "
        f"({source})")


def test_ci_constraints_pin_every_dependency_at_its_floor():
    out = subprocess.run([sys.executable, str(ROOT / ".ci" / "floors.py")], capture_output=True, text=True,
                         check=True, cwd=ROOT).stdout
    pins = dict(line.split("==") for line in out.splitlines() if line and not line.startswith("#"))
    assert pins == _floors()
