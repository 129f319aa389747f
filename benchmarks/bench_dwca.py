"""Time reading a Darwin Core Archive source and measure its peak memory (invented data).

Run: `python benchmarks/bench_dwca.py [EXTENSION_ROWS] [--occurrences N] [--folder DIR]`.
An archive is generated here with a fixed pattern: N occurrences in the core (three invented
species, invented sites) and EXTENSION_ROWS MeasurementOrFact rows pointing at them, zipped.
A child process then reads the whole source through `harmonize.foreign.read_dwca` (the reader a
build uses, in batches of `limits.batch_rows`) and reports the reading's seconds; its peak RSS
comes from `bench_build.run_child`, so the reading's memory is not mixed with this script's. The extension streams:
memory should follow the batch size and the core, not the extension. Not run by pytest.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
import zipfile
from pathlib import Path

from bench_build import run_child  # wall time and peak memory of a child process

META = """<?xml version="1.0" encoding="UTF-8"?>
<archive xmlns="http://rs.tdwg.org/dwc/text/">
 <core rowType="http://rs.tdwg.org/dwc/terms/Occurrence" fieldsTerminatedBy="\\t"
       fieldsEnclosedBy="" ignoreHeaderLines="1">
  <files><location>occurrence.txt</location></files>
  <id index="0"/>
  <field index="1" term="http://rs.tdwg.org/dwc/terms/scientificName"/>
  <field index="2" term="http://rs.tdwg.org/dwc/terms/locality"/>
 </core>
 <extension rowType="http://rs.tdwg.org/dwc/terms/MeasurementOrFact" fieldsTerminatedBy="\\t"
            fieldsEnclosedBy="" ignoreHeaderLines="1">
  <files><location>mof.txt</location></files>
  <coreid index="0"/>
  <field index="1" term="http://rs.tdwg.org/dwc/terms/measurementType"/>
  <field index="2" term="http://rs.tdwg.org/dwc/terms/measurementValue"/>
  <field index="3" term="http://rs.tdwg.org/dwc/terms/measurementUnit"/>
 </extension>
</archive>
"""
MAPPING = """source: bench-archive
path: ../archive.zip
level: individual
layout: long
citation: invented benchmark data
context: {taxon: scientificName, individual: coreid, site: locality}
columns: {trait: measurementType, value: measurementValue, unit: measurementUnit}
"""
SPECIES = ("Podarcis inventa", "Zootoca inventa", "Lacerta inventa")  # invented names


def write_archive(folder: Path, rows: int, occurrences: int) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    archive = folder / "archive.zip"
    with zipfile.ZipFile(archive, "w", compression=zipfile.ZIP_DEFLATED) as bundle:
        bundle.writestr("meta.xml", META)
        bundle.writestr(
            "occurrence.txt",
            "id\tname\tsite\n"
            + "".join(
                f"occ-{i}\t{SPECIES[i % 3]}\tInvented site {i % 97}\n" for i in range(occurrences)
            ),
        )
        with bundle.open("mof.txt", "w", force_zip64=True) as facts:
            facts.write(b"coreid\ttype\tvalue\tunit\n")
            for start in range(0, rows, 100_000):
                block = range(start, min(rows, start + 100_000))
                facts.write(
                    "".join(
                        f"occ-{i % occurrences}\tbody mass\t{i % 997 / 10:.1f}\tg\n" for i in block
                    ).encode()
                )
    (folder / "mappings").mkdir(exist_ok=True)
    (folder / "mappings" / "archive.yaml").write_text(MAPPING, encoding="utf-8")
    (folder / "harmonize.yaml").write_text("name: bench-archive\n", encoding="utf-8")
    return archive


def _read(folder: Path) -> None:
    from harmonize.foreign import read_dwca
    from harmonize.project import load_project
    from harmonize.sources import read_header

    project = load_project(folder)
    mapping = project.mappings[0]
    start = time.perf_counter()
    rows = sum(len(f) for f in read_dwca(mapping, read_header(mapping), project.limits))
    print(json.dumps({"rows": rows, "seconds": time.perf_counter() - start}))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("rows", type=int, nargs="?", default=3_000_000)
    parser.add_argument("--occurrences", type=int, default=200_000)
    parser.add_argument("--folder", type=Path, default=Path("bench-data") / "dwca")
    parser.add_argument("--read", type=Path, help=argparse.SUPPRESS)
    options = parser.parse_args()
    if options.read:
        _read(options.read)
        return
    folder = options.folder / f"rows-{options.rows}-occ-{options.occurrences}"
    if not (folder / "archive.zip").is_file():
        write_archive(folder, options.rows, options.occurrences)
    _, peak_mib, out = run_child(
        [sys.executable, str(Path(__file__).resolve()), "--read", str(folder)]
    )
    result = json.loads(out.strip().splitlines()[-1])
    result["peak_mib"] = peak_mib
    print(
        f"{result['rows']} extension rows over {options.occurrences} occurrences: "
        f"read in {result['seconds']:.2f} s, peak {result['peak_mib']:.0f} MiB"
    )
    print(json.dumps(result))


if __name__ == "__main__":
    main()
