"""The command line: exit codes, one-line errors, quick mode, vocabulary search, the installed script."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from harmonize.cli.main import EXIT_CODES, main

REPO = Path(__file__).resolve().parents[1]


def run(argv: list[str], capsys) -> tuple[int, str, str]:
    with pytest.raises(SystemExit) as exited:
        main(argv)
    captured = capsys.readouterr()
    code = exited.value.code if isinstance(exited.value.code, int) else 0
    return code, captured.out, captured.err


SEMICOLON_COMMA = ["--delimiter", ";", "--decimal", ","]


def quick(table: Path, text: str, options: list[str], capsys) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Write `text` to `table`, run `harmonize quick` on it; (individual values, rejects)."""
    table.write_text(text, encoding="utf-8")
    code, _, err = run(["quick", str(table), *options, "-q"], capsys)
    assert code == 0, err
    folder = table.with_name(f"{table.stem}-harmonized")
    return (
        pd.read_csv(folder / "individual_values.csv"),
        pd.read_csv(folder / "rejects.csv"),
    )


@pytest.fixture
def demo(tmp_path: Path) -> Path:
    shutil.copy(REPO / "harmonize.yaml", tmp_path / "harmonize.yaml")
    for folder in ("mappings", "demo_sources", "vocab"):
        shutil.copytree(REPO / folder, tmp_path / folder)
    return tmp_path


def test_build_prints_the_summary_and_says_names_need_review(demo: Path, capsys) -> None:
    code, out, err = run(["build", str(demo)], capsys)
    assert code == 1, err  # the demo has deliberately unknown names: exit 1 = built, review needed
    assert "names needing review" in out
    assert "balanced" in out and "NO" not in out.split("accounting")[0].split()[-1]
    assert "frictionless validation: valid" in out
    sd_line = next(line for line in out.splitlines() if "SDs:" in line)
    assert "given" in sd_line and "estimated (flagged)" in sd_line
    assert "reading north-lizards" in err  # progress on stderr
    assert (demo / "out" / "demo-package" / "datapackage.json").is_file()


def test_quiet_build_has_no_progress(demo: Path, capsys) -> None:
    _, _, err = run(["build", str(demo), "--quiet"], capsys)
    assert "reading" not in err


def test_bad_mapping_is_one_line_with_file_and_exit_3(demo: Path, capsys) -> None:
    mapping = demo / "mappings" / "north-lizards.yaml"
    mapping.write_text(
        mapping.read_text(encoding="utf-8").replace("layout: wide", "layuot: wide"),
        encoding="utf-8",
    )
    code, out, err = run(["build", str(demo)], capsys)
    assert code == 3
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error:")
    assert "north-lizards.yaml" in lines[0] and "did you mean 'layout'" in lines[0]
    assert "Traceback" not in err


def test_missing_source_file_names_it(demo: Path, capsys) -> None:
    (demo / "demo_sources" / "west" / "shrews.tsv").unlink()
    code, _, err = run(["build", str(demo)], capsys)
    assert code == 3
    assert "shrews.tsv" in err and "not found" in err


def test_quick_mode_on_a_messy_table(tmp_path: Path, capsys) -> None:
    table = tmp_path / "field sheet.csv"
    table.write_text(
        "Species;SVL (mm);Body mass [g];CTmax (°C);remarks\n"
        "Podarcis muralis;55,2;4,1;43,1;ok\n"
        "podarcis muralis;n.d.;3,9;42,8;\n"
        "Podarcis muralis;61,0;oops;43,5;\n",
        encoding="utf-8",
    )
    code, out, err = run(
        ["quick", str(table), "--taxon", "Species", "--delimiter", ";", "--decimal", ",",
         "--missing", "n.d.", "--ignore", "remarks", "--quiet"],
        capsys,
    )  # fmt: skip
    assert code == 0, err
    package = tmp_path / "field-sheet-harmonized"
    values = pd.read_csv(package / "individual_values.csv")
    assert set(values["trait_id"]) == {
        "snout_vent_length",
        "body_mass_wet",
        "critical_thermal_maximum",
    }
    rejects = pd.read_csv(package / "rejects.csv")
    assert rejects[["source_row", "column", "reason"]].values.tolist() == [
        [3, "Body mass [g]", "not-a-number"]
    ]
    assert "individual values:    7" in out


def test_cell_unit_other_than_the_headers_is_used_and_flagged(tmp_path: Path, capsys) -> None:
    # 1 cm = 10 mm (NIST SP 811, App. B). '45 mm' under 'SVL (cm)': the cell's unit is used and
    # flagged; '4,1 gram' under 'Body mass [g]' is the same unit and is not.
    values, _ = quick(
        tmp_path / "sheet.csv",
        "Species;SVL (cm);Body mass [g]\nPodarcis muralis;5,52;4,1 gram\nPodarcis muralis;45 mm;3,9\n",
        ["--taxon", "Species", *SEMICOLON_COMMA],
        capsys,
    )
    values = values.set_index(["source_row", "trait_id"])
    svl = values.xs("snout_vent_length", level="trait_id")
    assert svl["value"].tolist() == pytest.approx([55.2, 45.0])
    assert "cell-unit-differs-from-name" not in str(svl.loc[1, "flags"])
    assert "cell-unit-differs-from-name" in svl.loc[2, "flags"].split(";")
    mass = values.xs("body_mass_wet", level="trait_id")
    assert mass["value"].tolist() == pytest.approx([4.1, 3.9])
    assert not any("cell-unit-differs" in str(f) for f in mass["flags"])


def test_cell_unit_other_than_the_declared_is_rejected(tmp_path: Path, capsys) -> None:
    # Two explicit units disagree ('4100 mg' in a column declared g): either could be the typo,
    # and converting with the declared one would put a value 1000x off into the output, so the
    # cell goes to rejects. 'gram' is the declared 'g' spelled out: used, not rejected.
    values, rejects = quick(
        tmp_path / "masses.csv",
        "Species;mass\nPodarcis muralis;4,1 gram\nPodarcis muralis;4100 mg\n",
        ["--taxon", "Species", *SEMICOLON_COMMA, "--unit", "mass=g"],
        capsys,
    )
    assert values["source_row"].tolist() == [1]
    assert values["value"].tolist() == pytest.approx([4.1])
    assert "cell-unit" not in str(values.loc[0, "flags"])
    assert rejects[["source_row", "reason"]].values.tolist() == [[2, "unit-conflict"]]
    assert "'mg'" in rejects.loc[0, "message"] and "'g'" in rejects.loc[0, "message"]


def test_cell_unit_other_than_the_unit_column_is_rejected(tmp_path: Path, capsys) -> None:
    # long table: the row's unit column says mm, the cell says cm (8.5 cm = 85 mm or 8.5 mm?)
    values, rejects = quick(
        tmp_path / "long.csv",
        "species;trait;value;unit\n"
        "Podarcis muralis;SVL;8,5 cm;mm\n"
        "Podarcis muralis;SVL;61 millimetre;mm\n"
        "Podarcis muralis;SVL;62;mm\n",
        ["--taxon", "species", *SEMICOLON_COMMA,
         "--trait-column", "trait", "--value-column", "value", "--unit-column", "unit"],
        capsys,
    )  # fmt: skip
    assert values["value"].tolist() == pytest.approx([61.0, 62.0])  # NIST SP 811: mm as is
    assert rejects[["source_row", "reason"]].values.tolist() == [[1, "unit-conflict"]]


def test_quick_mode_takes_the_confidence_level(tmp_path: Path, capsys) -> None:
    # SD from a 90% CI with n = 10: sqrt(10) * (52.0 - 48.0) / (2 * t(0.95, 9)), t = 1.833
    # (any t table; Cochrane Handbook 6.5.2.2): 3.1623 * 4 / 3.666 = 3.450
    table = tmp_path / "means.csv"
    table.write_text(
        "species,trait,statistic,value,unit,n\n"
        "Sorex minutus,body mass,mean,50,g,10\n"
        "Sorex minutus,body mass,lower 90% CI,48.0,g,10\n"
        "Sorex minutus,body mass,upper 90% CI,52.0,g,10\n",
        encoding="utf-8",
    )
    base = ["quick", str(table), "--level", "population", "--taxon", "species",
            "--trait-column", "trait", "--value-column", "value", "--unit-column", "unit",
            "--statistic-column", "statistic", "--sample-size", "n", "-q"]  # fmt: skip
    code, _, err = run([*base, "--ci-level", "0.9"], capsys)
    assert code == 0, err
    out = pd.read_csv(tmp_path / "means-harmonized" / "population_summaries.csv")
    assert out["sd"].tolist() == pytest.approx([3.450], rel=1e-3)
    assert out["ci_level"].tolist() == pytest.approx([0.9])
    code, _, err = run([*base, "--ci-level", "90"], capsys)  # a percent is refused, not guessed
    assert code == 3 and "between 0.5 and 1" in err and "Traceback" not in err


def test_quick_mode_rejects_half_a_long_layout(tmp_path: Path, capsys) -> None:
    table = tmp_path / "t.csv"
    table.write_text("a,b\n1,2\n", encoding="utf-8")
    code, _, err = run(["quick", str(table), "--trait-column", "a"], capsys)
    assert code == 3 and "--value-column" in err


def test_vocab_search_finds_by_abbreviation(capsys) -> None:
    code, out, _ = run(["vocab", "search", "SVL"], capsys)
    assert code == 0
    assert "snout_vent_length" in out


def test_vocab_search_role_filter(capsys) -> None:
    _, out, _ = run(["vocab", "search", "--role", "forcing"], capsys)
    assert "air_temperature" in out and "body_mass_wet" not in out


def test_help_lists_exit_codes(capsys) -> None:
    code, out, _ = run(["--help"], capsys)
    assert code == 0
    for number in EXIT_CODES:
        assert f"  {number}  " in out


def test_unknown_command_is_a_usage_error(capsys) -> None:
    code, _, err = run(["frobnicate"], capsys)
    assert code == 2 and "frobnicate" in err


def test_installed_console_script_runs() -> None:
    script = Path(sys.executable).with_name("harmonize")
    if not script.exists():
        pytest.skip("console script not installed beside this Python (package not installed)")
    version = subprocess.run(
        [str(script), "--version"], capture_output=True, text=True, timeout=120
    )
    assert version.returncode == 0 and "harmonize" in version.stdout
    module = subprocess.run(
        [sys.executable, "-m", "harmonize", "vocab", "search", "CTmax"],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert module.returncode == 0 and "critical_thermal_maximum" in module.stdout


def test_quick_mode_hints_name_its_own_options(tmp_path: Path, capsys) -> None:
    # Quick mode has no mapping file: a reject's hint names the command-line option that fixes
    # it, where a mapping's hint names the key of its `read:` section (see test_values).
    _, rejects = quick(
        tmp_path / "sheet.csv",
        'species,SVL (mm),Body mass (g)\nPodarcis muralis,"55,2",4.1\n'
        'Podarcis muralis,61.0,"1,234"\n',
        ["--taxon", "species"],
        capsys,
    )
    messages = dict(zip(rejects["column"], rejects["message"], strict=True))
    assert "use `--decimal ,`" in messages["SVL (mm)"]
    # '1,234' is either 1.234 or 1234: both options are named
    assert "use `--decimal ,` or `--thousands ,`" in messages["Body mass (g)"]
    assert not any("mapping" in m for m in messages.values())


def test_quick_mode_encoding_error_names_the_encoding_option(tmp_path: Path, capsys) -> None:
    table = tmp_path / "sheet.csv"
    table.write_bytes("species,SVL (mm)\nLacerta v\xe4lida,55\n".encode("latin-1"))
    code, _, err = run(["quick", str(table), "--taxon", "species", "-q"], capsys)
    assert code == 3, err
    assert "`--encoding latin-1`" in err and "mapping" not in err


def test_quick_mode_names_its_own_fixes_for_unknown_names_and_delimiters(tmp_path, capsys) -> None:
    # Quick mode has neither a mapping file nor a review sheet: its messages point at its
    # options, and a declaration error names the command line, not a mapping file.
    table = tmp_path / "sheet.csv"
    table.write_text("species;SVL (mm);zqx index\nPodarcis muralis;55;3\n", encoding="utf-8")
    code, _, err = run(["quick", str(table), "--taxon", "species", "-q"], capsys)
    assert code == 3
    assert err.startswith("error: command line, column 'species'"), err
    assert "use `--delimiter ;`" in err and ".yaml" not in err
    code, out, _ = run(["quick", str(table), "--taxon", "species", "--delimiter", ";"], capsys)
    assert code == 1  # built; one name waits
    assert "--trait COLUMN=TRAIT_ID" in out and "review propose" not in out
    rejects = pd.read_csv(tmp_path / "sheet-harmonized" / "rejects.csv")
    (message,) = rejects.loc[rejects["reason"] == "unmatched-name", "message"]
    assert "--trait COLUMN=" in message and "make a project with a mapping file" in message


def test_quick_mode_long_table_is_not_told_to_use_trait(tmp_path, capsys) -> None:
    # --trait names a wide table's column; a long table's names can only be settled in a
    # project (review sheet or mapping), so neither the reject nor the summary offers --trait.
    table = tmp_path / "long.tsv"
    table.write_text(
        "species\tvariable\tvalue\tunit\nPodarcis muralis\tSVL\t55\tmm\n"
        "Podarcis muralis\tzqx index\t3\t\n",
        encoding="utf-8",
    )
    code, out, err = run(
        ["quick", str(table), "--taxon", "species", "--trait-column", "variable",
         "--value-column", "value", "--unit-column", "unit"],
        capsys,
    )  # fmt: skip
    assert code == 1, err
    assert "make a project with a mapping file" in out and "--trait" not in out
    rejects = pd.read_csv(tmp_path / "long-harmonized" / "rejects.csv")
    (message,) = rejects.loc[rejects["reason"] == "unmatched-name", "message"]
    assert "make a project with a mapping file" in message and "--trait" not in message


def test_progress_shows_the_share_read_and_ends_with_all_read(capsys, monkeypatch) -> None:
    # lines are throttled to one per interval; a source read within the first interval gets
    # only its last line (before, tiny sources ended on '96% read, about 0 s left')
    from harmonize.cli import render

    clock = iter([0.0, 0.1, 0.2, 1.0, 1.2, 5.0, 5.1])
    monkeypatch.setattr(render.time, "monotonic", lambda: next(clock))
    progress = render.progress_printer(quiet=False)
    progress("source", {"source": "s"})  # 0.0
    progress("batch", {"source": "s", "rows": 10, "fraction": 0.4})  # 0.1: within the interval
    progress("batch", {"source": "s", "rows": 20, "fraction": 0.5})  # 0.2: within the interval
    progress("batch", {"source": "s", "rows": 40, "fraction": 0.8})  # 1.0: shown
    progress("source-read", {"source": "s", "rows": 50, "fraction": 1.0})  # 1.2
    progress("source", {"source": "tiny"})  # 5.0
    progress("source-read", {"source": "tiny", "rows": 3, "fraction": 1.0})  # 5.1
    lines = [line.strip() for line in capsys.readouterr().err.splitlines()]
    assert lines == [
        "reading s ...",
        "s: 40 rows, 40 rows/s, 80% read, about 0 s left",
        "s: 50 rows, 42 rows/s, all read in 1 s",
        "reading tiny ...",
        "tiny: 3 rows, 30 rows/s, all read in 0 s",
    ]
    assert render.progress_printer(quiet=True) is None
