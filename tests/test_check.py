"""Tests of the unit-consistency check: planted unit mistakes are found with the right factor,
clean data (invented and the real palmerpenguins data) raise no alarm, unit problems and the
findings' JSON and terminal forms."""

from __future__ import annotations

import functools
import json
import math
from pathlib import Path

import jsonschema
import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from palmerpenguins import load_penguins, load_penguins_raw
from scipy.stats import norm

from harmonize.build import build_project
from harmonize.check import (
    MAD_TO_SD,
    CheckSettings,
    TraitInfo,
    _weighted_medians,
    check_values,
    findings_document,
)
from harmonize.check_sources import TableSpec, check_package, check_table
from harmonize.cli.main import cli
from harmonize.errors import UnsafePathError
from harmonize.project import LongColumns, single_file_project
from harmonize.vocab import load_vocabulary

# Exact conversion factors, NIST SP 811 (2008), Appendix B.8 / B.9:
INCH_MM = 25.4  # 1 in = 25.4 mm (exact)
POUND_G = 453.59237  # 1 lb = 0.45359237 kg (exact)

# INVENTED species levels (not measurements): mass in g, snout-vent length in mm, Tb in °C
SPECIES = {
    "Inventus alpha": (12.0, 55.0, 31.0),
    "Inventus beta": (30.0, 80.0, 33.0),
    "Inventus gamma": (5.5, 40.0, 29.0),
    "Inventus delta": (80.0, 120.0, 35.0),
}
TRAITS = ("body_mass_wet", "snout_vent_length", "body_temperature")
UNITS = ("g", "mm", "degC")

# how a mistaken source writes canonical values: (trait, function of canonical value, label)
PLANTS = {
    "g labelled kg": ("body_mass_wet", lambda g: g, "kg", "×1000"),
    "mg labelled g": ("body_mass_wet", lambda g: g * 1000.0, "g", "×1000"),
    "mg labelled kg": ("body_mass_wet", lambda g: g * 1000.0, "kg", "×10^6"),
    "lb labelled kg": ("body_mass_wet", lambda g: g / POUND_G, "kg", "×2.2046"),
    "in labelled mm": ("snout_vent_length", lambda mm: mm / INCH_MM, "mm", "÷25.4"),
    "m labelled mm": ("snout_vent_length", lambda mm: mm / 1000.0, "mm", "÷1000"),
    # NIST SP 811, B.9: t/°F = 1.8 t/°C + 32; T/K = t/°C + 273.15
    "degF labelled degC": ("body_temperature", lambda c: c * 1.8 + 32.0, "degC", "°F scale"),
    "K labelled degC": ("body_temperature", lambda c: c + 273.15, "degC", "+273.15"),
}


def invented_table(seed: int, plants: dict[str, str] | None = None, n: int = 12) -> pd.DataFrame:
    """INVENTED long table: six sources measuring the same four invented species.
    `plants` maps a source to a PLANTS key: that source's values of one trait carry the mistake."""
    rng = np.random.default_rng(seed)
    frames = []
    for s in range(6):
        source = f"station-{s + 1}"
        for species, levels in SPECIES.items():
            for trait, unit, level in zip(TRAITS, UNITS, levels, strict=True):
                if trait == "body_temperature":
                    values = rng.normal(level, 1.2, n)
                else:  # a population offset per source, then individuals around it
                    values = level * np.exp(rng.normal(rng.normal(0, 0.04), 0.12, n))
                label = unit
                plant = PLANTS.get((plants or {}).get(source, ""))
                if plant and plant[0] == trait:
                    values, label = plant[1](values), plant[2]
                frames.append(
                    pd.DataFrame(
                        {
                            "source": source,
                            "species": species,
                            "trait": trait,
                            "value": np.round(values, 5),
                            "unit": label,
                        }
                    )  # fmt: skip
                )
    return pd.concat(frames, ignore_index=True)


@functools.cache
def _vocabulary():
    return load_vocabulary()  # read once: the YAML parse costs more than a small check


def _check(tmp_path: Path, table: pd.DataFrame, group_by: str = "source"):
    path = tmp_path / "invented.csv"
    table.to_csv(path, index=False)
    spec = TableSpec(
        path, taxon="species", source="source", value_column="value",
        trait_column="trait", unit_column="unit",
    )  # fmt: skip
    return check_table(spec, group_by, vocabulary=_vocabulary())


def _suspected(result) -> dict[tuple[str, str], str]:
    return {
        (f.trait, f.group): f.factor for f in result.findings if f.kind == "suspected-unit-error"
    }


@pytest.mark.parametrize("plant", sorted(PLANTS))
def test_each_planted_mistake_is_found_with_its_factor(tmp_path: Path, plant: str) -> None:
    trait, _, _, factor = PLANTS[plant]
    result = _check(tmp_path, invented_table(1, {"station-4": plant}))
    assert _suspected(result) == {(trait, "station-4"): factor}


def test_four_planted_mistakes_in_one_dataset(tmp_path: Path) -> None:
    # the list: g labelled kg, mg, inches labelled mm, °F labelled °C
    plants = {
        "station-2": "g labelled kg",
        "station-3": "mg labelled kg",
        "station-4": "in labelled mm",
        "station-5": "degF labelled degC",
    }
    result = _check(tmp_path, invented_table(2, plants))
    assert _suspected(result) == {
        ("body_mass_wet", "station-2"): "×1000",
        ("body_mass_wet", "station-3"): "×10^6",
        ("snout_vent_length", "station-4"): "÷25.4",
        ("body_temperature", "station-5"): "°F scale",
    }
    for finding in result.findings:
        if finding.factor:
            assert finding.comparison == "within-taxon" and 0 < finding.confidence <= 1
            assert abs(finding.residual) <= finding.tolerance
            assert finding.values == 4 * 12 and finding.reference_values > 0
    flagged = result.observations[result.observations["flagged"]]
    assert set(zip(flagged["trait"], flagged["group"], strict=True)) == set(_suspected(result))


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("group_by", ["source", "taxon", "column"])
def test_clean_invented_data_raise_no_alarm(tmp_path: Path, seed: int, group_by: str) -> None:
    result = _check(tmp_path, invented_table(seed), group_by)
    assert result.findings == () and not result.alarming
    assert result.accounting.balanced


def test_a_factor_not_in_the_list_is_never_flagged(tmp_path: Path) -> None:
    table = invented_table(3)
    odd = (table["source"] == "station-1") & (table["trait"] == "body_mass_wet")
    table.loc[odd, "value"] *= 5.0  # far apart, but 5 is no known unit factor
    assert _suspected(_check(tmp_path, table)) == {}


def test_across_taxa_when_groups_share_no_taxon() -> None:
    # each INVENTED source measured its own species; one source wrote g under a kg label
    rng = np.random.default_rng(4)
    frames = [
        pd.DataFrame({"trait": "body_mass_wet", "group": f"s{i}", "taxon": f"sp{i}",
                      "value": 20 * np.exp(rng.normal(0, 0.15, 30)) * (1000 if i == 2 else 1)})
        for i in range(6)
    ]  # fmt: skip
    traits = {"body_mass_wet": TraitInfo("body_mass_wet", "g", None)}
    findings, _ = check_values(pd.concat(frames), traits, "source")
    assert [(f.group, f.factor, f.comparison) for f in findings] == [("s2", "×1000", "across-taxa")]
    assert findings[0].confidence < 0.9  # across taxa is weaker evidence than within a taxon


def test_two_equal_groups_are_not_judged() -> None:
    # with only two groups of equal size neither is "the rest"; say nothing rather than guess
    values = np.concatenate([np.full(10, 20.0), np.full(10, 20000.0)]) * np.linspace(0.9, 1.1, 20)
    frame = pd.DataFrame(
        {"trait": "m", "group": ["a"] * 10 + ["b"] * 10, "taxon": "x", "value": values}
    )
    findings, _ = check_values(frame, {"m": TraitInfo("m", "g", None)}, "source")
    assert findings == []


def test_mad_constant_and_weighted_median() -> None:
    # Rousseeuw & Croux 1993, JASA 88:1273: b = 1/Φ⁻¹(3/4) ≈ 1.4826 makes MAD consistent for σ
    assert MAD_TO_SD == pytest.approx(1 / norm.ppf(0.75), rel=1e-4)
    values = np.array([[5.0], [1.0], [3.0], [10.0], [2.0], [7.0]])
    by = np.array([0, 0, 0, 1, 1, 1])
    equal = _weighted_medians(values, np.ones(6), by)[:, 0]
    assert list(equal) == [3.0, 7.0]  # plain medians of {1,3,5} and {2,7,10}
    heavy = _weighted_medians(values, np.array([10.0, 1, 1, 1, 1, 1]), by)[:, 0]
    assert heavy[0] == 5.0  # a value holding most of the weight is the weighted median


# --------------------------------------------------------------------------- palmerpenguins
# Horst AM, Hill AP, Gorman KB (2020). palmerpenguins: Palmer Archipelago (Antarctica) penguin
# data. R package version 0.1.0, doi:10.5281/zenodo.3960218 — real measurements, no unit errors.


def _penguins(tmp_path: Path, frame: pd.DataFrame, name: str = "penguins.csv") -> Path:
    path = tmp_path / name
    frame.to_csv(path, index=False)
    return path


@pytest.mark.parametrize("source", ["Island", "studyName"])
@pytest.mark.parametrize("group_by", ["source", "taxon", "column"])
def test_penguins_raw_are_clean(tmp_path: Path, source: str, group_by: str) -> None:
    path = _penguins(tmp_path, load_penguins_raw())
    result = check_table(
        TableSpec(path, taxon="Species", source=source), group_by, vocabulary=_vocabulary()
    )
    assert result.findings == ()
    checked = dict(result.accounting.lines)["values checked"]
    assert checked == 4 * 344 - 8  # 2 penguins lack all four measurements (dataset docs)


def test_penguins_simple_table_is_clean(tmp_path: Path) -> None:
    path = _penguins(tmp_path, load_penguins())
    result = check_table(TableSpec(path, taxon="species", source="island", ignore=("year",)))
    assert set(result.observations["trait"]) >= {"body_mass_wet", "flipper_length"}
    assert result.findings == ()


def test_penguins_with_planted_mistakes(tmp_path: Path) -> None:
    frame = load_penguins_raw()
    torgersen = frame["Island"] == "Torgersen"
    frame.loc[torgersen, "Body Mass (g)"] /= 1000.0  # kg values under the "(g)" header
    dream = frame["Island"] == "Dream"
    frame.loc[dream, "Flipper Length (mm)"] /= INCH_MM  # inches under the "(mm)" header
    path = _penguins(tmp_path, frame, "penguins planted.csv")
    result = check_table(TableSpec(path, taxon="Species", source="Island"))
    assert _suspected(result) == {
        ("body_mass_wet", "Torgersen"): "÷1000",
        ("flipper_length", "Dream"): "÷25.4",
    }
    implausible = {(f.trait, f.group) for f in result.findings if f.kind == "implausible-value"}
    assert implausible == {("flipper_length", "Dream")}  # 7–9 "mm" flippers are below 10 mm


# --------------------------------------------------------------------------- unit findings


def test_raw_table_unit_problems(tmp_path: Path) -> None:
    table = invented_table(5)
    mass = table.index[table["trait"] == "body_mass_wet"]
    table.loc[mass[:3], "unit"] = ""  # missing
    table.loc[mass[3:5], "unit"] = "Zoll"  # not a unit
    table.loc[mass[5:9], "unit"] = "mL"  # a volume for a mass
    table.loc[mass[9:20], ["unit", "value"]] = ["mg", 12000.0]  # usable, but a second unit
    kinds = {(f.kind, f.group) for f in _check(tmp_path, table).findings}
    assert kinds == {
        ("missing-unit", "body_mass_wet"),
        ("unparsable-unit", "body_mass_wet"),
        ("dimension-mismatch", "body_mass_wet"),
        ("mixed-units", "body_mass_wet"),
    }


def test_raw_table_accounting_adds_up(tmp_path: Path) -> None:
    table = invented_table(6)
    table["value"] = table["value"].astype(object)
    table.loc[0, "value"] = "n.d."
    table.loc[1, "value"] = None
    table.loc[2, "trait"] = "tail colour index"
    lines = dict(_check(tmp_path, table).accounting.lines)
    assert lines["cells that are not one number"] == 1 and lines["empty cells"] == 1
    assert lines["cells whose trait name matched no vocabulary term"] == 1
    assert lines["values checked"] == len(table) - 3


# --------------------------------------------------------------------------- built package


def test_built_package_with_a_planted_source(tmp_path: Path) -> None:
    table = invented_table(7, {"station-6": "g labelled kg"})
    path = tmp_path / "invented.csv"
    table.to_csv(path, index=False)
    project = single_file_project(
        path, layout="long", output=tmp_path / "pkg", context={"taxon": "species"},
        columns=LongColumns("trait", "value", "unit", None, None),
    )  # fmt: skip
    build_project(project)
    result = check_package(tmp_path / "pkg", group_by="taxon")
    assert _suspected(result) == {}  # every taxon holds the planted source: nothing stands out
    assert dict(result.accounting.lines)["individual values read"] == len(table)


def test_built_package_reports_the_units_the_build_rejected(tmp_path: Path) -> None:
    # a mass in mL (a volume) and a cell '4100 mg' in a row whose unit column says g
    path = tmp_path / "long.csv"
    path.write_text(
        "species,trait,value,unit\n"
        "Sorex minutus,body mass,4.1,g\n"
        "Sorex minutus,body mass,4.0,mL\n"
        "Sorex minutus,body mass,4100 mg,g\n",
        encoding="utf-8",
    )
    project = single_file_project(
        path, layout="long", output=tmp_path / "pkg", context={"taxon": "species"},
        columns=LongColumns("trait", "value", "unit", None, None),
    )  # fmt: skip
    build_project(project)
    result = check_package(tmp_path / "pkg")
    found = {(f.kind, f.severity, f.values) for f in result.findings}
    assert found == {("dimension-mismatch", "error", 1), ("unit-conflict", "error", 1)}


def test_hostile_package_descriptor_is_refused(tmp_path: Path) -> None:
    (tmp_path / "datapackage.json").write_text(
        json.dumps({"resources": [{"name": "individual_values", "path": "../outside.csv"}]})
    )
    with pytest.raises(UnsafePathError):
        check_package(tmp_path)


# --------------------------------------------------------------------------- JSON and terminal

FINDINGS_SCHEMA = {
    "type": "object",
    "required": ["subject", "group_by", "alarming", "findings", "accounting"],
    "properties": {
        "findings": {
            "type": "array",
            "items": {
                "type": "object",
                "required": ["kind", "severity", "trait", "group", "values", "message", "factor", "confidence"],
                "properties": {
                    "severity": {"enum": ["error", "warning", "note"]},
                    "values": {"type": "integer", "minimum": 0},
                    "confidence": {"type": ["number", "null"], "minimum": 0, "maximum": 1},
                },
            },
        },
        "accounting": {"type": "object", "required": ["lines", "balanced"]},
    },
}  # fmt: skip


def test_findings_json_follows_its_schema(tmp_path: Path) -> None:
    result = _check(tmp_path, invented_table(8, {"station-1": "in labelled mm"}))
    document = json.loads(json.dumps(findings_document(result)))
    jsonschema.validate(document, FINDINGS_SCHEMA)
    assert document["alarming"] is True
    assert [f["factor"] for f in document["findings"] if f["factor"]] == ["÷25.4"]


def test_cli_summary_json_and_exit_codes(tmp_path: Path) -> None:
    bad = tmp_path / "bad.csv"
    invented_table(9, {"station-3": "degF labelled degC"}).to_csv(bad, index=False)
    options = ["--taxon", "species", "--source", "source", "--value-column", "value",
               "--trait-column", "trait", "--unit-column", "unit"]  # fmt: skip
    runner = CliRunner()
    found = runner.invoke(cli, ["check", str(bad), *options, "--json", str(tmp_path / "f.json")])
    assert found.exit_code == 1, found.output
    assert "suspected-unit-error" in found.output and "°F scale" in found.output
    assert "adds up: yes" in found.output
    assert json.loads((tmp_path / "f.json").read_text(encoding="utf-8"))["findings"]
    good = tmp_path / "good.csv"
    invented_table(9).to_csv(good, index=False)
    clean = runner.invoke(cli, ["check", str(good), *options])
    assert clean.exit_code == 0 and "0 error, 0 warning, 0 note" in clean.output
    missing = runner.invoke(cli, ["check", str(tmp_path / "absent.csv")])
    assert missing.exit_code != 0 and not math.isnan(missing.exit_code)


def test_settings_are_frozen() -> None:
    with pytest.raises(AttributeError):
        CheckSettings().outlier_mads = 2.0  # type: ignore[misc]
