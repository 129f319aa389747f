"""Docs that run: the README's commands and the generated command-line reference stay true."""

from __future__ import annotations

import re
import shlex
from pathlib import Path

import pandas as pd
import pytest

from harmonize.cli.main import main
from harmonize.cli.reference import render_reference

REPO = Path(__file__).resolve().parents[1]
README = (REPO / "README.md").read_text(encoding="utf-8")


def shell_blocks() -> list[str]:
    return re.findall(r"```sh\n(.*?)```", README, flags=re.S)


def test_cli_reference_is_current() -> None:
    current = (REPO / "docs" / "cli.md").read_text(encoding="utf-8")
    assert current == render_reference(), (
        "docs/cli.md is stale: python -m harmonize.cli.reference > docs/cli.md"
    )


def test_ci_runs_exactly_the_readme_test_command() -> None:
    test_command = shell_blocks()[1].strip()
    ci = (REPO / ".ci" / "run").read_text(encoding="utf-8")
    assert test_command in ci.splitlines()


def test_readme_starts_with_the_job() -> None:
    first = README.split("\n\n")[1]
    assert len(first) > 200 and "harmonize" in first


def test_readme_quick_example_runs(tmp_path: Path, capsys, monkeypatch) -> None:
    block = next(b for b in shell_blocks() if b.startswith("harmonize quick"))
    argv = shlex.split(block.replace("\\\n", " "))[1:]
    # a field sheet shaped like the example's options (invented values)
    (tmp_path / "field sheet.csv").write_text(
        "Species;mass;Tcrit;SVL (mm);remarks\nPodarcis muralis;4,1;43,2;55,0;ok\nPodarcis muralis;n.d.;42,9;57,5;\n",
        encoding="utf-8",
    )
    monkeypatch.chdir(tmp_path)
    with pytest.raises(SystemExit) as exited:
        main(argv)
    assert exited.value.code == 0, capsys.readouterr().err
    values = pd.read_csv(tmp_path / "field-sheet-harmonized" / "individual_values.csv")
    assert set(values["trait_id"]) == {
        "body_mass_wet",
        "critical_thermal_maximum",
        "snout_vent_length",
    }
    assert len(values) == 5  # 6 cells, one declared missing ('n.d.')
