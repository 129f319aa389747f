"""Clean taxon names as written in trait tables into comparable scientific names.

Splits a verbatim name such as "podarcis_MURALIS (Laurenti, 1768)" or "Sorex cf. minutus" into
the cleaned name ("Podarcis muralis"), an open-nomenclature qualifier ("cf.") and the author
citation ("(Laurenti, 1768)"), then applies a user synonym table. Work is done once per distinct
name and mapped back onto the column.

It leaves to others: checking names against a taxonomic backbone (there is no network at run
time), deciding that a missing taxon is a reject (`assemble`), and anything about trait values.
Names follow the shape given by the ICZN Code (4th ed.) and, for plant rank markers and hybrid
signs, the ICN; this module is a cleaner, not a nomenclatural validator.
"""

from __future__ import annotations

import csv
import re
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from harmonize.errors import ConfigError, SourceNotFoundError

__all__ = ["TaxonName", "parse_taxon_name", "clean_taxon_names", "load_taxon_synonyms"]

SYNONYM_COLUMNS = ("name", "accepted_name")
HYBRID_SIGN = "×"

# Open-nomenclature qualifiers as written -> the form we store (Bengtson 1988).
_OPEN_QUALIFIERS = {
    "cf": "cf.",
    "aff": "aff.",
    "sp": "sp.",
    "spec": "sp.",
    "spp": "spp.",
    "ssp": "ssp.",
    "subsp": "subsp.",
}
_UNNAMED_SPECIES = {"sp.", "spp."}
_SUBSPECIES_MARKERS = {"ssp.", "subsp."}
# Botanical rank markers that stay inside the name (ICN Art. 24.1, from memory).
_KEPT_RANK_MARKERS = {"var": "var.", "f": "f.", "forma": "f.", "subvar": "subvar."}
# Lower-case name particles that begin an author citation ("de Selys Longchamps").
_AUTHOR_PARTICLES = {"de", "von", "van", "der", "du", "da", "di", "del", "la", "le", "dos"}

# "S. minutus": an abbreviated genus, resolved by the synonym table
_GENUS = re.compile(rf"{HYBRID_SIGN}?(?:[A-Za-z]+|[A-Za-z]\.)")
# Latin letters only, hyphen allowed inside (ICZN Art. 32.5.2.3, e.g. "c-album").
_EPITHET = re.compile(r"[A-Za-z]+(?:-[A-Za-z]+)*")
_SUBGENUS = re.compile(r"\([A-Za-z]+\)")
_SPACES = re.compile(r"[\s_\u00a0\u202f]+")


@dataclass(frozen=True)
class TaxonName:
    """One verbatim name split into its parts; all None for an empty name."""

    cleaned: str | None
    qualifier: str | None
    authority: str | None


def _open_qualifier(token: str) -> str | None:
    return _OPEN_QUALIFIERS.get(token.lower().rstrip("."))


def _rank_marker(token: str) -> str | None:
    return _KEPT_RANK_MARKERS.get(token.lower().rstrip("."))


def _genus_like(tokens: list[str], i: int) -> bool:
    """Whether tokens[i] reads as a genus: title case without a period, an epithet after it."""
    following = tokens[i + 1] if i + 1 < len(tokens) else ""
    return tokens[i].istitle() and not tokens[i].endswith(".") and not following.istitle()


def _capitalised(word: str) -> str:
    if word.startswith(HYBRID_SIGN):
        return HYBRID_SIGN + _capitalised(word[1:])
    return word[:1].upper() + word[1:].lower()


def _starts_author_citation(tokens: list[str], i: int, have_epithet: bool) -> bool:
    """Whether tokens[i] begins the author and date part (ICZN Art. 51)."""
    token = tokens[i]
    following = tokens[i + 1] if i + 1 < len(tokens) else ""
    if not _EPITHET.fullmatch(token):
        return True  # "L.", "(Laurenti,", "1758", "Linnaeus," "&"
    if token.lower() in _AUTHOR_PARTICLES and following[:1].isupper():
        return True
    if token.islower() or (token.isupper() and len(token) > 1):
        return False  # an epithet, possibly typed in capitals
    # Title case: an author after an epithet; in the epithet's place only when a year or a
    # comma shows it is a citation ("Sorex Linnaeus, 1758" is genus plus author).
    if have_epithet:
        return True
    return following[:1].isdigit() or following.startswith(("(", "&"))


def parse_taxon_name(verbatim: object) -> TaxonName:
    """Split one verbatim name into cleaned name, qualifier and author citation."""
    if verbatim is None or (isinstance(verbatim, float) and np.isnan(verbatim)):
        return TaxonName(None, None, None)
    text = _SPACES.sub(" ", str(verbatim)).strip().strip("\"'").strip()
    tokens = text.split(" ") if text else []
    qualifiers: list[str] = []
    i = 0
    # A qualifier may precede the whole name: "cf. Sorex minutus". Written like a genus
    # before an epithet (title case, no period: "Aff aaa") it is the genus.
    while (
        i < len(tokens)
        and _open_qualifier(tokens[i]) in ("cf.", "aff.")
        and not _genus_like(tokens, i)
    ):
        qualifiers.append(_open_qualifier(tokens[i]))
        i += 1
    if i >= len(tokens) or not _GENUS.fullmatch(tokens[i]):
        return TaxonName(None, None, None)
    parts = [_capitalised(tokens[i])]
    i += 1
    # A subgenus in parentheses between genus and species is not a word of the binomen
    # (ICZN Art. 6.1), so it is left out of the cleaned name.
    if (
        i + 1 < len(tokens)
        and _SUBGENUS.fullmatch(tokens[i])
        and _EPITHET.fullmatch(tokens[i + 1])
        and tokens[i + 1].islower()
    ):
        i += 1
    have_epithet = False
    authority: list[str] = []
    while i < len(tokens):
        token = tokens[i]
        following = tokens[i + 1] if i + 1 < len(tokens) else ""
        open_qualifier = _open_qualifier(token)
        if open_qualifier in _UNNAMED_SPECIES:
            # "sp. 1", "sp. A": keep the designation with the qualifier so that distinct
            # unnamed species of one genus stay distinct.
            qualifiers.append(" ".join([open_qualifier, *tokens[i + 1 :]]))
            break
        if open_qualifier in _SUBSPECIES_MARKERS and not (
            _EPITHET.fullmatch(following) and following.islower()
        ):
            qualifiers.append(open_qualifier)  # "Sorex araneus ssp.": subspecies not named
            i += 1
            continue
        if open_qualifier is not None:
            if open_qualifier not in _SUBSPECIES_MARKERS:
                qualifiers.append(open_qualifier)  # cf. / aff. before the epithet they qualify
            # A subspecies marker before a named subspecies: zoological trinomina carry no
            # marker (ICZN Art. 5.2), so the marker is dropped and the epithet kept.
            i += 1
            continue
        if token in (HYBRID_SIGN, "x", "X") and parts and following:
            parts.append(HYBRID_SIGN)
            if _GENUS.fullmatch(following) and following[:1].isupper() and i + 2 < len(tokens):
                parts.append(_capitalised(following))  # "A b × C d": second parent's genus
                i += 2
                have_epithet = False
                continue
            i += 1
            continue
        marker = _rank_marker(token)
        if marker and have_epithet and _EPITHET.fullmatch(following) and following.islower():
            parts.extend([marker, following.lower()])
            i += 2
            continue
        if _starts_author_citation(tokens, i, have_epithet):
            authority = tokens[i:]
            break
        parts.append(token.lower())
        have_epithet = True
        i += 1
    citation = " ".join(authority).strip(" ,") or None
    qualifier = " ".join(qualifiers) or None
    return TaxonName(" ".join(parts), qualifier, citation)


def _synonym_lookup(synonyms: Mapping[str, str]) -> dict[str, str]:
    """Synonym keys and accepted names cleaned like the data, so spelling variants still meet."""
    lookup: dict[str, str] = {}
    for name, accepted in synonyms.items():  # loop over the synonym table, not the data
        key, target = parse_taxon_name(name).cleaned, parse_taxon_name(accepted).cleaned
        if key is None or target is None:
            raise ConfigError(
                f"synonym entry {name!r} -> {accepted!r} is not a taxon name",
                hint="both sides must start with a genus name",
            )
        lookup[key] = target
    return lookup


def clean_taxon_names(names: pd.Series, synonyms: Mapping[str, str] | None = None) -> pd.DataFrame:
    """Clean a column of verbatim names; returns taxon_verbatim, taxon, taxon_qualifier,
    taxon_authority aligned with `names` (same index).

    Synonyms are applied after cleaning, with keys cleaned the same way. When a synonym
    replaces the name, the author citation (which belonged to the verbatim name) is dropped.
    """
    codes, distinct = pd.factorize(names, use_na_sentinel=True)
    parsed = [parse_taxon_name(name) for name in distinct]  # once per distinct name
    # One extra slot at the end, reached by the code -1 that factorize gives missing names.
    taxon = np.array([p.cleaned for p in parsed] + [None], dtype=object)
    qualifier = np.array([p.qualifier for p in parsed] + [None], dtype=object)
    authority = np.array([p.authority for p in parsed] + [None], dtype=object)
    if synonyms:
        lookup = _synonym_lookup(synonyms)
        accepted = np.array([lookup.get(t, t) if t else t for t in taxon], dtype=object)
        replaced = accepted != taxon
        authority[replaced] = None
        taxon = accepted
    verbatim = names.astype(object).where(names.notna(), None).to_numpy()
    columns = {
        "taxon_verbatim": verbatim,
        "taxon": taxon[codes],
        "taxon_qualifier": qualifier[codes],
        "taxon_authority": authority[codes],
    }
    # Object columns keep None for missing parts; pandas 3 would otherwise infer its string
    # dtype and turn None into NaN.
    return pd.DataFrame(
        {
            name: pd.Series(values, index=names.index, dtype=object)
            for name, values in columns.items()
        }
    )


def load_taxon_synonyms(path: Path) -> dict[str, str]:
    """Read a synonym table: CSV with header `name,accepted_name` (extra columns are ignored).

    Row numbers in errors count the header as row 1, as a spreadsheet shows them.
    """
    path = Path(path)
    if not path.is_file():
        raise SourceNotFoundError("synonym table not found", file=str(path))
    synonyms: dict[str, str] = {}
    first: dict[
        str, tuple[int, str, str]
    ] = {}  # cleaned name -> (row, accepted as written, cleaned)
    try:
        with path.open(encoding="utf-8-sig", newline="") as handle:
            reader = csv.DictReader(handle)
            header = [h.strip() for h in reader.fieldnames or []]
            missing = [c for c in SYNONYM_COLUMNS if c not in header]
            if missing:
                raise ConfigError(
                    f"synonym table lacks column(s) {', '.join(missing)}",
                    file=str(path),
                    row=1,
                    hint="the header must be `name,accepted_name`",
                )
            reader.fieldnames = header
            for record in reader:  # loop over the synonym table, a config file
                row = reader.line_num
                name = (record.get("name") or "").strip()
                accepted = (record.get("accepted_name") or "").strip()
                if not name and not accepted:
                    continue  # blank line
                cleaned = {}
                for column, value in (("name", name), ("accepted_name", accepted)):
                    cleaned[column] = parse_taxon_name(value).cleaned
                    if cleaned[column] is None:
                        raise ConfigError(
                            f"{value!r} is not a taxon name" if value else "empty cell",
                            file=str(path),
                            row=row,
                            column=column,
                            hint="each row needs a name and the accepted name it stands for",
                        )
                key, target = cleaned["name"], cleaned["accepted_name"]
                if key in first and first[key][2] != target:
                    earlier_row, earlier_accepted, _ = first[key]
                    raise ConfigError(
                        f"{name!r} is already mapped to {earlier_accepted!r} in row {earlier_row}",
                        file=str(path),
                        row=row,
                        column="name",
                        hint="keep one accepted name per name",
                    )
                first.setdefault(key, (row, accepted, target))
                synonyms.setdefault(name, accepted)
    except UnicodeDecodeError as error:
        raise ConfigError(
            "synonym table is not UTF-8 text", file=str(path), hint=str(error)
        ) from error
    for key, (row, _, target) in first.items():
        onward = first.get(target)
        if target != key and onward is not None and onward[2] != target:
            raise ConfigError(
                f"accepted name {target!r} is itself mapped to {onward[2]!r} in row {onward[0]}",
                file=str(path),
                row=row,
                column="accepted_name",
                hint=f"point the row directly at {onward[2]!r}",
            )
    return synonyms
