"""The suite is self-contained and decisive (issue 13 item 12).

Every document a test cites must be a file inside the repository (the check values
live in ``tests/CHECK-VALUES.md`` with their sources), every number a test quotes
from that file must be in it, and no test may accept both "gate passed" and
"gate failed" as its outcome.
"""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
TESTS = sorted((ROOT / "tests").glob("*.py"))
CHECK_VALUES = ROOT / "tests" / "CHECK-VALUES.md"
DOCUMENT = re.compile(r"""(?<![\w./'"-])[\w./-]*[\w-]+\.md\b""")  # a cited document, not a quoted file name
NUMBER = re.compile(r"(?<![\w.])-?\d+\.\d+(?:e-?\d+)?")
EITHER_EXIT = re.compile(r"assert .*\bin [({]\s*(?:ExitCode\.OK|0)\s*,\s*(?:ExitCode\.GATE_FAILED|1)\s*[)}]")


def _inside(path: Path) -> bool:
    return path.is_file() and path.resolve().is_relative_to(ROOT)


def test_every_cited_document_is_a_file_inside_the_repository():
    outside = []
    for test in TESTS:
        for lineno, line in enumerate(test.read_text(encoding="utf-8").splitlines(), 1):
            for name in DOCUMENT.findall(line):
                if not any(_inside(base / name) for base in (test.parent, ROOT)):
                    outside.append(f"{test.name}:{lineno}: {name}")
    assert not outside, "tests cite documents that are not files inside the repository:\n" + "\n".join(outside)


def test_numbers_quoted_from_check_values_are_in_it():
    documented = CHECK_VALUES.read_text(encoding="utf-8")
    missing = []
    for test in TESTS:
        for lineno, line in enumerate(test.read_text(encoding="utf-8").splitlines(), 1):
            if "CHECK-VALUES.md" in line and test != Path(__file__).resolve():
                missing += [f"{test.name}:{lineno}: {n}" for n in NUMBER.findall(line) if n not in documented]
    assert not missing, "numbers cited from tests/CHECK-VALUES.md but not in it:\n" + "\n".join(missing)


def test_no_test_accepts_both_pass_and_fail():
    vague = [f"{test.name}:{lineno}" for test in TESTS if test != Path(__file__).resolve()
             for lineno, line in enumerate(test.read_text(encoding="utf-8").splitlines(), 1) if EITHER_EXIT.search(line)]
    assert not vague, "tests that accept either exit code decide nothing: " + ", ".join(vague)
