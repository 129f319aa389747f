"""Population statistics and temperature correction through the whole build (issue: population
summaries and temperature correction). Formulas are checked in tests/test_stats.py and
tests/test_temperature.py; here the build must apply them to the right cells, in the right units,
and label every derived number.
"""

from __future__ import annotations

import math
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from harmonize.build import build_tables
from harmonize.project import load_project

palmerpenguins = pytest.importorskip("palmerpenguins")


def project(root: Path, table: str, mapping: str, extra: str = "", name: str = "t.csv") -> Path:
    (root / "mappings").mkdir(parents=True, exist_ok=True)
    (root / name).write_text(table, encoding="utf-8")
    (root / "harmonize.yaml").write_text("name: t\n" + textwrap.dedent(extra), encoding="utf-8")
    (root / "mappings" / "t.yaml").write_text(
        f"source: t\npath: ../{name}\n" + textwrap.dedent(mapping), encoding="utf-8"
    )
    return root


LONG_POP = """\
level: population
layout: long
context: {taxon: species, sex: sex}
columns: {trait: trait, value: value, unit: unit, statistic: statistic, n: n}
"""


def built(root: Path) -> dict[str, pd.DataFrame]:
    """The project's tables, every cell accounted for."""
    frames, accounts, _ = build_tables(load_project(root))
    assert all(a.balanced for a in accounts)
    return frames


def built_with_one_reject(root: Path, table: str) -> tuple[dict[str, pd.DataFrame], tuple]:
    """A long population table's tables, and the one cell it rejects."""
    frames = built(project(root, table, LONG_POP))
    (reject,) = frames["rejects"].itertuples()
    return frames, reject


def summaries(root: Path) -> pd.DataFrame:
    return built(root)["population_summaries"]


def test_sd_from_variance_and_from_cv(tmp_path: Path) -> None:
    table = (
        "species,sex,trait,statistic,value,unit,n\n"
        "Sorex minutus,f,body mass,mean,50,g,10\n"
        "Sorex minutus,f,body mass,cv,10,%,10\n"  # CV = SD/mean: SD = 0.10 x 50 g = 5 g
        "Sorex minutus,m,body mass,mean,0.05,kg,12\n"
        "Sorex minutus,m,body mass,variance,0.000004,kg,12\n"  # 4e-6 kg^2 = 4 g^2: SD = 2 g
    )
    out = summaries(project(tmp_path, table, LONG_POP)).set_index("sex")
    assert out.loc["f", "sd"] == pytest.approx(5.0) and out.loc["f", "sd_method"] == "from cv"
    assert out.loc["f", "cv"] == pytest.approx(0.10)  # percent became a fraction
    # variance scales by the square of the unit factor (1 kg = 1000 g: x 1e6), never by an offset
    assert out.loc["m", "variance"] == pytest.approx(4.0)
    assert out.loc["m", "sd"] == pytest.approx(2.0) and out.loc["m", "sd_method"] == "from variance"
    assert out.loc["m", "mean"] == pytest.approx(50.0)


def test_variance_in_the_squared_unit(tmp_path: Path) -> None:
    # A variance's own unit is the square of the measurement's (definition of the variance).
    # 4 g2 is an SD of 2 g; 4e-6 kg2 = 4 g2 (1 kg = 1000 g, NIST SP 811 App. B, squared);
    # 3.24 degF2 = 1 degC2 (a temperature difference of 1.8 degF is 1 degC, NIST SP 811 B.9).
    table = (
        "species,sex,trait,statistic,value,unit,n\n"
        "Sorex minutus,f,body mass,mean,50,g,10\n"
        "Sorex minutus,f,body mass,variance,4,g²,10\n"
        "Sorex minutus,m,body mass,mean,0.05,kg,12\n"
        "Sorex minutus,m,body mass,variance,0.000004,kg^2,12\n"
        "Sorex araneus,f,body temperature,mean,98.6,degF,8\n"
        "Sorex araneus,f,body temperature,variance,3.24,degF^2,8\n"
        "Sorex araneus,m,body mass,mean,9,g,5\n"
        "Sorex araneus,m,body mass,variance,4,mm^2,5\n"  # a length squared: not a mass
    )
    frames = built(project(tmp_path, table, LONG_POP))
    out = frames["population_summaries"].set_index(["taxon", "sex"])
    for key in [("Sorex minutus", "f"), ("Sorex minutus", "m")]:
        assert out.loc[key, "variance"] == pytest.approx(4.0)
        assert out.loc[key, "sd"] == pytest.approx(2.0)
        assert out.loc[key, "sd_method"] == "from variance"
    assert out.loc[("Sorex araneus", "f"), "mean"] == pytest.approx(37.0)
    assert out.loc[("Sorex araneus", "f"), "variance"] == pytest.approx(1.0)
    assert out.loc[("Sorex araneus", "f"), "sd"] == pytest.approx(1.0)
    rejects = frames["rejects"]
    bad = rejects[rejects["raw_unit"] == "mm^2"]
    assert list(bad["reason"]) == ["dimension-mismatch"]
    assert "its square" in bad["message"].iloc[0]


def test_confidence_bounds_that_name_their_level(tmp_path: Path) -> None:
    # SD from a 95% CI with n = 10: sqrt(n) * (high - low) / (2 * t(0.975, 9)), t = 2.262 (any
    # t table; Cochrane Handbook 6.5.2.2). 48.57..51.43 gives SD = 3.1623 * 2.86 / 4.524 = 1.999.
    table = (
        "species,sex,trait,statistic,value,unit,n\n"
        "Sorex minutus,f,body mass,mean,50,g,10\n"
        "Sorex minutus,f,body mass,95% CI low,48.57,g,10\n"
        "Sorex minutus,f,body mass,95% CI high,51.43,g,10\n"
        "Sorex minutus,m,body mass,mean,50,g,10\n"
        "Sorex minutus,m,body mass,lower 90% CI,48.9,g,10\n"  # not this source's 0.95
    )
    frames = built(project(tmp_path, table, LONG_POP))
    out = frames["population_summaries"].set_index("sex")
    assert out.loc["f", "sd_method"] == "from ci"
    assert out.loc["f", "sd"] == pytest.approx(1.999, rel=1e-3)
    assert out.loc["f", "ci_level"] == pytest.approx(0.95)
    rejects = frames["rejects"]
    bad = rejects[rejects["raw_value"].astype(str) == "48.9"]
    assert list(bad["reason"]) == ["invalid-statistic"]
    assert "90% interval" in bad["message"].iloc[0]
    assert "ci_level: 0.9" in bad["message"].iloc[0]


def test_an_individual_value_in_a_population_source_is_rejected(tmp_path: Path) -> None:
    # Individual measurements must not be mixed with population summaries: a number whose
    # statistic names an individual value is rejected, not dropped from the summary or taken as
    # a mean; a category given as a value is kept (it describes the population).
    table = (
        "species,sex,trait,statistic,value,unit,n\n"
        "Sorex minutus,f,body mass,mean,50,g,10\n"
        "Sorex minutus,m,body mass,value,61,g,\n"
        "Sorex minutus,m,body mass,Individual,62,g,\n"
    )
    frames = built(project(tmp_path, table, LONG_POP))
    out = frames["population_summaries"]
    assert list(out["sex"]) == ["f"]
    assert out["mean"].iloc[0] == 50
    rejects = frames["rejects"].sort_values("source_row")
    assert list(rejects["source_row"]) == [2, 3]
    assert set(rejects["reason"]) == {"invalid-statistic"}
    assert "'Individual' is an individual's measurement" in rejects["message"].iloc[1]
    assert "level: individual" in rejects["message"].iloc[0]


WIDE_POP = """\
level: population
context: {taxon: species, sample_size: n}
"""


def test_cells_holding_two_statistics(tmp_path: Path) -> None:
    # Both bounds of a range or interquartile range in one cell are min and max, q1 and q3
    # (the SD estimates from them: Wan et al. 2014, tested in tests/test_stats.py); a range
    # given as its width alone says neither bound and is rejected. Bounds of a temperature
    # convert like any location: 50-104 degF is 10-40 degC (NIST SP 811 (2008), B.9).
    table = (
        "species,n,SVL range (mm),HL iqr (mm),CTmax range (degF),tail range (mm)\n"
        "Sorex minutus,10,50-60,20 - 24,50–104,10\n"
    )
    frames = built(project(tmp_path, table, WIDE_POP))
    out = frames["population_summaries"].set_index("trait_id")
    assert (out.loc["snout_vent_length", "min"], out.loc["snout_vent_length", "max"]) == (50, 60)
    assert (out.loc["head_length", "q1"], out.loc["head_length", "q3"]) == (20, 24)
    ctmax = out.loc["critical_thermal_maximum"]
    assert (ctmax["min"], ctmax["max"]) == (10, 40)
    assert out.loc["snout_vent_length", "sd_method"] == "from range (estimate)"
    (reject,) = frames["rejects"].itertuples()  # the one cell rejected
    assert (reject.column, reject.reason) == ("tail range (mm)", "invalid-statistic")
    assert "is a width" in reject.message


def test_a_range_cell_clashing_with_a_min_cell_says_what_it_holds(tmp_path: Path) -> None:
    # the first cell wins (as for any statistic given twice); the rejected range cell's message
    # says it held min and max, since its own statistic was 'range'
    table = (
        "species,sex,trait,statistic,value,unit,n\n"
        "Sorex minutus,f,body mass,min,3.9,g,10\n"
        "Sorex minutus,f,body mass,range,4.0-5.0,g,10\n"
        "Sorex minutus,f,body mass,mean,4.5,g,10\n"
    )
    frames, reject = built_with_one_reject(tmp_path, table)
    assert (reject.raw_value, reject.reason) == ("4.0-5.0", "duplicate-statistic")
    assert reject.message.endswith("(this cell gives min and max)")
    assert frames["population_summaries"]["min"].tolist() == [3.9]


def test_plus_minus_after_a_mean(tmp_path: Path) -> None:
    # '98.6 ± 1.8' in degF with plus_minus: sd is a mean of 37 degC and an SD of 1 degC: the SD
    # takes the scale 5/9 and no offset (NIST SP 811 (2008), B.9). Without plus_minus the mean
    # is kept and the half-width is not used, and the summary says so; a population that also
    # gives its SD in a cell of its own uses that cell.
    table = (
        "species,sex,n,Tb mean (degF),Tb SD (degF)\n"
        "Sorex minutus,f,10,98.6 ± 1.8,\n"
        "Sorex minutus,m,10,98.6 ± 1.8,3.6\n"
    )
    mapping = "level: population\ncontext: {taxon: species, sex: sex, sample_size: n}\n"
    plain = built(project(tmp_path / "plain", table, mapping))["population_summaries"]
    plain = plain.set_index("sex")
    assert plain.loc["f", "mean"] == 37.0 and pd.isna(plain.loc["f", "sd"])
    assert "plus-minus-unused" in plain.loc["f", "flags"]
    declared = mapping + "plus_minus: sd\n"
    frames = built(project(tmp_path / "sd", table, declared))
    out = frames["population_summaries"].set_index("sex")
    assert (out.loc["f", "mean"], out.loc["f", "sd"]) == (37.0, 1.0)
    assert out.loc["f", "sd_method"] == "given"
    assert "plus-minus-read-as-sd" in out.loc["f", "flags"]
    assert out.loc["m", "sd"] == 2.0  # its own SD cell, 3.6 degF
    assert "second-statistic-ignored" in out.loc["m", "flags"]
    assert frames["rejects"].empty


def test_the_mode_summarises_a_category_not_a_number(tmp_path: Path) -> None:
    # the most common category of a population is its summary (common practice, no source); a
    # mode of numbers has no column in population_summaries and is rejected, not taken as a mean
    table = (
        "species,sex,trait,statistic,value,unit,n\n"
        "Sorex minutus,f,thermoregulation,mode,endotherm,,10\n"
        "Sorex minutus,f,body mass,Modus,4.6,g,10\n"
    )
    frames, reject = built_with_one_reject(tmp_path, table)
    assert list(frames["population_summaries"]["value_text"]) == ["endotherm"]
    assert (reject.raw_value, reject.reason) == ("4.6", "invalid-statistic")
    assert "mode of a number trait" in reject.message


def test_sample_size_written_with_its_name(tmp_path: Path) -> None:
    # SD = SE * sqrt(n) (Cochrane Handbook 6.5.2.2): SE 1 g with 'n=9' is SD 3 g. An n cell
    # that is no count leaves n unknown, and the summary says why.
    table = (
        "species,sex,trait,statistic,value,unit,n\n"
        "Sorex minutus,f,body mass,mean,50,g,n=9\n"
        "Sorex minutus,f,body mass,se,1,g,n=9\n"
        "Sorex minutus,m,body mass,mean,50,g,N = 16\n"
        "Sorex minutus,m,body mass,se,1,g,N = 16\n"
        "Sorex araneus,f,body mass,mean,9,g,a few\n"
        "Sorex araneus,f,body mass,se,1,g,a few\n"
    )
    frames = built(project(tmp_path, table, LONG_POP))
    out = frames["population_summaries"].set_index(["taxon", "sex"])
    assert out.loc[("Sorex minutus", "f"), "n"] == 9
    assert out.loc[("Sorex minutus", "f"), "sd"] == pytest.approx(3.0)
    assert out.loc[("Sorex minutus", "m"), "sd"] == pytest.approx(4.0)
    unknown = out.loc[("Sorex araneus", "f")]
    assert pd.isna(unknown["n"]) and pd.isna(unknown["sd"])
    assert unknown["flags"].split(";")[:2] == ["n-unreadable", "n-missing"]


def test_temperature_sd_has_no_offset(tmp_path: Path) -> None:
    # an SD of 0.64 K is an SD of 0.64 degC (SI Brochure 9th ed. 2.3.1: a temperature difference
    # has the same value in K and degC); an SD of 1.8 degF is 1 degC (NIST SP 811 B.9)
    table = (
        "species,sex,trait,statistic,value,unit,n\n"
        "Sorex minutus,f,body temperature,mean,310.15,K,8\n"
        "Sorex minutus,f,body temperature,sd,0.64,K,8\n"
        "Sorex minutus,m,body temperature,mean,98.6,degF,8\n"
        "Sorex minutus,m,body temperature,sd,1.8,degF,8\n"
    )
    out = summaries(project(tmp_path, table, LONG_POP)).set_index("sex")
    assert out.loc["f", "mean"] == pytest.approx(37.0) and out.loc["f", "sd"] == pytest.approx(0.64)
    assert out.loc["m", "mean"] == pytest.approx(37.0) and out.loc["m", "sd"] == pytest.approx(1.0)


def test_rates_corrected_with_factor_and_original_kept(tmp_path: Path) -> None:
    table = "species,temp,vo2,mass\nSorex minutus,30,2.0,4.0\nSorex minutus,20,1.0,4.1\n"
    mapping = """\
    level: individual
    context: {taxon: species, temperature: {column: temp, unit: degC}}
    traits: {vo2: {trait: oxygen_consumption_rate, unit: mL/h}, mass: {trait: body_mass_wet, unit: g}}
    """
    extra = (
        "temperature_correction: {method: arrhenius, reference: 20, arrhenius_temperature: 8000}\n"
    )
    frames, _, _ = build_tables(load_project(project(tmp_path, table, mapping, extra)))
    values = frames["individual_values"].set_index(["trait_id", "source_row"])
    # rate_ref = rate x exp(T_A/T - T_A/T_ref), T_A = 8000 K (common practice, no single source)
    factor = math.exp(8000 / 303.15 - 8000 / 293.15)
    hot = values.loc[("oxygen_consumption_rate", 1)]
    assert hot["value_as_measured"] == pytest.approx(2.0)
    assert hot["correction_factor"] == pytest.approx(factor, rel=1e-12)
    assert hot["value"] == pytest.approx(2.0 * factor, rel=1e-12)
    assert "T_A=8000 K" in hot["temperature_correction"]
    assert values.loc[("oxygen_consumption_rate", 2), "correction_factor"] == pytest.approx(1.0)
    mass = values.loc[("body_mass_wet", 1)]  # never correct a non-rate
    assert pd.isna(mass["correction_factor"]) and pd.isna(mass["temperature_correction"])
    assert mass["value"] == pytest.approx(4.0)


def test_source_arrhenius_temperature_overrides_project(tmp_path: Path) -> None:
    table = "species,temp,vo2\nSorex minutus,30,2.0\n"
    mapping = """\
    level: individual
    arrhenius_temperature: 6000
    context: {taxon: species, temperature: {column: temp, unit: degC}}
    traits: {vo2: {trait: oxygen_consumption_rate, unit: mL/h}}
    """
    extra = "temperature_correction: {method: arrhenius, reference: 20}\n"
    frames, _, _ = build_tables(load_project(project(tmp_path, table, mapping, extra)))
    row = frames["individual_values"].iloc[0]
    assert row["correction_factor"] == pytest.approx(
        math.exp(6000 / 303.15 - 6000 / 293.15), rel=1e-12
    )


def test_q10_correction_of_a_population_summary_scales_every_statistic(tmp_path: Path) -> None:
    table = (
        "species,sex,temp,trait,statistic,value,unit,n\n"
        "Sorex minutus,f,30,oxygen consumption rate,mean,4.0,mL/h,10\n"
        "Sorex minutus,f,30,oxygen consumption rate,sd,1.0,mL/h,10\n"
    )
    mapping = LONG_POP.replace(
        "{taxon: species, sex: sex}",
        "{taxon: species, sex: sex, temperature: {column: temp, unit: degC}}",
    )
    extra = "temperature_correction: {method: q10, reference: 20, q10: 2}\n"
    out = summaries(project(tmp_path, table, mapping, extra)).iloc[0]
    # Q10 = 2 and 10 degC cooler: every rate statistic halves (Q10 definition)
    assert out["mean"] == pytest.approx(2.0) and out["sd"] == pytest.approx(0.5)
    assert out["correction_factor"] == pytest.approx(0.5)


@pytest.fixture(scope="module")
def penguins() -> pd.DataFrame:
    return palmerpenguins.load_penguins().dropna(subset=["sex", "body_mass_g"])


def test_combined_sexes_equal_the_pooled_raw_data(tmp_path: Path, penguins: pd.DataFrame) -> None:
    # per species and sex: n, mean, SD of body mass as a paper would report them
    by_sex = (
        penguins.groupby(["species", "sex"])["body_mass_g"]
        .agg(["count", "mean", "std", "min", "max"])
        .reset_index()
    )
    rows = ["species,sex,trait,statistic,value,unit,n"]
    for r in by_sex.itertuples():
        rows.append(f"{r.species},{r.sex},body mass,mean,{r.mean!r},g,{r.count}")
        rows.append(f"{r.species},{r.sex},body mass,sd,{r.std!r},g,{r.count}")
        rows.append(f"{r.species},{r.sex},body mass,min,{r.min!r},g,{r.count}")
        if (r.species, r.sex) != ("Gentoo", "female"):  # one part without its maximum
            rows.append(f"{r.species},{r.sex},body mass,max,{r.max!r},g,{r.count}")
    mapping = LONG_POP + "combine_groups: [sex]\n"
    out = summaries(project(tmp_path, "\n".join(rows) + "\n", mapping)).set_index("taxon_verbatim")
    # Cochrane Handbook v6.4 Table 6.5.a, checked against the raw pooled data (palmerpenguins);
    # the range of the whole is exact: smallest minimum to largest maximum
    pooled = penguins.groupby("species")["body_mass_g"].agg(["count", "mean", "std", "min", "max"])
    for species, want in pooled.iterrows():
        got = out.loc[species]
        assert got["n"] == want["count"]
        assert got["mean"] == pytest.approx(want["mean"], rel=1e-9)
        assert got["sd"] == pytest.approx(want["std"], rel=1e-9)
        assert got["min"] == want["min"]
        if species == "Gentoo":
            assert pd.isna(got["max"])  # a part did not give it: no guess
        else:
            assert got["max"] == want["max"]
        assert got["sd_method"] == "combined groups" and "combined-groups:sex" in got["flags"]
        assert pd.isna(got["sex"])


def test_individuals_aggregated_into_summaries_without_mixing(
    tmp_path: Path, penguins: pd.DataFrame
) -> None:
    penguins[["species", "island", "sex", "body_mass_g"]].to_csv(tmp_path / "p.csv", index=False)
    (tmp_path / "mappings").mkdir()
    (tmp_path / "mappings" / "t.yaml").write_text(
        "source: t\npath: ../p.csv\nlevel: individual\ncontext: {taxon: species, sex: sex, site: island}\n"
        "traits: {body_mass_g: {trait: body_mass_wet, unit: g}}\n",
        encoding="utf-8",
    )
    (tmp_path / "harmonize.yaml").write_text(
        "name: t\naggregate_individuals: {by: [sex]}\n", encoding="utf-8"
    )
    frames, accounts, _ = build_tables(load_project(tmp_path))
    assert len(frames["individual_values"]) == len(penguins)  # nothing moved out of individuals
    out = frames["population_summaries"].set_index(["taxon", "sex"])
    want = penguins.groupby(["species", "sex"])["body_mass_g"].agg(
        ["count", "mean", "std", "median"]
    )
    for key, row in want.iterrows():
        got = out.loc[key]
        assert got["n"] == row["count"]
        np.testing.assert_allclose(
            [got["mean"], got["sd"], got["median"]],
            [row["mean"], row["std"], row["median"]],
            rtol=1e-9,
        )
        assert got["sd_method"] == "computed from individuals"
    assert accounts[0].values_written == len(penguins)  # derived rows are not counted as cells
