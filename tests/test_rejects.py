"""Every reject reason: one bad cell in, one reject row out naming its row, column and reason.

Each case is a tiny project written into a temporary folder: a table, a mapping and optionally a
decisions file. The good cells around the bad one must still come through (nothing else lost).
"""

from __future__ import annotations

import textwrap
from dataclasses import dataclass
from pathlib import Path

import pytest

from harmonize.build import build_tables
from harmonize.errors import RejectReason
from harmonize.project import load_project


@dataclass(frozen=True)
class Case:
    reason: RejectReason
    table: str  # CSV text
    mapping: str  # YAML lines after source/path
    row: int  # expected source row of the reject (data rows count from 1)
    column: str
    decisions: str = ""
    project_extra: str = ""


IND = "level: individual\ncontext: {taxon: species}\n"
POP = "level: population\ncontext: {taxon: species}\n"
LONG_POP = "level: population\nlayout: long\ncontext: {taxon: species}\ncolumns: {trait: trait, value: value, unit: unit, statistic: statistic}\n"

CASES = [
    Case(
        RejectReason.UNMATCHED_NAME,
        "species,mass_g,zqx_index\nSorex minutus,4.1,3\n",
        IND,
        1,
        "zqx_index",
    ),
    Case(
        RejectReason.NOT_A_NUMBER,
        "species,mass_g\nSorex minutus,4.1\nSorex minutus,broken\n",
        IND,
        2,
        "mass_g",
    ),
    Case(
        RejectReason.NON_FINITE,
        "species,mass_g\nSorex minutus,inf\nSorex minutus,4.0\n",
        IND,
        1,
        "mass_g",
    ),
    Case(
        RejectReason.RANGE_VALUE,
        "species,mass_g\nSorex minutus,3-5\nSorex minutus,4.0\n",
        IND,
        1,
        "mass_g",
    ),
    Case(RejectReason.MISSING_UNIT, "species,body mass\nSorex minutus,4.1\n", IND, 1, "body mass"),
    Case(
        RejectReason.UNKNOWN_UNIT,
        "species,mass\nSorex minutus,4.1\n",
        IND + "traits: {mass: {trait: body_mass_wet, unit: Zoll}}\n",
        1,
        "mass",
    ),
    Case(
        RejectReason.AMBIGUOUS_UNIT,
        "species,mass\nSorex minutus,4.1\n",
        IND + "traits: {mass: {trait: body_mass_wet, unit: gr}}\n",
        1,
        "mass",
    ),
    Case(
        RejectReason.DIMENSION_MISMATCH,
        "species,mass\nSorex minutus,4.1\n",
        IND + "traits: {mass: {trait: body_mass_wet, unit: mm}}\n",
        1,
        "mass",
    ),
    Case(
        RejectReason.UNIT_CONFLICT,
        "species,mass\nSorex minutus,4.1\nSorex minutus,4100 mg\n",
        IND + "traits: {mass: {trait: body_mass_wet, unit: g}}\n",
        2,
        "mass",
    ),
    Case(
        RejectReason.LEVEL_NOT_ALLOWED,
        "species,mode,mass_g\nSorex minutus,endotherm,4\n",
        IND + "traits: {mode: {trait: thermoregulatory_mode}}\n",
        1,
        "mode",
    ),
    Case(RejectReason.MISSING_TAXON, "species,mass_g\nSorex minutus,4.1\n,3.9\n", IND, 2, "mass_g"),
    Case(
        RejectReason.CELL_TOO_LARGE,
        "species,mass_g\nSorex minutus," + "9" * 300 + "\nSorex minutus,4\n",
        IND,
        1,
        "mass_g",
    ),
    Case(
        RejectReason.ORPHAN_STATISTIC,
        "species,mass_mean,mass_sd,svl_sd\nSorex minutus,4.1,0.3,2.0\n",
        POP
        + "traits:\n  mass_mean: {trait: body_mass_wet, statistic: mean, unit: g}\n  mass_sd: {trait: body_mass_wet, statistic: sd, unit: g}\n  svl_sd: {trait: snout_vent_length, statistic: sd, unit: mm}\n",
        1,
        "svl_sd",
    ),
    Case(
        RejectReason.INVALID_STATISTIC,
        "species,mass_mean,mass_sd\nSorex minutus,4.1,-0.3\n",
        POP
        + "traits:\n  mass_mean: {trait: body_mass_wet, statistic: mean, unit: g}\n  mass_sd: {trait: body_mass_wet, statistic: sd, unit: g}\n",
        1,
        "mass_sd",
    ),
    Case(
        RejectReason.UNKNOWN_STATISTIC,
        "species,trait,statistic,value,unit\nSorex minutus,body mass,mean,4.1,g\nSorex minutus,body mass,geometric mean,4.0,g\n",
        LONG_POP,
        2,
        "value",
    ),
    Case(
        RejectReason.DUPLICATE_STATISTIC,
        "species,trait,statistic,value,unit\nSorex minutus,body mass,mean,4.1,g\nSorex minutus,body mass,mean,4.3,g\n",
        LONG_POP,
        2,
        "value",
    ),
    Case(
        RejectReason.UNKNOWN_CATEGORY,
        "species,mode,mass_mean\nSorex minutus,lukewarm,4.1\n",
        POP
        + "traits:\n  mode: {trait: thermoregulatory_mode}\n  mass_mean: {trait: body_mass_wet, statistic: mean, unit: g}\n",
        1,
        "mode",
    ),
    Case(
        RejectReason.NAME_REJECTED,
        "species,mass_g,wobble\nSorex minutus,4.1,7\n",
        IND,
        1,
        "wobble",
        decisions="name,trait_id,score,method,decided_by,decided_at\nwobble,,,rejected,tester,2026-12-01\n",
    ),
    Case(
        RejectReason.BAD_TEMPERATURE,
        "species,temp,vo2\nSorex minutus,hot,1.2\nSorex minutus,20,1.1\n",
        "level: individual\ncontext: {taxon: species, temperature: {column: temp, unit: degC}}\n"
        "traits: {vo2: {trait: oxygen_consumption_rate, unit: mL/h}}\n",
        1,
        "vo2",
        project_extra="temperature_correction: {method: q10, reference: 20, q10: 2}\n",
    ),
]


def make_project(root: Path, case: Case) -> Path:
    (root / "mappings").mkdir(parents=True)
    (root / "t.csv").write_text(case.table, encoding="utf-8")
    (root / "harmonize.yaml").write_text("name: t\n" + case.project_extra, encoding="utf-8")
    (root / "mappings" / "t.yaml").write_text(
        "source: t\npath: ../t.csv\n" + textwrap.dedent(case.mapping), encoding="utf-8"
    )
    if case.decisions:
        (root / "mappings" / "t.matches.csv").write_text(case.decisions, encoding="utf-8")
    return root


def test_every_reason_has_a_case() -> None:
    covered = {case.reason for case in CASES}
    assert covered == set(RejectReason), f"reasons without a case: {set(RejectReason) - covered}"


@pytest.mark.parametrize("case", CASES, ids=[c.reason.value for c in CASES])
def test_bad_cell_is_rejected_with_row_column_and_reason(tmp_path: Path, case: Case) -> None:
    project = load_project(make_project(tmp_path, case))
    frames, accounts, _ = build_tables(project)
    rejects = frames["rejects"]
    hit = rejects[(rejects["reason"] == case.reason.value)]
    assert len(hit) >= 1, f"no {case.reason} reject; rejects were:\n{rejects.to_string()}"
    assert (hit["source_row"] == case.row).any() and (hit["column"] == case.column).any(), (
        hit.to_string()
    )
    assert hit["message"].str.len().min() > 10  # a message a person can act on
    # nothing lost: every cell is written, rejected or empty
    assert all(a.balanced for a in accounts)


def test_oversized_cell_is_kept_as_an_excerpt(tmp_path: Path) -> None:
    # regression: a huge rejected cell used to be copied whole into rejects.raw_value
    case = next(c for c in CASES if c.reason is RejectReason.CELL_TOO_LARGE)
    frames, _, _ = build_tables(load_project(make_project(tmp_path, case)))
    hit = frames["rejects"][frames["rejects"]["reason"] == RejectReason.CELL_TOO_LARGE.value]
    raw = hit["raw_value"].iloc[0]
    assert len(raw) < 300 and raw.endswith("(300 characters)")


@pytest.mark.parametrize(
    ("table", "mapping", "fix"),
    [
        (  # wide: the column has no declared unit, its name no unit hint
            "species,tail length\nSorex minutus,41\n",
            IND,
            "`unit:` for the column under `traits:` in the mapping",
        ),
        (  # long with a unit column: the row's unit cell is empty
            "species,trait,value,unit\nSorex minutus,tail length,41,\n",
            "level: individual\nlayout: long\ncontext: {taxon: species}\n"
            "columns: {trait: trait, value: value, unit: unit}\n",
            "write the unit in the row's 'unit' cell",
        ),
        (  # long without a unit column
            "species,trait,value\nSorex minutus,tail length,41\n",
            "level: individual\nlayout: long\ncontext: {taxon: species}\n"
            "columns: {trait: trait, value: value}\n",
            "`columns: {unit: COLUMN}` in the mapping",
        ),
    ],
    ids=["wide", "long-unit-cell", "long-no-unit-column"],
)
def test_a_missing_unit_names_the_fix_for_the_layout(tmp_path: Path, table, mapping, fix) -> None:
    case = Case(RejectReason.MISSING_UNIT, table, mapping, 1, "")
    frames, _, _ = build_tables(load_project(make_project(tmp_path, case)))
    rejects = frames["rejects"]
    assert list(rejects["reason"]) == ["missing-unit"]
    assert "trait unit 'mm'" in rejects["message"].iloc[0]
    assert fix in rejects["message"].iloc[0]
