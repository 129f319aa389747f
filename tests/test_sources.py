"""Source adapters: the same table read from CSV, TSV and Parquet gives the same trait cells."""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from harmonize.errors import ConfigError, SourceReadError
from harmonize.project import Limits, LongColumns, Mapping, ReadOptions, TraitColumn
from harmonize.sources import iter_cells, read_header

ROWS = [("Sorex minutus", "A1", "4,1", "55"), ("Sorex araneus", "A2", "NA", "70")]


def mapping_for(path: Path, fmt: str, **changes) -> Mapping:
    base = dict(
        source="s",
        mapping_file=path.with_suffix(".yaml"),
        path=path,
        format=fmt,
        level="individual",
        layout="wide",
        read=ReadOptions(decimal=","),
        context={"taxon": "species", "individual": "id"},
        traits=(TraitColumn("mass", unit="g"),),
    )
    base.update(changes)
    return Mapping(**base)


def cells_of(mapping: Mapping, limits: Limits | None = None) -> pd.DataFrame:
    return pd.concat([b.cells for b in iter_cells(mapping, limits)], ignore_index=True)


def write_delimited(path: Path, sep: str, encoding: str = "utf-8") -> None:
    quote = (
        (lambda f: f'"{f}"') if sep == "," else (lambda f: f)
    )  # a decimal comma must be quoted in a comma CSV
    lines = [sep.join(["species", "id", "mass", "svl"])] + [
        sep.join(quote(f) for f in r) for r in ROWS
    ]
    path.write_bytes(("\n".join(lines) + "\n").encode(encoding))


@pytest.mark.parametrize(
    ("name", "fmt", "sep", "encoding"),
    [
        ("t.csv", "csv", ";", "latin-1"),
        ("t.tsv", "tsv", "\t", "utf-8"),
        ("t.csv", "csv", ",", "utf-8"),
    ],
)
def test_delimited_wide_table_becomes_cells(tmp_path: Path, name, fmt, sep, encoding) -> None:
    path = tmp_path / name
    write_delimited(path, sep, encoding)
    cells = cells_of(
        mapping_for(path, fmt, read=ReadOptions(delimiter=sep, decimal=",", encoding=encoding))
    )
    # 2 rows x 2 trait columns (mass declared, svl unclaimed and so matched by name)
    assert len(cells) == 4
    mass = cells[cells["column"] == "mass"].sort_values("source_row")
    assert mass["raw_value"].tolist() == ["4,1", "NA"]  # raw text is kept exactly
    assert mass["raw_unit"].tolist() == ["g", "g"]
    assert mass["source_row"].tolist() == [1, 2]
    assert set(cells["taxon_verbatim"]) == {"Sorex minutus", "Sorex araneus"}


def test_parquet_numbers_become_text_cells(tmp_path: Path) -> None:
    path = tmp_path / "t.parquet"
    table = pa.table(
        {
            "species": ["Sorex minutus", None],
            "id": ["A1", "A2"],
            "mass": [4.1, None],
            "svl": [55, 70],
        }
    )
    pq.write_table(table, path)
    cells = cells_of(mapping_for(path, "parquet", read=ReadOptions()))
    mass = cells[cells["column"] == "mass"].sort_values("source_row")
    assert mass["raw_value"].tolist() == ["4.1", ""]
    assert cells["taxon_verbatim"].isna().sum() == 2  # the missing species, once per trait column


@pytest.mark.parametrize("zone", [None, "UTC", "Europe/Berlin", "America/New_York"])
def test_parquet_timestamps_become_iso_8601_text(tmp_path: Path, zone) -> None:
    # ISO 8601 extended format (date 'T' time, offset '+hh:mm' or 'Z'), as Darwin Core's
    # eventDate asks; Python's datetime.fromisoformat, an independent reader, must give back
    # the same instant.
    moments = [
        datetime(2024, 5, 1, 10, 0, 0, 123000),
        datetime(2024, 5, 2),
        datetime(1999, 12, 31, 23, 59, 59, 1),
    ]
    kind = pa.timestamp("us", tz=zone)
    stamps = pa.array(moments, kind)
    path = tmp_path / "t.parquet"
    table = {"species": ["Sorex minutus"] * 3, "id": ["A1", "A2", "A3"], "mass": [4.1, 4.2, 4.3]}
    pq.write_table(pa.table({**table, "caught": stamps}), path)
    mapping = mapping_for(
        path, "parquet", read=ReadOptions(), context={"taxon": "species", "date": "caught"}
    )
    cells = cells_of(mapping)
    texts = cells[cells["column"] == "mass"].sort_values("source_row")["date"].tolist()
    assert all("T" in t and " " not in t for t in texts)
    if zone == "UTC":
        assert all(t.endswith("Z") for t in texts)
    back = [datetime.fromisoformat(t.replace("Z", "+00:00")) for t in texts]
    expected = stamps.to_pylist()
    assert back == expected
    assert ".000" not in texts[1]  # no zero digits after the second


def test_long_table_keeps_rows(tmp_path: Path) -> None:
    path = tmp_path / "long.csv"
    path.write_text(
        "species,trait,value,unit\nSorex minutus,mass,4.1,g\nSorex minutus,SVL,55,mm\n",
        encoding="utf-8",
    )
    mapping = mapping_for(
        path, "csv", layout="long", traits=(), read=ReadOptions(), context={"taxon": "species"},
        columns=LongColumns(trait="trait", value="value", unit="unit"),
    )  # fmt: skip
    cells = cells_of(mapping)
    assert cells["original_name"].tolist() == ["mass", "SVL"]
    assert cells["raw_unit"].tolist() == ["g", "mm"]
    assert cells["column"].tolist() == ["value", "value"]


def test_batches_number_rows_continuously(tmp_path: Path) -> None:
    path = tmp_path / "many.csv"
    path.write_text(
        "species,mass\n" + "".join(f"Sorex minutus,{i}\n" for i in range(25)), encoding="utf-8"
    )
    mapping = mapping_for(path, "csv", read=ReadOptions(), context={"taxon": "species"})
    batches = list(iter_cells(mapping, Limits(batch_rows=10)))
    rows = pd.concat([b.cells for b in batches])["source_row"].tolist()
    assert rows == list(range(1, 26))
    assert sum(b.rows for b in batches) == 25


def test_ragged_row_is_reported_with_its_row(tmp_path: Path) -> None:
    path = tmp_path / "ragged.csv"
    path.write_text("species,id,mass\nA b,1,2\nA b,2,3,EXTRA\n", encoding="utf-8")
    with pytest.raises(SourceReadError) as caught:
        cells_of(mapping_for(path, "csv", read=ReadOptions(), traits=()))
    assert caught.value.row == 2
    assert "ragged.csv" in str(caught.value)


def test_wrong_encoding_names_the_fix(tmp_path: Path) -> None:
    path = tmp_path / "latin.csv"
    path.write_bytes("species,id,mass\nPrà,1,2\n".encode("latin-1"))
    with pytest.raises(SourceReadError, match="encoding"):
        cells_of(mapping_for(path, "csv", read=ReadOptions(), traits=()))


def test_missing_declared_column_suggests_the_closest(tmp_path: Path) -> None:
    path = tmp_path / "t.csv"
    write_delimited(path, ",")
    mapping = mapping_for(path, "csv", read=ReadOptions(), context={"taxon": "specie"})
    with pytest.raises(ConfigError) as caught:
        cells_of(mapping)
    assert caught.value.column == "specie"
    assert "did you mean 'species'" in str(caught.value)


def test_duplicate_header_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "dup.csv"
    path.write_text("species,mass,mass\nA b,1,2\n", encoding="utf-8")
    with pytest.raises(SourceReadError, match="appears twice"):
        read_header(mapping_for(path, "csv", read=ReadOptions()))


def test_an_error_naming_a_header_with_a_line_break_stays_one_line(tmp_path: Path) -> None:
    # found by tests/test_properties.py: a quoted header name may hold a line break, and the
    # error naming it must still be one line (the break written as \n)
    path = tmp_path / "dup.csv"
    path.write_text('species,"0\n0","0\n0"\n', encoding="utf-8")
    with pytest.raises(SourceReadError) as caught:
        read_header(mapping_for(path, "csv", read=ReadOptions()))
    assert "\n" not in str(caught.value)
    assert "column '0\\n0' appears twice" in str(caught.value)


def test_file_size_limit(tmp_path: Path) -> None:
    path = tmp_path / "t.csv"
    write_delimited(path, ",")
    with pytest.raises(SourceReadError, match="above the limit"):
        cells_of(mapping_for(path, "csv", read=ReadOptions()), Limits(max_file_bytes=10))


def test_not_parquet_is_a_read_error(tmp_path: Path) -> None:
    path = tmp_path / "fake.parquet"
    path.write_text("this is not parquet", encoding="utf-8")
    with pytest.raises(SourceReadError, match="Parquet"):
        cells_of(mapping_for(path, "parquet", read=ReadOptions(), traits=(), context={}))
