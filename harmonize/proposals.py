"""Gather the trait names of a project that need a human decision, with example values.

The review sheet lets a curator accept, correct or reject each proposed match in a spreadsheet;
`review` reads the sheet back into the decisions files. This module only collects the rows.
"""

from __future__ import annotations

import pandas as pd

from harmonize.build import build_tables
from harmonize.project import Project
from harmonize.review import SHEET_COLUMNS


def names_for_review(
    project: Project, *, include_fuzzy: bool = True, examples: int = 3
) -> pd.DataFrame:
    """One row per (source, name) that is unmatched, awaiting review or (optionally) fuzzy-accepted."""
    frames, _, _ = build_tables(project)
    matches = frames["name_matches"]
    wanted = matches["status"].eq("review")
    if include_fuzzy:
        wanted |= matches["method"].eq("fuzzy")
    chosen = matches[wanted]
    rejects = frames["rejects"]
    values = frames["individual_values"]
    shown = pd.concat(
        [
            rejects[["source_id", "original_name", "raw_value"]].rename(
                columns={"raw_value": "value"}
            ),
            values[["source_id", "original_name", "original_value"]].rename(
                columns={"original_value": "value"}
            ),
        ],
        ignore_index=True,
    ).dropna()
    example = (
        shown.groupby(["source_id", "original_name"])["value"]
        .agg(lambda s: " | ".join(pd.unique(s.astype(str))[:examples]))
        .rename("example_values")
    )
    rows = chosen.merge(example, left_on=["source_id", "name"], right_index=True, how="left")
    # an unmatched name carries its best candidate as runner-up: propose it, for the human to judge
    best_only = rows["trait_id"].isna() & rows["runner_up"].notna()
    rows.loc[best_only, "trait_id"] = rows.loc[best_only, "runner_up"]
    rows.loc[best_only, "score"] = rows.loc[best_only, "runner_up_score"]
    rows.loc[best_only, ["runner_up", "runner_up_score"]] = None
    sheet = pd.DataFrame(
        {
            "source": rows["source_id"],
            "name": rows["name"],
            "example_values": rows["example_values"],
            "proposed_trait": rows["trait_id"],
            "score": rows["score"].round(1),
            "runner_up": rows["runner_up"],
            "runner_up_score": rows["runner_up_score"].round(1),
            "decision": "",
            "note": rows["note"],
        },
        columns=list(SHEET_COLUMNS),
    )
    return sheet.sort_values(["source", "name"]).reset_index(drop=True)
