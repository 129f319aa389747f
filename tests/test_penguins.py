"""An open external dataset through the whole build: the palmerpenguins raw table.

Source: Horst AM, Hill AP, Gorman KB (2020). palmerpenguins: Palmer Archipelago (Antarctica)
penguin data. R package version 0.1.0, doi:10.5281/zenodo.3960218; data from Gorman KB,
Williams TD, Fraser WR (2014) PLoS ONE 9(3): e90081. Shipped to us by the `palmerpenguins` PyPI
package (a test dependency).

The raw table's headers are matched by name ('Culmen Length (mm)', 'Body Mass (g)'), its units
taken from the header hints; a second copy is written with masses in kg and lengths in cm and
must harmonise to the same canonical values. Per-species n, mean and SD of the harmonised values
must equal a direct pandas computation on the raw data to 1e-9 relative.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from harmonize.build import build_project, build_tables
from harmonize.project import load_project
from harmonize.stats import summarise_individuals

palmerpenguins = pytest.importorskip("palmerpenguins")

TRAITS = {
    "Body Mass (g)": "body_mass_wet",
    "Culmen Length (mm)": "bill_length",
    "Culmen Depth (mm)": "bill_depth",
    "Flipper Length (mm)": "flipper_length",
}
IGNORED = [
    "studyName",
    "Sample Number",
    "Region",
    "Stage",
    "Clutch Completion",
    "Delta 15 N (o/oo)",
    "Delta 13 C (o/oo)",
    "Comments",
]


@pytest.fixture(scope="module")
def raw() -> pd.DataFrame:
    return palmerpenguins.load_penguins_raw()


def write_project(root: Path, table: pd.DataFrame, traits_block: str) -> Path:
    (root / "data").mkdir(parents=True, exist_ok=True)
    (root / "mappings").mkdir(exist_ok=True)
    table.to_csv(root / "data" / "penguins.csv", index=False)
    (root / "harmonize.yaml").write_text(
        "name: penguins\noutput: {folder: out}\n", encoding="utf-8"
    )
    ignore = ", ".join(f'"{c}"' for c in IGNORED)
    (root / "mappings" / "penguins.yaml").write_text(
        "source: palmer-penguins\npath: ../data/penguins.csv\nlevel: individual\n"
        "citation: Horst, Hill & Gorman (2020) palmerpenguins; Gorman et al. (2014) PLoS ONE 9:e90081\n"
        "context: {taxon: Species, individual: Individual ID, sex: Sex, site: Island, date: Date Egg}\n"
        f"ignore: [{ignore}]\n" + traits_block,
        encoding="utf-8",
    )
    return root


def reference(raw: pd.DataFrame, column: str) -> pd.DataFrame:
    grouped = raw.dropna(subset=[column]).groupby("Species")[column]
    return pd.DataFrame({"n": grouped.size(), "mean": grouped.mean(), "sd": grouped.std(ddof=1)})


def harmonised(values: pd.DataFrame, trait: str) -> pd.DataFrame:
    chosen = values[values["trait_id"] == trait]
    summary = summarise_individuals(chosen, ["taxon_verbatim"])
    return summary.set_index("taxon_verbatim")[["n", "mean", "sd"]]


def test_raw_headers_are_matched_and_statistics_agree(tmp_path: Path, raw: pd.DataFrame) -> None:
    project = load_project(write_project(tmp_path, raw, ""))
    frames, accounts, _ = build_tables(project)
    matches = frames["name_matches"].set_index("name")
    for column, trait in TRAITS.items():
        assert matches.loc[column, "trait_id"] == trait
        assert matches.loc[column, "status"] == "accepted"
    values = frames["individual_values"]
    # units came from the header hints and are recorded as such
    assert set(values["unit_origin"]) == {"name-hint"}
    for column, trait in TRAITS.items():
        got, want = harmonised(values, trait), reference(raw, column)
        assert list(got.index) == list(want.index)
        np.testing.assert_array_equal(got["n"].to_numpy(), want["n"].to_numpy())
        np.testing.assert_allclose(got["mean"], want["mean"], rtol=1e-9)
        np.testing.assert_allclose(got["sd"], want["sd"], rtol=1e-9)
    # every cell accounted for: 344 rows x 4 trait columns; the 2 rows without measurements are empty
    (account,) = accounts
    assert account.rows_read == len(raw) == 344
    assert account.cells == 344 * 4
    assert account.cells_empty == int(raw[list(TRAITS)].isna().sum().sum())
    assert account.values_written + account.cells_rejected + account.cells_empty == account.cells


def test_kilograms_and_centimetres_convert_back_exactly(tmp_path: Path, raw: pd.DataFrame) -> None:
    # NIST SP 811 (2008) Appendix B: 1 g = 1e-3 kg and 1 mm = 0.1 cm exactly (SI prefixes)
    converted = raw.copy()
    converted["Body Mass (g)"] = raw["Body Mass (g)"] / 1000.0
    for column in ("Culmen Length (mm)", "Culmen Depth (mm)", "Flipper Length (mm)"):
        converted[column] = raw[column] / 10.0
    block = (
        "traits:\n"
        '  "Body Mass (g)": {trait: body_mass_wet, unit: kg}\n'
        '  "Culmen Length (mm)": {trait: bill_length, unit: cm}\n'
        '  "Culmen Depth (mm)": {trait: bill_depth, unit: cm}\n'
        '  "Flipper Length (mm)": {trait: flipper_length, unit: cm}\n'
    )
    project = load_project(write_project(tmp_path, converted, block))
    frames, _, _ = build_tables(project)
    values = frames["individual_values"]
    assert set(values["unit_origin"]) == {"mapping"}
    for column, trait in TRAITS.items():
        got, want = harmonised(values, trait), reference(raw, column)
        np.testing.assert_allclose(got["mean"], want["mean"], rtol=1e-9)
        np.testing.assert_allclose(got["sd"], want["sd"], rtol=1e-9)


def test_penguin_package_validates(tmp_path: Path, raw: pd.DataFrame) -> None:
    project = load_project(write_project(tmp_path, raw, ""))
    report = build_project(project)
    assert report.validation.valid
    assert report.individual_values == int(raw[list(TRAITS)].notna().sum().sum())
    written = pd.read_csv(report.output / "individual_values.csv")
    assert written["record_id"].is_unique
    assert set(written["role"]) <= {"parameter", "estimation"}
