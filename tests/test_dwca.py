"""Darwin Core Archive export, read back with an independent reader (python-dwca-reader).

References: Darwin Core Text Guide (TDWG, dwc.tdwg.org/text/) for meta.xml; Darwin Core
MeasurementOrFact terms (dwc.tdwg.org/terms/) for the extension; ECOSYSTEM-NOTES §4 for what the
reader does not check (duplicate core ids, orphan extension rows), which these tests check.
"""

from __future__ import annotations

import re
import shutil
import xml.etree.ElementTree as ET
import zipfile
from pathlib import Path

import pandas as pd
import pytest

from harmonize.build import build_project
from harmonize.dwca import STATISTICS, export_dwca, summaries_archive_path
from harmonize.errors import ConfigError, UnsafePathError
from harmonize.project import load_project

dwca_read = pytest.importorskip("dwca.read")

REPO = Path(__file__).resolve().parents[1]
DWC = "http://rs.tdwg.org/dwc/terms/"


def _copy_demo(root: Path) -> Path:
    shutil.copy(REPO / "harmonize.yaml", root / "harmonize.yaml")
    for folder in ("mappings", "demo_sources", "vocab"):
        shutil.copytree(REPO / folder, root / folder)
    return root


@pytest.fixture(scope="module")
def exported(tmp_path_factory):
    root = _copy_demo(tmp_path_factory.mktemp("demo"))
    package = tmp_path_factory.mktemp("out") / "package"
    build_project(load_project(root), output=package)
    summary = export_dwca(package, package.parent / "traits.zip")
    return package, summary


def _star(archive: Path) -> tuple[pd.DataFrame, pd.DataFrame, dict]:
    """Core rows and extension rows as the independent reader sees them."""
    with dwca_read.DwCAReader(str(archive)) as reader:
        orphans = reader.orphaned_extension_rows()
        core_rows, extension_rows = [], []
        for row in reader:
            core_rows.append({"_id": row.id, **row.data})
            for extension in row.extensions:
                extension_rows.append({"_coreid": extension.core_id, **extension.data})
    return pd.DataFrame(core_rows), pd.DataFrame(extension_rows), orphans


def _remark(remarks: pd.Series, label: str) -> pd.Series:
    return remarks.str.extract(rf"(?:^|; ){label}: ([^;]*)")[0]


def test_every_individual_value_round_trips(exported):
    package, summary = exported
    values = pd.read_csv(package / "individual_values.csv", keep_default_na=False, dtype=str)
    core, facts, orphans = _star(summary.archive)
    # ECOSYSTEM-NOTES §4: the reader skips orphans silently; it lists them per extension file
    assert orphans == {"measurementorfact.txt": {}}
    assert len(facts) == len(values) == summary.measurements
    facts = facts.set_index(DWC + "measurementID").loc[values["record_id"]]
    numeric = values["value"] != ""
    got = pd.to_numeric(facts[DWC + "measurementValue"].where(numeric.to_numpy()))
    assert (got.to_numpy()[numeric] == values["value"].astype(float)[numeric].to_numpy()).all()
    assert (
        facts[DWC + "measurementValue"].to_numpy()[~numeric] == values["value_text"][~numeric]
    ).all()
    assert (facts[DWC + "measurementType"].to_numpy() == values["trait_id"].to_numpy()).all()
    assert (facts[DWC + "measurementUnit"].to_numpy()[numeric] == values["ucum"][numeric]).all()
    remarks = facts[DWC + "measurementRemarks"]
    assert (_remark(remarks, "role").to_numpy() == values["role"].to_numpy()).all()
    source = values["source_id"] + " row " + values["source_row"]
    assert (_remark(remarks, "source").to_numpy() == source.to_numpy()).all()


def test_occurrence_core_carries_the_context_of_each_value(exported):
    package, summary = exported
    values = pd.read_csv(package / "individual_values.csv", keep_default_na=False, dtype=str)
    core, facts, _ = _star(summary.archive)
    assert core["_id"].is_unique  # ECOSYSTEM-NOTES §4: the reader does not check this
    assert len(core) == summary.occurrences
    joined = facts.merge(core, left_on="_coreid", right_on="_id", how="left")
    joined = joined.set_index(DWC + "measurementID").loc[values["record_id"]]
    for term, column in [
        ("scientificName", "taxon"),
        ("verbatimIdentification", "taxon_verbatim"),
        ("organismID", "individual_id"),
        ("sex", "sex"),
        ("lifeStage", "life_stage"),
        ("locality", "site"),
        ("verbatimEventDate", "date"),
    ]:
        assert (joined[DWC + term].to_numpy() == values[column].to_numpy()).all(), term


def test_every_population_statistic_round_trips_with_its_statistic_named(exported):
    package, summary = exported
    summaries = pd.read_csv(package / "population_summaries.csv", keep_default_na=False, dtype=str)
    taxa, facts, orphans = _star(summary.summaries_archive)
    assert orphans == {"measurementorfact.txt": {}}
    assert taxa["_id"].is_unique
    facts = facts.set_index(DWC + "measurementID")
    expected = 0
    for statistic in STATISTICS:
        present = summaries[summaries[statistic] != ""]
        expected += len(present)
        rows = facts.loc[present["record_id"] + ":" + statistic]
        values = rows[DWC + "measurementValue"].astype(float).to_numpy()
        assert (values == present[statistic].astype(float).to_numpy()).all(), statistic
        assert (rows[DWC + "measurementType"].to_numpy() == present["trait_id"].to_numpy()).all()
        assert (rows[DWC + "measurementMethod"].str.startswith(f"statistic: {statistic}")).all()
        if statistic != "n":
            assert (rows[DWC + "measurementUnit"].to_numpy() == present["ucum"].to_numpy()).all()
    categories = summaries[summaries["value_text"] != ""]
    rows = facts.loc[categories["record_id"] + ":value"]
    assert (rows[DWC + "measurementValue"].to_numpy() == categories["value_text"].to_numpy()).all()
    assert len(facts) == expected + len(categories) == summary.summary_measurements
    assert expected > 0 and len(categories) > 0  # the demo has both kinds


def test_sd_rows_say_how_sd_was_obtained(exported):
    package, summary = exported
    summaries = pd.read_csv(package / "population_summaries.csv", keep_default_na=False, dtype=str)
    _, facts, _ = _star(summary.summaries_archive)
    facts = facts.set_index(DWC + "measurementID")
    present = summaries[summaries["sd"] != ""]
    methods = facts.loc[present["record_id"] + ":sd", DWC + "measurementMethod"]
    stated = methods.str.extract(r"; sd: ([^;]*)")[0]
    assert (stated.to_numpy() == present["sd_method"].to_numpy()).all()


@pytest.mark.parametrize("which", ["archive", "summaries_archive"])
def test_meta_xml_writes_every_attribute_out(exported, which):
    # Darwin Core Text Guide: encoding, delimiters and header lines are attributes of <core> and
    # <extension>; python-dwca-reader's defaults differ from the guide's (ECOSYSTEM-NOTES §4).
    _, summary = exported
    with zipfile.ZipFile(getattr(summary, which)) as bundle:
        names = bundle.namelist()
        meta = ET.fromstring(bundle.read("meta.xml"))
    assert all("/" not in name for name in names)  # files at the archive root
    ns = {"t": "http://rs.tdwg.org/dwc/text/"}
    parts = [meta.find("t:core", ns), meta.find("t:extension", ns)]
    for part in parts:
        assert part is not None
        assert part.get("encoding") == "UTF-8"
        assert part.get("fieldsTerminatedBy") == "\\t"
        assert part.get("linesTerminatedBy") == "\\n"
        assert part.get("fieldsEnclosedBy") == '"'
        assert part.get("ignoreHeaderLines") == "1"
    assert parts[1].get("rowType") == DWC + "MeasurementOrFact"
    assert meta.get("metadata") == "eml.xml" and "eml.xml" in names


def test_eml_carries_the_invented_data_statement(exported):
    # demo_sources/README.md: the demo package description marks the data as invented
    _, summary = exported
    with dwca_read.DwCAReader(str(summary.archive)) as reader:
        text = ET.tostring(reader.metadata, encoding="unicode")
    assert "INVENTED" in text


def test_two_exports_give_identical_bytes(exported, tmp_path):
    package, summary = exported
    again = export_dwca(package, tmp_path / "again.zip")
    assert again.archive.read_bytes() == summary.archive.read_bytes()
    assert again.summaries_archive.read_bytes() == summary.summaries_archive.read_bytes()


def test_summaries_archive_sits_beside_the_archive():
    assert summaries_archive_path(Path("x/traits.zip")) == Path("x/traits-summaries.zip")


# ---------------------------------------------------------------- occurrence ids


@pytest.fixture(scope="module")
def awkward_ids(tmp_path_factory):
    """A tiny invented table whose individual ids try to collide with the id scheme."""
    root = tmp_path_factory.mktemp("ids")
    (root / "data").mkdir()
    # INVENTED values: ids 'A' (caught at two sites), 'A:2' and 'x#3', and rows without an id.
    (root / "data" / "animals.csv").write_text(
        "species,animal,site,mass_g\n"
        "Podarcis muralis,A,s1,5.1\n"
        "Podarcis muralis,A,s2,5.3\n"
        "Podarcis muralis,A:2,s1,6.0\n"
        "Podarcis muralis,x#3,s1,6.2\n"
        "Podarcis muralis,,s1,4.0\n"
        "Podarcis muralis,,s1,4.2\n",
        encoding="utf-8",
    )
    (root / "harmonize.yaml").write_text("name: ids\nmappings: [mappings/*.yaml]\n")
    (root / "mappings").mkdir()
    (root / "mappings" / "animals.yaml").write_text(
        "source: x\npath: ../data/animals.csv\nlevel: individual\n"
        "citation: invented test data\n"
        "context: {taxon: species, individual: animal, site: site}\n"
        "traits: {mass_g: {trait: body_mass_wet, unit: g}}\n"
    )
    package = root / "out"
    build_project(load_project(root), output=package)
    return export_dwca(package, root / "ids.zip")


def test_occurrence_ids_are_unique_when_individual_ids_look_like_the_scheme(awkward_ids):
    core, facts, orphans = _star(awkward_ids.archive)
    assert orphans == {"measurementorfact.txt": {}}
    assert core["_id"].is_unique
    # one occurrence per organism at one place and time (Darwin Core 'Occurrence'): A twice,
    # A:2, x#3, and each id-less row on its own
    assert len(core) == 6
    assert sorted(core[DWC + "organismID"]) == ["", "", "A", "A", "A:2", "x#3"]
    assert len(facts) == 6


def test_export_refuses_a_folder_that_is_not_a_harmonize_package(tmp_path):
    (tmp_path / "datapackage.json").write_text('{"name": "other", "resources": []}')
    with pytest.raises(ConfigError, match="not a harmonize data package"):
        export_dwca(tmp_path, tmp_path / "a.zip")


def test_export_refuses_a_package_pointing_outside_its_folder(tmp_path):
    (tmp_path / "datapackage.json").write_text(
        '{"name": "x", "resources": [{"name": "individual_values", "path": "../secret.csv"}]}'
    )
    with pytest.raises(UnsafePathError):
        export_dwca(tmp_path, tmp_path / "a.zip")


def test_remarks_name_the_trait_label(exported):
    package, summary = exported
    traits = pd.read_csv(package / "traits.csv", keep_default_na=False, dtype=str)
    _, facts, _ = _star(summary.archive)
    labels = dict(zip(traits["trait_id"], traits["label"], strict=True))
    stated = _remark(facts[DWC + "measurementRemarks"], "trait")
    expected = facts[DWC + "measurementType"].map(labels)
    assert (stated.to_numpy() == expected.to_numpy()).all()
    assert re.fullmatch(r"[a-z_]+", facts[DWC + "measurementType"].iloc[0])


def test_cli_export_writes_both_archives(exported, tmp_path, capsys):
    from harmonize.cli.main import main

    package, summary = exported
    target = tmp_path / "cli.zip"
    with pytest.raises(SystemExit) as exited:
        main(["export", "dwca", str(package), "-o", str(target)])
    assert exited.value.code == 0
    out = capsys.readouterr().out
    assert f"{summary.occurrences} occurrences" in out
    assert target.read_bytes() == summary.archive.read_bytes()
    assert summaries_archive_path(target).is_file()


def test_cli_export_of_a_missing_package_is_bad_input(tmp_path, capsys):
    from harmonize.cli.main import main

    with pytest.raises(SystemExit) as exited:
        main(["export", "dwca", str(tmp_path / "nothing"), "-o", str(tmp_path / "a.zip")])
    assert exited.value.code == 3  # README exit codes: 3 = bad input
    assert "datapackage.json" in capsys.readouterr().err


def test_exported_archive_reads_back_as_a_source_with_the_same_values(exported, tmp_path):
    # Our own reader (harmonize.foreign) on our own export: every value comes back unchanged in
    # the same trait, since the UCUM codes read as the canonical units (factor 1).
    package, summary = exported
    (tmp_path / "data").mkdir()
    shutil.copy(summary.archive, tmp_path / "data" / "export.zip")
    (tmp_path / "mappings").mkdir()
    (tmp_path / "harmonize.yaml").write_text("name: again\nmappings: [mappings/*.yaml]\n")
    (tmp_path / "mappings" / "again.yaml").write_text(
        "source: again\npath: ../data/export.zip\nlevel: individual\nlayout: long\n"
        "context: {taxon: scientificName, individual: organismID, sex: sex,"
        " life_stage: lifeStage, site: locality, date: verbatimEventDate}\n"
        "columns: {trait: measurementType, value: measurementValue, unit: measurementUnit}\n"
    )
    report = build_project(load_project(tmp_path), output=tmp_path / "out")
    order = ["trait_id", "taxon", "value", "value_text"]
    original = pd.read_csv(package / "individual_values.csv").sort_values(order)
    again = report.tables["individual_values"].sort_values(order)
    assert len(report.tables["rejects"]) == 0
    assert list(again["trait_id"]) == list(original["trait_id"])
    assert again["value"].to_numpy() == pytest.approx(original["value"].to_numpy(), rel=1e-12)
    assert list(again["taxon"]) == list(original["taxon"])
