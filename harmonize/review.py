"""Decisions files and review sheets: how people confirm, correct or reject trait-name matches.

Two CSV files, both meant to be opened in a spreadsheet:

- the decisions file `mappings/<source>.matches.csv` (columns
  `name,trait_id,score,method,decided_by,decided_at`), re-read on every build; a name listed
  there is never re-scored. `method` is exact | synonym | fuzzy | manual | rejected, and
  `trait_id` is empty exactly when the method is `rejected`;
- the review sheet (columns `source,name,example_values,proposed_trait,score,runner_up,
  runner_up_score,decision,note`), written for a person to fill in the `decision` column
  with a trait id, `accept` (take the proposal) or `reject`. A decision that would change an
  earlier one must say so: `replace:<trait id>`, `replace:accept` or `replace:reject`.

Cells that a spreadsheet would run as a formula (starting with = + - @) are written with a
leading apostrophe and read back without it (OWASP, "CSV Injection"). Files are replaced
atomically (temporary file, then os.replace), so a crash never leaves half a file.

What it leaves to others: scoring names (`harmonize.match`), choosing which names go on the
sheet (`harmonize.proposals`), the command line (`harmonize.cli`).
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import math
import os
import re
import tempfile
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import pandas as pd

from harmonize.errors import ConfigError, SourceNotFoundError
from harmonize.match import did_you_mean

if TYPE_CHECKING:
    from harmonize.vocab import Vocabulary

DECISION_COLUMNS = ("name", "trait_id", "score", "method", "decided_by", "decided_at")
DECISION_METHODS = ("exact", "synonym", "fuzzy", "manual", "rejected")
SHEET_COLUMNS = (
    "source",
    "name",
    "example_values",
    "proposed_trait",
    "score",
    "runner_up",
    "runner_up_score",
    "decision",
    "note",
)
_SHEET_REQUIRED = ("source", "name", "proposed_trait", "decision")
_OUTCOMES = ("accept", "manual", "reject", "pending")
_REPLACE = "replace:"
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_SOURCE_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]*$")  # also a safe file-name stem


@dataclass(frozen=True)
class Decision:
    """One row of a decisions file: what a name means, and who said so when."""

    name: str
    trait_id: str | None
    method: str
    score: float | None
    decided_by: str
    decided_at: str


# ------------------------------------------------------------------------------- CSV cells


def _guard(cell: str) -> str:
    return "'" + cell if cell.startswith(_FORMULA_START) else cell


def _unguard(cell: str) -> str:
    return cell[1:] if cell.startswith("'") and cell[1:].startswith(_FORMULA_START) else cell


def _text(value: object) -> str:
    """A cell as text: blanks for None/NaN, short numbers ('96', '88.9')."""
    if value is None or (isinstance(value, float) and math.isnan(value)) or value is pd.NA:
        return ""
    if isinstance(value, float):
        return format(round(value, 1), "g")
    return str(value)


def _read_rows(path: Path, required: Sequence[str]) -> tuple[list[str], list[tuple[int, dict]]]:
    """Header and (spreadsheet row number, row) pairs; the header is row 1, blank rows skipped.

    The delimiter is whichever of ',', ';' or tab splits the header into the required
    columns: spreadsheets in many locales save ';'.
    """
    text = path.read_text(encoding="utf-8-sig")
    first = text.splitlines()[0] if text.strip() else ""
    delimiter = max(",;\t", key=lambda d: sum(c in first.split(d) for c in required))
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)
    header = [h.strip() for h in next(reader, [])]
    missing = [c for c in required if c not in header]
    if missing:
        raise ConfigError(
            f"missing column(s) {', '.join(missing)}",
            file=str(path),
            row=1,
            column=missing[0],
            hint=f"the first row must name the columns {', '.join(required)}",
        )
    rows = []
    for number, cells in enumerate(reader, start=2):
        if not any(c.strip() for c in cells):
            continue
        if len(cells) > len(header):
            raise ConfigError(
                f"{len(cells)} cells but {len(header)} columns",
                file=str(path),
                row=number,
                hint="a name containing the delimiter must be quoted",
            )
        values = [_unguard(c.strip()) for c in cells] + [""] * (len(header) - len(cells))
        rows.append((number, dict(zip(header, values, strict=True))))
    return header, rows


def _write_atomically(path: Path, header: Sequence[str], rows: list[dict], *, bom: bool) -> None:
    handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(handle, "w", encoding="utf-8-sig" if bom else "utf-8", newline="") as out:
            writer = csv.writer(out, lineterminator="\n")
            writer.writerow(header)
            writer.writerows([_guard(_text(row.get(c, ""))) for c in header] for row in rows)
            out.flush()
            os.fsync(out.fileno())
        os.replace(temporary, path)
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise


# -------------------------------------------------------------------------- decisions file


def read_decisions(path: Path, vocabulary: Vocabulary | None = None) -> dict[str, Decision]:
    """Decisions by name; a missing file means none yet. Bad rows raise ConfigError."""
    path = Path(path)
    if not path.exists():
        return {}
    _, rows = _read_rows(path, DECISION_COLUMNS)
    decisions: dict[str, Decision] = {}
    first_row: dict[str, int] = {}
    for number, row in rows:
        decision = _decision(row, path, number, vocabulary)
        if decision.name in decisions:
            raise ConfigError(
                f"name '{decision.name}' is decided twice",
                file=str(path),
                row=number,
                column="name",
                hint=f"keep one of rows {first_row[decision.name]} and {number}",
            )
        decisions[decision.name] = decision
        first_row[decision.name] = number
    return decisions


def _decision(row: dict, path: Path, number: int, vocabulary: Vocabulary | None) -> Decision:
    def fail(column: str, problem: str, hint: str | None = None) -> ConfigError:
        return ConfigError(problem, file=str(path), row=number, column=column, hint=hint)

    name, trait_id, method = row["name"], row["trait_id"] or None, row["method"].lower()
    if not name:
        raise fail("name", "empty name")
    if method not in DECISION_METHODS:
        raise fail(
            "method",
            f"unknown method '{row['method']}'",
            f"use one of {', '.join(DECISION_METHODS)}",
        )
    if method == "rejected" and trait_id is not None:
        raise fail(
            "trait_id", f"a rejected name has no trait id, got '{trait_id}'", "empty the cell"
        )
    if method != "rejected" and trait_id is None:
        raise fail(
            "trait_id", "empty trait id", "give a vocabulary id, or set method to 'rejected'"
        )
    if trait_id is not None and vocabulary is not None and trait_id not in vocabulary.terms:
        raise fail("trait_id", f"unknown trait id '{trait_id}'", did_you_mean(trait_id, vocabulary))
    score = None
    if row["score"]:
        try:
            score = float(row["score"])
        except ValueError:
            score = math.nan
        if not 0 <= score <= 100:  # also false for NaN
            raise fail("score", f"score '{row['score']}' is not a number from 0 to 100")
    if not row["decided_by"]:
        raise fail("decided_by", "empty decided_by", "name the person or process that decided")
    try:
        dt.datetime.fromisoformat(row["decided_at"])
    except ValueError:
        raise fail(
            "decided_at", f"'{row['decided_at']}' is not an ISO date", "write e.g. 2026-12-01"
        ) from None
    return Decision(name, trait_id, method, score, row["decided_by"], row["decided_at"])


# ---------------------------------------------------------------------------- review sheet


def write_review_sheet(path: Path, rows: pd.DataFrame) -> None:
    """Write the sheet; columns absent from `rows` are left blank (always 'decision')."""
    missing = [c for c in ("source", "name") if c not in rows.columns]
    if missing:
        raise ValueError(f"review rows need the columns {', '.join(missing)}")
    records = rows.reindex(columns=list(SHEET_COLUMNS)).to_dict("records")
    _write_atomically(Path(path), SHEET_COLUMNS, records, bom=True)  # BOM: spreadsheets read UTF-8


def read_review_sheet(path: Path, vocabulary: Vocabulary) -> pd.DataFrame:
    """The sheet's rows with each decision resolved.

    Adds the columns `outcome` (accept | manual | reject | pending), `trait_id` (what the
    name will mean), `replace` (the decision may overwrite an earlier one) and `row` (the
    spreadsheet row, for messages). Unreadable decisions raise ConfigError naming the row.
    """
    path = Path(path)
    if not path.exists():
        raise SourceNotFoundError("review sheet not found", file=str(path))
    _, rows = _read_rows(path, _SHEET_REQUIRED)
    out, seen = [], {}
    for number, row in rows:
        record = {c: row.get(c, "") for c in SHEET_COLUMNS}
        if record["score"] and not re.fullmatch(r"\d+(\.\d*)?", record["score"]):
            raise ConfigError(
                f"score '{record['score']}' is not a number",
                file=str(path),
                row=number,
                column="score",
            )
        outcome, trait_id, replace = _resolve(row, path, number, vocabulary)
        if outcome != "pending":
            key = (row["source"], row["name"])
            if not _SOURCE_ID.match(row["source"]):
                raise ConfigError(
                    f"source id '{row['source']}' is not a plain name",
                    file=str(path),
                    row=number,
                    column="source",
                )
            if key in seen:
                raise ConfigError(
                    f"'{row['name']}' of {row['source']} is decided twice",
                    file=str(path),
                    row=number,
                    hint=f"see row {seen[key]}",
                )
            seen[key] = number
        out.append(
            record | {"outcome": outcome, "trait_id": trait_id, "replace": replace, "row": number}
        )
    columns = [*SHEET_COLUMNS, "outcome", "trait_id", "replace", "row"]
    return pd.DataFrame(out, columns=columns)


def _resolve(
    row: dict, path: Path, number: int, vocabulary: Vocabulary
) -> tuple[str, str | None, bool]:
    text = row["decision"].strip()
    replace = text.lower().startswith(_REPLACE)
    if replace:
        text = text[len(_REPLACE) :].strip()
    word = text.lower()
    if not text:
        if replace:
            raise ConfigError(
                "'replace:' needs a decision after it",
                file=str(path),
                row=number,
                column="decision",
            )
        return "pending", None, False
    if word == "reject":
        return "reject", None, replace
    trait_id = row["proposed_trait"] if word == "accept" else text
    if not trait_id:
        raise ConfigError(
            f"'{row['name']}': 'accept' but nothing was proposed",
            file=str(path),
            row=number,
            column="decision",
            hint="write the trait id instead",
        )
    if trait_id not in vocabulary.terms:
        raise ConfigError(
            f"'{trait_id}' is not a vocabulary id, nor 'accept' or 'reject'",
            file=str(path),
            row=number,
            column="decision",
            hint=did_you_mean(trait_id, vocabulary),
        )
    return ("accept" if word == "accept" else "manual"), trait_id, replace


def apply_review(
    sheet: pd.DataFrame, decisions_dir: Path, *, decided_by: str, decided_at: str
) -> dict[str, int]:
    """Merge the sheet's decisions into each source's decisions file.

    Existing rows keep their order and new names are appended. A decision that differs from an
    earlier one raises ConfigError (and nothing is written) unless the sheet row says
    `replace:`. Returns counts: accepted, manual, rejected (new rows), replaced, unchanged,
    pending.
    """
    if not decided_by.strip() or not decided_at.strip():
        raise ConfigError("decided_by and decided_at must not be empty")
    decisions_dir = Path(decisions_dir)
    if not decisions_dir.is_dir():
        raise SourceNotFoundError("decisions folder not found", file=str(decisions_dir))
    counts = dict.fromkeys(
        ("accepted", "manual", "rejected", "replaced", "unchanged", "pending"), 0
    )
    counts["pending"] = int((sheet["outcome"] == "pending").sum())
    decided = sheet[sheet["outcome"] != "pending"]
    planned: list[tuple[Path, list[str], list[dict]]] = []
    conflicts: list[str] = []
    for source, rows in decided.groupby("source", sort=False):
        path = decisions_dir / f"{source}.matches.csv"
        header, existing = list(DECISION_COLUMNS), []
        if path.exists():
            read_decisions(path)  # refuse to merge into a file that is already invalid
            header, numbered = _read_rows(path, DECISION_COLUMNS)
            existing = [row for _, row in numbered]
        where = {row["name"]: i for i, row in enumerate(existing)}
        for record in rows.to_dict("records"):
            new = _new_row(record, decided_by, decided_at)
            if record["name"] not in where:
                where[record["name"]] = len(existing)
                existing.append(new)
                counts[
                    {"accept": "accepted", "manual": "manual", "reject": "rejected"}[
                        record["outcome"]
                    ]
                ] += 1
                continue
            old = existing[where[record["name"]]]
            if (old["trait_id"] or None) == (new["trait_id"] or None):
                counts["unchanged"] += 1
            elif record["replace"]:
                existing[where[record["name"]]] = old | new
                counts["replaced"] += 1
            else:
                conflicts.append(
                    f"'{record['name']}' ({source}) is decided as {old['trait_id'] or 'rejected'} "
                    f"in {path.name}; sheet row {record['row']} says {new['trait_id'] or 'rejected'}"
                )
        planned.append((path, header, existing))
    if conflicts:
        more = f" (and {len(conflicts) - 1} more)" if len(conflicts) > 1 else ""
        raise ConfigError(
            conflicts[0] + more,
            hint="to overwrite, write 'replace:<trait id>', 'replace:accept' or 'replace:reject' in the decision column",
        )
    for path, header, rows_out in planned:
        _write_atomically(path, header, rows_out, bom=False)
    return counts


def _new_row(record: dict, decided_by: str, decided_at: str) -> dict:
    outcome, score = record["outcome"], _text(record.get("score"))
    if outcome == "reject":
        return {
            "name": record["name"],
            "trait_id": "",
            "score": "",
            "method": "rejected",
            "decided_by": decided_by,
            "decided_at": decided_at,
        }
    if outcome == "manual":
        method, score = "manual", ""
    else:  # the proposal taken as it was: keep how it was found and its score
        method = "synonym" if score and float(score) >= 100 else "fuzzy"
    return {
        "name": record["name"],
        "trait_id": record["trait_id"],
        "score": score,
        "method": method,
        "decided_by": decided_by,
        "decided_at": decided_at,
    }
