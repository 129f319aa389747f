"""Tests for harmonize.review: decisions files, the review sheet and merging decisions.

All names and decisions here are invented for the tests.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from harmonize.errors import ConfigError, SourceNotFoundError
from harmonize.match import match_names
from harmonize.review import (
    DECISION_COLUMNS,
    SHEET_COLUMNS,
    Decision,
    apply_review,
    read_decisions,
    read_review_sheet,
    write_review_sheet,
)
from harmonize.vocab import load_vocabulary

TINY = Path(__file__).parent / "fixtures" / "vocab_tiny"
HEADER = ",".join(DECISION_COLUMNS)


@pytest.fixture(scope="module")
def tiny():
    return load_vocabulary(TINY)


def _write(path: Path, *lines: str, encoding: str = "utf-8") -> Path:
    path.write_text("\n".join(lines) + "\n", encoding=encoding)
    return path


def _sheet_rows(*rows: dict) -> pd.DataFrame:
    return pd.DataFrame([{"source": "north", **row} for row in rows])


# -------------------------------------------------------------------------- decisions file


def test_missing_decisions_file_means_no_decisions(tmp_path):
    assert read_decisions(tmp_path / "north.matches.csv") == {}


def test_decisions_are_read_with_their_types(tmp_path, tiny):
    path = _write(
        tmp_path / "d.csv",
        HEADER,
        "Masse (g),body_mass_wet,88.5,fuzzy,alice,2026-12-01",
        "notes,,,rejected,bob,2026-12-02T10:00:00",
    )
    assert read_decisions(path, tiny) == {
        "Masse (g)": Decision("Masse (g)", "body_mass_wet", "fuzzy", 88.5, "alice", "2026-12-01"),
        "notes": Decision("notes", None, "rejected", None, "bob", "2026-12-02T10:00:00"),
    }


def test_semicolons_bom_and_blank_rows_as_spreadsheets_save_them(tmp_path):
    path = _write(
        tmp_path / "d.csv",
        HEADER.replace(",", ";"),
        "SVL;snout_vent_length;100;synonym;alice;2026-12-01",
        ";;;;;",
        encoding="utf-8-sig",
    )
    assert read_decisions(path)["SVL"].trait_id == "snout_vent_length"


@pytest.mark.parametrize(
    ("line", "column", "words"),
    [
        ("SVL,snout_vent_length,100,guessed,alice,2026-12-01", "method", "unknown method"),
        ("SVL,,100,manual,alice,2026-12-01", "trait_id", "empty trait id"),
        ("SVL,snout_vent_length,,rejected,alice,2026-12-01", "trait_id", "rejected"),
        ("SVL,snout_vent_length,150,fuzzy,alice,2026-12-01", "score", "0 to 100"),
        ("SVL,snout_vent_length,high,fuzzy,alice,2026-12-01", "score", "0 to 100"),
        ("SVL,snout_vent_length,,manual,,2026-12-01", "decided_by", "decided_by"),
        ("SVL,snout_vent_length,,manual,alice,1 Dec 2026", "decided_at", "ISO date"),
        (",snout_vent_length,,manual,alice,2026-12-01", "name", "empty name"),
        ("SVL,snout_vent_lenght,,manual,alice,2026-12-01", "trait_id", "unknown trait id"),
    ],
)
def test_bad_decision_rows_name_file_row_and_column(tmp_path, tiny, line, column, words):
    path = _write(
        tmp_path / "north.matches.csv", HEADER, "Tb,body_mass_wet,,manual,a,2026-12-01", line
    )
    with pytest.raises(ConfigError) as caught:
        read_decisions(path, tiny)
    error = caught.value
    assert (error.file, error.row, error.column) == (str(path), 3, column)
    assert words in str(error)
    assert "north.matches.csv, row 3" in str(error)


def test_unknown_trait_id_hints_at_the_close_one(tmp_path, tiny):
    path = _write(tmp_path / "d.csv", HEADER, "SVL,snout_vent_lenght,,manual,alice,2026-12-01")
    with pytest.raises(ConfigError, match="did you mean snout_vent_length"):
        read_decisions(path, tiny)


def test_duplicate_name_and_missing_column_are_refused(tmp_path):
    twice = _write(
        tmp_path / "a.csv",
        HEADER,
        "SVL,snout_vent_length,,manual,alice,2026-12-01",
        "SVL,body_mass_wet,,manual,bob,2026-12-01",
    )
    with pytest.raises(ConfigError, match="decided twice") as caught:
        read_decisions(twice)
    assert caught.value.row == 3
    no_method = _write(tmp_path / "b.csv", "name,trait_id,score,decided_by,decided_at")
    with pytest.raises(ConfigError) as caught:
        read_decisions(no_method)
    assert (caught.value.row, caught.value.column) == (1, "method")


# ---------------------------------------------------------------------------- review sheet


def test_review_round_trip_into_decisions_and_back_into_matching(tmp_path, tiny):
    rows = _sheet_rows(
        {"name": "Masse (g)", "proposed_trait": "body_mass_wet", "score": 88.46, "note": "n"},
        {"name": "col17", "proposed_trait": None, "score": float("nan")},
        {"name": "lenght_mm", "proposed_trait": "snout_vent_length", "score": 80.0},
        {"name": "observer", "proposed_trait": None},
    )
    sheet = tmp_path / "review.csv"
    write_review_sheet(sheet, rows)
    written = pd.read_csv(sheet, dtype=str, keep_default_na=False, encoding="utf-8-sig")
    assert list(written.columns) == list(SHEET_COLUMNS)
    assert written.loc[0, "score"] == "88.5" and written.loc[1, "score"] == ""
    # the person fills in the decision column
    written["decision"] = ["accept", "reject", "snout_vent_length", ""]
    written.to_csv(sheet, index=False, encoding="utf-8-sig")

    decided = read_review_sheet(sheet, tiny)
    assert list(decided["outcome"]) == ["accept", "reject", "manual", "pending"]
    counts = apply_review(decided, tmp_path, decided_by="alice", decided_at="2026-12-01")
    assert counts == {
        "accepted": 1,
        "manual": 1,
        "rejected": 1,
        "replaced": 0,
        "unchanged": 0,
        "pending": 1,
    }

    decisions = read_decisions(tmp_path / "north.matches.csv", tiny)
    assert decisions["Masse (g)"] == Decision(
        "Masse (g)", "body_mass_wet", "fuzzy", 88.5, "alice", "2026-12-01"
    )
    assert decisions["col17"].method == "rejected"
    assert decisions["lenght_mm"].method == "manual"
    assert "observer" not in decisions
    result = match_names(["Masse (g)", "col17", "lenght_mm"], tiny, decisions=decisions)
    assert [result[n].status for n in result] == ["accepted", "rejected", "accepted"]
    assert not list(tmp_path.glob(".*.tmp"))  # atomic writes leave no temporary files


def test_formula_like_cells_are_guarded_and_read_back_unchanged(tmp_path, tiny):
    names = ["=SUM(A1:A3)", "-log mass", "+1 mass", "@mass"]
    sheet = tmp_path / "review.csv"
    write_review_sheet(
        sheet, _sheet_rows(*[{"name": n, "proposed_trait": "body_mass_wet"} for n in names])
    )
    text = sheet.read_text(encoding="utf-8-sig")
    assert "'=SUM(A1:A3)" in text and "'-log mass" in text  # OWASP, "CSV Injection"
    frame = pd.read_csv(sheet, dtype=str, keep_default_na=False, encoding="utf-8-sig")
    frame["decision"] = "reject"
    frame.to_csv(sheet, index=False, encoding="utf-8-sig")
    decided = read_review_sheet(sheet, tiny)
    assert list(decided["name"]) == names
    apply_review(decided, tmp_path, decided_by="alice", decided_at="2026-12-01")
    assert set(read_decisions(tmp_path / "north.matches.csv")) == set(names)


@pytest.mark.parametrize(
    ("decision", "words"),
    [
        ("snout_vent_lenght", "did you mean snout_vent_length"),
        ("replace:", "needs a decision"),
    ],
)
def test_unreadable_decisions_in_the_sheet_name_the_row(tmp_path, tiny, decision, words):
    sheet = tmp_path / "review.csv"
    rows = _sheet_rows({"name": "a", "proposed_trait": "body_mass_wet", "decision": ""})
    write_review_sheet(sheet, rows)
    frame = pd.read_csv(sheet, dtype=str, keep_default_na=False, encoding="utf-8-sig")
    frame["decision"] = decision
    frame.to_csv(sheet, index=False)
    with pytest.raises(ConfigError, match=words) as caught:
        read_review_sheet(sheet, tiny)
    assert (caught.value.row, caught.value.column) == (2, "decision")


def test_accept_without_a_proposal_is_refused(tmp_path, tiny):
    sheet = _write(tmp_path / "r.csv", ",".join(SHEET_COLUMNS), "north,col17,,,,,,accept,")
    with pytest.raises(ConfigError, match="nothing was proposed"):
        read_review_sheet(sheet, tiny)


def test_missing_sheet_is_reported(tmp_path, tiny):
    with pytest.raises(SourceNotFoundError):
        read_review_sheet(tmp_path / "nope.csv", tiny)


# ------------------------------------------------------------------- merging decisions


def _decide(tmp_path, tiny, *lines: str) -> pd.DataFrame:
    sheet = _write(tmp_path / "review.csv", ",".join(SHEET_COLUMNS), *lines)
    return read_review_sheet(sheet, tiny)


def test_a_changed_decision_is_refused_unless_marked_replace(tmp_path, tiny):
    existing = _write(
        tmp_path / "north.matches.csv",
        HEADER + ",comment",
        "Tb,critical_thermal_maximum,,manual,bob,2026-11-01,first",
        "SVL,snout_vent_length,100,synonym,bob,2026-11-01,",
    )
    before = existing.read_text()
    changed = _decide(tmp_path, tiny, "north,Tb,,,,,,air_temperature,", "north,new,,,,,,reject,")
    with pytest.raises(ConfigError) as caught:
        apply_review(changed, tmp_path, decided_by="alice", decided_at="2026-12-01")
    message = str(caught.value)
    assert (
        "'Tb'" in message and "critical_thermal_maximum" in message and "air_temperature" in message
    )
    assert existing.read_text() == before  # nothing written, not even the new name

    replaced = _decide(
        tmp_path,
        tiny,
        "north,Tb,,,,,,replace:air_temperature,",
        "north,SVL,,,,,,snout_vent_length,",
    )
    counts = apply_review(replaced, tmp_path, decided_by="alice", decided_at="2026-12-01")
    assert (counts["replaced"], counts["unchanged"]) == (1, 1)
    lines = existing.read_text().splitlines()
    assert lines[0] == HEADER + ",comment"  # extra columns kept
    assert lines[1].startswith("Tb,air_temperature,,manual,alice,2026-12-01")
    assert lines[2].startswith("SVL,snout_vent_length,100,synonym,bob")  # order and old row kept


def test_new_names_are_appended_after_existing_rows(tmp_path, tiny):
    _write(
        tmp_path / "north.matches.csv", HEADER, "SVL,snout_vent_length,100,synonym,bob,2026-11-01"
    )
    added = _decide(tmp_path, tiny, "north,zz,,,,,,reject,", "north,aa,,body_mass_wet,95,,,accept,")
    apply_review(added, tmp_path, decided_by="alice", decided_at="2026-12-01")
    names = [
        line.split(",")[0] for line in (tmp_path / "north.matches.csv").read_text().splitlines()
    ]
    assert names == ["name", "SVL", "zz", "aa"]


def test_decisions_go_to_each_source_file(tmp_path, tiny):
    both = _decide(tmp_path, tiny, "north,a,,,,,,reject,", "south,b,,,,,,body_mass_wet,")
    apply_review(both, tmp_path, decided_by="alice", decided_at="2026-12-01")
    assert set(read_decisions(tmp_path / "north.matches.csv")) == {"a"}
    assert read_decisions(tmp_path / "south.matches.csv")["b"].trait_id == "body_mass_wet"


def test_source_ids_that_are_not_plain_names_are_refused(tmp_path, tiny):
    with pytest.raises(ConfigError, match="not a plain name"):
        _decide(tmp_path, tiny, "../north,a,,,,,,reject,")
