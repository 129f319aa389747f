"""Time the unit-consistency check on a one-million-row long table (invented data).

Run: `python benchmarks/bench_check.py [rows]`. The table is generated here with a fixed seed:
20 invented sources, 500 invented taxa, three traits (wet body mass in g, snout-vent length in
mm, body temperature in °C); one source's masses are written in g but labelled kg, so the check
has one real finding to make. It prints the seconds for reading + converting + checking the CSV
(`check_table`) and for the detection alone (`check_values`). Target: a few seconds, so that a
reviewer can run it interactively. Not run by pytest.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from harmonize.check import check_values
from harmonize.check_sources import TableSpec, check_table

TRAITS = (  # trait, unit, typical log10 level, log10 spread between taxa
    ("body_mass_wet", "g", 1.5, 0.6),
    ("snout_vent_length", "mm", 1.8, 0.25),
    ("body_temperature", "degC", None, None),
)


def invented_table(rows: int, seed: int = 7) -> pd.DataFrame:
    """INVENTED benchmark data: not measurements of anything."""
    rng = np.random.default_rng(seed)
    sources = np.array([f"bench-source-{i:02d}" for i in range(20)])
    taxa = np.array([f"Inventus species{i:03d}" for i in range(500)])
    source = rng.integers(0, len(sources), rows)
    taxon = rng.integers(0, len(taxa), rows)
    trait = rng.integers(0, len(TRAITS), rows)
    taxon_level = {
        t: rng.normal(level or 0, spread or 1, len(taxa)) for t, _, level, spread in TRAITS
    }
    value = np.empty(rows)
    for i, (name, _unit, level, _spread) in enumerate(TRAITS):
        here = trait == i
        if level is None:  # body temperature: a linear scale around 30 °C
            value[here] = rng.normal(30 + taxon_level[name][taxon[here]] * 2, 1.5)
        else:
            value[here] = 10 ** rng.normal(taxon_level[name][taxon[here]], 0.05)
    unit = np.array([u for _, u, _, _ in TRAITS])[trait].astype(object)
    planted = (source == 3) & (trait == 0)
    unit[planted] = "kg"  # g values written with a kg label: they will read 1000 times too large
    return pd.DataFrame(
        {
            "source": sources[source],
            "species": taxa[taxon],
            "trait": np.array([t for t, _, _, _ in TRAITS])[trait],
            "value": np.round(value, 6),
            "unit": unit,
        }
    )


def main(rows: int) -> None:
    table = invented_table(rows)
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "bench.csv"
        table.to_csv(path, index=False)
        spec = TableSpec(
            path, taxon="species", source="source", value_column="value",
            trait_column="trait", unit_column="unit",
        )  # fmt: skip
        start = time.perf_counter()
        result = check_table(spec)
        whole = time.perf_counter() - start
    observations = result.observations.drop(columns=["flagged"])
    start = time.perf_counter()
    findings, _ = check_values(observations, result.traits, "source")
    detection = time.perf_counter() - start
    suspected = [f for f in findings if f.kind == "suspected-unit-error"]
    print(f"rows: {rows}")
    print(f"check_table (read, parse, convert, check): {whole:.2f} s")
    print(f"check_values (detection only): {detection:.2f} s")
    print(f"suspected unit errors: {[(f.trait, f.group, f.factor) for f in suspected]}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000)
