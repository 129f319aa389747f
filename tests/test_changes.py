"""The change report's file-to-file comparison (`compare_value_files`, used for large packages)
must say what the text-frame comparison (`compare_values`) says, for any pair of tables: ids
in 16 hex digits (compared as numbers) or not (compared as text, upper-case twins included),
repeated ids, missing cells, NaN, added, removed and changed rows. Hypothesis generates the
pairs."""

from __future__ import annotations

from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
from hypothesis import given, settings
from hypothesis import strategies as st

from harmonize.changes import compare_value_files, compare_values

HEX_IDS = [f"{i * 0x9E3779B97F4A7C15 % 2**64:016x}" for i in range(1, 13)]
TEXT_IDS = ["r1", "r2", "r3", "x", "y", "long id 7", "8", "9", "10", "11", "12", "13"]
# hex ids with upper-case twins: as numbers they would be one id, as text they are two
TWIN_IDS = [*HEX_IDS[:6], *(i.upper() for i in HEX_IDS[:6])]

row = st.tuples(
    st.integers(0, 11),  # which id
    st.sampled_from(["body_mass_wet", "tail_length", None]),
    st.sampled_from([1.5, 2.0, float("nan"), None]),
    st.sampled_from(["a", "b", "", None]),
)


def _write(path: Path, rows: list, ids: list[str]) -> Path:
    table = pa.table(
        {
            "record_id": pa.array([ids[r[0]] for r in rows], pa.string()),
            "trait_id": pa.array([r[1] for r in rows], pa.string()),
            "value": pa.array([r[2] for r in rows], pa.float64()),
            "flags": pa.array([r[3] for r in rows], pa.string()),
        }
    )
    pq.write_table(table, path)
    return path


def _as_text_frame(path: Path):
    # what `read_package_tables` makes of a Parquet resource
    frame = pq.read_table(path).to_pandas()
    return frame.astype("string").fillna("").astype(object)


@settings(max_examples=60, deadline=None)
@given(
    before=st.lists(row, max_size=14),
    after=st.lists(row, max_size=14),
    ids=st.sampled_from([HEX_IDS, TEXT_IDS, TWIN_IDS]),
)
def test_file_comparison_equals_the_frame_comparison(tmp_path_factory, before, after, ids):
    folder = tmp_path_factory.mktemp("pair")
    old = _write(folder / "old.parquet", before, ids)
    new = _write(folder / "new.parquet", after, ids)
    assert compare_value_files(old, new) == compare_values(_as_text_frame(old), _as_text_frame(new))


def test_first_build_counts_every_row_as_added(tmp_path):
    new = _write(
        tmp_path / "new.parquet", [(i, "tail_length", 1.5, "a") for i in range(12)], HEX_IDS
    )
    got = compare_value_files(None, new)
    assert (got.added, got.removed, got.changed, got.unchanged) == (12, 0, 0, 0)
    assert got.added_ids == tuple(sorted(HEX_IDS))
    assert got.by_trait == {"tail_length": {"added": 12, "removed": 0, "changed": 0}}
