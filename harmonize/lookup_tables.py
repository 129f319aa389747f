"""Per-distinct lookup tables for `assemble`: one row per distinct trait name and per trait.

`assemble` works out what a name or a trait implies once, here, and takes it per cell by
integer codes (pandas.factorize), so no Python runs per cell. A name's row holds the accepted
trait (or none), the match method and score, hints read from the name and the reject message;
a trait's row holds its kind, canonical unit (pint text and UCUM code), role, plausible range,
whether it is a rate and whether the source's level is allowed. Matching names is `match`'s
job, the vocabulary `vocab`'s.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from harmonize import units
from harmonize.mapping_file import COMMAND_LINE, Mapping
from harmonize.match import NameMatch
from harmonize.vocab import Vocabulary

if TYPE_CHECKING:
    from harmonize.assemble import SourcePlan


def command_line_fix(mapping: Mapping, trait_id: str | None = None) -> str:
    """How to settle a trait name when the source was declared on the command line (quick
    mode has no review sheet): --trait for a wide table's column, otherwise a project."""
    project = "make a project with a mapping file to use the review sheet"
    if mapping.layout != "wide":
        return project
    return f"--trait COLUMN={trait_id or 'TRAIT_ID'} names a column's trait, or {project}"


def missing_unit_message(mapping: Mapping, canonical: str) -> str:
    """Why a number without a unit is rejected, and the fix where the source was declared: the
    row's unit cell (a long table with a unit column), or the column's declared unit."""
    quick = mapping.read.declared_in == COMMAND_LINE
    given = f"no unit given for trait unit '{canonical}'"
    if mapping.layout == "long":
        if mapping.columns is not None and mapping.columns.unit:
            return f"{given}: write the unit in the row's '{mapping.columns.unit}' cell"
        where = "--unit-column COLUMN" if quick else "`columns: {unit: COLUMN}` in the mapping"
        return f"{given}: name the table's unit column ({where})"
    where = (
        "--unit COLUMN=UNIT" if quick else "`unit:` for the column under `traits:` in the mapping"
    )
    return f"{given}: declare the column's unit ({where}) or write it in the cell"


def unmatched_message(name: str, match: NameMatch | None, mapping: Mapping | None = None) -> str:
    """Why a name's cells are rejected, and the fix where the source was declared: the review
    sheet or the mapping file, or the command line's (`command_line_fix`)."""
    guess = None if match is None else match.trait_id
    if mapping is not None and mapping.read.declared_in == COMMAND_LINE:
        fix = command_line_fix(mapping, guess)
    elif guess is None:
        fix = "add a decision in the review sheet or declare `trait:` in the mapping"
    else:
        fix = "accept or reject it in the review sheet, or declare `trait:` in the mapping"
    if match is None or match.trait_id is None:
        return f"trait name '{name}' matches no vocabulary term; {fix}"
    return (
        f"trait name '{name}' needs review: best guess '{guess}' (score {match.score:.0f}); {fix}"
    )


def name_table(distinct: list[str], plan: SourcePlan) -> pd.DataFrame:
    """One row per distinct name: the accepted trait (or None) and what goes with it."""
    rows = []
    for name in distinct:
        match = plan.names.get(name)
        accepted = match is not None and match.status == "accepted" and match.trait_id is not None
        if match is not None and match.status == "rejected":
            message = f"trait name '{name}' was rejected in the decisions file"
        else:
            message = unmatched_message(name, match, plan.mapping)
        rows.append(
            {
                "trait_id": match.trait_id if accepted else None,
                "status": match.status if match else "review",
                "method": match.method if match else "unmatched",
                "score": match.score if match else np.nan,
                "statistic_hint": match.statistic_hint if match else None,
                "unit_hint": match.unit_hint if match else None,
                "role": plan.roles.get(name),
                "message": message,
            }
        )
    return pd.DataFrame(
        rows,
        columns=[
            "trait_id",
            "status",
            "method",
            "score",
            "statistic_hint",
            "unit_hint",
            "role",
            "message",
        ],
    )


def trait_table(used: list, vocabulary: Vocabulary, level: str) -> pd.DataFrame:
    """One row per trait id met in the batch (None included): facts from the vocabulary."""
    rows = []
    for trait_id in used:
        term = vocabulary.terms.get(trait_id) if isinstance(trait_id, str) else None
        if term is None:
            rows.append(
                {
                    "kind": "",
                    "unit": None,
                    "unit_text": None,
                    "ucum": None,
                    "role": None,
                    "rate": False,
                    "plausible_min": -np.inf,
                    "plausible_max": np.inf,
                    "level_ok": True,
                }
            )
            continue
        unit_text, ucum = unit_texts(term.unit)
        low, high = term.plausible if term.plausible else (-np.inf, np.inf)
        rows.append(
            {
                "kind": term.kind, "unit": term.unit, "unit_text": unit_text, "ucum": ucum, "role": term.role,
                "rate": bool(term.rate), "plausible_min": float(low), "plausible_max": float(high),
                "level_ok": level in term.levels,
            }
        )  # fmt: skip
    return pd.DataFrame(
        rows,
        columns=[
            "kind",
            "unit",
            "unit_text",
            "ucum",
            "role",
            "rate",
            "plausible_min",
            "plausible_max",
            "level_ok",
        ],
    )


def unit_texts(unit: str | None) -> tuple[str | None, str | None]:
    """The canonical unit as pint text and as a UCUM code (None for unitless kinds)."""
    if unit is None:
        return None, None
    from harmonize.ucum import to_ucum

    return units.format_unit(unit), to_ucum(unit)
