"""Behaviour pinned: the golden runs reproduce their recorded logs and videos byte for byte.

See :mod:`tests.golden.cases` for the runs and for how to record them anew after a change that
is meant to alter the results.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.golden.cases import DATA, RUNS, run_case


@pytest.fixture(scope="module")
def work(tmp_path_factory) -> Path:
    return tmp_path_factory.mktemp("golden")


@pytest.mark.parametrize("name", [r[0] for r in RUNS])
def test_golden_run_is_reproduced(name: str, work: Path) -> None:
    got = run_case(name, work)
    for part, text in got.items():
        want = (DATA / f"{name}.{part}.txt").read_text()
        if text != want:
            lines = [i for i, (a, b) in enumerate(zip(text.splitlines(), want.splitlines(),
                                                      strict=False))
                     if a != b]
            pytest.fail(f"{name}: {part} differs from the recorded run "
                        f"(first differing line {lines[:1] or 'at the end'}; "
                        f"{len(text.splitlines())} vs {len(want.splitlines())} lines)")
