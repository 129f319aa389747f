"""Write a seeded, messy long trait table (INVENTED data) and a project that builds it.

Run: `python benchmarks/make_long_table.py ROWS FOLDER [--seed N] [--partitions K]`.
FOLDER gets `harmonize.yaml`, `mappings/long-table.yaml` and `data/long.parquet` (one row per
value: species, individual, sex, site, date, trait name, value text, unit text); with
`--partitions K` also `data/long-parts/part-XXXX.parquet`, the same rows split into K files for
the distributed path. The project uses the bundled vocabulary.

Every number is INVENTED: drawn from each trait's plausible range in the vocabulary, then
expressed in one of several units. The mess is made the way spreadsheets make it: many spellings
of each trait name (label, synonyms, case, separators), several units per trait, and a few
percent bad cells (words, ranges, missing units, unknown units, unmatched names, blanks).
Generation is vectorised (numpy), so 5 million rows take a few seconds. Not run by pytest.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from harmonize.match import MatchSettings, match_names
from harmonize.units import conversion
from harmonize.vocab import load_vocabulary

# trait id -> units it is written in (each checked against the canonical unit below)
TRAIT_UNITS = {
    "body_mass_wet": ["g", "kg", "mg", "gram", "grams"],
    "snout_vent_length": ["mm", "cm", "millimetre", "m"],
    "total_length": ["mm", "cm", "in"],
    "tail_length": ["mm", "cm"],
    "head_width": ["mm", "cm", "µm"],
    "hind_foot_length": ["mm", "cm"],
    "body_temperature": ["degC", "°C", "K", "degF", "C"],
    "critical_thermal_maximum": ["degC", "°C", "K"],
    "fur_depth": ["mm", "cm", "in"],
    "body_surface_area": ["cm^2", "mm^2", "m^2", "cm2"],
    "egg_mass": ["g", "mg"],
}
BAD_VALUES = ["n.d.x", "abc", "12-15", "?", "1,2,3", "inf", "--"]
UNKNOWN_UNITS = ["furlong-ish", "bananas", "units?"]
UNMATCHED_NAMES = ["field notes", "observer", "photo number", "qq zz"]
SPECIES = [f"Lacerta inventa{i:03d}" for i in range(300)]
SITES = [f"site-{i:03d}" for i in range(120)]
BAD_SHARE = 0.04  # a few percent of cells are unusable, by design


def _spellings(term) -> list[str]:
    base = [term.label, *term.synonyms[:8]]
    out = []
    for text in base:
        out += [text, text.upper(), text.title(), text.replace(" ", "_"), f" {text} "]
    return list(dict.fromkeys(out))


def _plan(vocabulary):
    """(name, trait, unit, scale, offset) rows: every accepted spelling x every usable unit."""
    accepted_names = {}
    for trait in TRAIT_UNITS:
        names = _spellings(vocabulary.terms[trait])
        matches = match_names([n.strip() for n in names], vocabulary, MatchSettings(), {})
        accepted_names[trait] = [
            n
            for n in names
            if matches[n.strip()].trait_id == trait and matches[n.strip()].status == "accepted"
        ]
    combos = []
    for trait, unit_texts in TRAIT_UNITS.items():
        term = vocabulary.terms[trait]
        for unit in unit_texts:
            conv = conversion(unit, term.unit)
            if not conv.ok:
                continue
            for name in accepted_names[trait]:
                combos.append((name, trait, unit, conv.scale, conv.offset, term.plausible))
    return combos


def make_table(rows: int, seed: int = 20261203) -> pa.Table:
    """The messy long table of `rows` rows (INVENTED values), as an Arrow table of text."""
    rng = np.random.default_rng(seed)
    vocabulary = load_vocabulary(None)
    combos = _plan(vocabulary)
    pick = rng.integers(0, len(combos), rows)
    names = np.array([c[0] for c in combos], dtype=object)[pick]
    units = np.array([c[2] for c in combos], dtype=object)[pick]
    scale = np.array([c[3] for c in combos])[pick]
    offset = np.array([c[4] for c in combos])[pick]
    low = np.array([max(c[5][0], 1e-3) if c[5][0] >= 0 else c[5][0] for c in combos])[pick]
    high = np.array([c[5][1] for c in combos])[pick]
    # a value inside the central part of the plausible range, in the canonical unit ...
    span = np.minimum(high - low, 1e4)
    canonical = low + span * rng.uniform(0.05, 0.6, rows)
    # ... written in the cell's unit (inverse of canonical = raw * scale + offset)
    raw = (canonical - offset) / scale
    value_text = np.char.mod("%.6g", raw).astype(object)

    bad = rng.random(rows) < BAD_SHARE
    kind = rng.integers(0, 5, rows)
    at = bad & (kind == 0)
    value_text[at] = np.array(BAD_VALUES, dtype=object)[rng.integers(0, len(BAD_VALUES), at.sum())]
    at = bad & (kind == 1)
    units[at] = None  # missing unit
    at = bad & (kind == 2)
    units[at] = np.array(UNKNOWN_UNITS, dtype=object)[rng.integers(0, len(UNKNOWN_UNITS), at.sum())]
    at = bad & (kind == 3)
    names[at] = np.array(UNMATCHED_NAMES, dtype=object)[
        rng.integers(0, len(UNMATCHED_NAMES), at.sum())
    ]
    at = bad & (kind == 4)
    value_text[at] = "NA"  # empty by declaration

    individual = rng.integers(0, max(rows // 6, 1), rows)
    days = rng.integers(0, 3650, rows).astype("timedelta64[D]") + np.datetime64("2010-01-01")
    return pa.table(
        {
            "species": pa.array(np.array(SPECIES, dtype=object)[individual % len(SPECIES)]),
            "animal": pa.array(np.char.mod("ind-%07d", individual).astype(object)),
            "sex": pa.array(np.array(["f", "m", "NA"], dtype=object)[individual % 3]),
            "site": pa.array(np.array(SITES, dtype=object)[rng.integers(0, len(SITES), rows)]),
            "date": pa.array(np.datetime_as_string(days, unit="D").astype(object)),
            "measure": pa.array(names, type=pa.string()),
            "value": pa.array(value_text, type=pa.string()),
            "unit": pa.array(units, type=pa.string()),
        }
    )


PROJECT_FILE = """\
# Benchmark project written by benchmarks/make_long_table.py: INVENTED data, not measurements.
name: scale-benchmark
title: Scale benchmark (invented data)
description: INVENTED messy long table for timing harmonize at scale.
mappings: ["mappings/*.yaml"]
output: {{folder: out/package, format: {fmt}}}
"""
MAPPING_FILE = """\
# INVENTED benchmark data written by benchmarks/make_long_table.py.
source: long-table
path: ../data/long.parquet
format: parquet
read: {missing: ["NA", ""]}
citation: "Invented benchmark data - not real measurements"
licence: CC0-1.0
level: individual
layout: long
context: {taxon: species, individual: animal, sex: sex, site: site, date: date}
columns: {trait: measure, value: value, unit: unit}
"""


def write_project(
    folder: Path, rows: int, *, seed: int = 20261203, partitions: int = 0, fmt: str = "parquet"
) -> Path:
    """Write the table and a project around it into `folder`; return the table's path."""
    folder = Path(folder)
    (folder / "data").mkdir(parents=True, exist_ok=True)
    (folder / "mappings").mkdir(exist_ok=True)
    table = make_table(rows, seed)
    target = folder / "data" / "long.parquet"
    pq.write_table(table, target, compression="zstd", row_group_size=262_144)
    if partitions:
        parts = folder / "data" / "long-parts"
        parts.mkdir(exist_ok=True)
        bounds = np.linspace(0, rows, partitions + 1).astype(int)
        for number, (start, stop) in enumerate(zip(bounds[:-1], bounds[1:], strict=True)):
            pq.write_table(table.slice(start, stop - start), parts / f"part-{number:04d}.parquet")
    (folder / "harmonize.yaml").write_text(PROJECT_FILE.format(fmt=fmt), encoding="utf-8")
    (folder / "mappings" / "long-table.yaml").write_text(MAPPING_FILE, encoding="utf-8")
    return target


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("rows", type=int)
    parser.add_argument("folder", type=Path)
    parser.add_argument("--seed", type=int, default=20261203)
    parser.add_argument("--partitions", type=int, default=0)
    parser.add_argument("--format", default="parquet", choices=["csv", "parquet"])
    options = parser.parse_args()
    path = write_project(
        options.folder,
        options.rows,
        seed=options.seed,
        partitions=options.partitions,
        fmt=options.format,
    )
    print(f"wrote {options.rows} rows to {path}")


if __name__ == "__main__":
    main()
