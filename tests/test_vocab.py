"""Tests for harmonize.vocab: the bundled vocabulary's schema, the loader's refusals, the tiny
fixture vocabulary, the version hash and search.

Broken vocabularies are written into tmp_path by each test; the tiny fixture vocabulary lives
in tests/fixtures/vocab_tiny and is shared with other tests.
"""

from __future__ import annotations

import pickle
import re
import shutil
from dataclasses import FrozenInstanceError
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from harmonize.errors import VocabularyError
from harmonize.units import parse_unit, registry
from harmonize.vocab import (
    KINDS,
    LEVELS,
    ROLES,
    Vocabulary,
    bundled_vocabulary_path,
    check_vocabulary,
    load_vocabulary,
    vocabulary_version,
)

TINY = Path(__file__).parent / "fixtures" / "vocab_tiny"
REPO_VOCAB = Path(__file__).resolve().parent.parent / "vocab"


@pytest.fixture(scope="module")
def bundled() -> Vocabulary:
    return load_vocabulary()


# --------------------------------------------------------------------------- bundled vocabulary

# The ids the demo and the build rely on, with their contract (vocab brief): unit, kind, role,
# levels, rate. LEVELS is (individual, population).
DEMO_TERMS = [
    ("body_mass_wet", "g", "quantity", "parameter", LEVELS, False),
    ("snout_vent_length", "mm", "quantity", "parameter", LEVELS, False),
    ("tail_length", "mm", "quantity", "estimation", LEVELS, False),
    ("head_body_length", "mm", "quantity", "parameter", LEVELS, False),
    ("hind_foot_length", "mm", "quantity", "estimation", LEVELS, False),
    ("body_temperature", "degC", "quantity", "estimation", LEVELS, False),
    ("critical_thermal_maximum", "degC", "quantity", "threshold", LEVELS, False),
    ("critical_thermal_minimum", "degC", "quantity", "threshold", LEVELS, False),
    ("preferred_body_temperature", "degC", "quantity", "threshold", LEVELS, False),
    ("oxygen_consumption_rate", "mL/h", "quantity", "estimation", LEVELS, True),
    ("standard_metabolic_rate", "W", "quantity", "parameter", LEVELS, True),
    ("evaporative_water_loss", "mg/h", "quantity", "estimation", LEVELS, True),
    ("solar_absorptivity", "dimensionless", "quantity", "parameter", LEVELS, False),
    ("thermoregulatory_mode", None, "category", "structure", ("population",), False),
    ("clutch_size", "count", "count", "parameter", LEVELS, False),
    ("air_temperature", "degC", "quantity", "forcing", LEVELS, False),
    ("relative_humidity", "percent", "quantity", "forcing", LEVELS, False),
]


@pytest.mark.parametrize(("trait_id", "unit", "kind", "role", "levels", "rate"), DEMO_TERMS)
def test_demo_terms_exist_with_their_contract(bundled, trait_id, unit, kind, role, levels, rate):
    term = bundled.get(trait_id)
    assert (term.unit, term.kind, term.role, term.levels, term.rate) == (
        unit,
        kind,
        role,
        tuple(levels),
        rate,
    )


def test_thermoregulatory_mode_categories(bundled):
    assert bundled.get("thermoregulatory_mode").categories == (
        "ectotherm",
        "endotherm",
        "heterotherm",
    )


def test_bundled_vocabulary_is_large_and_clean(bundled):
    assert len(bundled) >= 130
    assert check_vocabulary(bundled) == []


def test_bundled_ids_are_unique_across_files(bundled):
    # Count '- id:' lines in the files themselves, so that a loader silently dropping a
    # duplicate would be caught.
    written = [
        m.group(1)
        for path in sorted(REPO_VOCAB.glob("*.yaml"))
        for m in re.finditer(r"^- id: (\S+)$", path.read_text(encoding="utf-8"), re.MULTILINE)
    ]
    assert len(written) == len(set(written)) == len(bundled)


def test_bundled_vocabulary_covers_every_theme_file(bundled):
    themes = {
        "morphology.yaml",
        "energetics.yaml",
        "heat_balance.yaml",
        "water_balance.yaml",
        "life_history.yaml",
        "structure.yaml",
        "environment.yaml",
    }
    assert set(bundled.files) == themes
    assert {term.source_file for term in bundled} == themes


def test_every_bundled_entry_has_a_valid_shape(bundled):
    for term in bundled:
        assert term.role in ROLES, term.id
        assert term.kind in KINDS, term.id
        assert term.levels and set(term.levels) <= set(LEVELS), term.id
        assert term.label.strip() and len(term.definition) >= 20, term.id
        if term.kind in ("quantity", "count"):
            assert term.unit is not None, term.id
            parse_unit(term.unit)  # raises UnitProblem if harmonize.units cannot read it
            assert term.plausible is not None, term.id
            low, high = term.plausible
            assert low < high, term.id
        else:
            assert term.unit is None and term.plausible is None and not term.rate, term.id
        if term.kind == "category":
            assert len(term.categories) >= 2, term.id


def test_counts_are_dimensionless_and_fractions_stay_in_unit_interval(bundled):
    # A fraction cannot leave [0, 1] by definition (ISO 80000-1, quantities of dimension one);
    # counts are pure numbers.
    for term in bundled:
        if term.kind == "count":
            assert parse_unit(term.unit).dimensionless, term.id
        if term.unit == "dimensionless" and "fraction" in term.label:
            assert 0.0 <= term.plausible[0] and term.plausible[1] <= 1.0, term.id
        if term.unit == "percent":
            assert 0.0 <= term.plausible[0] and term.plausible[1] <= 100.0, term.id


def test_rates_are_per_unit_time(bundled):
    # A rate is an amount per unit time (ISO 80000-3 defines rates as time derivatives), so every
    # term marked rate: true must have time to the power -1 in its canonical unit's dimension.
    for term in bundled:
        if term.rate:
            dimensionality = parse_unit(term.unit).dimensionality
            assert dimensionality.get("[time]", 0) <= -1, term.id


def test_temperatures_are_celsius_and_thresholds_are_temperatures_or_fractions(bundled):
    ureg = registry()
    for term in bundled:
        if term.unit and parse_unit(term.unit).dimensionality == ureg.kelvin.dimensionality:
            # degC throughout, except the Arrhenius temperature (an absolute scale by
            # construction) and differences (delta_degC)
            assert term.unit in ("degC", "K", "delta_degC"), term.id
            if term.unit == "K":
                assert term.id == "arrhenius_temperature"


# Published values that a broad range across animals must admit. Each is from memory (not
# re-checked against the source while writing this test) and rounded.
KNOWN_VALUES = [
    ("body_mass_wet", 1.8),  # Etruscan shrew, about 1.8 g (from memory; e.g. Jürgens 2002)
    ("body_mass_wet", 1.5e8),  # blue whale, about 150 t (from memory)
    (
        "snout_vent_length",
        13.5,
    ),  # Brookesia nana male SVL (Glaw et al. 2021, Sci Rep 11:2522; from memory)
    ("snout_vent_length", 6000.0),  # reticulated python, about 6 m (from memory)
    ("body_temperature", 37.0),  # human core temperature, common textbook value
    ("body_temperature", -2.0),  # supercooled wood frog body (Storey & Storey; from memory)
    ("critical_thermal_maximum", 53.6),  # Saharan silver ant (Gehring & Wehner 1995; from memory)
    ("critical_thermal_minimum", -3.0),  # cold-adapted insects below 0 degC (from memory)
    ("basal_metabolic_rate", 0.05),  # a 2 g shrew, tens of mW (from memory)
    ("air_temperature", 56.7),  # WMO-listed Death Valley 1913 record (from memory)
    ("air_temperature", -89.2),  # Vostok station 1983, WMO record low (from memory)
    ("relative_humidity", 100.0),  # saturation, by definition
    ("clutch_size", 3.0e8),  # ocean sunfish egg count often quoted (from memory)
    (
        "maximum_lifespan",
        392.0,
    ),  # Greenland shark estimate (Nielsen et al. 2016, Science; from memory)
]


@pytest.mark.parametrize(("trait_id", "value"), KNOWN_VALUES)
def test_plausible_ranges_admit_published_extremes(bundled, trait_id, value):
    low, high = bundled.get(trait_id).plausible
    assert low <= value <= high


def test_demo_synonyms_map_to_one_term_each(bundled):
    # Abbreviations researchers write in headers (vocab brief); each must be claimed by the
    # expected term and by no other term as an unambiguous synonym.
    expected = {
        "SVL": "snout_vent_length",
        "BM": "body_mass_wet",
        "CTmax": "critical_thermal_maximum",
        "CTmin": "critical_thermal_minimum",
        "Tb": "body_temperature",
        "Tpref": "preferred_body_temperature",
        "Tsel": "preferred_body_temperature",
        "EWL": "evaporative_water_loss",
        "SMR": "standard_metabolic_rate",
        "RMR": "resting_metabolic_rate",
        "BMR": "basal_metabolic_rate",
        "FMR": "field_metabolic_rate",
        "VO2": "oxygen_consumption_rate",
        "mass": "body_mass_wet",
        "Körpermasse": "body_mass_wet",
        "masse corporelle": "body_mass_wet",
        "masa corporal": "body_mass_wet",
        "peso": "body_mass_wet",
    }
    for synonym, trait_id in expected.items():
        holders = [t.id for t in bundled if synonym.casefold() in map(str.casefold, t.synonyms)]
        assert holders == [trait_id], synonym


def test_length_is_left_to_review(bundled):
    holders = {t.id for t in bundled if "length" in t.ambiguous_synonyms}
    assert {"snout_vent_length", "head_body_length", "total_length"} <= holders
    assert not any("length" in t.synonyms for t in bundled)


def test_bundled_path_holds_the_theme_files():
    path = bundled_vocabulary_path()
    assert (path / "morphology.yaml").is_file()


def test_readme_documents_every_key():
    from harmonize.vocab import _ALLOWED_KEYS

    text = (REPO_VOCAB / "README.md").read_text(encoding="utf-8")
    for key in _ALLOWED_KEYS:
        assert f"`{key}`" in text, key


# --------------------------------------------------------------------------- tiny fixture


def test_tiny_fixture_loads_in_file_order():
    vocab = load_vocabulary(TINY)
    # environment.yaml sorts before organism.yaml
    assert list(vocab.terms) == [
        "air_temperature",
        "body_mass_wet",
        "snout_vent_length",
        "critical_thermal_maximum",
        "oxygen_consumption_rate",
        "thermoregulatory_mode",
    ]
    assert vocab.get("air_temperature").source_file == "environment.yaml"
    assert vocab.get("oxygen_consumption_rate").rate is True
    assert vocab.get("thermoregulatory_mode").categories == (
        "ectotherm",
        "endotherm",
        "heterotherm",
    )
    assert check_vocabulary(vocab) == []


def test_tiny_fixture_agrees_with_bundled_units(bundled):
    for term in load_vocabulary(TINY):
        full = bundled.get(term.id)
        assert (term.unit, term.kind, term.role, term.rate) == (
            full.unit,
            full.kind,
            full.role,
            full.rate,
        )


def test_terms_and_vocabulary_are_immutable():
    vocab = load_vocabulary(TINY)
    with pytest.raises(FrozenInstanceError):
        vocab.get("body_mass_wet").unit = "kg"  # type: ignore[misc]
    with pytest.raises(TypeError):
        vocab.terms["new"] = vocab.get("body_mass_wet")  # type: ignore[index]


def test_get_suggests_close_ids():
    vocab = load_vocabulary(TINY)
    with pytest.raises(KeyError, match="body_mass_wet"):
        vocab.get("body_mass_weet")
    assert "body_mass_wet" in vocab and "nothing" not in vocab


# --------------------------------------------------------------------------- search


@pytest.mark.parametrize(
    ("text", "role", "kind", "expected"),
    [
        ("svl", None, None, ["snout_vent_length"]),
        ("SVL", None, None, ["snout_vent_length"]),  # case-insensitive
        ("körper", None, None, ["body_mass_wet"]),
        ("length", None, None, ["snout_vent_length"]),  # ambiguous synonyms are searched too
        ("", "forcing", None, ["air_temperature"]),
        ("", None, "category", ["thermoregulatory_mode"]),
        ("temperature", "threshold", None, []),  # CTmax's label has no 'temperature'
        ("thermal", "threshold", "quantity", ["critical_thermal_maximum"]),
        ("zzz", None, None, []),
    ],
)
def test_search(text, role, kind, expected):
    found = load_vocabulary(TINY).search(text, role=role, kind=kind)
    assert [t.id for t in found] == expected


def test_search_puts_the_closest_spelling_first():
    # a spelling equal to the text, then one holding it as a word, then a part of a word
    vocab = load_vocabulary(TINY)
    assert [t.id for t in vocab.search("ta")][:1] == ["air_temperature"]  # synonym 'Ta'
    found = [t.id for t in vocab.search("therm")]
    # 'thermoregulation' (16 characters) is shorter than 'critical thermal maximum'
    assert found == ["thermoregulatory_mode", "critical_thermal_maximum"]
    assert [t.id for t in vocab.search("body_mass_wet")] == ["body_mass_wet"]
    bundled = load_vocabulary()
    assert bundled.search("mass")[0].id == "body_mass_wet"  # 'mass' is one of its synonyms


def test_search_without_filters_lists_everything():
    vocab = load_vocabulary(TINY)
    assert len(vocab.search()) == len(vocab) == 6


def test_search_refuses_unknown_role():
    with pytest.raises(ValueError, match="forcing"):
        load_vocabulary(TINY).search("", role="forcings")


# --------------------------------------------------------------------------- version


def test_version_is_stable_and_independent_of_location(tmp_path):
    first = load_vocabulary(TINY).version
    assert re.fullmatch(r"sha256:[0-9a-f]{16}", first)
    assert load_vocabulary(TINY).version == first
    copy = tmp_path / "elsewhere" / "vocab"
    shutil.copytree(TINY, copy)
    assert load_vocabulary(copy).version == first


def test_version_ignores_line_endings(tmp_path):
    for path in TINY.glob("*.yaml"):
        text = path.read_bytes().replace(b"\r\n", b"\n")
        (tmp_path / path.name).write_bytes(text.replace(b"\n", b"\r\n"))
    assert load_vocabulary(tmp_path).version == load_vocabulary(TINY).version


def test_version_changes_when_a_file_changes_or_is_renamed(tmp_path):
    shutil.copytree(TINY, tmp_path / "v")
    before = load_vocabulary(tmp_path / "v").version
    target = tmp_path / "v" / "environment.yaml"
    target.write_text(target.read_text(encoding="utf-8") + "# edited\n", encoding="utf-8")
    edited = load_vocabulary(tmp_path / "v").version
    assert edited != before
    target.rename(tmp_path / "v" / "weather.yaml")
    assert load_vocabulary(tmp_path / "v").version not in (before, edited)


@settings(max_examples=50, deadline=None)
@given(st.binary(min_size=1, max_size=40))
def test_version_sees_any_appended_bytes(extra):
    # Appending bytes always lengthens the line-ending-normalised content, so the hash must move.
    original = {"a.yaml": b"- id: x\n"}
    changed = {"a.yaml": b"- id: x\n" + extra}
    assert vocabulary_version(original) != vocabulary_version(changed)


def test_version_does_not_confuse_name_and_content_boundaries():
    assert vocabulary_version({"ab": b"c"}) != vocabulary_version({"a": b"bc"})


# --------------------------------------------------------------------------- loader refusals

GOOD = """\
- id: body_mass_wet
  label: wet body mass
  definition: Mass of the living animal as weighed.
  kind: quantity
  unit: g
  role: parameter
  levels: [individual, population]
  synonyms: [mass]
  plausible: [1.0e-6, 2.0e+8]
  rate: false
"""


def _entry(**changes: str | None) -> str:
    """GOOD with keys replaced (value text) or removed (None), under a new id."""
    lines = GOOD.replace("body_mass_wet", "broken_entry").splitlines()
    out = []
    present = set()
    for line in lines:
        key = line.strip().lstrip("- ").split(":")[0]
        present.add(key)
        if key in changes:
            if changes[key] is None:
                continue
            prefix = "- " if line.startswith("- ") else "  "
            line = f"{prefix}{key}: {changes[key]}"
        out.append(line)
    extra = [f"  {k}: {v}" for k, v in changes.items() if v is not None and k not in present]
    return "\n".join(out + extra) + "\n"


BROKEN = [
    ("yaml-syntax", _entry(synonyms="[mass, weight"), "not valid YAML"),
    ("unknown-key", _entry(synonym="[mass]"), "unknown key"),
    ("missing-key", _entry(role=None), "missing key(s) role"),
    ("bad-role", _entry(role="forcings"), "role 'forcings'"),
    ("bad-kind", _entry(kind="number"), "kind 'number'"),
    ("bad-level", _entry(levels="[individual, species]"), "levels"),
    ("empty-levels", _entry(levels="[]"), "levels"),
    ("bad-unit", _entry(unit="gramz"), "unit 'gramz' cannot be parsed"),
    ("range-unordered", _entry(plausible="[5.0, 1.0]"), "not ordered"),
    ("range-equal", _entry(plausible="[1.0, 1.0]"), "not ordered"),
    ("range-yaml-text", _entry(plausible="[1e-6, 2.0]"), "not a number"),
    ("range-one-number", _entry(plausible="[1.0]"), "not a pair"),
    ("rate-not-bool", _entry(rate="often"), "rate"),
    ("unit-on-category", _entry(kind="category", categories="[a, b]"), "has no unit"),
    (
        "unquoted-yes-no",
        _entry(kind="category", unit=None, plausible=None, categories="[yes, no]"),
        "not non-empty text",
    ),
    ("categories-on-quantity", _entry(categories="[a, b]"), "categories given"),
    ("count-with-mass-unit", _entry(kind="count"), "dimensionless"),
    ("bad-id", _entry(id="Body Mass"), "snake_case"),
    ("synonym-not-text", _entry(synonyms="[mass, 12]"), "synonyms holds 12"),
]


@pytest.mark.parametrize(("case", "text", "problem"), BROKEN, ids=[c[0] for c in BROKEN])
def test_loader_refuses_broken_entry_naming_file_and_id(tmp_path, case, text, problem):
    (tmp_path / "good.yaml").write_text(GOOD, encoding="utf-8")
    (tmp_path / "broken.yaml").write_text(text, encoding="utf-8")
    with pytest.raises(VocabularyError) as caught:
        load_vocabulary(tmp_path)
    message = str(caught.value)
    assert "broken.yaml" in message
    assert problem in message
    if case != "bad-id":
        assert "broken_entry" in message
    assert caught.value.hint


def test_loader_refuses_duplicate_ids_across_files(tmp_path):
    (tmp_path / "a.yaml").write_text(GOOD, encoding="utf-8")
    (tmp_path / "b.yaml").write_text(GOOD, encoding="utf-8")
    with pytest.raises(VocabularyError) as caught:
        load_vocabulary(tmp_path)
    message = str(caught.value)
    assert "b.yaml" in message and "body_mass_wet" in message and "a.yaml" in message


def test_loader_refuses_missing_or_empty_folder(tmp_path):
    with pytest.raises(VocabularyError, match="does not exist"):
        load_vocabulary(tmp_path / "absent")
    with pytest.raises(VocabularyError, match="no .yaml files"):
        load_vocabulary(tmp_path)


def test_loader_refuses_a_file_that_is_not_a_list(tmp_path):
    (tmp_path / "map.yaml").write_text("id: body_mass_wet\n", encoding="utf-8")
    with pytest.raises(VocabularyError, match="list of entries"):
        load_vocabulary(tmp_path)


def test_vocabulary_error_survives_pickling(tmp_path):
    (tmp_path / "x.yaml").write_text(_entry(role="nope"), encoding="utf-8")
    with pytest.raises(VocabularyError) as caught:
        load_vocabulary(tmp_path)
    again = pickle.loads(pickle.dumps(caught.value))
    assert str(again) == str(caught.value)


# --------------------------------------------------------------------------- check_vocabulary


def _write_terms(folder: Path, entries: list[dict[str, str]]) -> Vocabulary:
    blocks = []
    for fields in entries:
        block = GOOD.replace("body_mass_wet", fields["id"]).replace(
            "label: wet body mass", f"label: {fields.get('label', fields['id'])}"
        )
        block = block.replace("synonyms: [mass]", f"synonyms: [{fields.get('synonyms', '')}]")
        if "ambiguous" in fields:
            block += f"  ambiguous_synonyms: [{fields['ambiguous']}]\n"
        if fields.get("no_unit"):
            block = block.replace("  unit: g\n", "")
        blocks.append(block)
    (folder / "terms.yaml").write_text("\n".join(blocks), encoding="utf-8")
    return load_vocabulary(folder)


def test_check_reports_synonym_claimed_by_two_terms(tmp_path):
    vocab = _write_terms(
        tmp_path, [{"id": "a_term", "synonyms": "Tb"}, {"id": "b_term", "synonyms": "T b"}]
    )
    problems = check_vocabulary(vocab)
    assert len(problems) == 1 and "a_term" in problems[0] and "b_term" in problems[0]


def test_check_reports_one_sided_ambiguity(tmp_path):
    vocab = _write_terms(
        tmp_path, [{"id": "a_term", "ambiguous": "length"}, {"id": "b_term", "synonyms": "Length"}]
    )
    assert any("b_term" in p for p in check_vocabulary(vocab))


def test_check_accepts_synonym_ambiguous_on_both_sides(tmp_path):
    vocab = _write_terms(
        tmp_path, [{"id": "a_term", "ambiguous": "length"}, {"id": "b_term", "ambiguous": "LENGTH"}]
    )
    assert check_vocabulary(vocab) == []


def test_check_reports_synonym_equal_to_another_label(tmp_path):
    vocab = _write_terms(
        tmp_path,
        [{"id": "a_term", "label": "tail length"}, {"id": "b_term", "synonyms": "Tail-Length"}],
    )
    assert any("'a_term'" in p for p in check_vocabulary(vocab))


def test_check_reports_quantity_without_unit_and_statistic_synonym(tmp_path):
    vocab = _write_terms(tmp_path, [{"id": "a_term", "no_unit": "1", "synonyms": "body mass sd"}])
    problems = check_vocabulary(vocab)
    assert any("without unit" in p for p in problems)
    assert any("statistic" in p for p in problems)


# --------------------------------------------------------------------------- bundled path


def _fake_package(tmp_path: Path, monkeypatch) -> Path:
    import harmonize.vocab as vocab_module

    package = tmp_path / "site" / "harmonize"
    package.mkdir(parents=True)
    monkeypatch.setattr(vocab_module, "__file__", str(package / "vocab.py"))
    return package


def test_bundled_path_prefers_the_wheel_copy(tmp_path, monkeypatch):
    package = _fake_package(tmp_path, monkeypatch)
    shutil.copytree(TINY, package / "_bundled_vocab")
    shutil.copytree(TINY, package.parent / "vocab")
    (package.parent / "pyproject.toml").write_text("", encoding="utf-8")
    assert bundled_vocabulary_path() == (package / "_bundled_vocab").resolve()


def test_bundled_path_ignores_a_stray_vocab_folder_outside_a_checkout(tmp_path, monkeypatch):
    package = _fake_package(tmp_path, monkeypatch)
    shutil.copytree(TINY, package.parent / "vocab")  # no pyproject.toml beside it
    with pytest.raises(VocabularyError, match="no bundled vocabulary"):
        bundled_vocabulary_path()
    (package.parent / "pyproject.toml").write_text("", encoding="utf-8")
    assert bundled_vocabulary_path() == (package.parent / "vocab").resolve()
