"""Shared test settings: the bad-input count in the summary, and slow tests on request.

Tests marked `slow` (bounded fuzzing) run only when asked for: `pytest -m slow`, or with the
environment variable HARMONIZE_SLOW=1 (CI's thorough run).
"""

from __future__ import annotations

import os

import pytest

BAD_INPUT_TEST = "test_bad_inputs.py::test_bad_input["


def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> None:
    if "slow" in (config.getoption("-m") or "") or os.environ.get("HARMONIZE_SLOW") == "1":
        return
    skip = pytest.mark.skip(reason="slow: run with -m slow or HARMONIZE_SLOW=1")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)


def pytest_terminal_summary(terminalreporter, exitstatus: int, config: pytest.Config) -> None:
    """Print the size of the bad-input catalogue and whether every case was handled."""
    outcomes: dict[str, str] = {}
    for outcome in ("passed", "failed", "error", "skipped"):
        for report in terminalreporter.stats.get(outcome, []):
            nodeid = getattr(report, "nodeid", "")
            if BAD_INPUT_TEST in nodeid and (report.when == "call" or outcome != "passed"):
                outcomes.setdefault(nodeid, outcome)
                if outcome != "passed":
                    outcomes[nodeid] = outcome
    if not outcomes:
        return
    handled = sum(outcome == "passed" for outcome in outcomes.values())
    if handled == len(outcomes):
        terminalreporter.write_line(f"{len(outcomes)} bad inputs, all handled")
    else:
        terminalreporter.write_line(
            f"{len(outcomes)} bad inputs, {len(outcomes) - handled} NOT handled", red=True
        )
