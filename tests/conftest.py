"""Shared test fixtures and hooks: an independent UCUM reader, the benchmark's table generator,
the bad-input catalogue count."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest
from hypothesis import settings

REPO = Path(__file__).resolve().parents[1]

# No wall-clock deadline for property tests that set none themselves: CI machines are shared,
# and a slow moment would fail an example that is only slow (DeadlineExceeded or Flaky).
settings.register_profile("harmonize-default", deadline=None)
settings.load_profile("harmonize-default")


@pytest.fixture(scope="session")
def ucumvert_reader():
    """ucumvert on its own pint registry (ECOSYSTEM-NOTES §3 'Fix I tested'), so a check never
    shares state with the registry under test. Returns (registry, code -> pint quantity)."""
    ucumvert = pytest.importorskip("ucumvert")
    import pint

    reference = pint.UnitRegistry()
    reference.load_definitions(str(Path(ucumvert.__file__).parent / "pint_ucum_defs.txt"))
    transformer = ucumvert.UcumToPintTransformer(ureg=reference)
    parser = ucumvert.get_ucum_parser()

    def read(code: str):
        return transformer.transform(ucumvert.parse_ucum(code, parser))

    return reference, read


@pytest.fixture(scope="session")
def long_table_generator():
    """benchmarks/make_long_table.py as a module (a script, not part of the package)."""
    spec = importlib.util.spec_from_file_location(
        "make_long_table", REPO / "benchmarks" / "make_long_table.py"
    )
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


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
