"""Streaming builds: the streamed package equals the in-memory one, cells stay accounted for,
and the column-wise (pyarrow) validation every build runs finds planted key violations.

The large tables are made by `benchmarks/make_long_table.py` (seeded, INVENTED data) and read
with a small batch size so that many batches are exercised. Key semantics (a primary key is
unique, a foreign key must resolve, rows count the header as row 1) are those of the Table
Schema specification (specs.frictionlessdata.io/table-schema, "Primary Keys", "Foreign Keys");
where a package is small enough, the frictionless library — the reference implementation —
must report the same rows as our pyarrow checks. No timings here: speed lives in benchmarks/.
"""

from __future__ import annotations

import shutil
from collections import Counter
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import pytest
from hypothesis import given
from hypothesis import strategies as st

from harmonize import build, package, sources, tables
from harmonize.arrow_validate import (
    ResourceCheck,
    accounting_problems,
    check_package_arrow,
    hex_key_numbers,
)
from harmonize.build import build_project, build_tables
from harmonize.changes import compare_values, read_package_tables
from harmonize.cli.render import summary_lines
from harmonize.ingest import RejectSink
from harmonize.package import (
    PackageInfo,
    schema_descriptor,
    write_package,
)
from harmonize.package_validate import validate_package
from harmonize.project import Limits, load_project, single_file_project

REPO = Path(__file__).resolve().parents[1]
ROWS = 60_000
BATCH_ROWS = 4_000
# The large-package branch (no values kept in memory, no frictionless, no change report) is
# taken above this many values; lowered from SMALL_PACKAGE_ROWS so the tests stay quick.
SMALL_ROWS_FOR_TESTS = 20_000
INFO = PackageInfo(
    name="scale-test",
    title="Scale test (invented data)",
    description="INVENTED data for tests.",
    version="0.0.0",
    created=None,
    vocabulary_version="v",
    tool_version="t",
)


def _with_batch_rows(root: Path, rows: int) -> None:
    project_file = root / "harmonize.yaml"
    text = project_file.read_text(encoding="utf-8")
    project_file.write_text(text + f"limits: {{batch_rows: {rows}}}\n", encoding="utf-8")


@pytest.fixture
def large_is_small(monkeypatch):
    monkeypatch.setattr(build, "SMALL_PACKAGE_ROWS", SMALL_ROWS_FOR_TESTS)


@pytest.fixture(scope="module")
def long_project(tmp_path_factory, long_table_generator) -> Path:
    root = tmp_path_factory.mktemp("scale") / "long"
    long_table_generator.write_project(root, ROWS, seed=7, fmt="parquet")
    _with_batch_rows(root, BATCH_ROWS)
    return root


@pytest.fixture(scope="module")
def in_memory(long_project):
    """The same project's tables built in memory (every value held at once)."""
    return build_tables(load_project(long_project))


def _files(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


@pytest.mark.parametrize("fmt", ["parquet", "csv"])
def test_streamed_build_writes_the_same_bytes_as_the_in_memory_tables(
    long_project, in_memory, tmp_path, fmt, large_is_small
):
    frames, accounts, _ = in_memory
    root = long_project
    if fmt != "parquet":  # the generated project writes Parquet; a copy writes the other format
        root = tmp_path / "project"
        shutil.copytree(long_project, root, ignore=shutil.ignore_patterns("out", ".harmonize-*"))
        text = (root / "harmonize.yaml").read_text(encoding="utf-8")
        (root / "harmonize.yaml").write_text(
            text.replace("format: parquet}", f"format: {fmt}}}"), encoding="utf-8"
        )
    project = load_project(root)
    assert project.output_format == fmt
    streamed = build_project(
        project, output=tmp_path / "streamed", incremental=False, frictionless=False
    )
    write_package(frames, tmp_path / "memory", streamed_info(streamed.output), fmt=fmt)
    assert streamed.individual_values == len(frames["individual_values"]) > SMALL_ROWS_FOR_TESTS
    assert _files(streamed.output) == _files(tmp_path / "memory")
    assert [a.cells for a in streamed.accounts] == [a.cells for a in accounts]


def streamed_info(folder: Path) -> PackageInfo:
    """The package-level metadata a build wrote, so both packages differ only by their rows."""
    import json

    descriptor = json.loads((folder / "datapackage.json").read_text(encoding="utf-8"))
    return PackageInfo(
        name=descriptor["name"],
        title=descriptor["title"],
        description=descriptor["description"],
        version=descriptor["version"],
        created=None,
        vocabulary_version=descriptor["x-harmonize"]["vocabulary_version"],
        tool_version=descriptor["x-harmonize"]["tool_version"],
    )


def test_large_build_accounts_for_every_row_and_keeps_values_out_of_memory(
    long_project, tmp_path, large_is_small
):
    report = build_project(load_project(long_project), output=tmp_path / "out", incremental=False)
    assert report.balanced
    assert not report.frictionless_checked  # large package: column-wise checks only
    assert report.changes is None and report.changes_skipped
    assert report.tables["individual_values"].empty  # streamed to disk, not held
    (account,) = report.accounts
    assert account.rows_read == ROWS  # a long table: one cell per row
    assert accounting_problems(report.output) == []
    written = pq.read_table(report.output / "individual_values.parquet", columns=["source_row"])
    rows = written.column("source_row").to_numpy()
    assert len(rows) == account.values_written
    assert (rows[1:] > rows[:-1]).all()  # source-row order, each long row once


def test_rejects_go_to_the_package_batch_by_batch(long_project, in_memory, tmp_path, monkeypatch):
    # An individual-level source's rejects are written as its batches come and not held: 5
    # million invented rows that were almost all rejected peaked at 3.1 GiB while a build held
    # its rejects until the end, 932-950 MiB since.
    monkeypatch.setattr(build, "SMALL_PACKAGE_ROWS", 100)  # far fewer than the rejects
    taken = []
    original = RejectSink.add

    def recording(self, frame, source_id):
        taken.append(len(frame))
        return original(self, frame, source_id)

    monkeypatch.setattr(RejectSink, "add", recording)
    report = build_project(load_project(long_project), output=tmp_path / "out", incremental=False)
    expected = in_memory[0]["rejects"]
    assert sum(taken) == len(expected) and len([n for n in taken if n]) > 1
    assert max(taken) <= BATCH_ROWS  # one batch's rejects at a time (a long row is one cell)
    assert report.tables["rejects"].empty  # too many to keep in memory
    assert report.rejects_by_reason == dict(sorted(Counter(expected["reason"]).items()))
    written = pq.read_table(tmp_path / "out" / "rejects.parquet").to_pandas()
    key = ["source_row", "column", "reason", "message"]
    assert written[key].astype(str).values.tolist() == expected[key].astype(str).values.tolist()
    assert report.accounts[0].cells_rejected == len(expected) and report.balanced


def test_wide_sources_read_in_tiny_batches_give_the_same_package(tmp_path):
    """Wide tables give several cells per row; streamed, they must keep the in-memory order."""
    root = tmp_path / "demo"
    root.mkdir()
    shutil.copy(REPO / "harmonize.yaml", root / "harmonize.yaml")
    for folder in ("mappings", "demo_sources", "vocab"):
        shutil.copytree(REPO / folder, root / folder)
    _with_batch_rows(root, 7)
    project = load_project(root)
    report = build_project(project, output=tmp_path / "streamed", incremental=False)
    frames, _, _ = build_tables(project)
    write_package(frames, tmp_path / "memory", streamed_info(report.output), fmt="csv")
    assert _files(report.output) == _files(tmp_path / "memory")
    assert report.validation.valid and report.frictionless_checked


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
@pytest.mark.parametrize(("trait_columns", "rows_per_batch"), [(10, 100), (1, 1000), (40, 64)])
def test_a_wide_batch_holds_about_batch_rows_cells(tmp_path, suffix, trait_columns, rows_per_batch):
    # every trait column of a row is a cell: 262,144 rows of 100 trait columns at once took
    # 3 GiB at peak; the rows per batch are cut (to at least MIN_BATCH_ROWS = 64)
    rows = 2530
    table = {"species": ["Sorex minutus"] * rows}
    table |= {f"body mass {i} (g)": ["4.1"] * rows for i in range(trait_columns)}
    path = tmp_path / f"wide{suffix}"
    frame = pd.DataFrame(table)
    frame.to_csv(path, index=False) if suffix == ".csv" else frame.to_parquet(path)
    mapping = single_file_project(path, context={"taxon": "species"}).mappings[0]
    batches = list(sources.iter_cells(mapping, Limits(batch_rows=1000)))
    sizes = [b.rows for b in batches]
    assert sizes == [rows_per_batch] * (rows // rows_per_batch) + [rows % rows_per_batch]
    assert sum(len(b.cells) for b in batches) == rows * trait_columns


def test_rejects_count_towards_a_large_package(tmp_path, monkeypatch):
    # a source of millions of cells that are all rejected is no small package: frictionless
    # row by row and the in-memory change report over its rejects would take minutes
    monkeypatch.setattr(build, "SMALL_PACKAGE_ROWS", 50)
    rows = ["Sorex minutus,4.1"] * 10 + ["Sorex minutus,broken"] * 60
    path = tmp_path / "mostly-bad.csv"
    path.write_text("species,mass_g\n" + "\n".join(rows) + "\n", encoding="utf-8")
    project = single_file_project(path, output=tmp_path / "out", context={"taxon": "species"})
    report = build_project(project)
    assert report.individual_values == 10 and report.rejects_by_reason == {"not-a-number": 60}
    assert not report.frictionless_checked and report.changes_skipped and report.large
    assert report.validation.valid  # still checked column-wise
    # the summary says why there is no change report (it said "--no-changes", never given)
    assert "change report: skipped for a large package (--changes makes it)" in summary_lines(
        report
    )


# --- planted problems ------------------------------------------------------------------------


@pytest.fixture(scope="module")
def demo_frames():
    frames, _, _ = build_tables(load_project(REPO))
    return frames


def _planted(demo_frames) -> tuple[dict[str, pd.DataFrame], int, int]:
    frames = {name: frame.copy() for name, frame in demo_frames.items()}
    values = (
        frames["individual_values"]
        .sort_values(["source_id", "source_row"], kind="mergesort")
        .reset_index(drop=True)
    )
    duplicate_at, orphan_at = 5, 11
    values.loc[duplicate_at, "record_id"] = values.loc[duplicate_at - 1, "record_id"]
    values.loc[orphan_at, "trait_id"] = "no_such_trait"
    frames["individual_values"] = values
    # Table Schema rows count the header as row 1: data row i (0-based) is row i + 2
    return frames, duplicate_at + 2, orphan_at + 2


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_arrow_validation_finds_a_planted_duplicate_key_and_orphan(demo_frames, tmp_path, fmt):
    frames, duplicate_row, orphan_row = _planted(demo_frames)
    write_package(frames, tmp_path, INFO, fmt=fmt)
    result = check_package_arrow(tmp_path)
    assert not result.valid
    found = {(p.resource, p.type, p.row, p.field) for p in result.problems}
    assert found == {
        ("individual_values", "primary-key", duplicate_row, "record_id"),
        ("individual_values", "foreign-key", orphan_row, "trait_id"),
    }


def test_values_checked_as_written_give_the_problems_reading_back_gives(demo_frames, tmp_path):
    # A build checks a Parquet package's values as the writer writes them, then looks only at
    # the small tables; the problems (type, row, field) must be those of reading the file back.
    frames, duplicate_row, orphan_row = _planted(demo_frames)
    write_package(frames, tmp_path, INFO, fmt="parquet")
    read_back = check_package_arrow(tmp_path).problems
    check = ResourceCheck(
        {"name": "individual_values", "schema": schema_descriptor(tables.INDIVIDUAL_VALUES)}
    )
    for batch in pq.read_table(tmp_path / "individual_values.parquet").to_batches(7):
        check.add(batch)  # in pieces, as a streamed build hands them over
    streamed = check_package_arrow(tmp_path, streamed={"individual_values": check}).problems
    assert streamed == read_back
    assert {(p.type, p.row) for p in streamed} == {
        ("primary-key", duplicate_row),
        ("foreign-key", orphan_row),
    }
    written = pq.read_table(tmp_path / "individual_values.parquet")["source_id"].to_pylist()
    assert dict(check.source_rows) == dict(Counter(written))


def test_arrow_validation_agrees_with_frictionless_on_the_same_csv_package(demo_frames, tmp_path):
    frames, _, _ = _planted(demo_frames)
    write_package(frames, tmp_path, INFO, fmt="csv")
    ours = {(p.resource, p.type, p.row) for p in check_package_arrow(tmp_path).problems}
    reference = {(p.resource, p.type, p.row) for p in validate_package(tmp_path).problems}
    assert ours == reference and ours


def test_arrow_validation_passes_the_demo_package(demo_frames, tmp_path):
    write_package(demo_frames, tmp_path, INFO, fmt="csv")
    assert check_package_arrow(tmp_path).problems == ()
    assert validate_package(tmp_path).valid  # and the reference agrees


def test_accounting_check_notices_a_count_that_does_not_add_up(demo_frames, tmp_path):
    frames = {name: frame.copy() for name, frame in demo_frames.items()}
    sources = frames["sources"]
    individual = sources.index[sources["level"] == "individual"][0]
    sources.loc[individual, "values_written"] += 1  # one value claimed that was never written
    write_package(frames, tmp_path, INFO, fmt="parquet")
    problems = accounting_problems(tmp_path)
    named = sources.loc[individual, "source_id"]
    # cells no longer add up, and individual_values holds one row fewer than claimed
    assert len(problems) == 2
    assert all(named in p.message and p.resource == tables.SOURCES.name for p in problems)


def test_progress_reports_the_share_of_the_file_read(long_project, tmp_path):
    events = []
    build_project(
        load_project(long_project),
        output=tmp_path / "out",
        incremental=False,
        progress=lambda event, detail: events.append((event, detail)),
    )
    batches = [d for e, d in events if e == "batch"]
    assert len(batches) == ROWS // BATCH_ROWS
    fractions = [d["fraction"] for d in batches]
    assert fractions == sorted(fractions) and fractions[-1] == pytest.approx(1.0)
    assert [d["rows"] for d in batches][-1] == ROWS


@given(st.lists(st.integers(min_value=0, max_value=2**64 - 1), min_size=1, max_size=50))
def test_record_id_keys_are_read_as_the_numbers_they_write(numbers):
    # reference: Python's own int(text, 16); any other text is left to hashing (None)
    texts = [f"{n:016x}" for n in numbers]
    assert hex_key_numbers(pa.array(texts)).tolist() == [int(t, 16) for t in texts]
    assert hex_key_numbers(pa.array([*texts, "X" * 16])) is None
    assert hex_key_numbers(pa.array([*texts, None])) is None
    assert hex_key_numbers(pa.array([*texts, "abc"])) is None


def test_values_checked_as_dictionary_text_give_the_problems_plain_text_gives(
    demo_frames, tmp_path
):
    # A build hands the checker coded text (Arrow dictionary arrays) without decoding it; the
    # checks must report what they report on the same rows as plain text. Planted: a blank
    # required cell (a missing value, as Table Schema's default missingValues [""] says), a
    # role outside its enum, and the duplicate key and orphan of `_planted`.
    frames, duplicate_row, orphan_row = _planted(demo_frames)
    values = frames["individual_values"]
    values["role"] = values["role"].astype(object)
    values.loc[3, "original_name"] = ""
    values.loc[8, "role"] = "bogus"
    write_package(frames, tmp_path, INFO, fmt="parquet")
    plain = pq.read_table(tmp_path / "individual_values.parquet")
    descriptor = {
        "name": "individual_values",
        "schema": schema_descriptor(tables.INDIVIDUAL_VALUES),
    }
    checks = []
    for coded in (False, True):
        check = ResourceCheck(descriptor)
        for batch in plain.to_batches(7):
            table = pa.Table.from_batches([batch])
            if coded:
                for name in ("original_name", "role", "unit_origin", "match_method"):
                    at = table.schema.get_field_index(name)
                    column = table[name]
                    if name == "original_name":  # the blank as a text in the dictionary
                        column = pc.fill_null(column, "")
                    table = table.set_column(at, name, pc.dictionary_encode(column))
            check.add(table)
        checks.append(check_package_arrow(tmp_path, streamed={"individual_values": check}))
    as_text, as_codes = (c.problems for c in checks)
    assert as_codes == as_text
    assert {(p.type, p.row, p.field) for p in as_codes} == {
        ("constraint-error", 5, "original_name"),
        ("constraint-error", 10, "role"),
        ("primary-key", duplicate_row, "record_id"),
        ("foreign-key", orphan_row, "trait_id"),
    }


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_in_memory_tables_are_written_in_slices(demo_frames, tmp_path, monkeypatch, fmt):
    # 20 million rejects written whole failed ("input array too large": one text column over
    # 2 GiB) after peaking at 15 GiB; a writer converts a frame WRITE_SLICE_ROWS rows at a
    # time, and the bytes are those of one whole write
    info = INFO
    write_package(demo_frames, tmp_path / "whole", info, fmt=fmt)
    sizes = []
    convert = "csv_text" if fmt == "csv" else "_arrow_table"
    original = getattr(package, convert)

    def recording(frame, *args, **kwargs):
        sizes.append(len(frame))
        return original(frame, *args, **kwargs)

    monkeypatch.setattr(package, "WRITE_SLICE_ROWS", 10)
    monkeypatch.setattr(package, convert, recording)
    write_package(demo_frames, tmp_path / "sliced", info, fmt=fmt)
    assert sizes and max(sizes) == 10 and sum(sizes) == sum(map(len, demo_frames.values()))
    assert _files(tmp_path / "whole") == _files(tmp_path / "sliced")


@pytest.mark.parametrize("fmt", ["parquet", "csv"])
def test_large_change_report_equals_the_in_memory_comparison(
    long_project, tmp_path, fmt, large_is_small
):
    # Above the small-package limit the report compares the package files column by column;
    # it must say exactly what the text-frame comparison of small packages says.
    root = tmp_path / "project"
    shutil.copytree(long_project, root, ignore=shutil.ignore_patterns("out", ".harmonize-*"))
    text = (root / "harmonize.yaml").read_text(encoding="utf-8")
    (root / "harmonize.yaml").write_text(
        text.replace("format: parquet}", f"format: {fmt}}}"), encoding="utf-8"
    )
    out = tmp_path / "out"
    first = build_project(load_project(root), output=out, incremental=False, change_report=True)
    first_changes = first.changes.values["individual_values"]
    assert first_changes.added == first.individual_values > SMALL_ROWS_FOR_TESTS
    assert first_changes.ids_truncated and len(first_changes.added_ids) == 1000
    shutil.copytree(out, tmp_path / "before")

    source = root / "data" / "long.parquet"
    table = pq.read_table(source)
    values = table["value"].to_pylist()
    measures = table["measure"].to_pylist()
    for row in range(10, 20):
        values[row] = "12.5"  # a different value: changed records
    for row in range(40, 45):
        measures[row] = "tail length"  # another trait: new record ids (added and removed)
    table = table.set_column(table.schema.get_field_index("value"), "value", pa.array(values))
    table = table.set_column(table.schema.get_field_index("measure"), "measure", pa.array(measures))
    pq.write_table(table.slice(0, len(table) - 30), source)  # the last rows go: removed
    second = build_project(load_project(root), output=out, incremental=False, change_report=True)
    got = second.changes.values["individual_values"]

    expected = compare_values(
        read_package_tables(tmp_path / "before")["individual_values"],
        read_package_tables(out)["individual_values"],
    )
    assert got == expected
    assert got.changed > 0 and got.added > 0 and got.removed > 0
    assert got.changed_columns.get("value", 0) > 0
    assert second.changes.rejects_after == Counter(
        pd.read_parquet(out / "rejects.parquet")["reason"]
        if fmt == "parquet"
        else pd.read_csv(out / "rejects.csv")["reason"]
    )


def test_large_change_report_survives_a_damaged_previous_package(
    long_project, tmp_path, large_is_small
):
    out = tmp_path / "out"
    build_project(load_project(long_project), output=out, incremental=False, change_report=True)
    (out / "individual_values.parquet").write_bytes(b"not parquet")
    report = build_project(
        load_project(long_project), output=out, incremental=False, change_report=True
    )
    assert report.changes.previous_problem is not None
    assert not report.changes.previous_found
    assert report.changes.values["individual_values"].added == report.individual_values
    assert report.changes.values["individual_values"].removed == 0


def test_the_command_line_allocates_with_jemalloc_unless_a_pool_was_chosen(monkeypatch):
    # harmonize/arrow_memory.py: jemalloc where pyarrow has it; Arrow's own variable wins.
    from harmonize.arrow_memory import POOL_VARIABLE, choose_memory_pool

    before = pa.default_memory_pool()
    try:
        pa.set_memory_pool(pa.system_memory_pool())
        monkeypatch.setenv(POOL_VARIABLE, "system")
        assert choose_memory_pool() == "system"
        monkeypatch.delenv(POOL_VARIABLE)
        expected = "jemalloc" if "jemalloc" in pa.supported_memory_backends() else "system"
        assert choose_memory_pool() == expected
    finally:
        pa.set_memory_pool(before)
