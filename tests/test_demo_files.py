"""Checks on the invented demo project: generator, mappings, project file and the README's table.

The demo tables are INVENTED data. These tests make sure the committed files are exactly what
`demo_sources/make_demo.py` writes, that the mappings describe the files as they really are, and
that the bad cells documented in `demo_sources/README.md` are really in the files.
"""

from __future__ import annotations

import hashlib
import importlib.util
import re
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pint
import pyarrow.compute as pc
import pyarrow.parquet as pq
import pytest
import yaml

from harmonize.errors import RejectReason

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_sources"
MAPPING_FILES = sorted((ROOT / "mappings").glob("*.yaml"))
INVENTED = "Invented demo data – not real measurements"

# The mapping grammar of the project's design contract (DESIGN.md "Source mapping").
MAPPING_KEYS = {
    "source", "path", "format", "read", "citation", "licence", "level", "layout", "context",
    "ignore", "traits", "columns", "ci_level", "combine_groups",
}  # fmt: skip
READ_KEYS = {"delimiter", "decimal", "thousands", "encoding", "missing"}
CONTEXT_KEYS = {
    "taxon", "individual", "sex", "life_stage", "site", "date", "temperature", "sample_size",
}  # fmt: skip
TRAIT_KEYS = {"trait", "unit", "statistic", "role"}
LONG_KEYS = {"trait", "value", "unit", "statistic", "n"}
STATISTICS = {
    "value", "mean", "sd", "se", "n", "min", "max", "median", "q1", "q3", "ci_low", "ci_high",
    "variance", "cv",
}  # fmt: skip


def _load_generator():
    spec = importlib.util.spec_from_file_location("make_demo", DEMO / "make_demo.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses look their module up while the class is built
    spec.loader.exec_module(module)
    return module


make_demo = _load_generator()


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _mapping(path: Path) -> dict:
    return yaml.safe_load(path.read_text(encoding="utf-8"))


def _mappings_by_source() -> dict[str, tuple[Path, dict]]:
    return {(m := _mapping(p))["source"]: (p, m) for p in MAPPING_FILES}


def _read_text(mapping_file: Path, mapping: dict) -> pd.DataFrame:
    """The source as text cells exactly as written ('' for empty), using the declared options."""
    path = (mapping_file.parent / mapping["path"]).resolve()
    if mapping["format"] == "parquet":
        table = pq.read_table(path)
        text = {name: pc.cast(table.column(name), "string") for name in table.column_names}
        return pd.DataFrame({k: v.to_pylist() for k, v in text.items()}).fillna("")
    read = mapping.get("read", {})
    return pd.read_csv(
        path,
        sep=read.get("delimiter", "\t" if mapping["format"] == "tsv" else ","),
        encoding=read.get("encoding", "utf-8"),
        dtype=str,
        keep_default_na=False,
    )


def _declared_columns(mapping: dict) -> set[str]:
    declared = set()
    for key, value in mapping.get("context", {}).items():
        declared.add(value["column"] if key == "temperature" else value)
    declared.update(mapping.get("ignore", []))
    declared.update(mapping.get("traits", {}))
    declared.update(mapping.get("columns", {}).values())
    return declared


# ---------------------------------------------------------------- generator


def test_generator_reproduces_the_committed_files(tmp_path):
    written = make_demo.write_demo(tmp_path)
    committed = {
        p.relative_to(DEMO)
        for p in DEMO.rglob("*")
        if p.is_file() and p.suffix in {".csv", ".tsv", ".parquet"}
    }
    assert set(written) == committed
    for relative in written:
        fresh, kept = tmp_path / relative, DEMO / relative
        if relative.suffix != ".parquet":
            assert _sha256(fresh) == _sha256(kept), f"{relative} differs: rerun make_demo.py"
        elif pq.ParquetFile(fresh).metadata.created_by == pq.ParquetFile(kept).metadata.created_by:
            assert _sha256(fresh) == _sha256(kept), f"{relative} differs: rerun make_demo.py"
        else:  # another Parquet writer version writes its name into the file: compare content
            assert pq.read_table(fresh).equals(pq.read_table(kept), check_metadata=True)


def test_generator_is_byte_identical_across_runs(tmp_path):
    first = make_demo.write_demo(tmp_path / "first")
    make_demo.write_demo(tmp_path / "second")
    for relative in first:
        assert _sha256(tmp_path / "first" / relative) == _sha256(tmp_path / "second" / relative)


def test_parquet_file_says_it_is_invented():
    metadata = pq.ParquetFile(DEMO / make_demo.SOUTH_FILE).schema_arrow.metadata
    assert metadata[b"note"] == b"invented demo data"


def test_readme_says_the_data_are_invented():
    assert "INVENTED" in (DEMO / "README.md").read_text(encoding="utf-8")


# ---------------------------------------------------------------- mappings and project file


def test_there_is_one_mapping_per_demo_table():
    sources = {m["source"] for m in map(_mapping, MAPPING_FILES)}
    assert sources == {
        "north-lizards",
        "south-species-means",
        "east-respirometry",
        "west-shrews",
        "west-shrews-by-sex",
    }


@pytest.mark.parametrize("mapping_file", MAPPING_FILES, ids=lambda p: p.stem)
def test_mapping_uses_only_the_allowed_keys(mapping_file):
    mapping = _mapping(mapping_file)
    assert set(mapping) <= MAPPING_KEYS
    assert mapping["source"] == mapping_file.stem
    assert set(mapping.get("read", {})) <= READ_KEYS
    assert set(mapping.get("context", {})) <= CONTEXT_KEYS
    assert mapping["level"] in {"individual", "population"}
    assert mapping["layout"] in {"wide", "long"}
    if mapping["layout"] == "long":
        assert set(mapping["columns"]) <= LONG_KEYS and "traits" not in mapping
    else:
        assert "columns" not in mapping
    for spec in mapping.get("traits", {}).values():
        assert set(spec) <= TRAIT_KEYS
        assert spec.get("statistic", "value") in STATISTICS


@pytest.mark.parametrize("mapping_file", MAPPING_FILES, ids=lambda p: p.stem)
def test_mapping_citation_marks_invented_data(mapping_file):
    assert INVENTED in _mapping(mapping_file)["citation"]


@pytest.mark.parametrize("mapping_file", MAPPING_FILES, ids=lambda p: p.stem)
def test_mapping_path_is_relative_and_inside_demo_sources(mapping_file):
    raw = _mapping(mapping_file)["path"]
    assert not Path(raw).is_absolute()
    resolved = (mapping_file.parent / raw).resolve()
    assert DEMO in resolved.parents and resolved.is_file()


@pytest.mark.parametrize("mapping_file", MAPPING_FILES, ids=lambda p: p.stem)
def test_declared_columns_are_exactly_the_file_columns(mapping_file):
    mapping = _mapping(mapping_file)
    frame = _read_text(mapping_file, mapping)
    declared = _declared_columns(mapping)
    assert declared <= set(frame.columns), f"declared but absent: {declared - set(frame.columns)}"
    # every column is claimed, so no column is silently taken as a trait matched by name
    assert set(frame.columns) <= declared, f"undeclared: {set(frame.columns) - declared}"


@pytest.mark.parametrize("mapping_file", MAPPING_FILES, ids=lambda p: p.stem)
def test_file_reads_with_the_declared_options(mapping_file):
    """Read as pandas would with the mapping's options: numbers come out as numbers."""
    mapping = _mapping(mapping_file)
    if mapping["format"] == "parquet":
        frame = pd.read_parquet((mapping_file.parent / mapping["path"]).resolve())
    else:
        read = mapping["read"]
        frame = pd.read_csv(
            (mapping_file.parent / mapping["path"]).resolve(),
            sep=read["delimiter"],
            decimal=read["decimal"],
            thousands=read["thousands"],
            encoding=read["encoding"],
            na_values=read["missing"],
            keep_default_na=False,
        )
    numeric = frame.select_dtypes("number")
    assert numeric.shape[1] >= 1 and numeric.notna().to_numpy().any()


def test_north_header_decodes_only_as_latin1():
    raw = (DEMO / make_demo.NORTH_FILE).read_bytes()
    assert "Prà Alto" in raw.decode("latin-1")
    with pytest.raises(UnicodeDecodeError):
        raw.decode("utf-8")


def test_project_file_names_the_demo_and_its_mappings():
    project = yaml.safe_load((ROOT / "harmonize.yaml").read_text(encoding="utf-8"))
    assert re.fullmatch(r"[a-z0-9]+(-[a-z0-9]+)*", project["name"])
    assert "INVENTED" in project["description"]
    found = sorted(p for pattern in project["mappings"] for p in ROOT.glob(pattern))
    assert found == MAPPING_FILES
    assert (ROOT / project["taxon_synonyms"]).is_file()
    matching = project["matching"]
    assert 0 < matching["review"] < matching["accept"] <= 100
    # Gillooly et al. 2001, Science 293:2248: mean activation energy of metabolism about 0.65 eV
    assert project["temperature_correction"]["activation_energy_ev"] == pytest.approx(0.65)


def test_project_loads_with_the_package_loader():
    from harmonize.project import load_project
    from harmonize.sources import check_declared_columns, read_header

    project = load_project(ROOT)
    assert {m.source for m in project.mappings} == set(_mappings_by_source())
    for mapping in project.mappings:
        check_declared_columns(mapping, read_header(mapping))


def test_taxon_synonyms_point_to_binomials_used_in_the_demo():
    synonyms = pd.read_csv(ROOT / "mappings" / "taxon_synonyms.csv", dtype=str)
    assert list(synonyms.columns) == ["name", "accepted_name"]
    used = set()
    for path, mapping in _mappings_by_source().values():
        used.update(_read_text(path, mapping)[mapping["context"]["taxon"]])
    assert set(synonyms["name"]) <= used
    assert synonyms["accepted_name"].str.fullmatch(r"[A-Z][a-z]+ [a-z]+").all()


# ---------------------------------------------------------------- the README's table of bad cells


def _bad_cell_rows() -> list[dict[str, str]]:
    text = (DEMO / "README.md").read_text(encoding="utf-8")
    section = text.split("## Deliberately bad cells", 1)[1]
    rows = []
    for line in section.splitlines():
        cells = [c.strip() for c in line.strip().strip("|").split("|")]
        if len(cells) == 6 and cells[1].isdigit():
            source, row, column, raw, problem, expected = cells
            raw = raw.strip("`")
            rows.append(
                {
                    "source": source,
                    "row": row,
                    "column": column,
                    "raw": "" if raw == "(empty)" else raw,
                    "expected": expected,
                }
            )
    return rows


BAD_CELLS = _bad_cell_rows()


def test_readme_lists_every_kind_of_bad_cell_asked_for():
    codes = {row["expected"].strip("`") for row in BAD_CELLS}
    wanted = {
        "not-a-number", "range-value", "non-finite", "missing-unit", "unknown-unit",
        "ambiguous-unit", "dimension-mismatch", "unmatched-name", "missing-taxon",
        "orphan-statistic", "invalid-statistic",
    }  # fmt: skip
    assert wanted <= codes
    assert len(BAD_CELLS) >= 15


@pytest.mark.parametrize("bad", BAD_CELLS, ids=lambda b: f"{b['source']}-{b['row']}-{b['column']}")
def test_readme_bad_cell_is_in_the_file(bad):
    mappings = _mappings_by_source()
    assert bad["source"] in mappings
    frame = _read_text(*mappings[bad["source"]])
    assert bad["column"] in frame.columns
    assert frame.loc[int(bad["row"]) - 1, bad["column"]] == bad["raw"]
    expected = bad["expected"]
    if expected.startswith("`"):
        assert expected.strip("`") in {reason.value for reason in RejectReason}
    else:
        assert expected.startswith("kept")


def test_the_bad_cells_are_the_only_odd_values_of_their_kind():
    """'broken', 'tbd', 'inf', 'Zoll' … appear only where the README says."""
    listed = {(b["source"], int(b["row"]), b["column"]) for b in BAD_CELLS}
    odd = {"broken", "tbd", "3-5", "inf", "<0.5", "zqx_index", "mode", "gr", "Zoll", "12,9"}
    for source, (path, mapping) in _mappings_by_source().items():
        frame = _read_text(path, mapping)
        for column in frame.columns:
            for index in np.flatnonzero(frame[column].isin(odd).to_numpy()):
                assert (source, int(index) + 1, column) in listed


# ---------------------------------------------------------------- realism of the invented values


def test_east_rates_rise_with_temperature_like_metabolism():
    """Q10 between 20 and 30 degC, per animal (each animal's sheet uses one unit per measure).

    Gillooly et al. 2001, Science 293:2248: E about 0.65 eV, i.e. Q10 = exp(E/k (1/293.15 -
    1/303.15)) = 2.34 between 20 and 30 degC; the demo aims at Q10 2-2.5 (our own target for
    water loss too, which has no such published constant).
    """
    frame = pd.read_csv(DEMO / make_demo.EAST_FILE, dtype=str, keep_default_na=False)
    frame["number"] = pd.to_numeric(frame["value"], errors="coerce")
    usual_unit = frame.groupby(["animal", "measure"])["unit"].transform(lambda u: u.mode()[0])
    frame = frame[np.isfinite(frame["number"]) & (frame["unit"] == usual_unit)]
    wide = frame.pivot_table(index=["animal", "measure"], columns="test_temp", values="number")
    ratios = (wide["30"] / wide["20"]).dropna()
    oxygen = ratios[ratios.index.get_level_values("measure").isin(make_demo.OXYGEN_NAMES)]
    water = ratios[ratios.index.get_level_values("measure").isin(make_demo.WATER_LOSS_NAMES)]
    assert len(oxygen) >= 12 and len(water) >= 12
    assert 2.0 <= oxygen.median() <= 2.6
    assert 1.8 <= water.median() <= 2.5


def test_demo_uses_at_least_four_units_per_dimension():
    """Distinct unit spellings grouped by pint's dimensionality (qualifiers O2/H2O dropped)."""
    registry = pint.UnitRegistry()
    spellings: set[str] = set()
    for path, mapping in _mappings_by_source().values():
        spellings.update(s["unit"] for s in mapping.get("traits", {}).values() if "unit" in s)
        if "columns" in mapping and "unit" in mapping["columns"]:
            spellings.update(_read_text(path, mapping)[mapping["columns"]["unit"]])
    by_dimension: dict[str, set[str]] = {}
    for spelling in spellings:
        text = re.sub(r"\b(O2|H2O)\b", " ", spelling)
        text = re.sub(r"(?<=[A-Za-z])(-\d+)", r"**\1", text)  # 'h-1' -> 'h**-1'
        try:
            dimension = str(registry.parse_units(text).dimensionality)
        except Exception:  # noqa: BLE001 - unparsable spellings ('Zoll', '') are simply not counted
            continue
        by_dimension.setdefault(dimension, set()).add(spelling)
    for dimension in (
        "[mass]",
        "[length]",
        "[temperature]",
        "[length] ** 3 / [time]",
        "[mass] * [length] ** 2 / [time] ** 3",
    ):
        assert len(by_dimension.get(dimension, ())) >= 4, (dimension, by_dimension.get(dimension))
