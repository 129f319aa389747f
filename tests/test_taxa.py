"""Tests for harmonize.taxa: cleaning verbatim taxon names.

Nomenclature sources behind the expected splits (article numbers from memory, not re-checked):
- ICZN Code, 4th ed. (1999), Art. 51: author and date follow the name; Art. 51.3: author and
  date in parentheses when the species is now in another genus than the original one.
- ICZN Art. 6.1: a subgenus in parentheses is not one of the words of the binomen.
- ICZN Art. 5.2: a subspecies name is a trinomen, written without a rank marker.
- ICZN Art. 32.5.2.3: a hyphen is kept in some epithets ("c-album").
- Open nomenclature cf., aff., sp.: Bengtson 1988, Palaeontology 31:223-227.
- ICN (Shenzhen Code 2018) Art. 24.1: botanical rank terms (var., f.) stay in the name;
  Appendix I, H.3: the multiplication sign × marks a hybrid.
The species names used are real; the tables they sit in are invented test data.
"""

from __future__ import annotations

import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from harmonize.errors import ConfigError, SourceNotFoundError
from harmonize.taxa import clean_taxon_names, load_taxon_synonyms, parse_taxon_name

# (verbatim, taxon, qualifier, authority)
NAME_SPLITS = [
    # Spacing and case as typed.
    ("Podarcis muralis", "Podarcis muralis", None, None),
    ("Podarcis_muralis", "Podarcis muralis", None, None),
    ("  Podarcis \t muralis ", "Podarcis muralis", None, None),
    ("podarcis MURALIS", "Podarcis muralis", None, None),
    ("PODARCIS MURALIS", "Podarcis muralis", None, None),
    ("Podarcis Muralis", "Podarcis muralis", None, None),
    ('"Podarcis muralis"', "Podarcis muralis", None, None),
    # Author and date (ICZN Art. 51).
    ("Sorex araneus Linnaeus, 1758", "Sorex araneus", None, "Linnaeus, 1758"),
    ("Sorex araneus Linnaeus 1758", "Sorex araneus", None, "Linnaeus 1758"),
    ("Podarcis muralis (Laurenti, 1768)", "Podarcis muralis", None, "(Laurenti, 1768)"),
    ("Bufo bufo L.", "Bufo bufo", None, "L."),
    ("Pieris rapae (L.)", "Pieris rapae", None, "(L.)"),
    ("Sorex Linnaeus, 1758", "Sorex", None, "Linnaeus, 1758"),
    ("Sorex araneus de Selys-Longchamps, 1839", "Sorex araneus", None, "de Selys-Longchamps, 1839"),
    # Subgenus (ICZN Art. 6.1) and trinomina (ICZN Art. 5.2).
    ("Sorex (Sorex) araneus Linnaeus, 1758", "Sorex araneus", None, "Linnaeus, 1758"),
    ("Sorex araneus tetragonurus", "Sorex araneus tetragonurus", None, None),
    ("Sorex araneus ssp. tetragonurus", "Sorex araneus tetragonurus", None, None),
    ("Nymphalis c-album", "Nymphalis c-album", None, None),  # ICZN Art. 32.5.2.3
    # Open nomenclature (Bengtson 1988).
    ("Sorex cf. minutus", "Sorex minutus", "cf.", None),
    ("Sorex cf minutus", "Sorex minutus", "cf.", None),
    ("cf. Sorex minutus", "Sorex minutus", "cf.", None),
    ("Cf. Sorex minutus", "Sorex minutus", "cf.", None),
    ("aff Sorex minutus", "Sorex minutus", "aff.", None),
    ("Cf Sorex minutus", "Sorex minutus", "cf.", None),
    # a genus spelt like a qualifier (found by the generated-name test below; invented name)
    ("Aff aaa Aaa, 1758", "Aff aaa", None, "Aaa, 1758"),
    ("Sorex aff. araneus", "Sorex araneus", "aff.", None),
    ("Sorex sp.", "Sorex", "sp.", None),
    ("Sorex spp.", "Sorex", "spp.", None),
    ("Sorex sp. 1", "Sorex", "sp. 1", None),  # distinct unnamed species stay distinct
    ("Sorex araneus ssp.", "Sorex araneus", "ssp.", None),
    ("Sorex araneus subsp.", "Sorex araneus", "subsp.", None),
    # Botanical rank markers and hybrids (ICN Art. 24.1, H.3).
    (
        "Rosa canina var. lutetiana (Léman) Baker",
        "Rosa canina var. lutetiana",
        None,
        "(Léman) Baker",
    ),
    ("Mentha × piperita", "Mentha × piperita", None, None),
    ("Mentha x piperita L.", "Mentha × piperita", None, "L."),
    ("Podarcis muralis x Podarcis siculus", "Podarcis muralis × Podarcis siculus", None, None),
    # Higher taxa pass through; things that are not names become None.
    ("Lacertidae", "Lacertidae", None, None),
    ("", None, None, None),
    ("   ", None, None, None),
    ("123", None, None, None),
    ("?", None, None, None),
]


@pytest.mark.parametrize(("verbatim", "taxon", "qualifier", "authority"), NAME_SPLITS)
def test_name_is_split_into_taxon_qualifier_and_authority(verbatim, taxon, qualifier, authority):
    parsed = parse_taxon_name(verbatim)
    assert (parsed.cleaned, parsed.qualifier, parsed.authority) == (taxon, qualifier, authority)


def test_column_is_cleaned_and_aligned_with_its_index():
    names = pd.Series(
        ["Sorex_araneus", None, "sorex ARANEUS L.", "Sorex cf. minutus", "Sorex_araneus"],
        index=[5, 9, 2, 7, 1],
    )
    table = clean_taxon_names(names)
    assert list(table.columns) == ["taxon_verbatim", "taxon", "taxon_qualifier", "taxon_authority"]
    assert table.index.tolist() == [5, 9, 2, 7, 1]
    assert table["taxon_verbatim"].tolist() == [
        "Sorex_araneus",
        None,
        "sorex ARANEUS L.",
        "Sorex cf. minutus",
        "Sorex_araneus",
    ]
    assert table["taxon"].tolist() == [
        "Sorex araneus",
        None,
        "Sorex araneus",
        "Sorex minutus",
        "Sorex araneus",
    ]
    assert table.loc[2, "taxon_authority"] == "L."
    assert table.loc[7, "taxon_qualifier"] == "cf."
    assert table.loc[9, "taxon_verbatim"] is None


def test_synonyms_apply_after_cleaning_on_both_sides():
    # Lacerta vivipara Lichtenstein, 1823 is the original combination of Zootoca vivipara.
    names = pd.Series(["lacerta_vivipara Lichtenstein, 1823", "Zootoca vivipara", "Lacerta agilis"])
    table = clean_taxon_names(names, synonyms={"Lacerta  VIVIPARA": "zootoca vivipara"})
    assert table["taxon"].tolist() == ["Zootoca vivipara", "Zootoca vivipara", "Lacerta agilis"]
    # The citation belonged to the verbatim name, not to the accepted one.
    assert table["taxon_authority"].tolist() == [None, None, None]
    assert table["taxon_verbatim"][0] == "lacerta_vivipara Lichtenstein, 1823"


def test_synonym_that_is_not_a_name_is_a_config_error():
    with pytest.raises(ConfigError):
        clean_taxon_names(pd.Series(["Sorex araneus"]), synonyms={"123": "Sorex araneus"})


def _write(tmp_path, text):
    path = tmp_path / "synonyms.csv"
    path.write_text(text, encoding="utf-8")
    return path


def test_synonym_table_is_read_with_blank_lines_and_extra_columns(tmp_path):
    path = _write(
        tmp_path,
        "name,accepted_name,note\n"
        "Lacerta vivipara,Zootoca vivipara,original combination\n"
        "\n"
        "Sorex tetragonurus,Sorex araneus,\n",
    )
    assert load_taxon_synonyms(path) == {
        "Lacerta vivipara": "Zootoca vivipara",
        "Sorex tetragonurus": "Sorex araneus",
    }


@pytest.mark.parametrize(
    ("text", "row", "column", "words"),
    [
        ("taxon,accepted\nA b,C d\n", 1, None, "name, accepted_name"),
        (
            "name,accepted_name\nSorex minutus,Sorex minutus\nSorex x,\n",
            3,
            "accepted_name",
            "empty",
        ),
        ("name,accepted_name\n123,Sorex araneus\n", 2, "name", "not a taxon name"),
        # The same name (after cleaning) pointing two ways.
        ("name,accepted_name\nA b,C d\na_B,E f\n", 3, "name", "already mapped"),
        # A chain: b -> c while a -> b.
        ("name,accepted_name\nA b,C d\nC d,E f\n", 2, "accepted_name", "itself mapped"),
    ],
)
def test_bad_synonym_rows_name_file_row_and_column(tmp_path, text, row, column, words):
    path = _write(tmp_path, text)
    with pytest.raises(ConfigError) as caught:
        load_taxon_synonyms(path)
    error = caught.value
    assert (error.row, error.column) == (row, column)
    assert error.file == str(path)
    assert words in str(error)


def test_missing_synonym_table_is_reported(tmp_path):
    with pytest.raises(SourceNotFoundError):
        load_taxon_synonyms(tmp_path / "absent.csv")


genus = st.from_regex(r"[A-Z][a-z]{2,10}", fullmatch=True)
epithet = st.from_regex(r"[a-z]{3,12}", fullmatch=True)
author = st.from_regex(r"[A-Z][a-z]{2,10}", fullmatch=True)
year = st.integers(min_value=1758, max_value=2025)  # ICZN Art. 3: 1758 is the starting point


@settings(max_examples=100, deadline=None)
@given(genus, epithet, author, year, st.booleans(), st.sampled_from([" ", "_", "  "]))
def test_binomen_with_any_citation_comes_apart_cleanly(g, e, a, y, moved, gap):
    citation = f"({a}, {y})" if moved else f"{a}, {y}"
    parsed = parse_taxon_name(f"{g}{gap}{e.upper()} {citation}")
    assert parsed.cleaned == f"{g} {e}"
    assert parsed.authority == citation
    assert parsed.qualifier is None


@settings(max_examples=100, deadline=None)
@given(st.one_of(st.none(), st.text(max_size=40)))
def test_cleaning_never_raises_and_is_idempotent(text):
    parsed = parse_taxon_name(text)
    if parsed.cleaned is not None:
        again = parse_taxon_name(parsed.cleaned)
        assert again.cleaned == parsed.cleaned
