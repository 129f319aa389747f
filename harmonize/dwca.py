"""Export a built data package as two Darwin Core Archives (DwC-A, the TDWG text guide).

`export_dwca(package_folder, archive)` writes:

- `archive` — individual values: an Occurrence core (one row per organism at one place and time)
  and a MeasurementOrFact extension with one row per value;
- `<archive stem>-summaries.zip` — population summaries: a Taxon core with one row per
  population (taxon, source, site, sex, life stage, date) and one MeasurementOrFact row per
  statistic, the statistic named first in `measurementMethod` ("statistic: sd; sd: from se").

Individual values and summaries stay in separate archives for the same reason the data package
keeps them in separate resources: a mean is not a measurement of one organism.

Terms used (all `http://rs.tdwg.org/dwc/terms/`): measurementType is the vocabulary trait id (the
label is in measurementRemarks), measurementUnit the UCUM code, measurementMethod the name match,
unit origin and temperature handling, measurementRemarks the model role, trait label, provenance
(source and row, original name and value), qualifier and flags. `eventDate` and
`measurementDeterminedDate` are filled only when the date as given is already ISO 8601
(YYYY, YYYY-MM or YYYY-MM-DD); the date as given is always in `verbatimEventDate`.

Guarantees the reader does not check (ECOSYSTEM-NOTES §4): unique core ids, every extension row
points at a core row, every meta.xml attribute written out, files at the zip root, fixed zip
timestamps so that the same package gives the same bytes. Reading archives written by others is
`harmonize.foreign`'s job; validating the package before export is `harmonize.package_validate`'s.
"""

from __future__ import annotations

import csv
import io
import json
import os
import zipfile
from dataclasses import dataclass
from pathlib import Path
from xml.sax.saxutils import escape, quoteattr

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from harmonize.errors import ConfigError, SourceReadError
from harmonize.package_validate import DESCRIPTOR_NAME, check_paths

DWC = "http://rs.tdwg.org/dwc/terms/"
OCCURRENCE = DWC + "Occurrence"
TAXON = DWC + "Taxon"
MEASUREMENT_OR_FACT = DWC + "MeasurementOrFact"
# Population statistics in export order; 'value' is a category stated for the population.
STATISTICS = ("n", "mean", "sd", "se", "min", "max", "median", "q1", "q3", "ci_low", "ci_high")
COUNT_UNIT = "{count}"  # UCUM annotation for a number of individuals, as the vocabulary's 'count'
_ZIP_TIME = (1980, 1, 1, 0, 0, 0)  # earliest time a zip entry can hold: no wall clock in bytes
_ISO_DATE = r"^\d{4}(-\d{2}(-\d{2})?)?$"
_MOF_TERMS = (
    "measurementID", "measurementType", "measurementValue", "measurementUnit",
    "measurementDeterminedDate", "measurementMethod", "measurementRemarks",
)  # fmt: skip


@dataclass(frozen=True)
class ExportSummary:
    """What `export_dwca` wrote: both archive paths and their row counts."""

    archive: Path
    summaries_archive: Path
    occurrences: int
    measurements: int
    populations: int
    summary_measurements: int


def summaries_archive_path(archive: Path) -> Path:
    """Where the population-summaries archive goes: 'traits.zip' -> 'traits-summaries.zip'."""
    archive = Path(archive)
    return archive.with_name(f"{archive.stem}-summaries{archive.suffix or '.zip'}")


def export_dwca(package_folder: Path, archive: Path) -> ExportSummary:
    """Write the package in `package_folder` as two Darwin Core Archives (see module docstring)."""
    folder = Path(package_folder)
    check_paths(folder)  # refuses descriptors pointing outside the folder before any read
    descriptor = json.loads((folder / DESCRIPTOR_NAME).read_text(encoding="utf-8"))
    resources = {r.get("name"): r for r in descriptor.get("resources", []) if isinstance(r, dict)}
    wanted = ("individual_values", "population_summaries", "traits", "sources")
    missing = [name for name in wanted if name not in resources]
    if missing:
        raise ConfigError(
            f"not a harmonize data package: no resource {', '.join(missing)}",
            file=str(folder / DESCRIPTOR_NAME),
            hint="export a folder written by `harmonize build`",
        )
    tables = {name: _read_resource(folder, resources[name]) for name in wanted}
    labels = dict(zip(tables["traits"]["trait_id"], tables["traits"]["label"], strict=True))

    archive = Path(archive)
    core, facts = _individual_archive(tables["individual_values"], labels)
    meta = _meta_xml(OCCURRENCE, list(core.columns), list(facts.columns))
    eml = _eml_xml(descriptor, tables["sources"], "individual values (Occurrence core)")
    _write_zip(archive, meta, eml, ("occurrence.txt", core), ("measurementorfact.txt", facts))

    summaries = summaries_archive_path(archive)
    taxa, statistics = _summaries_archive(tables["population_summaries"], labels)
    meta = _meta_xml(TAXON, list(taxa.columns), list(statistics.columns))
    eml = _eml_xml(descriptor, tables["sources"], "population summaries (Taxon core)")
    _write_zip(summaries, meta, eml, ("taxon.txt", taxa), ("measurementorfact.txt", statistics))
    return ExportSummary(archive, summaries, len(core), len(facts), len(taxa), len(statistics))


# ---------------------------------------------------------------- reading the package


def _read_resource(folder: Path, resource: dict) -> pd.DataFrame:
    """One resource as text columns, missing cells as '' (float text stays round-trip exact)."""
    paths = resource.get("path")
    paths = paths if isinstance(paths, list) else [paths]
    frames = []
    for relative in paths:
        path = folder / str(relative)
        if not path.is_file():
            raise SourceReadError("resource file missing from the package", file=str(path))
        if resource.get("format") == "parquet" or path.suffix == ".parquet":
            table = pq.read_table(path)
            text = {n: pc.cast(table.column(n), pa.string()) for n in table.column_names}
            frames.append(pa.table(text).to_pandas().fillna(""))
        else:
            frames.append(pd.read_csv(path, dtype=str, keep_default_na=False, na_filter=False))
    return pd.concat(frames, ignore_index=True) if len(frames) > 1 else frames[0]


# ---------------------------------------------------------------- building rows


def _joined(parts: list[pd.Series]) -> pd.Series:
    """Join text parts with '; ', leaving out empty parts (vectorised)."""
    out = pd.Series("", index=parts[0].index, dtype=object)
    for part in parts:
        part = part.astype(str)
        glue = np.where((out != "") & (part != ""), "; ", "")
        out = out + glue + part
    return out


def _labelled(label: str, values: pd.Series, suffix: str = "") -> pd.Series:
    """'label: value' where the value is not empty, '' elsewhere."""
    return pd.Series(np.where(values != "", label + values + suffix, ""), index=values.index)


def _iso_date(dates: pd.Series) -> pd.Series:
    return dates.where(dates.str.match(_ISO_DATE), "")


def _escape_id(values: pd.Series) -> pd.Series:
    """Percent-escape the characters our id scheme uses as separators, so ids stay unique."""
    return values.str.replace("%", "%25").str.replace(":", "%3A").str.replace("#", "%23")


def _method(frame: pd.DataFrame) -> list[pd.Series]:
    """measurementMethod parts shared by values and statistics: match, unit, temperature."""
    score = frame["match_score"]
    unit_origin = frame["unit_origin"]
    original_unit = frame["original_unit"]
    unit_part = np.where(
        original_unit != "",
        "unit: converted from '" + original_unit + "' (" + unit_origin + ")",
        _labelled("unit origin: ", unit_origin),
    )
    return [
        "name match: " + frame["match_method"] + np.where(score != "", ", score " + score, ""),
        pd.Series(unit_part, index=frame.index),
        _labelled("measured at ", frame["measurement_temperature"], " degC"),
        _labelled("temperature correction: ", frame["temperature_correction"]),
    ]


def _remarks(frame: pd.DataFrame, labels: dict[str, str]) -> list[pd.Series]:
    label = frame["trait_id"].map(labels).fillna("")
    return [
        "role: " + frame["role"],
        _labelled("trait: ", label),
        "source: " + frame["source_id"] + " row " + frame["source_row"],
    ]


def _individual_archive(
    values: pd.DataFrame, labels: dict[str, str]
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Occurrence core rows and MeasurementOrFact rows for the individual values."""
    values = values.assign(_row=pd.to_numeric(values["source_row"]))
    values = values.sort_values(["source_id", "_row", "record_id"], kind="stable")
    values = values.reset_index(drop=True)
    has_id = values["individual_id"] != ""
    # An Occurrence is one organism at one place and time (Darwin Core): a re-captured animal
    # is a second occurrence of the same organismID. Rows without an individual id are one
    # occurrence per source row (a wide row holds one organism's values).
    context = ["taxon_verbatim", "taxon", "taxon_qualifier", "sex", "life_stage", "site", "date"]
    row_key = values["source_row"].where(~has_id, "")
    keys = [values["source_id"], values["individual_id"], row_key] + [values[c] for c in context]
    occurrence = pd.Series(pd.MultiIndex.from_arrays(keys).factorize()[0], index=values.index)
    first = values.loc[~occurrence.duplicated()].copy()
    first["_occurrence"] = occurrence[first.index].to_numpy()
    nth = first.groupby(["source_id", "individual_id"], sort=False).cumcount() + 1
    by_id = first["source_id"] + ":" + _escape_id(first["individual_id"])
    by_id = by_id + np.where(nth > 1, ":" + nth.astype(str), "")
    first_has_id = first["individual_id"] != ""
    ids = pd.Series(
        np.where(first_has_id, by_id, first["source_id"] + "#" + first["source_row"]),
        index=first.index,
    )
    if ids.duplicated().any():  # the scheme above makes this impossible; never ship a bad archive
        raise RuntimeError("Darwin Core export produced duplicate occurrence ids (a bug)")
    core = pd.DataFrame(
        {
            "occurrenceID": ids,
            "basisOfRecord": "Occurrence",  # the package does not say how organisms were observed
            "datasetID": first["source_id"],
            "organismID": first["individual_id"],
            "scientificName": first["taxon"],
            "verbatimIdentification": first["taxon_verbatim"],
            "identificationQualifier": first["taxon_qualifier"],
            "sex": first["sex"],
            "lifeStage": first["life_stage"],
            "locality": first["site"],
            "eventDate": _iso_date(first["date"]),
            "verbatimEventDate": first["date"],
        }
    )
    id_of = pd.Series(ids.to_numpy(), index=first["_occurrence"].to_numpy())
    numeric = values["value"] != ""
    facts = pd.DataFrame(
        {
            "occurrenceID": id_of[occurrence].to_numpy(),
            "measurementID": values["record_id"],
            "measurementType": values["trait_id"],
            "measurementValue": values["value"].where(numeric, values["value_text"]),
            "measurementUnit": values["ucum"].where(numeric, ""),
            "measurementDeterminedDate": _iso_date(values["date"]),
            "measurementMethod": _joined(_method(values)),
            "measurementRemarks": _joined(
                _remarks(values, labels)
                + [
                    "original: " + values["original_name"] + " = " + values["original_value"],
                    _labelled("qualifier: ", values["qualifier"]),
                    _labelled("flags: ", values["flags"]),
                ]
            ),
        }
    )
    return core.reset_index(drop=True), facts.reset_index(drop=True)


def _summaries_archive(
    summaries: pd.DataFrame, labels: dict[str, str]
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Taxon core rows (one per population) and one MeasurementOrFact row per statistic."""
    summaries = summaries.assign(_row=pd.to_numeric(summaries["source_row"]))
    summaries = summaries.sort_values(["source_id", "_row", "trait_id", "record_id"])
    summaries = summaries.reset_index(drop=True)
    context = ["taxon_verbatim", "taxon", "taxon_qualifier", "sex", "life_stage", "site", "date"]
    keys = [summaries["source_id"]] + [summaries[c] for c in context]
    population = pd.Series(pd.MultiIndex.from_arrays(keys).factorize()[0], index=summaries.index)
    first = summaries.loc[~population.duplicated()]
    number = first.groupby("source_id", sort=False).cumcount() + 1
    ids = first["source_id"] + ":population-" + number.astype(str)
    taxa = pd.DataFrame(
        {
            "taxonID": ids,
            "scientificName": first["taxon"],
            "datasetID": first["source_id"],
            "taxonRemarks": _joined(
                [
                    pd.Series("population summary", index=first.index),
                    _labelled("name as given: ", first["taxon_verbatim"]),
                    _labelled("qualifier: ", first["taxon_qualifier"]),
                ]
            ),
            "locality": first["site"],
            "sex": first["sex"],
            "lifeStage": first["life_stage"],
            "eventDate": _iso_date(first["date"]),
            "verbatimEventDate": first["date"],
        }
    )
    id_of = pd.Series(ids.to_numpy(), index=population[first.index].to_numpy())
    pieces = []
    for order, statistic in enumerate((*STATISTICS, "value")):
        column = "value_text" if statistic == "value" else statistic
        rows = summaries.loc[summaries[column] != ""]
        if statistic == "n":
            unit = pd.Series(COUNT_UNIT, index=rows.index)
        elif statistic == "value":
            unit = pd.Series("", index=rows.index)
        else:
            unit = rows["ucum"]
        how = {
            "sd": _labelled("sd: ", rows["sd_method"]),
            "mean": _labelled("mean: ", rows["mean_method"]),
            "ci_low": _labelled("confidence level: ", rows["ci_level"]),
            "ci_high": _labelled("confidence level: ", rows["ci_level"]),
        }.get(statistic, pd.Series("", index=rows.index))
        pieces.append(
            pd.DataFrame(
                {
                    "taxonID": id_of[population[rows.index]].to_numpy(),
                    "measurementID": rows["record_id"] + ":" + statistic,
                    "measurementType": rows["trait_id"],
                    "measurementValue": rows[column],
                    "measurementUnit": unit,
                    "measurementDeterminedDate": _iso_date(rows["date"]),
                    "measurementMethod": _joined(
                        [pd.Series(f"statistic: {statistic}", index=rows.index), how]
                        + _method(rows)
                    ),
                    "measurementRemarks": _joined(
                        _remarks(rows, labels)
                        + [
                            _labelled("original: ", rows["original_name"]),
                            _labelled("flags: ", rows["flags"]),
                        ]
                    ),
                    "_population": population[rows.index].to_numpy(),
                    "_order": order,
                }
            )
        )
    statistics = pd.concat(pieces, ignore_index=True)
    statistics = statistics.sort_values(["_population", "measurementType", "_order"], kind="stable")
    statistics = statistics.drop(columns=["_population", "_order"]).reset_index(drop=True)
    return taxa.reset_index(drop=True), statistics


# ---------------------------------------------------------------- writing the archive


def _meta_xml(core_type: str, core_columns: list[str], extension_columns: list[str]) -> str:
    """meta.xml with every attribute written out: python-dwca-reader's defaults differ from the
    DwC text schema's (ECOSYSTEM-NOTES §4), so nothing may be left to a default."""
    attributes = (
        'encoding="UTF-8" fieldsTerminatedBy="\\t" linesTerminatedBy="\\n" '
        'fieldsEnclosedBy="&quot;" ignoreHeaderLines="1"'
    )

    def fields(columns: list[str], first: int) -> str:
        return "".join(
            f'    <field index="{i}" term="{DWC}{columns[i]}"/>\n'
            for i in range(first, len(columns))
        )

    core_file = "taxon.txt" if core_type == TAXON else "occurrence.txt"

    return (
        '<?xml version="1.0" encoding="UTF-8"?>\n'
        '<archive xmlns="http://rs.tdwg.org/dwc/text/" metadata="eml.xml">\n'
        f'  <core rowType="{core_type}" {attributes}>\n'
        f"    <files><location>{core_file}</location></files>\n"
        '    <id index="0"/>\n'
        f"{fields(core_columns, 0)}"
        "  </core>\n"
        f'  <extension rowType="{MEASUREMENT_OR_FACT}" {attributes}>\n'
        "    <files><location>measurementorfact.txt</location></files>\n"
        '    <coreid index="0"/>\n'
        # column 0 is the core id the row belongs to, declared by <coreid>
        f"{fields(extension_columns, 1)}"
        "  </extension>\n"
        "</archive>\n"
    )


def _eml_xml(descriptor: dict, sources: pd.DataFrame, holds: str) -> str:
    """A short EML document: title, the package description (with any 'invented data'
    statement it carries), what this archive holds, the licence and how to cite each source."""
    title = str(descriptor.get("title") or descriptor.get("name") or "harmonize export")
    description = str(descriptor.get("description") or "")
    tool = descriptor.get("x-harmonize", {})
    about = (
        f"Darwin Core Archive of the {holds} of data package '{descriptor.get('name', '')}' "
        f"version {descriptor.get('version', '')}, written by harmonize "
        f"{tool.get('tool_version', '')} with vocabulary {tool.get('vocabulary_version', '')}."
    )
    licences = [
        str(item.get("name") or item.get("path") or "")
        for item in descriptor.get("licenses", [])
        if isinstance(item, dict)
    ]
    cites = [
        f"{s}: {c}" + (f" (licence {lic})" if lic else "")
        for s, c, lic in zip(
            sources["source_id"], sources["citation"], sources["licence"], strict=True
        )
    ]
    paragraphs = "".join(f"<para>{escape(p)}</para>" for p in (description, about) if p)
    rights = "".join(f"<para>{escape(x)}</para>" for x in licences if x)
    citations = "".join(f"<para>{escape(x)}</para>" for x in cites)
    return (
        '<?xml version="1.0" encoding="UTF-8"?>\n'
        '<eml:eml xmlns:eml="https://eml.ecoinformatics.org/eml-2.2.0" '
        f'packageId={quoteattr(str(descriptor.get("name", "package")))} system="harmonize">\n'
        f"  <dataset>\n    <title>{escape(title)} – {escape(holds)}</title>\n"
        f"    <abstract>{paragraphs}</abstract>\n"
        + (f"    <intellectualRights>{rights}</intellectualRights>\n" if rights else "")
        + (f"    <additionalInfo>{citations}</additionalInfo>\n" if citations else "")
        + "  </dataset>\n</eml:eml>\n"
    )


def _tab_text(frame: pd.DataFrame) -> bytes:
    buffer = io.StringIO()
    frame.to_csv(
        buffer,
        sep="\t",
        index=False,
        lineterminator="\n",
        quotechar='"',
        quoting=csv.QUOTE_MINIMAL,
        doublequote=True,
    )
    return buffer.getvalue().encode("utf-8")


def _write_zip(
    archive: Path,
    meta: str,
    eml: str,
    core: tuple[str, pd.DataFrame],
    extension: tuple[str, pd.DataFrame],
) -> None:
    """Write the zip next to its destination, then move it into place (no half-written archive)."""
    members = [
        ("meta.xml", meta.encode("utf-8")),
        ("eml.xml", eml.encode("utf-8")),
        (core[0], _tab_text(core[1])),
        (extension[0], _tab_text(extension[1])),
    ]
    archive.parent.mkdir(parents=True, exist_ok=True)
    partial = archive.with_name(f".{archive.name}.partial-{os.getpid()}")
    try:
        with zipfile.ZipFile(partial, "w") as bundle:
            for name, data in members:
                entry = zipfile.ZipInfo(name, date_time=_ZIP_TIME)
                entry.compress_type = zipfile.ZIP_DEFLATED
                entry.create_system = 3  # Unix, whatever system writes it: same bytes everywhere
                entry.external_attr = 0o644 << 16
                bundle.writestr(entry, data, compresslevel=6)
        os.replace(partial, archive)
    finally:
        partial.unlink(missing_ok=True)
