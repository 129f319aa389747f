"""Write the demo source tables of the Orrenvald Gradient Network: INVENTED data, not measurements.

The network, its stations, localities and every number are made up for demonstrating
`harmonize`; species names use real genera only so that taxon cleaning has something realistic
to chew on. Values come from a seeded numpy Generator plus a handful of deliberately bad cells
placed at fixed rows (listed in demo_sources/README.md), so the output is byte-identical on
every run. This script only writes files; reading, matching and converting them is the
package's job.

    python demo_sources/make_demo.py              # rewrite the committed files beside this script
    python demo_sources/make_demo.py --out DIR    # write the same files into DIR
"""

from __future__ import annotations

import argparse
import csv
import datetime as dt
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
from scipy import stats

SEED = 20_231_108
INVENTED_NOTE = "invented demo data"
NORTH_FILE = Path("north/lizards.csv")
SOUTH_FILE = Path("south/species_means.parquet")
EAST_FILE = Path("east/respirometry.csv")
WEST_FILE = Path("west/shrews.tsv")
WEST_SEX_FILE = Path("west/shrews_by_sex.csv")
DEMO_FILES = (NORTH_FILE, SOUTH_FILE, EAST_FILE, WEST_FILE, WEST_SEX_FILE)

# Exact conversion factors used to express invented canonical values in the stations' units.
# NIST SP 811 (2008) Appendix B.8: 1 oz (avoirdupois) = 28.349523125 g, 1 in = 25.4 mm,
# thermochemical calorie = 4.184 J; SI Brochure 9th ed. 2.3.1: T/K = t/degC + 273.15.
GRAMS_PER_OUNCE = 28.349523125
MM_PER_INCH = 25.4
JOULES_PER_KCAL = 4184.0
KELVIN_OFFSET = 273.15


def _rounded(value: float, decimals: int, decimal_mark: str = ".") -> str:
    text = f"{value:.{decimals}f}"
    return text.replace(".", decimal_mark)


def _write_delimited(
    path: Path, header: Sequence[str], rows: Sequence[Sequence[str]], delimiter: str, encoding: str
) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    with open(path, "w", encoding=encoding, newline="") as handle:
        writer = csv.writer(handle, delimiter=delimiter, lineterminator="\n")
        writer.writerow(header)
        writer.writerows(rows)


# ---------------------------------------------------------------- north: individual lizards


@dataclass(frozen=True)
class LizardSpecies:
    """Invented adult means for one species (plausible magnitudes, not literature values)."""

    verbatim_names: tuple[str, ...]  # how the station's field sheets spell the name
    verbatim_weights: tuple[float, ...]
    svl_mm: float
    mass_g_at_mean_svl: float
    tail_to_svl: float
    body_temperature_c: float
    ctmax_c: float
    absorptivity_percent: float


WALL_LIZARD = LizardSpecies(
    ("Podarcis muralis", "podarcis muralis", "Podarcis muralis (Laurenti, 1768)"),
    (0.6, 0.25, 0.15),
    62.0,
    5.8,
    1.8,
    33.4,
    43.3,
    88.0,
)
COMMON_LIZARD = LizardSpecies(
    ("Zootoca vivipara", "Zootoca cf. vivipara", "Lacerta vivipara"),
    (0.6, 0.25, 0.15),
    55.0,
    4.1,
    1.4,
    31.2,
    40.9,
    92.0,
)
NORTH_PLAN = (  # locality (invented), species, number of animals
    ("Pian Sercè", WALL_LIZARD, 20),
    ("Costa Brìna", WALL_LIZARD, 10),
    ("Costa Brìna", COMMON_LIZARD, 10),
    ("Prà Alto", COMMON_LIZARD, 20),
)
NORTH_HEADER = (
    "animal_id", "species", "sex", "stage", "locality", "capture_date",
    "SVL_mm", "Masse (g)", "tail_cm", "Tb [°C]", "CTmax", "abs_dorsal", "notes",
)  # fmt: skip
STAGE_SIZE = {"adult": 1.0, "subadult": 0.82, "juvenile": 0.6}


def north_rows(rng: np.random.Generator) -> list[list[str]]:
    season_start = dt.date(2023, 5, 8)
    records = []
    for locality, species, count in NORTH_PLAN:
        days = rng.integers(0, 110, size=count)
        for day in days:
            records.append((season_start + dt.timedelta(days=int(day)), locality, species))
    order = sorted(range(len(records)), key=lambda i: (records[i][0], records[i][1], i))
    rows = []
    for number, index in enumerate(order, start=1):
        date, locality, species = records[index]
        name = str(rng.choice(species.verbatim_names, p=species.verbatim_weights))
        sex = str(rng.choice(["M", "F"]))
        stage = str(rng.choice(list(STAGE_SIZE), p=[0.75, 0.15, 0.10]))
        size = STAGE_SIZE[stage]
        svl = species.svl_mm * size * (1.03 if sex == "M" else 0.97) + rng.normal(0, 3.0 * size)
        mass = species.mass_g_at_mean_svl * (svl / species.svl_mm) ** 3 * rng.lognormal(0, 0.08)
        regenerated = rng.random() < 0.12
        tail_cm = species.tail_to_svl * svl / 10 * rng.normal(1, 0.05) * (0.7 if regenerated else 1)
        tb = species.body_temperature_c + rng.normal(0, 1.4)
        ctmax = species.ctmax_c + rng.normal(0, 0.6)
        absorptivity = species.absorptivity_percent + rng.normal(0, 1.8)
        notes = "tail regenerated" if regenerated else ""
        if not notes and sex == "F" and stage == "adult" and rng.random() < 0.25:
            notes = "gravid"
        rows.append(
            [
                f"NO23-{number:03d}",
                name,
                sex,
                stage,
                locality,
                date.strftime("%d.%m.%Y"),
                _rounded(svl, 1, ","),
                _rounded(mass, 2, ","),
                _rounded(tail_cm, 1, ","),
                "NA" if rng.random() < 0.06 else _rounded(tb, 1, ","),
                # CTmax was run on adults only, and not on all of them
                _rounded(ctmax, 1, ",") if stage == "adult" and rng.random() < 0.7 else "n.d.",
                "" if rng.random() < 0.1 else f"{absorptivity:.0f}",
                notes,
            ]
        )
    column = NORTH_HEADER.index
    # Deliberately bad cells, documented in README.md (rows count from 1 below the header).
    rows[6][column("species")] = ""
    rows[11][column("tail_cm")] = "broken"
    rows[17][column("Masse (g)")] = "3-5"
    rows[24][column("CTmax")] = "tbd"
    rows[32][column("Tb [°C]")] = "335"  # decimal comma forgotten: 33,5 written as 335
    mass_text = rows[40][column("Masse (g)")]
    rows[40][column("Masse (g)")] = f"{float(mass_text.replace(',', '.')) * 1000:.0f}"  # in mg
    return rows


# ---------------------------------------------------------------- south: species means (Parquet)


@dataclass(frozen=True)
class SpeciesMeans:
    """Invented population means for one species."""

    name: str
    sites: tuple[str, ...]
    mass_g: float
    svl_mm: float
    ctmax_c: float
    clutch: float


SOUTH_SPECIES = (
    SpeciesMeans("Podarcis muralis", ("S-650", "S-1100", "S-1550"), 5.6, 62.0, 43.4, 5.1),
    SpeciesMeans("Podarcis siculus", ("S-650", "S-1100", "S-1550"), 8.5, 72.0, 44.2, 6.0),
    SpeciesMeans("Lacerta bilineata", ("S-650", "S-1100", "S-1550"), 28.0, 105.0, 42.6, 11.2),
    SpeciesMeans("Zootoca vivipara", ("S-1100", "S-1550", "S-2000"), 4.2, 55.0, 40.9, 6.3),
)


def fahrenheit(celsius: float) -> float:
    return celsius * 9 / 5 + 32  # NIST SP 811 (2008) B.9: t/degF = 1.8 t/degC + 32


def south_table(rng: np.random.Generator) -> pa.Table:
    columns: dict[str, list] = {
        name: []
        for name in (
            "species",
            "site",
            "n",
            "mass_mean_kg",
            "mass_se_kg",
            "svl_mean_cm",
            "svl_sd_cm",
            "ctmax_mean_F",
            "ctmax_ci_low_F",
            "ctmax_ci_high_F",
            "thermo_mode",
            "clutch",
        )  # fmt: skip
    }
    for species in SOUTH_SPECIES:
        for site in species.sites:
            n = int(rng.integers(6, 31))
            mass = species.mass_g * rng.normal(1, 0.05)
            mass_sd = 0.15 * mass
            svl = species.svl_mm * rng.normal(1, 0.02)
            svl_sd = 0.07 * svl
            ctmax = species.ctmax_c + rng.normal(0, 0.3)
            # 95 % CI of a mean from a t distribution with n-1 df (Cochrane Handbook 6.5.2.2)
            half_width = stats.t.ppf(0.975, n - 1) * 0.8 / np.sqrt(n)
            columns["species"].append(species.name)
            columns["site"].append(site)
            columns["n"].append(n)
            columns["mass_mean_kg"].append(round(mass / 1000, 5))
            columns["mass_se_kg"].append(round(mass_sd / np.sqrt(n) / 1000, 6))
            columns["svl_mean_cm"].append(round(svl / 10, 2))
            columns["svl_sd_cm"].append(round(svl_sd / 10, 2))
            columns["ctmax_mean_F"].append(round(fahrenheit(ctmax), 1))
            columns["ctmax_ci_low_F"].append(round(fahrenheit(ctmax - half_width), 1))
            columns["ctmax_ci_high_F"].append(round(fahrenheit(ctmax + half_width), 1))
            columns["thermo_mode"].append("ectotherm")
            columns["clutch"].append(round(species.clutch * rng.normal(1, 0.08), 1))
    # Deliberate problems, documented in README.md (rows count from 1).
    columns["svl_sd_cm"][4] = -columns["svl_sd_cm"][4]  # sign typo: negative SD
    for name in ("ctmax_mean_F", "ctmax_ci_low_F", "ctmax_ci_high_F"):
        columns[name][8] = None  # CTmax not measured at this site: empty, not bad
    columns["thermo_mode"][10] = None
    schema = pa.schema(
        [
            ("species", pa.string()),
            ("site", pa.string()),
            ("n", pa.int64()),
            *[(name, pa.float64()) for name in list(columns)[3:10]],
            ("thermo_mode", pa.string()),
            ("clutch", pa.float64()),
        ],
        metadata={"note": INVENTED_NOTE},
    )
    return pa.table(columns, schema=schema)


def write_parquet(table: pa.Table, path: Path) -> None:
    """Every option that affects the bytes is spelled out so reruns give identical files."""
    path.parent.mkdir(parents=True, exist_ok=True)
    pq.write_table(
        table,
        path,
        version="2.6",
        compression="snappy",
        use_dictionary=["species", "site", "thermo_mode"],
        write_statistics=True,
        store_schema=True,
        data_page_version="1.0",
    )


# ---------------------------------------------------------------- east: respirometry, long layout

TEST_TEMPERATURES_C = (15, 20, 25, 30)
# Invented temperature sensitivities: Q10 about 2.3 for O2 uptake (near the 0.65 eV of
# Gillooly et al. 2001, Science 293:2248) and 2.0 for evaporative water loss.
Q10_OXYGEN = 2.3
Q10_WATER_LOSS = 2.0
OXYGEN_NAMES = ("VO2", "O2 consumption", "oxygen uptake rate")
WATER_LOSS_NAMES = ("EWL", "evaporative water loss")
# unit text -> factor from mL/h (or mg/h); 1 L = 1000 mL, 1 h = 60 min, 1 d = 24 h
OXYGEN_UNITS = {
    "mL O2/h": 1.0,
    "ml O2 h-1": 1.0,
    "µL/min": 1000 / 60,
    "L/d": 24 / 1000,
    "mL/min": 1 / 60,
}
WATER_LOSS_UNITS = {"mg/h": 1.0, "mg H2O h-1": 1.0, "g/d": 24 / 1000}
EAST_HEADER = ("animal", "species", "run_date", "test_temp", "measure", "value", "unit")


def east_rows(rng: np.random.Generator) -> list[list[str]]:
    species = ["Podarcis muralis"] * 8 + ["Zootoca vivipara"] * 7
    masses = np.where(
        np.arange(15) < 8, rng.lognormal(np.log(5.5), 0.2, 15), rng.lognormal(np.log(4.0), 0.2, 15)
    )
    masses[3] = 1.6  # animal EA-04 is a juvenile: its water loss at 15 degC is below detection
    oxygen_units = list(OXYGEN_UNITS)
    water_units = list(WATER_LOSS_UNITS)
    rows = []
    for i in range(15):
        animal = f"EA-{i + 1:02d}"
        run_date = (dt.date(2023, 7, 3) + dt.timedelta(days=i)).isoformat()
        oxygen_20 = 0.075 * masses[i] ** 0.8  # mL O2/h at 20 degC, invented allometry
        water_20 = 0.30 * masses[i] ** 0.67  # mg H2O/h at 20 degC, invented allometry
        oxygen_unit = oxygen_units[i % len(oxygen_units)]
        water_unit = water_units[i % len(water_units)]
        for temperature in TEST_TEMPERATURES_C:
            steps = (temperature - 20) / 10
            oxygen = oxygen_20 * Q10_OXYGEN**steps * rng.lognormal(0, 0.05)
            water = water_20 * Q10_WATER_LOSS**steps * rng.lognormal(0, 0.05)
            common = [animal, species[i], run_date, str(temperature)]
            rows.append(
                common
                + [
                    OXYGEN_NAMES[i % len(OXYGEN_NAMES)],
                    f"{oxygen * OXYGEN_UNITS[oxygen_unit]:.3g}",
                    oxygen_unit,
                ]
            )
            rows.append(
                common
                + [
                    WATER_LOSS_NAMES[i % len(WATER_LOSS_NAMES)],
                    f"{water * WATER_LOSS_UNITS[water_unit]:.3g}",
                    water_unit,
                ]
            )

    def at(animal: int, temperature: int, water_loss: bool) -> list[str]:
        return rows[(animal - 1) * 8 + TEST_TEMPERATURES_C.index(temperature) * 2 + water_loss]

    # Deliberately bad cells, documented in README.md.
    at(4, 15, True)[5] = "<0.5"  # below the balance's detection limit: valid, flagged
    at(7, 30, False)[5] = "inf"  # analyser overflow
    at(9, 25, True)[6] = ""  # unit left blank
    at(11, 20, False)[6] = "mg/h"  # a mass rate on an O2 volume rate
    rows.append(["EA-15", "Zootoca vivipara", rows[-1][2], "30", "zqx_index", "73", "%"])
    return rows


# ---------------------------------------------------------------- west: shrew summaries, long


@dataclass(frozen=True)
class ShrewPopulation:
    """Invented true values of one population in canonical units (g, mm, degC, W)."""

    species: str
    site: str
    n: int
    mass_g: float
    head_body_mm: float
    hind_foot_mm: float
    body_temperature_c: float
    metabolic_rate_w: float


WEST_HEADER = ("species", "site", "trait", "statistic", "value", "unit", "n")
# unit text -> (scale, offset, decimals) from the canonical unit
WEST_UNITS = {
    "g": (1.0, 0.0, 2),
    "mg": (1000.0, 0.0, 0),
    "oz": (1 / GRAMS_PER_OUNCE, 0.0, 4),
    "mm": (1.0, 0.0, 1),
    "cm": (0.1, 0.0, 2),
    "in": (1 / MM_PER_INCH, 0.0, 3),
    "m": (0.001, 0.0, 4),
    "°C": (1.0, 0.0, 1),
    "C": (1.0, 0.0, 1),
    "degC": (1.0, 0.0, 1),
    "K": (1.0, KELVIN_OFFSET, 2),
    "W": (1.0, 0.0, 4),
    "mW": (1000.0, 0.0, 0),
    "J/h": (3600.0, 0.0, 0),
    "kcal/d": (86400 / JOULES_PER_KCAL, 0.0, 2),
}


def west_rows(rng: np.random.Generator) -> list[list[str]]:
    populations = (
        ShrewPopulation("Sorex araneus", "W1 lower meadow", 18, 8.9, 72.0, 12.6, 38.1, 0.29),
        ShrewPopulation("Sorex araneus", "W2 upper scree", 11, 8.2, 70.0, 12.4, 37.8, 0.27),
        ShrewPopulation("S. minutus", "W2 upper scree", 9, 4.6, 52.0, 10.8, 37.9, 0.16),
        ShrewPopulation("Crocidura russula", "W1 lower meadow", 14, 10.6, 71.0, 12.1, 36.8, 0.14),
    )
    # per population: units for mass, head-body length, body temperature, metabolic rate
    units = (
        ("g", "mm", "°C", "W"),
        ("g", "in", "K", "mW"),
        ("mg", "cm", "C", "J/h"),
        ("oz", "m", "degC", "kcal/d"),
    )
    rows: list[list[str]] = []

    def add(pop: ShrewPopulation, trait: str, statistic: str, value: float, unit: str) -> None:
        scale, offset, decimals = WEST_UNITS[unit]
        # a dispersion converts by the scale only (no offset): a SD in K equals a SD in degC
        shifted = value * scale + (0.0 if statistic in ("sd", "se") else offset)
        text = _rounded(shifted, decimals)
        rows.append([pop.species, pop.site, trait, statistic, text, unit, str(pop.n)])

    for index, (pop, (mass_unit, length_unit, temp_unit, rate_unit)) in enumerate(
        zip(populations, units, strict=True)
    ):
        mass_sd = 0.12 * pop.mass_g
        median = pop.mass_g * rng.normal(1, 0.02)
        add(pop, "body mass", "median", median, mass_unit)
        add(pop, "body mass", "q1", median - 0.62 * mass_sd, mass_unit)
        add(pop, "body mass", "q3", median + 0.74 * mass_sd, mass_unit)
        if index == 0:
            rows.append(
                [pop.species, pop.site, "body mass", "geometric mean", "8.6", "g", str(pop.n)]
            )

        length_sd = 0.05 * pop.head_body_mm
        mean = pop.head_body_mm * rng.normal(1, 0.015)
        # 95 % CI of a mean: mean +- t(0.975, n-1) SD / sqrt(n) (Cochrane Handbook 6.5.2.2)
        half = stats.t.ppf(0.975, pop.n - 1) * length_sd / np.sqrt(pop.n)
        add(pop, "head-body length", "mean", mean, length_unit)
        add(pop, "head-body length", "ci_low", mean - half, length_unit)
        add(pop, "head-body length", "ci_high", mean + half, length_unit)

        if index in (0, 3):
            # expected range of n normal draws, Blom's plotting position (as in Wan et al. 2014)
            spread = stats.norm.ppf((pop.n - 0.375) / (pop.n + 0.25)) * 0.04 * pop.hind_foot_mm
            add(pop, "hind foot", "min", pop.hind_foot_mm - spread * rng.uniform(0.9, 1.1), "mm")
            add(pop, "hind foot", "max", pop.hind_foot_mm + spread * rng.uniform(0.9, 1.1), "mm")
        elif index == 2:
            add(pop, "hind foot", "sd", 0.04 * pop.hind_foot_mm, "mm")  # orphan: no mean given

        temperature = pop.body_temperature_c + rng.normal(0, 0.2)
        add(pop, "Tb", "mean", temperature, temp_unit)
        add(pop, "Tb", "sd", 0.5 + rng.uniform(0, 0.3), temp_unit)

        rate = pop.metabolic_rate_w * rng.normal(1, 0.04)
        add(pop, "SMR", "mean", rate, rate_unit)
        add(pop, "SMR", "se", 0.18 * rate / np.sqrt(pop.n), rate_unit)

    # Crocidura Tb mean typed in kelvin into a degC row (an offset of 273.15): flagged, kept.
    tb_row = next(r for r in rows if r[0] == "Crocidura russula" and r[2:4] == ["Tb", "mean"])
    tb_row[4] = _rounded(float(tb_row[4]) + KELVIN_OFFSET, 1)
    # A small second Crocidura sample whose sheet went wrong in three different ways.
    extra = ["Crocidura russula", "W2 upper scree"]
    rows.append(extra + ["body mass", "mean", "10.4", "gr", "6"])  # gram or grain?
    rows.append(extra + ["head-body length", "mean", "2.8", "Zoll", "6"])  # German inch: unknown
    rows.append(extra + ["hind foot", "mean", "12,9", "mm", "6"])  # decimal comma, TSV says '.'
    rows.append(extra + ["Tb", "mean", "36.9", "degC", "6"])
    return rows


# ---------------------------------------------------------------- entry point


WEST_SEX_HEADER = ("species", "site", "sex", "trait", "statistic", "value", "unit", "n")


def west_by_sex_rows(rng: np.random.Generator) -> list[list[str]]:
    """Invented shrew summaries reported per sex (as many papers do), to be pooled by the build.

    Dispersion is given three ways: SD, variance and coefficient of variation.
    """
    rows: list[list[str]] = []
    for species, mass_g, length_mm in (
        ("Sorex araneus", 8.9, 72.0),
        ("Crocidura russula", 10.6, 71.0),
    ):
        for sex, shift in (("f", 0.96), ("m", 1.04)):
            n = int(rng.integers(8, 20))
            mean = mass_g * shift * rng.normal(1, 0.02)
            sd = 0.11 * mean
            rows.append(
                [species, "W1 lower meadow", sex, "body mass", "mean", f"{mean:.2f}", "g", str(n)]
            )
            if sex == "f":
                rows.append(
                    [species, "W1 lower meadow", sex, "body mass", "sd", f"{sd:.3f}", "g", str(n)]
                )
            else:
                rows.append(
                    [
                        species,
                        "W1 lower meadow",
                        sex,
                        "body mass",
                        "variance",
                        f"{sd**2:.4f}",
                        "g",
                        str(n),
                    ]
                )
            length = length_mm * shift * rng.normal(1, 0.01)
            rows.append(
                [
                    species,
                    "W1 lower meadow",
                    sex,
                    "head-body length",
                    "mean",
                    f"{length:.1f}",
                    "mm",
                    str(n),
                ]
            )
            rows.append(
                [
                    species,
                    "W1 lower meadow",
                    sex,
                    "head-body length",
                    "cv",
                    f"{rng.uniform(4, 6):.1f}",
                    "%",
                    str(n),
                ]
            )
    return rows


def write_demo(out_dir: Path) -> list[Path]:
    """Write every demo table below `out_dir`; returns the written paths (relative)."""
    out_dir = Path(out_dir)
    rng = np.random.default_rng(SEED)
    north = north_rows(rng)
    south = south_table(rng)
    east = east_rows(rng)
    west = west_rows(rng)
    _write_delimited(out_dir / NORTH_FILE, NORTH_HEADER, north, ";", "latin-1")
    write_parquet(south, out_dir / SOUTH_FILE)
    _write_delimited(out_dir / EAST_FILE, EAST_HEADER, east, ",", "utf-8")
    _write_delimited(out_dir / WEST_FILE, WEST_HEADER, west, "\t", "utf-8")
    # its own generator, so adding this table left the other files unchanged
    by_sex = west_by_sex_rows(np.random.default_rng(SEED + 5))
    _write_delimited(out_dir / WEST_SEX_FILE, WEST_SEX_HEADER, by_sex, ",", "utf-8")
    return list(DEMO_FILES)


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Write the invented demo source tables.")
    parser.add_argument(
        "--out",
        type=Path,
        default=Path(__file__).resolve().parent,
        help="folder to write into (default: the folder holding this script)",
    )
    args = parser.parse_args(argv)
    write_demo(args.out)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
