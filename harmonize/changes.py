"""What changed between two builds: sources, values per trait and source, names, rejects.

`compare_packages` reads the previous package (if any) and the newly written one from disk, the
same way for both, and compares them: sources by file checksum, individual values and population
summaries by their stable `record_id` (a record with the same id but any differing cell is
"changed"), names newly waiting for review, and reject counts by reason. `report_text` draws the
same report as plain text. Cells are compared as the text the package holds, so a change is a
change a reader of the package would see; a switch of output format between builds shows as
changed records.

Writing the report files and deciding when to compare are left to `build`; the comparison never
fails a build: an unreadable previous package is reported as such and everything counts as added.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

# Record ids listed per kind of change in the JSON report; counts are always complete.
MAX_LISTED_IDS = 1000
_VALUE_RESOURCES = ("individual_values", "population_summaries")
_READ_RESOURCES = (*_VALUE_RESOURCES, "sources", "rejects", "name_matches")


@dataclass(frozen=True)
class ValueChanges:
    """Record-level differences of one value resource."""

    added: int = 0
    removed: int = 0
    changed: int = 0
    unchanged: int = 0
    by_trait: dict[str, dict[str, int]] = field(default_factory=dict)
    by_source: dict[str, dict[str, int]] = field(default_factory=dict)
    changed_columns: dict[str, int] = field(default_factory=dict)
    added_ids: tuple[str, ...] = ()
    removed_ids: tuple[str, ...] = ()
    changed_ids: tuple[str, ...] = ()
    ids_truncated: bool = False

    @property
    def any(self) -> bool:
        return bool(self.added or self.removed or self.changed)


@dataclass(frozen=True)
class ChangeReport:
    built_at: str  # UTC, ISO 8601: the only wall-clock time a build records
    full: bool  # every source read again (no reuse asked for)
    previous_found: bool
    previous_problem: str | None
    sources_added: tuple[str, ...]
    sources_removed: tuple[str, ...]
    sources_changed: tuple[str, ...]  # file checksum differs
    sources_unchanged: tuple[str, ...]
    sources_reused: tuple[str, ...]  # taken from the cache, not read again
    values: dict[str, ValueChanges]
    names_needing_review: tuple[tuple[str, str], ...]
    new_names_needing_review: tuple[tuple[str, str], ...]
    rejects_before: dict[str, int]
    rejects_after: dict[str, int]

    @property
    def rejects_difference(self) -> dict[str, int]:
        reasons = sorted(set(self.rejects_before) | set(self.rejects_after))
        return {
            r: self.rejects_after.get(r, 0) - self.rejects_before.get(r, 0)
            for r in reasons
            if self.rejects_after.get(r, 0) != self.rejects_before.get(r, 0)
        }

    def to_json(self) -> dict:
        return {
            "built_at": self.built_at,
            "full_rebuild": self.full,
            "previous_package": {"found": self.previous_found, "problem": self.previous_problem},
            "sources": {
                "added": list(self.sources_added),
                "removed": list(self.sources_removed),
                "changed": list(self.sources_changed),
                "unchanged": list(self.sources_unchanged),
                "reused_from_cache": list(self.sources_reused),
            },
            "values": {
                name: {
                    "added": c.added,
                    "removed": c.removed,
                    "changed": c.changed,
                    "unchanged": c.unchanged,
                    "by_trait": c.by_trait,
                    "by_source": c.by_source,
                    "changed_columns": c.changed_columns,
                    "record_ids": {
                        "added": list(c.added_ids),
                        "removed": list(c.removed_ids),
                        "changed": list(c.changed_ids),
                        "truncated": c.ids_truncated,
                    },
                }
                for name, c in self.values.items()
            },
            "names_needing_review": {
                "total": len(self.names_needing_review),
                "new": [{"source_id": s, "name": n} for s, n in self.new_names_needing_review],
            },
            "rejects_by_reason": {
                "before": self.rejects_before,
                "after": self.rejects_after,
                "difference": self.rejects_difference,
            },
        }


def _safe_resource_file(folder: Path, resource: dict) -> Path:
    path = resource.get("path")
    if not isinstance(path, str) or "/" in path or "\\" in path or path.startswith("."):
        raise ValueError(f"resource {resource.get('name')!r} has an unexpected path {path!r}")
    return folder / path


def read_package_tables(folder: Path) -> dict[str, pd.DataFrame]:
    """The package's resources as text frames (missing cells as ""), keyed by resource name."""
    descriptor = json.loads((folder / "datapackage.json").read_text(encoding="utf-8"))
    frames = {}
    for resource in descriptor.get("resources", []):
        name = resource.get("name")
        if name not in _READ_RESOURCES:
            continue
        path = _safe_resource_file(folder, resource)
        if path.suffix == ".parquet":
            frame = pd.read_parquet(path)
            frame = frame.astype("string").fillna("").astype(object)
        else:
            frame = pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8")
        frames[name] = frame
    return frames


def _count_by(frame: pd.DataFrame, column: str) -> dict[str, int]:
    if frame.empty or column not in frame.columns:
        return {}
    return {str(k): int(v) for k, v in frame[column].value_counts().sort_index().items()}


def _nested_counts(parts: dict[str, pd.DataFrame], column: str) -> dict[str, dict[str, int]]:
    nested: dict[str, dict[str, int]] = {}
    for kind, frame in parts.items():
        for key, count in _count_by(frame, column).items():
            nested.setdefault(key, {"added": 0, "removed": 0, "changed": 0})[kind] = count
    return dict(sorted(nested.items()))


def _listed(index: pd.Index) -> tuple[str, ...]:
    return tuple(str(i) for i in sorted(index)[:MAX_LISTED_IDS])


def compare_values(previous: pd.DataFrame, current: pd.DataFrame) -> ValueChanges:
    """Compare two text frames of one value resource by record_id (vectorised)."""
    before = previous.drop_duplicates("record_id").set_index("record_id")
    after = current.drop_duplicates("record_id").set_index("record_id")
    added = after.index.difference(before.index)
    removed = before.index.difference(after.index)
    common = after.index.intersection(before.index)
    shared = [c for c in after.columns if c in before.columns]
    differs = before.loc[common, shared].ne(after.loc[common, shared])
    changed_mask = differs.any(axis=1)
    changed = common[changed_mask.to_numpy()]
    parts = {
        "added": after.loc[added],
        "removed": before.loc[removed],
        "changed": after.loc[changed],
    }
    column_counts = differs[changed_mask].sum()
    return ValueChanges(
        added=len(added),
        removed=len(removed),
        changed=len(changed),
        unchanged=len(common) - len(changed),
        by_trait=_nested_counts(parts, "trait_id"),
        by_source=_nested_counts(parts, "source_id"),
        changed_columns={str(k): int(v) for k, v in column_counts.items() if v},
        added_ids=_listed(added),
        removed_ids=_listed(removed),
        changed_ids=_listed(changed),
        ids_truncated=max(len(added), len(removed), len(changed)) > MAX_LISTED_IDS,
    )


def _review_pairs(frame: pd.DataFrame | None) -> set[tuple[str, str]]:
    if frame is None or frame.empty or "status" not in frame.columns:
        return set()
    waiting = frame[frame["status"] == "review"]
    return set(zip(waiting["source_id"], waiting["name"], strict=True))


def compare_packages(
    previous: Path | None,
    current: Path,
    *,
    built_at: str,
    reused_sources: tuple[str, ...] = (),
    full: bool = False,
) -> ChangeReport:
    """Compare the package in `current` with the one in `previous` (None: first build)."""
    new = read_package_tables(current)
    old: dict[str, pd.DataFrame] = {}
    problem = None
    if previous is not None:
        try:
            old = read_package_tables(previous)
        except (OSError, ValueError, KeyError) as error:  # damaged or foreign: report, go on
            problem = f"{type(error).__name__}: {error}"
            old = {}
    empty = pd.DataFrame(columns=["record_id", "trait_id", "source_id"])
    values = {
        name: compare_values(old.get(name, empty), new.get(name, empty))
        for name in _VALUE_RESOURCES
    }
    old_sources = _sha_by_source(old.get("sources"))
    new_sources = _sha_by_source(new.get("sources"))
    review_now = _review_pairs(new.get("name_matches"))
    return ChangeReport(
        built_at=built_at,
        full=full,
        previous_found=previous is not None and problem is None,
        previous_problem=problem,
        sources_added=tuple(sorted(set(new_sources) - set(old_sources))),
        sources_removed=tuple(sorted(set(old_sources) - set(new_sources))),
        sources_changed=tuple(
            sorted(s for s in new_sources if s in old_sources and old_sources[s] != new_sources[s])
        ),
        sources_unchanged=tuple(
            sorted(s for s in new_sources if old_sources.get(s) == new_sources[s])
        ),
        sources_reused=tuple(sorted(reused_sources)),
        values=values,
        names_needing_review=tuple(sorted(review_now)),
        new_names_needing_review=tuple(sorted(review_now - _review_pairs(old.get("name_matches")))),
        rejects_before=_count_by(old.get("rejects", pd.DataFrame()), "reason"),
        rejects_after=_count_by(new.get("rejects", pd.DataFrame()), "reason"),
    )


def _sha_by_source(frame: pd.DataFrame | None) -> dict[str, str]:
    if frame is None or frame.empty:
        return {}
    return dict(zip(frame["source_id"], frame["sha256"], strict=True))


def _names(items: tuple[str, ...]) -> str:
    return ", ".join(items) if items else "none"


def report_text(report: ChangeReport) -> list[str]:
    """The change report as lines of plain text (for the `.changes.txt` file and the terminal)."""
    if report.previous_problem:
        since = f"previous package unreadable ({report.previous_problem}); all counted as new"
    elif report.previous_found:
        since = "compared with the previous package"
    else:
        since = "first build: no previous package"
    lines = [f"changes (built {report.built_at}; {since})"]
    lines.append(
        f"sources: added {_names(report.sources_added)}; removed {_names(report.sources_removed)}; "
        f"changed {_names(report.sources_changed)}; unchanged {len(report.sources_unchanged)}"
    )
    if report.full:
        lines.append("every source read again (full rebuild)")
    else:
        lines.append(
            f"reused from the previous build without reading: {_names(report.sources_reused)}"
        )
    for name, change in report.values.items():
        label = name.replace("_", " ")
        if not change.any:
            lines.append(f"{label}: no change ({change.unchanged} unchanged)")
            continue
        lines.append(
            f"{label}: {change.added} added, {change.removed} removed, {change.changed} changed, "
            f"{change.unchanged} unchanged"
        )
        for trait, counts in change.by_trait.items():
            parts = [f"{counts[k]} {k}" for k in ("added", "removed", "changed") if counts[k]]
            lines.append(f"  {trait}: {', '.join(parts)}")
    new_names = report.new_names_needing_review
    lines.append(f"names needing review: {len(report.names_needing_review)} ({len(new_names)} new)")
    lines += [f"  new: {source}: {name}" for source, name in new_names[:20]]
    difference = report.rejects_difference
    if difference:
        lines.append("rejects by reason (before -> after):")
        lines += [
            f"  {reason}: {report.rejects_before.get(reason, 0)} -> {report.rejects_after.get(reason, 0)}"
            for reason in difference
        ]
    else:
        lines.append(f"rejects: unchanged ({sum(report.rejects_after.values())} cells)")
    return lines
