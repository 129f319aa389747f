"""Read tables published by others as sources: Darwin Core Archives and Frictionless packages.

Two formats for `harmonize.sources.READERS`, each a header reader and a batch reader that yield
text frames like the CSV and Parquet readers do, so a mapping treats them like any table:

- `dwca`: a Darwin Core Archive with a MeasurementOrFact (or extended MeasurementOrFact)
  extension, given as the `.zip` or as the `meta.xml` of an unpacked archive. Each extension row
  becomes one row of a long table: `coreid`, the core's terms (scientificName, sex, lifeStage,
  locality, eventDate, ...) and the extension's terms (measurementType, measurementValue,
  measurementUnit, ...), named by the last part of their term URI. Source rows count extension
  rows. A term in both files keeps the core's value under its name and the extension's as
  `mof.<term>`. Extension rows whose core id is not in the core are kept with empty core
  columns (the build rejects their cells for a missing taxon); a core id used twice is refused,
  since it would attach the same values to two records (ECOSYSTEM-NOTES §4).
- `datapackage`: a Frictionless Data Package written by someone else, given as its
  `datapackage.json`; `read: {resource: NAME}` picks the resource (optional when there is one).
  CSV/TSV and Parquet resources are read; the dialect's delimiter, quote character and header,
  the resource's encoding and the schema's `missingValues` (they become empty cells) are honoured.

Both stream: the MeasurementOrFact extension and a package's files are read in batches of
`limits.batch_rows` rows, so memory follows the batch, not the file. An archive's core is held
whole (one row per occurrence, looked up by id for each extension row).

Safety, before any data is read: archive members with absolute paths, drive letters or `..`
are refused (zip-slip), meta.xml locations likewise, every data file is held to the project's
`limits.max_file_bytes`, and package paths go through `harmonize.package_validate.check_paths`.
Nothing here uses the network. Parsing numbers, matching names and converting units are left to
the later stages; this module only reads.
"""

from __future__ import annotations

import csv
import json
import os
import xml.etree.ElementTree as ET
import zipfile
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path, PurePosixPath
from typing import IO, Any

import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from harmonize.errors import ConfigError, SourceReadError, UnsafePathError
from harmonize.foreign_text import (
    arrow_encoding,
    check_size,
    text_tables,
    unsafe_member,
)
from harmonize.package_validate import DESCRIPTOR_NAME, check_paths
from harmonize.project import Limits, Mapping

_TEXT_NS = "{http://rs.tdwg.org/dwc/text/}"
_ESCAPES = {"\\t": "\t", "\\n": "\n", "\\r": "\r"}


# ---------------------------------------------------------------- Darwin Core Archive


@dataclass(frozen=True)
class _FileSpec:
    """One <core> or <extension> of meta.xml (Darwin Core Text Guide)."""

    row_type: str
    location: str
    key_index: int  # <id> of the core, <coreid> of an extension
    fields: tuple[tuple[str, int | None, str], ...]  # (term name, index or None, default)
    delimiter: str
    quote: str
    skip_rows: int
    encoding: str


class _ArchiveFiles:
    """Member files of a zipped or unpacked archive, refusing paths that leave it."""

    def __init__(self, mapping: Mapping, limits: Limits) -> None:
        self.path = mapping.path
        self.limits = limits
        self.zip: zipfile.ZipFile | None = None
        self.base = ""
        if mapping.path.name.lower() == "meta.xml":
            self.folder = Path(os.path.realpath(mapping.path.parent))
            return
        try:
            self.zip = zipfile.ZipFile(mapping.path)
        except zipfile.BadZipFile:
            raise SourceReadError(
                "not a zip file",
                file=str(mapping.path),
                hint="give a Darwin Core Archive (.zip) or the meta.xml of an unpacked one",
            ) from None
        total = 0
        for info in self.zip.infolist():
            reason = unsafe_member(info.filename)
            if reason:
                raise UnsafePathError(
                    f"archive member {info.filename!r} {reason}; the archive is refused",
                    file=str(mapping.path),
                    hint="an archive may only hold files below its own root",
                )
            check_size(info.file_size, limits, f"{mapping.path}:{info.filename}")
            total += info.file_size
        check_size(total, limits, str(mapping.path))
        metas = [n for n in self.zip.namelist() if PurePosixPath(n).name == "meta.xml"]
        if not metas:
            raise SourceReadError(
                "no meta.xml in the archive",
                file=str(mapping.path),
                hint="a Darwin Core Archive describes its files in meta.xml",
            )
        shallowest = min(metas, key=lambda n: n.count("/"))
        self.base = shallowest[: -len("meta.xml")]

    def __enter__(self) -> _ArchiveFiles:
        return self

    def __exit__(self, *exc: object) -> None:
        if self.zip is not None:
            self.zip.close()

    def where(self, name: str) -> str:
        return f"{self.path}:{name}" if self.zip else str(self.folder / name)

    def _refuse_unsafe(self, name: str) -> None:
        reason = unsafe_member(name)
        if reason:
            raise UnsafePathError(
                f"meta.xml location {name!r} {reason}",
                file=str(self.path),
                hint="locations must name files inside the archive",
            )

    def open(self, name: str) -> IO[bytes]:
        if self.zip is None:
            return open(self.member_path(name), "rb")
        self._refuse_unsafe(name)
        try:
            return self.zip.open(self.base + name)
        except KeyError:
            raise SourceReadError(
                f"meta.xml names {name!r}, which is not in the archive", file=str(self.path)
            ) from None

    def member_path(self, name: str) -> Path:
        """The file of a member of an unpacked archive (checked to stay inside its folder)."""
        self._refuse_unsafe(name)
        target = Path(os.path.realpath(self.folder / name))
        if not target.is_relative_to(self.folder):
            raise UnsafePathError(
                f"meta.xml location {name!r} leaves the archive folder once links are resolved",
                file=str(self.path),
            )
        if not target.is_file():
            raise SourceReadError(f"meta.xml names {name!r}, which is missing", file=str(target))
        check_size(target.stat().st_size, self.limits, str(target))
        return target

    def files(self) -> list[Path]:
        """The files an unpacked archive reads: meta.xml, the core and the extension."""
        core, facts = _archive_layout(self)
        return [
            self.member_path("meta.xml"),
            *(self.member_path(s.location) for s in (core, facts)),
        ]


def _attribute(element: ET.Element, name: str, default: str) -> str:
    value = element.get(name)
    if value is None:
        return default
    for written, meant in _ESCAPES.items():
        value = value.replace(written, meant)
    return value


def _file_spec(element: ET.Element, key_tag: str, file: str) -> _FileSpec:
    location = element.find(f"{_TEXT_NS}files/{_TEXT_NS}location")
    key = element.find(f"{_TEXT_NS}{key_tag}")
    if location is None or not (location.text or "").strip() or key is None:
        raise SourceReadError(
            f"meta.xml <{element.tag.removeprefix(_TEXT_NS)}> needs <files><location> and "
            f"<{key_tag}>",
            file=file,
        )
    fields = []
    for field in element.findall(f"{_TEXT_NS}field"):
        term = (field.get("term") or "").rstrip("/")
        name = term.rsplit("/", 1)[-1].rsplit("#", 1)[-1]
        index = field.get("index")
        fields.append(
            (name, int(index) if index not in (None, "") else None, field.get("default", ""))
        )
    # Defaults of the Darwin Core text schema (tdwg_dwc_text.xsd), not those of any one reader.
    return _FileSpec(
        row_type=element.get("rowType", ""),
        location=location.text.strip(),
        key_index=int(key.get("index", "0")),
        fields=tuple(fields),
        delimiter=_attribute(element, "fieldsTerminatedBy", ","),
        quote=_attribute(element, "fieldsEnclosedBy", '"'),
        skip_rows=int(element.get("ignoreHeaderLines", "0") or 0),
        encoding=_attribute(element, "encoding", "UTF-8"),
    )


def _archive_layout(files: _ArchiveFiles) -> tuple[_FileSpec, _FileSpec]:
    """The core and the MeasurementOrFact extension described by meta.xml."""
    where = files.where("meta.xml")
    try:
        with files.open("meta.xml") as handle:
            root = ET.parse(handle).getroot()  # expat >= 2.4 refuses entity expansion bombs
    except ET.ParseError as error:
        raise SourceReadError(f"meta.xml is not well-formed XML ({error})", file=where) from None
    core = root.find(f"{_TEXT_NS}core")
    if core is None:
        raise SourceReadError("meta.xml has no <core>", file=where)
    facts = [
        e
        for e in root.findall(f"{_TEXT_NS}extension")
        if e.get("rowType", "").endswith("MeasurementOrFact")
    ]
    if len(facts) != 1:
        raise SourceReadError(
            f"meta.xml declares {len(facts)} MeasurementOrFact extensions; one is needed",
            file=where,
            hint="harmonize reads the trait values from one MeasurementOrFact extension",
        )
    return _file_spec(core, "id", where), _file_spec(facts[0], "coreid", where)


def _column_names(spec: _FileSpec, key_name: str, taken: set[str], prefix: str) -> list[str]:
    names = [key_name]
    for name, _index, _default in spec.fields:
        names.append(f"{prefix}{name}" if name in taken else name)
    return names


def dwca_header(mapping: Mapping) -> list[str]:
    with _ArchiveFiles(mapping, Limits()) as files:
        core, facts = _archive_layout(files)
    core_names = _column_names(core, "coreid", set(), "")[1:]
    return ["coreid", *core_names, *_column_names(facts, "coreid", set(core_names), "mof.")[1:]]


def _spec_tables(
    files: _ArchiveFiles, spec: _FileSpec, names: list[str], batch_rows: int
) -> Iterator[pa.Table]:
    """The file of one meta.xml part, in batches: key column then one column per declared
    field."""
    by_index = {spec.key_index: names[0]}  # file column -> first output name reading it
    copies: dict[str, str] = {}  # a field sharing a column (occurrenceID at the id's)
    constants: dict[str, str] = {}  # a field with only a default applies to every row
    for name, (_term, index, default) in zip(names[1:], spec.fields, strict=True):
        if index is None:
            constants[name] = default
        elif index in by_index:
            copies[name] = by_index[index]
        else:
            by_index[index] = name
    with files.open(spec.location) as handle:
        for table in text_tables(
            handle,
            file=files.where(spec.location),
            delimiter=spec.delimiter,
            quote=spec.quote,
            skip_rows=spec.skip_rows,
            encoding=arrow_encoding(spec.encoding),
            columns={f"f{index}": name for index, name in by_index.items()},
            batch_rows=batch_rows,
            reopen=lambda: files.open(spec.location),
        ):
            count = len(table)
            yield pa.table(
                {
                    name: table[copies.get(name, name)]
                    if name not in constants
                    else pa.repeat(pa.scalar(constants[name], pa.string()), count)
                    for name in names
                }
            )


def source_files(mapping: Mapping, limits: Limits) -> list[Path]:
    """Every file a `dwca` or `datapackage` source reads (the build's checksum covers them
    all, so a changed data file is never taken for an unchanged source): the zip itself, or
    the meta.xml or datapackage.json and the data files it names, in that order."""
    if mapping.format == "datapackage":
        return [mapping.path, *_resource(mapping).paths]
    if mapping.path.name.lower() != "meta.xml":  # a zipped archive is one file
        return [mapping.path]
    with _ArchiveFiles(mapping, limits) as files:
        return files.files()


def read_dwca(mapping: Mapping, header: list[str], limits: Limits) -> Iterator[pd.DataFrame]:
    """Extension rows in batches, each joined to its core row. The core is held whole (one
    row per occurrence, to look rows up by id); the extension, usually the long file, streams."""
    with _ArchiveFiles(mapping, limits) as files:
        core_spec, facts_spec = _archive_layout(files)
        core_names = _column_names(core_spec, "coreid", set(), "")
        fact_names = _column_names(facts_spec, "coreid", set(core_names[1:]), "mof.")
        core = pa.concat_tables(
            _spec_tables(files, core_spec, core_names, limits.batch_rows)
        ).combine_chunks()
        ids = core["coreid"].combine_chunks()
        if len(pc.unique(ids)) < len(ids):
            repeated = ids.to_pandas()
            raise SourceReadError(
                f"core id {repeated[repeated.duplicated()].iloc[0]!r} is used by more than one "
                "core row",
                file=files.where(core_spec.location),
                hint="core ids must be unique, or the archive's values would be attached twice",
            )
        attached = core.select(core_names[1:])
        for facts in _spec_tables(files, facts_spec, fact_names, limits.batch_rows):
            rows = pc.index_in(facts["coreid"], value_set=ids)  # null: not in the core
            found = attached.take(rows)
            columns = {name: facts[name] for name in fact_names}
            # an extension row whose id the core lacks gets empty core columns
            columns |= {name: pc.fill_null(found[name], "") for name in attached.column_names}
            yield pa.table(columns).select(header).to_pandas()


# ---------------------------------------------------------------- Frictionless Data Package

_DATA_FORMATS = {
    ".csv": "csv",
    ".tsv": "tsv",
    ".tab": "tsv",
    ".parquet": "parquet",
    ".pq": "parquet",
}
_UNSUPPORTED_DIALECT = ("commentChar", "commentRows", "headerJoin")


@dataclass(frozen=True)
class _Resource:
    name: str
    paths: tuple[Path, ...]
    format: str
    delimiter: str
    quote: str
    header: bool
    encoding: str
    fields: tuple[str, ...]
    missing: tuple[str, ...]


def _json_part(folder: Path, value: Any, what: str) -> dict:
    """An inline object, or a JSON file inside the package (paths already checked)."""
    if value is None:
        return {}
    if isinstance(value, str):
        try:
            value = json.loads((folder / value).read_text(encoding="utf-8"))
        except (OSError, ValueError) as error:
            raise ConfigError(f"cannot read the {what} file {value!r} ({error})") from None
    if not isinstance(value, dict):
        raise ConfigError(f"the resource {what} must be an object")
    return value


def _resource(mapping: Mapping) -> _Resource:
    descriptor_file = mapping.path
    if descriptor_file.name != DESCRIPTOR_NAME:
        raise ConfigError(
            f"a data package source must point at its {DESCRIPTOR_NAME}",
            file=mapping.declared_at,
        )
    folder = Path(os.path.realpath(descriptor_file.parent))
    check_paths(folder)  # URLs, absolute paths, '..' and links out of the folder are refused
    descriptor = json.loads(descriptor_file.read_text(encoding="utf-8"))
    resources = [r for r in descriptor.get("resources", []) if isinstance(r, dict)]
    names = [str(r.get("name", "")) for r in resources]
    wanted = mapping.read.resource
    if wanted is None and len(resources) == 1:
        chosen = resources[0]
    elif wanted is not None and wanted in names:
        chosen = resources[names.index(wanted)]
    else:
        raise ConfigError(
            f"resource {wanted!r} is not in the package"
            if wanted
            else f"the package has {len(resources)} resources; name one",
            file=mapping.declared_at,
            hint=f"set read: {{resource: NAME}}, one of: {', '.join(names) or '(none)'}",
        )
    name = str(chosen.get("name", ""))
    paths = chosen.get("path")
    if paths is None:
        raise ConfigError(
            f"resource {name!r} has no path (inline data is not read)", file=str(descriptor_file)
        )
    paths = tuple(folder / str(p) for p in (paths if isinstance(paths, list) else [paths]))
    fmt = str(chosen.get("format") or _DATA_FORMATS.get(paths[0].suffix.lower(), "")).lower()
    if fmt not in ("csv", "tsv", "parquet"):
        raise ConfigError(
            f"resource {name!r} has format {fmt or 'unknown'!r}",
            file=str(descriptor_file),
            hint="harmonize reads CSV, TSV and Parquet resources",
        )
    dialect = _json_part(folder, chosen.get("dialect"), "dialect")
    schema = _json_part(folder, chosen.get("schema"), "schema")
    for key in _UNSUPPORTED_DIALECT:
        if dialect.get(key) not in (None, "", []):
            raise ConfigError(
                f"resource {name!r}: dialect '{key}' is not supported", file=str(descriptor_file)
            )
    if dialect.get("headerRows", [1]) != [1]:
        raise ConfigError(
            f"resource {name!r}: only a header in the first row is supported",
            file=str(descriptor_file),
        )
    fields = tuple(str(f.get("name", "")) for f in schema.get("fields", []) if isinstance(f, dict))
    header = bool(dialect.get("header", True))
    if not header and not fields:
        raise ConfigError(
            f"resource {name!r} has no header row and no schema fields to name its columns",
            file=str(descriptor_file),
        )
    missing = schema.get("missingValues", [""])
    tokens = missing if isinstance(missing, list) else []
    return _Resource(
        name=name,
        paths=paths,
        format=fmt,
        delimiter=str(dialect.get("delimiter", "\t" if fmt == "tsv" else ",")),
        quote=str(dialect.get("quoteChar", '"')),
        header=header,
        encoding=str(chosen.get("encoding", "utf-8")),
        fields=fields,
        missing=tuple(str(t.get("value", "")) if isinstance(t, dict) else str(t) for t in tokens),
    )


def datapackage_header(mapping: Mapping) -> list[str]:
    resource = _resource(mapping)
    first = resource.paths[0]
    if resource.format == "parquet":
        try:
            return list(pq.ParquetFile(first).schema_arrow.names)
        except (pa.ArrowInvalid, OSError) as error:
            raise SourceReadError(
                f"not a readable Parquet file ({error})", file=str(first)
            ) from None
    if not resource.header:
        return list(resource.fields)
    try:
        with open(first, encoding=resource.encoding, newline="") as handle:
            row = next(
                csv.reader(handle, delimiter=resource.delimiter, quotechar=resource.quote), None
            )
    except (OSError, UnicodeDecodeError, LookupError) as error:
        raise SourceReadError(f"cannot read the header ({error})", file=str(first)) from None
    if not row:
        raise SourceReadError("the resource file is empty (no header row)", file=str(first))
    return [name.strip() for name in row]


def read_datapackage(mapping: Mapping, header: list[str], limits: Limits) -> Iterator[pd.DataFrame]:
    resource = _resource(mapping)
    for number, path in enumerate(resource.paths):
        check_size(path.stat().st_size if path.is_file() else 0, limits, str(path))
        if resource.format == "parquet":
            frames = _parquet_batches(path, header, limits.batch_rows)
        else:
            # Data Package multipart resources: only the first file carries the header row.
            skip = 1 if resource.header and number == 0 else 0
            frames = (
                table.to_pandas()
                for table in text_tables(
                    path,
                    file=str(path),
                    delimiter=resource.delimiter,
                    quote=resource.quote,
                    skip_rows=skip,
                    encoding=arrow_encoding(resource.encoding),
                    columns={f"f{i}": name for i, name in enumerate(header)},
                    batch_rows=limits.batch_rows,
                    reopen=lambda path=path: open(path, "rb"),
                )
            )
        for frame in frames:
            if resource.missing:
                frame = frame.mask(frame.isin(list(resource.missing)), "")
            yield frame


def _parquet_batches(path: Path, header: list[str], batch_rows: int) -> Iterator[pd.DataFrame]:
    """A Parquet resource's columns as text, in batches of `batch_rows` rows (one empty frame
    for a file without rows)."""
    try:
        yielded = False
        for batch in pq.ParquetFile(path).iter_batches(batch_size=batch_rows, columns=header):
            text = {n: pc.cast(batch.column(n), pa.string()) for n in header}
            yield pa.table(text).to_pandas().fillna("")
            yielded = True
        if not yielded:
            yield pd.DataFrame({name: pd.Series([], dtype=object) for name in header})
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError, OSError) as error:
        raise SourceReadError(f"cannot read Parquet ({error})", file=str(path)) from None
