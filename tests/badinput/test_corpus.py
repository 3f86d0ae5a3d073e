"""The bad-input corpus (tests/badinput/README.md): every case gives the outcome the contract promises.

Each case runs in its own folder (``tmp_path``), so the corpus runs in parallel under
pytest-xdist. Cases are made by :mod:`badinput.corpus` with fixed seeds.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from badinput import runner
from badinput.corpus import Case, all_cases
from badinput.summary import README, render_table, replace_table

CASES = all_cases()


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_case(case: Case, tmp_path: Path) -> None:
    if case.kind == "report":
        runner.run_report(case)
        return
    if case.kind == "signal":
        runner.run_signal(case, tmp_path)
        return
    if case.kind == "rerun":
        runner.run_rerun(case, tmp_path)
        return
    kept = runner.materialise(case, tmp_path)
    rc, err = runner.run_cli(case, tmp_path)
    runner.check_messages(case, rc, err)
    runner.check_kept(kept, tmp_path)
    if case.output and rc == 0:
        runner.check_rows(case, tmp_path)
    elif case.output:
        assert not (tmp_path / case.output).exists()


def test_enough_cases_in_every_category() -> None:
    by_category: dict[str, int] = {}
    for c in CASES:
        by_category[c.category] = by_category.get(c.category, 0) + 1
    assert len(CASES) >= 300, len(CASES)
    assert min(by_category.values()) >= 10, by_category


def test_readme_summary_is_current() -> None:
    text = README.read_text(encoding="utf-8")
    assert replace_table(text, render_table(CASES)) == text, (
        "the summary in tests/badinput/README.md is out of date; run "
        "'python tests/badinput/summary.py --update'")
