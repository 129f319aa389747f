"""Foreign sources: a Darwin Core Archive and a Frictionless Data Package written by someone else.

The archives here are written by hand, following the Darwin Core Text Guide (TDWG,
dwc.tdwg.org/text/), not by harmonize's exporter, so that reading does not merely mirror
writing. All values are INVENTED test data. Unit factors: NIST SP 811 (2008), Appendix B
(1 cm = 10 mm, 1 mg = 1e-3 g).
"""

from __future__ import annotations

import json
import zipfile
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from harmonize.build import build_project
from harmonize.errors import ConfigError, SourceReadError, UnsafePathError
from harmonize.foreign import read_datapackage, read_dwca
from harmonize.project import Limits, load_project
from harmonize.sources import iter_cells, read_header

DWC = "http://rs.tdwg.org/dwc/terms/"
ATTRIBUTES = (
    'encoding="UTF-8" fieldsTerminatedBy="\\t" linesTerminatedBy="\\n" '
    'fieldsEnclosedBy="&quot;" ignoreHeaderLines="1"'
)


def meta_xml(core_location: str = "occurrence.txt", facts_location: str = "mof.txt") -> str:
    # Darwin Core Text Guide: <id>/<coreid> name the key column; a field with a default and no
    # index applies to every row. Indexes are deliberately not in file order.
    return f"""<?xml version="1.0" encoding="UTF-8"?>
<archive xmlns="http://rs.tdwg.org/dwc/text/">
 <core rowType="{DWC}Occurrence" {ATTRIBUTES}>
  <files><location>{core_location}</location></files>
  <id index="0"/>
  <field index="0" term="{DWC}occurrenceID"/>
  <field index="1" term="{DWC}scientificName"/>
  <field index="3" term="{DWC}sex"/>
  <field index="2" term="{DWC}locality"/>
  <field index="4" term="{DWC}eventDate"/>
  <field default="adult" term="{DWC}lifeStage"/>
 </core>
 <extension rowType="{DWC}MeasurementOrFact" {ATTRIBUTES}>
  <files><location>{facts_location}</location></files>
  <coreid index="0"/>
  <field index="1" term="{DWC}measurementType"/>
  <field index="2" term="{DWC}measurementValue"/>
  <field index="3" term="{DWC}measurementUnit"/>
  <field index="4" term="{DWC}measurementRemarks"/>
 </extension>
</archive>
"""


CORE = (
    "id\tname\twhere\tsex\twhen\n"
    "occ-1\tPodarcis muralis\tInvented Hill\tmale\t2023-05-01\n"
    'occ-2\tZootoca vivipara\t"Invented\tMarsh"\tfemale\t2023-05-02\n'
)
FACTS = (
    "coreid\ttype\tvalue\tunit\tremarks\n"
    "occ-1\tbody mass\t5.2\tg\t\n"
    "occ-1\tsnout-vent length\t6.1\tcm\t\n"
    'occ-2\tbody mass\t3100\tmg\tweighed "wet"\n'
    "occ-2\tbody mass\tabc\tg\ttypo in the sheet\n"
    "occ-9\tbody mass\t4.0\tg\tcore row missing\n"
)
DWCA_MAPPING = """\
source: foreign-archive
path: {path}
{format}level: individual
layout: long
citation: invented test data
context: {{taxon: scientificName, individual: coreid, sex: sex, life_stage: lifeStage,
          site: locality, date: eventDate}}
columns: {{trait: measurementType, value: measurementValue, unit: measurementUnit}}
"""


def project(root: Path, mapping: str) -> Path:
    (root / "mappings").mkdir(exist_ok=True)
    (root / "harmonize.yaml").write_text("name: foreign\nmappings: [mappings/*.yaml]\n")
    (root / "mappings" / "source.yaml").write_text(mapping)
    return root


def write_zip(path: Path, members: dict[str, str]) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    with zipfile.ZipFile(path, "w") as bundle:
        for name, text in members.items():
            bundle.writestr(name, text)
    return path


def archive_project(root: Path) -> Path:
    write_zip(
        root / "data" / "lizards.zip",
        {"meta.xml": meta_xml(), "occurrence.txt": CORE, "mof.txt": FACTS},
    )
    return project(root, DWCA_MAPPING.format(path="../data/lizards.zip", format=""))


def check_archive_build(root: Path) -> None:
    report = build_project(load_project(root), output=root / "out")
    values = report.tables["individual_values"].sort_values("source_row")
    assert list(values["source_row"]) == [1, 2, 3]
    assert list(values["trait_id"]) == ["body_mass_wet", "snout_vent_length", "body_mass_wet"]
    # NIST SP 811 App. B: 6.1 cm = 61 mm; 3100 mg = 3.1 g
    assert list(values["value"]) == pytest.approx([5.2, 61.0, 3.1], rel=1e-12)
    assert list(values["taxon"]) == ["Podarcis muralis", "Podarcis muralis", "Zootoca vivipara"]
    assert list(values["individual_id"]) == ["occ-1", "occ-1", "occ-2"]
    assert list(values["life_stage"]) == ["adult"] * 3  # the field's default applies to every row
    assert values["site"].iloc[2] == "Invented\tMarsh"  # quoted tab survives
    rejects = report.tables["rejects"].set_index("source_row")
    assert rejects.loc[4, "reason"] == "not-a-number"
    assert rejects.loc[5, "reason"] == "missing-taxon"  # extension row without a core row
    assert "coreid is not an id of the archive's core" in rejects.loc[5, "message"]
    assert len(rejects) == 2
    assert report.balanced


def test_darwin_core_archive_zip_is_read_like_any_long_table(tmp_path):
    check_archive_build(archive_project(tmp_path))


def test_archive_extension_streams_in_batches_joined_to_its_core(tmp_path):
    # 1,000 core rows and 250,000 extension rows (about 6.6 MB: more than one of the reader's
    # 4 MiB blocks), every 7th pointing at an id the core lacks. Read in batches of 40,000,
    # each extension row must carry exactly its own core row's columns (or empty ones).
    species = ["Podarcis muralis", "Zootoca vivipara", "Lacerta agilis"]
    core = "id\tname\twhere\tsex\twhen\n" + "".join(
        f"occ-{i}\t{species[i % 3]}\tInvented site {i}\tmale\t2023-05-01\n" for i in range(1000)
    )
    ids = [f"occ-{i % 1000}" if i % 7 else f"lost-{i}" for i in range(250_000)]
    facts = "coreid\ttype\tvalue\tunit\tremarks\n" + "".join(
        f"{c}\tbody mass\t{i}\tg\t\n" for i, c in enumerate(ids)
    )
    write_zip(
        tmp_path / "data" / "big.zip",
        {"meta.xml": meta_xml(), "occurrence.txt": core, "mof.txt": facts},
    )
    root = project(tmp_path, DWCA_MAPPING.format(path="../data/big.zip", format=""))
    mapping = load_project(root).mappings[0]
    frames = list(read_dwca(mapping, read_header(mapping), Limits(batch_rows=40_000)))
    assert len(frames) > 1
    assert [len(f) for f in frames] == [40_000] * 6 + [10_000]  # the reader's blocks, cut
    joined = pd.concat(frames, ignore_index=True)
    assert list(joined["measurementValue"]) == [str(i) for i in range(250_000)]  # in file order
    assert list(joined["coreid"]) == ids
    expected = [species[int(c[4:]) % 3] if c.startswith("occ-") else "" for c in ids]
    assert list(joined["scientificName"]) == expected
    assert list(joined["locality"]) == [
        f"Invented site {c[4:]}" if c.startswith("occ-") else "" for c in ids
    ]
    # the core's default (lifeStage) is part of the core row: absent with it
    assert list(joined["lifeStage"]) == ["adult" if c.startswith("occ-") else "" for c in ids]


def test_parquet_resource_of_a_data_package_is_read_in_batches(tmp_path):
    table = pa.table(
        {
            "species": ["Podarcis muralis"] * 10,
            "animal": [f"a{i}" for i in range(10)],
            "mass": [i + 0.5 if i % 4 else None for i in range(10)],
            "svl": list(range(40, 50)),
        }
    )
    sink = pa.BufferOutputStream()
    pq.write_table(table, sink, row_group_size=3)
    resource = {"name": "animals", "path": "animals.parquet", "format": "parquet"}
    write_package(tmp_path, resource, {"animals.parquet": sink.getvalue().to_pybytes()})
    root = project(tmp_path, PACKAGE_MAPPING.format(read="read: {resource: animals}\n"))
    mapping = load_project(root).mappings[0]
    frames = list(read_datapackage(mapping, read_header(mapping), Limits(batch_rows=4)))
    assert [len(f) for f in frames] == [4, 4, 2]
    joined = pd.concat(frames, ignore_index=True)
    assert list(joined["animal"]) == [f"a{i}" for i in range(10)]
    assert list(joined["mass"]) == ["" if i % 4 == 0 else f"{i}.5" for i in range(10)]


def unpacked_archive_project(root: Path) -> Path:
    """The archive of `archive_project` unpacked into a folder, read through its meta.xml."""
    folder = root / "data" / "lizards"
    folder.mkdir(parents=True)
    (folder / "meta.xml").write_text(meta_xml())
    (folder / "occurrence.txt").write_text(CORE)
    (folder / "mof.txt").write_text(FACTS)
    mapping = DWCA_MAPPING.format(path="../data/lizards/meta.xml", format="format: dwca\n")
    return project(root, mapping)


def test_unpacked_archive_is_read_through_its_meta_xml(tmp_path):
    check_archive_build(unpacked_archive_project(tmp_path))


def test_archive_header_names_core_and_extension_terms(tmp_path):
    mapping = load_project(archive_project(tmp_path)).mappings[0]
    assert mapping.format == "dwca"  # '.zip' means a Darwin Core Archive
    assert read_header(mapping) == [
        "coreid", "occurrenceID", "scientificName", "sex", "locality", "eventDate", "lifeStage",
        "measurementType", "measurementValue", "measurementUnit", "measurementRemarks",
    ]  # fmt: skip
    cells = next(iter_cells(mapping)).cells
    assert list(cells["raw_unit"]) == ["g", "cm", "mg", "g", "g"]


@pytest.mark.parametrize(
    "member",
    ["../outside.txt", "/etc/outside.txt", "data/../../outside.txt", "C:/outside.txt"],
)
def test_hostile_archive_member_refuses_the_archive(tmp_path, member):
    root = archive_project(tmp_path)
    members = {"meta.xml": meta_xml(), "occurrence.txt": CORE, "mof.txt": FACTS, member: "x"}
    write_zip(tmp_path / "data" / "lizards.zip", members)
    with pytest.raises(UnsafePathError, match="archive member"):
        build_project(load_project(root), output=root / "out")


def test_meta_xml_location_outside_the_archive_is_refused(tmp_path):
    folder = tmp_path / "data" / "lizards"
    folder.mkdir(parents=True)
    (folder / "meta.xml").write_text(meta_xml(facts_location="../../secret.txt"))
    (folder / "occurrence.txt").write_text(CORE)
    (tmp_path / "secret.txt").write_text(FACTS)
    mapping = DWCA_MAPPING.format(path="../data/lizards/meta.xml", format="format: dwca\n")
    root = project(tmp_path, mapping)
    with pytest.raises(UnsafePathError, match="location"):
        build_project(load_project(root), output=root / "out")


def test_archive_member_above_the_size_limit_is_refused(tmp_path):
    mapping = load_project(archive_project(tmp_path)).mappings[0]
    with pytest.raises(SourceReadError, match="above the limit"):
        next(iter_cells(mapping, Limits(max_file_bytes=len(FACTS) - 1)))


def test_duplicate_core_ids_are_refused(tmp_path):
    root = archive_project(tmp_path)
    duplicated = CORE + "occ-1\tLacerta bilineata\tInvented Hill\tmale\t2023-05-03\n"
    members = {"meta.xml": meta_xml(), "occurrence.txt": duplicated, "mof.txt": FACTS}
    write_zip(tmp_path / "data" / "lizards.zip", members)
    with pytest.raises(SourceReadError, match="occ-1"):
        build_project(load_project(root), output=root / "out")


def test_archive_without_measurement_extension_is_refused(tmp_path):
    root = archive_project(tmp_path)
    meta = meta_xml().replace("MeasurementOrFact", "ResourceRelationship")
    members = {"meta.xml": meta, "occurrence.txt": CORE, "mof.txt": FACTS}
    write_zip(tmp_path / "data" / "lizards.zip", members)
    with pytest.raises(SourceReadError, match="MeasurementOrFact"):
        build_project(load_project(root), output=root / "out")


def test_a_ragged_extension_row_is_named_by_file_and_row(tmp_path):
    # the one-line error names file and row; a quoted tab in row 1 is not a field break
    root = archive_project(tmp_path)
    ragged = FACTS.replace("occ-2\tbody mass\tabc", "occ-2\tbody mass\tabc\textra")
    members = {"meta.xml": meta_xml(), "occurrence.txt": CORE, "mof.txt": ragged}
    write_zip(tmp_path / "data" / "lizards.zip", members)
    with pytest.raises(SourceReadError) as caught:
        build_project(load_project(root), output=root / "out")
    assert str(caught.value).startswith(f"{tmp_path / 'data' / 'lizards.zip'}:mof.txt, row 4: ")
    assert "different number of fields" in str(caught.value)


# ---------------------------------------------------------------- Frictionless Data Package

PACKAGE_MAPPING = """\
source: foreign-package
path: ../data/pkg/datapackage.json
{read}level: individual
citation: invented test data
context: {{taxon: species, individual: animal}}
traits:
  mass: {{trait: body_mass_wet, unit: g}}
  svl: {{trait: snout_vent_length, unit: mm}}
"""


def write_package(root: Path, resource: dict, files: dict[str, bytes | str]) -> None:
    folder = root / "data" / "pkg"
    folder.mkdir(parents=True)
    other = {"name": "sites", "path": "sites.csv", "schema": {"fields": [{"name": "site"}]}}
    (folder / "sites.csv").write_text("site\nInvented Hill\n")
    descriptor = {"name": "someone-elses", "resources": [other, resource]}
    (folder / "datapackage.json").write_text(json.dumps(descriptor))
    for name, data in files.items():
        target = folder / name
        target.write_bytes(data if isinstance(data, bytes) else data.encode("utf-8"))


def test_foreign_data_package_csv_resource_is_a_source(tmp_path):
    # Data Package standard: dialect.delimiter, schema.missingValues (datapackage.org)
    resource = {
        "name": "animals",
        "path": "animals.csv",
        "dialect": {"delimiter": ";"},
        "schema": {
            "fields": [{"name": n} for n in ("species", "animal", "mass", "svl")],
            "missingValues": ["-"],
        },
    }
    csv_text = "species;animal;mass;svl\nPodarcis muralis;a1;5.5;60\nZootoca vivipara;a2;-;48\n"
    write_package(tmp_path, resource, {"animals.csv": csv_text})
    root = project(tmp_path, PACKAGE_MAPPING.format(read="read: {resource: animals}\n"))
    report = build_project(load_project(root), output=root / "out")
    values = report.tables["individual_values"].sort_values(["source_row", "trait_id"])
    assert list(values["value"]) == [5.5, 60.0, 48.0]
    assert list(values["individual_id"]) == ["a1", "a1", "a2"]
    account = report.accounts[0]
    assert account.cells_empty == 1  # '-' is the package's declared missing value
    assert len(report.tables["rejects"]) == 0


def test_a_ragged_row_of_a_data_package_resource_is_named_by_file_and_row(tmp_path):
    resource = {"name": "animals", "path": "animals.csv", "dialect": {"delimiter": ";"}}
    csv_text = 'species;animal;mass;svl\n"Podarcis\nmuralis";a1;5.5;60\nZootoca;a2;4;48;9\n'
    write_package(tmp_path, resource, {"animals.csv": csv_text})
    root = project(tmp_path, PACKAGE_MAPPING.format(read="read: {resource: animals}\n"))
    with pytest.raises(SourceReadError) as caught:
        build_project(load_project(root), output=root / "out")
    # row 2 starts on the fourth line: row 1 holds a quoted line break
    assert str(caught.value).startswith(f"{tmp_path / 'data' / 'pkg' / 'animals.csv'}, row 2: ")


def test_foreign_data_package_parquet_resource_is_a_source(tmp_path):
    table = pa.table(
        {
            "species": ["Podarcis muralis", "Zootoca vivipara"],
            "animal": ["a1", "a2"],
            "mass": [5.5, None],
            "svl": [60, 48],
        }
    )
    sink = pa.BufferOutputStream()
    pq.write_table(table, sink)
    resource = {"name": "animals", "path": "animals.parquet", "format": "parquet"}
    write_package(tmp_path, resource, {"animals.parquet": sink.getvalue().to_pybytes()})
    root = project(tmp_path, PACKAGE_MAPPING.format(read="read: {resource: animals}\n"))
    report = build_project(load_project(root), output=root / "out")
    values = report.tables["individual_values"].sort_values(["source_row", "trait_id"])
    assert list(values["value"]) == [5.5, 60.0, 48.0]
    assert report.accounts[0].cells_empty == 1


def test_changed_data_file_of_a_package_is_read_again(tmp_path):
    # The descriptor stays the same; only the resource's data changes. A scheduled build must
    # not reuse the cached values of the old file.
    resource = {"name": "animals", "path": "animals.csv"}
    write_package(tmp_path, resource, {"animals.csv": "species,animal,mass,svl\nP m,a1,5.5,60\n"})
    root = project(tmp_path, PACKAGE_MAPPING.format(read="read: {resource: animals}\n"))
    first = build_project(load_project(root), output=root / "out")
    data = tmp_path / "data" / "pkg" / "animals.csv"
    data.write_text("species,animal,mass,svl\nP m,a1,7.5,60\n")
    second = build_project(load_project(root), output=root / "out")
    assert second.reused_sources == ()
    values = second.tables["individual_values"].set_index("trait_id")["value"]
    assert values["body_mass_wet"] == 7.5
    sha = [r.tables["sources"]["sha256"].iloc[0] for r in (first, second)]
    assert sha[0] != sha[1]
    third = build_project(load_project(root), output=root / "out")  # nothing changed now
    assert third.reused_sources == ("foreign-package",)


def test_changed_extension_of_an_unpacked_archive_is_read_again(tmp_path):
    root = unpacked_archive_project(tmp_path)
    folder = tmp_path / "data" / "lizards"
    build_project(load_project(root), output=root / "out")
    (folder / "mof.txt").write_text(FACTS.replace("occ-1\tbody mass\t5.2", "occ-1\tbody mass\t5.9"))
    report = build_project(load_project(root), output=root / "out")
    assert report.reused_sources == ()
    values = report.tables["individual_values"].sort_values("source_row")
    assert values["value"].iloc[0] == 5.9


def test_data_package_with_several_resources_needs_one_named(tmp_path):
    resource = {"name": "animals", "path": "animals.csv"}
    write_package(tmp_path, resource, {"animals.csv": "species,animal,mass,svl\n"})
    root = project(tmp_path, PACKAGE_MAPPING.format(read=""))
    with pytest.raises(ConfigError, match="sites, animals"):
        build_project(load_project(root), output=root / "out")


def test_data_package_resource_outside_its_folder_is_refused(tmp_path):
    resource = {"name": "animals", "path": "../../secret.csv"}
    write_package(tmp_path, resource, {})
    (tmp_path / "secret.csv").write_text("species,animal,mass,svl\n")
    root = project(tmp_path, PACKAGE_MAPPING.format(read="read: {resource: animals}\n"))
    with pytest.raises(UnsafePathError):
        build_project(load_project(root), output=root / "out")


def test_resource_option_only_applies_to_data_packages(tmp_path):
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "t.csv").write_text("species,mass\n")
    mapping = PACKAGE_MAPPING.replace("pkg/datapackage.json", "t.csv").format(
        read="read: {resource: animals}\n"
    )
    with pytest.raises(ConfigError, match="read.resource"):
        load_project(project(tmp_path, mapping))


def test_rejects_table_names_rows_of_the_extension(tmp_path):
    root = archive_project(tmp_path)
    build_project(load_project(root), output=root / "out")
    rejects = pd.read_csv(root / "out" / "rejects.csv")
    assert set(rejects["column"]) == {"measurementValue"}
    assert sorted(rejects["raw_value"].astype(str)) == ["4.0", "abc"]
