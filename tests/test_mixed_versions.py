"""Issue 13 item 9: seeds run under different installed versions are reported, not merged.

A results folder can hold seeds trained under different versions (a dask cluster with unequal
workers, files copied together). Before the fix the candidate's versions were merged
last-one-wins, so the report named one version and the exact check could call the curves
"bitwise identical" against a baseline of that version. Now every report names which seeds ran
under which version, the side's version reads ``mixed: ...`` and the exact check is skipped.
"""

from __future__ import annotations

import json

import pytest
from crafting import cli, copy_results, record, resign_results

from harness.cli import ExitCode


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    return record(tmp_path_factory.mktemp("recorded"))


def test_a_mix_of_versions_among_the_candidate_seeds_is_reported(recorded, tmp_path):
    folder = copy_results(recorded / "res", tmp_path / "mixed")

    def older_numpy_for_the_last_seed(records, index):
        records[-1]["versions"]["numpy"] = "1.26.4"

    resign_results(folder, older_numpy_for_the_last_seed, rehash_config=False)
    installed = json.loads((folder / "seed-7-0.json").read_text())["versions"]["numpy"]
    report = tmp_path / "verdict.json"
    code, text = cli("compare", recorded / "res", folder, "--json", report)
    assert code == ExitCode.OK, text
    assert (f"candidate seeds ran under different versions of numpy: {installed} (seeds 7/0, 7/1); "
            "1.26.4 (seed 7/2)") in text
    assert "every seed's curve is bitwise identical" not in text and "exact check: skipped" in text
    data = json.loads(report.read_text())["provenance"]
    assert data["mixed_versions"] == {"baseline": {}, "candidate": {"numpy": {installed: ["7/0", "7/1"],
                                                                            "1.26.4": ["7/2"]}}}
    code, text = cli("compare", recorded / "res", recorded / "res")
    assert "different versions" not in text
