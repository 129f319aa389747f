"""Coded text columns (`harmonize.text_columns`) and record ids hashed from Arrow.

The fast paths are checked against the plain way of doing the same thing: numpy/pandas on
Python objects, pyarrow's own conversion, and pandas' `hash_pandas_object` for record ids.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest
from hypothesis import given
from hypothesis import strategies as st

from harmonize.summaries import RECORD_ID_COLUMNS, record_ids, record_ids_of_table
from harmonize.text_columns import (
    Coded,
    choose,
    column_to_arrow,
    concat,
    join_per_row,
    objects_to_arrow,
    used_codes,
)

TEXTS = st.one_of(st.none(), st.sampled_from(["", "a", " a", "Sorex minutus", "µm", "é"]))


def _forms(values: list[str | None]) -> dict[str, object]:
    """The same column as each reader hands it over."""
    return {
        "objects": np.array(values, dtype=object),
        "arrow-backed": pd.Series(values, dtype="str"),
        "categorical": pd.Series(pd.Categorical(values)),
        "arrow": pa.array(values, type=pa.string()),
    }


@given(st.lists(TEXTS, max_size=40))
def test_codes_give_back_the_cells_in_every_form(values):
    for form, column in _forms(values).items():
        coded = Coded.of(column)
        assert list(coded.values()) == values, form
        assert coded.arrow().to_pylist() == values, form
        back = pd.Series(coded.categorical(), dtype=object)
        assert [None if pd.isna(v) else v for v in back] == values, form


@given(st.lists(st.tuples(TEXTS, TEXTS, TEXTS, st.booleans(), st.booleans()), max_size=40))
def test_choose_is_numpy_select_on_codes(rows):
    a, b, default = ([r[i] for r in rows] for i in range(3))
    first = np.array([r[3] for r in rows], dtype=bool)
    second = np.array([r[4] for r in rows], dtype=bool)
    chosen = choose(
        [first, second], [Coded.of(pa.array(a, pa.string())), Coded.of(np.array(b, dtype=object))],
        Coded.of(pd.Series(default, dtype="str")),
    )  # fmt: skip
    expected = np.select(
        [first, second],
        [np.array(a, dtype=object), np.array(b, dtype=object)],
        np.array(default, dtype=object),
    )
    assert list(chosen.values()) == list(expected)


def test_concat_and_tile_keep_cells_in_order():
    left, right = Coded.of(pa.array(["x", None])), Coded.constant("u", 3)
    assert list(concat([left, right]).values()) == ["x", None, "u", "u", "u"]
    assert left.tile(2).arrow().to_pylist() == ["x", None, "x", None]


def test_a_slice_converts_only_the_texts_it_uses():
    coded = Coded.of(np.array([f"id-{i}" for i in range(1000)], dtype=object))
    rows = np.array([999, 3, 3])
    assert coded.take(rows).arrow().to_pylist() == ["id-999", "id-3", "id-3"]
    dictionary = coded.take(rows).dictionary()
    assert dictionary.dictionary.to_pylist() == ["id-3", "id-999"]
    assert dictionary.to_pylist() == ["id-999", "id-3", "id-3"]
    from_arrow = Coded.of(pa.array([f"id-{i}" for i in range(1000)])).take(rows).dictionary()
    assert from_arrow.dictionary.to_pylist() == ["id-3", "id-999"]
    assert from_arrow.to_pylist() == ["id-999", "id-3", "id-3"]


@pytest.mark.parametrize(
    "values",
    [["", None, "q", 1.5, np.nan], [None, None], [], ["a"] * 5],
)
def test_objects_to_arrow_matches_pyarrow(values):
    array = np.array(values, dtype=object)
    texts = [
        None if v is None or (isinstance(v, float) and np.isnan(v)) else str(v) for v in values
    ]
    assert objects_to_arrow(array).to_pylist() == texts
    assert column_to_arrow(pd.Series(array, dtype=object)).to_pylist() == texts


def _value_rows(count: int, seed: int) -> pd.DataFrame:
    """Output-like rows (INVENTED): text with gaps, row numbers, temperatures with NaN."""
    rng = np.random.default_rng(seed)
    pick = lambda choices: np.array(choices, dtype=object)[rng.integers(0, len(choices), count)]  # noqa: E731
    return pd.DataFrame(
        {
            "source_row": np.arange(1, count + 1, dtype=np.int64),
            "column": pick(["value", "mass (g)"]),
            "trait_id": pick(["body_mass_wet", "tail_length", None]),
            "taxon_verbatim": pick(["Sorex minutus", "Sorex araneus L.", None]),
            "sex": pick(["f", "m", None]),
            "life_stage": pick([None]),
            "site": pick(["north", "", "south"]),
            "date": pick(["2024-05-01", None]),
            "measurement_temperature": rng.choice([np.nan, 20.0, 25.5, -1e-3], count),
        }
    )


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_record_ids_from_arrow_equal_pandas_hashing(seed):
    # Reference: pandas' hash_pandas_object on the rows' text, the ids every
    # earlier build wrote; the Arrow path must give the very same ids.
    frame = _value_rows(500, seed)
    table = pa.Table.from_pandas(frame, preserve_index=False)
    basis = frame[list(RECORD_ID_COLUMNS)].astype(str)
    basis.insert(0, "source_id", "west-shrews")
    expected = [f"{h:016x}" for h in pd.util.hash_pandas_object(basis, index=False)]
    assert record_ids_of_table(table, "west-shrews").to_pylist() == expected
    assert list(record_ids(frame, "west-shrews")) == expected  # the pandas frames' route
    # the assembled batches' route: text as dictionary arrays (codes into texts, missing texts
    # in the dictionary)
    coded = {
        name: Coded.of(frame[name].to_numpy(dtype=object)).dictionary()
        for name in RECORD_ID_COLUMNS
        if frame[name].dtype == object
    }
    dictionaries = table.drop_columns(list(coded))
    for name, array in coded.items():
        dictionaries = dictionaries.append_column(name, array)
    assert any(array.dictionary.null_count for array in coded.values())
    assert record_ids_of_table(dictionaries, "west-shrews").to_pylist() == expected
    assert len(set(expected)) == len(frame)  # the row number alone makes each id distinct


@given(st.lists(st.integers(min_value=0, max_value=6), max_size=60))
def test_used_codes_are_numpy_unique(codes):
    # reference: numpy's own unique with inverse
    codes = np.array(codes, dtype=np.int32)
    used, inverse = used_codes(codes, 7)
    expected_used, expected_inverse = np.unique(codes, return_inverse=True)
    assert used.tolist() == expected_used.tolist()
    assert inverse.tolist() == expected_inverse.reshape(-1).tolist()


FLAGS = st.sampled_from(["", "unit-assumed", "sd-estimated", None])


@given(
    st.lists(st.tuples(FLAGS, FLAGS, st.booleans()), max_size=40),
)
def test_join_per_row_equals_joining_each_row(rows):
    # reference: the plain per-row join the vectorised one replaces
    first = np.array([r[0] for r in rows], dtype=object)
    second = Coded.of(np.array([r[1] for r in rows], dtype=object))
    mask = np.array([r[2] for r in rows], dtype=bool)
    joined = join_per_row(first, second, (mask, "qualifier:<"))
    expected = [
        ";".join(t for t in (a, b, "qualifier:<" if m else "") if t) or None for a, b, m in rows
    ]
    assert list(joined.values()) == expected
