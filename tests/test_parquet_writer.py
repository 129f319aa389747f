"""The package's Parquet writer: the bytes do not depend on how rows arrive (in pieces, as
coded text or as sliced text), and each column gets the encoding chosen for it.

Encoding names and page layout are those of the Apache Parquet format specification
("Encodings", "Column chunks"); pyarrow reads the files back as the independent check.
"""

from __future__ import annotations

import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from harmonize import tables
from harmonize.package import ResourceWriter, prepare_table


def _values(trait_ids: list[str], written: list[str]) -> tuple[pa.Table, list[str]]:
    """An individual-values table of distinct 16-digit ids, rising row numbers, coded trait
    ids and the given values as written; with its ids."""
    rows = len(trait_ids)
    ids = [f"{i * 2654435761 % 2**64:016x}" for i in range(rows)]
    table = pa.table(
        {
            "record_id": ids,
            "source_id": ["s"] * rows,
            "source_row": list(range(1, rows + 1)),
            "trait_id": pc.dictionary_encode(pa.array(trait_ids)),
            "original_value": written,
        }
    )
    return prepare_table(table, tables.INDIVIDUAL_VALUES), ids


def test_parquet_bytes_do_not_depend_on_how_values_arrive(tmp_path):
    # A row group is written from its pieces joined, so pieces of any size give the same file.
    # Written piece by piece, columns of many distinct texts (ids, values as written: more
    # than a dictionary page holds) came out in different pages.
    rows = 140_000
    written = [f"{(i * 7919 % 100_003) / 7:.{i % 5}f}" for i in range(rows)]
    table, ids = _values(["body_mass"] * rows, written)
    written = {}
    for piece in (rows, 7_001):
        writer = ResourceWriter(tables.INDIVIDUAL_VALUES, tmp_path, "parquet")
        for start in range(0, rows, piece):
            writer.write(table.slice(start, piece))
        writer.close()
        written[piece] = (tmp_path / "individual_values.parquet").read_bytes()
    assert written[rows] == written[7_001]
    assert pq.read_table(tmp_path / "individual_values.parquet")["record_id"].to_pylist() == ids


def test_coded_text_is_written_as_its_decoded_text_would_be(tmp_path):
    # Coded columns (trait ids, units, roles, methods, flags) reach the Parquet writer as their
    # dictionaries instead of being decoded and hashed again. The file must be the one the
    # decoded text gives: pieces with their own dictionaries, codes of a missing text, a text
    # under two codes, unused texts and missing codes included. Readers get text columns.
    rows = 3_000
    units = ["g", "mm", None, "g", "degC", "unused"]  # 'g' twice; a missing text
    codes = [(i * 7) % 5 for i in range(rows)]  # never code 5 ('unused')
    texts = [units[c] for c in codes]
    texts[10] = None
    coded = pa.DictionaryArray.from_arrays(
        pa.array([None if i == 10 else c for i, c in enumerate(codes)], pa.int32()), units
    )
    other = pc.dictionary_encode(pa.array(list(reversed(texts))))  # another dictionary order

    def frame(unit, role) -> pa.Table:
        return prepare_table(
            pa.table(
                {
                    "record_id": [f"r{i}" for i in range(rows)],
                    "source_id": ["s"] * rows,
                    "source_row": list(range(1, rows + 1)),
                    "unit": unit,
                    "original_unit": unit,
                    "role": role,
                }
            ),
            tables.INDIVIDUAL_VALUES,
        )

    roles = ["parameter", "forcing"] * (rows // 2)
    as_coded = [frame(coded, pc.dictionary_encode(pa.array(roles))), frame(other, roles)]
    as_text = [frame(pa.array(texts), roles), frame(pa.array(list(reversed(texts))), roles)]
    written = {}
    for name, parts in (("coded", as_coded), ("text", as_text)):
        writer = ResourceWriter(tables.INDIVIDUAL_VALUES, tmp_path, "parquet")
        for part in parts:
            for start in range(0, rows, 1_000):  # several pieces per row group
                writer.write(part.slice(start, 1_000))
        writer.close()
        written[name] = (tmp_path / "individual_values.parquet").read_bytes()
    assert written["coded"] == written["text"]
    back = pq.read_table(tmp_path / "individual_values.parquet")
    assert back.schema.field("unit").type == pa.string()
    expected = [None if t in ("", None) else t for t in texts]
    assert back["unit"].to_pylist() == expected + list(reversed(expected))


def test_text_sliced_from_a_large_column_is_written_as_it_reads(tmp_path):
    # pandas holds text as large_string; a slice of a column of over 2 GiB (20 million rejects)
    # kept offsets past 2**31 and its cast to string failed. Small here: the slice must still
    # come out as its own rows.
    rows = 300
    frame = tables.REJECTS.empty_frame().reindex(range(rows))
    frame["source_id"] = "s"
    frame["source_row"] = range(1, rows + 1)
    frame["column"] = pd.array(
        [f"c{i}" for i in range(rows)], dtype=pd.ArrowDtype(pa.large_string())
    )
    frame["reason"] = "not-a-number"
    frame["message"] = "ä message"
    writer = ResourceWriter(tables.REJECTS, tmp_path, "parquet")
    writer.write(frame.iloc[250:])
    writer.close()
    written = pq.read_table(tmp_path / "rejects.parquet")
    assert written["column"].to_pylist() == [f"c{i}" for i in range(250, rows)]
    assert written.schema.field("column").type == pa.string()


def test_parquet_dictionaries_stay_small_and_row_numbers_are_delta_encoded(tmp_path):
    # Columns of few distinct texts are dictionary-encoded; a column of mostly distinct texts
    # gives up its dictionary once the page reaches the writer's limit instead of Arrow's 1 MiB.
    # Record ids never take a dictionary, and rising row numbers are delta-encoded; the values
    # read back unchanged. (Encoding names: Apache Parquet format specification, Encodings.)
    rows = 100_000
    written = [f"{i * 0.37:.2f} g" for i in range(rows)]
    table, ids = _values(["body_mass", "tail_length"] * (rows // 2), written)
    writer = ResourceWriter(tables.INDIVIDUAL_VALUES, tmp_path, "parquet")
    writer.write(table)
    writer.close()
    path = tmp_path / "individual_values.parquet"
    group = pq.ParquetFile(path).metadata.row_group(0)
    chunks = {group.column(i).path_in_schema: group.column(i) for i in range(group.num_columns)}

    def dictionary_page_bytes(name: str) -> int:
        chunk = chunks[name]
        assert chunk.has_dictionary_page
        # the dictionary page's size in the file (compressed, with its header)
        return chunk.data_page_offset - chunk.dictionary_page_offset

    assert "PLAIN" in chunks["original_value"].encodings  # fell back to plain pages
    assert dictionary_page_bytes("original_value") < 100_000  # < Arrow's 1 MiB default
    assert "RLE_DICTIONARY" in chunks["trait_id"].encodings
    assert dictionary_page_bytes("trait_id") < 200
    assert not chunks["record_id"].has_dictionary_page
    assert "DELTA_LENGTH_BYTE_ARRAY" in chunks["record_id"].encodings
    assert not chunks["source_row"].has_dictionary_page
    assert "DELTA_BINARY_PACKED" in chunks["source_row"].encodings
    # 100,000 consecutive numbers as deltas of 1: far below 8 bytes a row
    assert chunks["source_row"].total_compressed_size < rows
    back = pq.read_table(path)
    assert back["record_id"].to_pylist() == ids
    assert back["source_row"].to_pylist() == list(range(1, rows + 1))
    assert back.schema.field("source_row").type == pa.int64()
    assert back["original_value"].to_pylist() == written
