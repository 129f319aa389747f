"""Shared test hook: the size of the bad-input catalogue in the test summary."""

from __future__ import annotations

import pytest

BAD_INPUT_TEST = "test_bad_inputs.py::test_bad_input["


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
