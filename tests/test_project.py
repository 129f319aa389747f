"""Project file and mapping loader: every configuration mistake is named with its file and key."""

from __future__ import annotations

import os
import textwrap
from pathlib import Path

import pytest

from harmonize.errors import ConfigError, SourceNotFoundError, UnsafePathError
from harmonize.project import load_mapping, load_project, single_file_project


def write(path: Path, text: str) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


@pytest.fixture
def project(tmp_path: Path) -> Path:
    write(tmp_path / "data" / "a.csv", "species,mass\nSorex minutus,4.1\n")
    write(tmp_path / "harmonize.yaml", "name: t\noutput: {folder: out}\n")
    write(
        tmp_path / "mappings" / "a.yaml",
        """
        source: a
        path: ../data/a.csv
        level: individual
        context: {taxon: species}
        traits:
          mass: {unit: g}
        """,
    )
    return tmp_path


def test_valid_project_loads_with_resolved_paths(project: Path) -> None:
    loaded = load_project(project)
    assert [m.source for m in loaded.mappings] == ["a"]
    mapping = loaded.mappings[0]
    assert mapping.path == (project / "data" / "a.csv").resolve()
    assert mapping.format == "csv" and mapping.layout == "wide"
    assert mapping.trait_column("mass").unit == "g"
    assert loaded.output_folder == (project / "out").resolve()


MAPPING_MISTAKES = [
    # (yaml addition or replacement, expected error class, text the message must contain)
    ("levle: individual\n", ConfigError, "did you mean 'level'"),
    ("read: {delimter: ';'}\n", ConfigError, "did you mean 'delimiter'"),
    ("read: {decimal: ';'}\n", ConfigError, "'read.decimal'"),
    ("read: {encoding: klingon-8}\n", ConfigError, "unknown encoding"),
    ("traits: {mass: {statistic: average}}\n", ConfigError, "unknown statistic 'average'"),
    ("traits: {mass: {role: decoration}}\n", ConfigError, "unknown role 'decoration'"),
    ("ci_level: 3\n", ConfigError, "'ci_level'"),
    ("plus_minus: sd\n", ConfigError, "'plus_minus' applies to population-level sources only"),
    ("plus_minus: ci\n", ConfigError, "'plus_minus' must be one of sd, se"),
    ("format: dwca\n", ConfigError, "one measurement per MeasurementOrFact row"),
    ("context: {temperature: {unit: degC}}\n", ConfigError, "exactly one of 'column' or 'value'"),
]


@pytest.mark.parametrize(("extra", "error", "text"), MAPPING_MISTAKES)
def test_mapping_mistakes_are_named(project: Path, extra: str, error: type, text: str) -> None:
    path = project / "mappings" / "a.yaml"
    base = "source: a\npath: ../data/a.csv\nlevel: individual\n"
    path.write_text(base + extra, encoding="utf-8")
    with pytest.raises(error) as caught:
        load_mapping(path, project)
    assert text in str(caught.value)
    assert "a.yaml" in str(caught.value)


@pytest.mark.parametrize(
    "bad_path",
    [
        "../../outside.csv",
        "/etc/passwd",
        "https://example.org/a.csv",
        "file:///etc/passwd",
        "~/a.csv",
    ],
)
def test_paths_outside_the_project_are_refused(project: Path, bad_path: str) -> None:
    path = project / "mappings" / "a.yaml"
    path.write_text(f"source: a\npath: '{bad_path}'\nlevel: individual\n", encoding="utf-8")
    with pytest.raises(UnsafePathError):
        load_mapping(path, project)


def test_symlink_leaving_the_project_is_refused(project: Path, tmp_path_factory) -> None:
    outside = tmp_path_factory.mktemp("elsewhere") / "secret.csv"
    outside.write_text("a\n1\n", encoding="utf-8")
    os.symlink(outside, project / "data" / "link.csv")
    path = project / "mappings" / "a.yaml"
    path.write_text("source: a\npath: ../data/link.csv\nlevel: individual\n", encoding="utf-8")
    with pytest.raises(UnsafePathError, match="outside the project root"):
        load_mapping(path, project)


def test_invalid_yaml_reports_the_line(project: Path) -> None:
    path = project / "mappings" / "a.yaml"
    path.write_text("source: a\npath: [unclosed\nlevel: individual\n", encoding="utf-8")
    with pytest.raises(ConfigError) as caught:
        load_mapping(path, project)
    assert caught.value.row is not None and "invalid YAML" in str(caught.value)


def test_duplicate_source_ids_are_refused(project: Path) -> None:
    (project / "mappings" / "b.yaml").write_text(
        (project / "mappings" / "a.yaml").read_text(encoding="utf-8"), encoding="utf-8"
    )
    with pytest.raises(ConfigError, match="source id 'a' is also used"):
        load_project(project)


def test_unknown_project_key_is_named(project: Path) -> None:
    write(project / "harmonize.yaml", "name: t\noutptu: {folder: out}\n")
    with pytest.raises(ConfigError, match="did you mean 'output'"):
        load_project(project)


def test_missing_project_file(tmp_path: Path) -> None:
    with pytest.raises(SourceNotFoundError, match="no harmonize.yaml"):
        load_project(tmp_path)


def test_long_layout_needs_columns(project: Path) -> None:
    path = project / "mappings" / "a.yaml"
    path.write_text(
        "source: a\npath: ../data/a.csv\nlevel: individual\nlayout: long\n", encoding="utf-8"
    )
    with pytest.raises(ConfigError, match="needs 'columns'"):
        load_mapping(path, project)


def test_kelvin_reference_temperature_is_converted(project: Path) -> None:
    write(
        project / "harmonize.yaml",
        "name: t\ntemperature_correction: {method: q10, reference: 293.15, unit: K, q10: 2}\n",
    )
    loaded = load_project(project)
    # SI Brochure (9th ed.) 2.3.1: t/degC = T/K - 273.15
    assert loaded.temperature_correction.reference_celsius == pytest.approx(20.0)


def test_single_file_project_names_the_source_after_the_file(tmp_path: Path) -> None:
    table = write(tmp_path / "My Table.csv", "species,mass\nA b,1\n")
    quick = single_file_project(table, context={"taxon": "species"})
    assert quick.mappings[0].source == "my-table"
    assert quick.output_folder == table.resolve().parent / "my-table-harmonized"
    with pytest.raises(SourceNotFoundError):
        single_file_project(tmp_path / "nope.csv")
