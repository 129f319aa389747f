"""Load, validate and search the curated trait vocabulary (`vocab/*.yaml`).

A vocabulary is a folder of YAML files, each a list of entries (grammar in vocab/README.md).
`load_vocabulary` turns them into frozen `Term` records and refuses a malformed folder with a
`VocabularyError` naming the file, the entry id and the fix; `check_vocabulary` reports the
softer cross-entry problems (synonym clashes) as messages. Units are read by
`harmonize.units`; matching names against terms is `harmonize.match`'s job, not this module's.
"""

from __future__ import annotations

import difflib
import hashlib
import math
import re
import unicodedata
from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any

import yaml

from harmonize.config_files import YAML_MAX_BYTES, parse_yaml
from harmonize.errors import VocabularyError

ROLES = ("parameter", "threshold", "structure", "estimation", "forcing", "descriptive")
KINDS = ("quantity", "count", "category", "text")
LEVELS = ("individual", "population")

_REQUIRED_KEYS = ("id", "label", "definition", "kind", "role", "levels")
_OPTIONAL_KEYS = (
    "unit",
    "synonyms",
    "ambiguous_synonyms",
    "plausible",
    "rate",
    "categories",
    "notes",
    "arrhenius_temperature",
)
_ALLOWED_KEYS = _REQUIRED_KEYS + _OPTIONAL_KEYS
_VALUED_KINDS = ("quantity", "count")  # kinds whose values carry a unit and a range
_ID_PATTERN = re.compile(r"^[a-z][a-z0-9_]*$")
_FILE_PATTERNS = ("*.yaml", "*.yml")
# Statistic words a synonym must not end with: matching strips these from column names itself
# ('mass_sd'), so a synonym holding one would never be met. 'min'/'max' are left out on
# purpose: they end real trait names ('CTmax', 'VO2max').
_STATISTIC_WORDS = frozenset({"sd", "se", "sem", "mean", "avg", "median", "stdev", "var", "ci"})


@dataclass(frozen=True)
class Term:
    """One vocabulary entry: a trait or context variable, its canonical unit and model role."""

    id: str
    label: str
    definition: str
    kind: str
    unit: str | None
    role: str
    levels: tuple[str, ...]
    synonyms: tuple[str, ...]
    ambiguous_synonyms: tuple[str, ...]
    plausible: tuple[float, float] | None
    rate: bool
    categories: tuple[str, ...]
    source_file: str  # file name inside the vocabulary folder, e.g. 'morphology.yaml'
    notes: str | None = None
    arrhenius_temperature: float | None = None  # K; only for rates, overrides the project default


@dataclass(frozen=True)
class Vocabulary:
    """All terms of one vocabulary folder, by id, in file order then entry order."""

    terms: Mapping[str, Term]
    version: str  # 'sha256:' + 16 hex digits over the file names and contents
    files: tuple[str, ...] = field(default=())

    def __contains__(self, trait_id: object) -> bool:
        return trait_id in self.terms

    def __iter__(self) -> Iterator[Term]:
        return iter(self.terms.values())

    def __len__(self) -> int:
        return len(self.terms)

    def get(self, trait_id: str) -> Term:
        """The term with this id; KeyError naming the closest ids when there is none."""
        try:
            return self.terms[trait_id]
        except KeyError:
            close = difflib.get_close_matches(str(trait_id), list(self.terms), n=3, cutoff=0.6)
            hint = f"; did you mean {', '.join(close)}?" if close else ""
            raise KeyError(f"no trait '{trait_id}' in the vocabulary{hint}") from None

    def search(
        self, text: str = "", role: str | None = None, kind: str | None = None
    ) -> list[Term]:
        """Terms whose id, label or a synonym contains `text` (case-insensitive), optionally
        limited to one role and one kind. Closest first: a spelling equal to the text, then
        one holding it as a whole word, then any other; among equals the shorter spelling,
        then vocabulary order. Empty text lists every term in vocabulary order."""
        for value, allowed, what in ((role, ROLES, "role"), (kind, KINDS, "kind")):
            if value is not None and value not in allowed:
                raise ValueError(f"unknown {what} '{value}'; choose one of {', '.join(allowed)}")
        needle = _fold(text).replace("_", " ")  # ids are searched as words
        word = re.compile(rf"(?<!\w){re.escape(needle)}(?!\w)") if needle else None
        found = []
        for position, term in enumerate(self.terms.values()):
            if role is not None and term.role != role:
                continue
            if kind is not None and term.kind != kind:
                continue
            haystack = (term.id, term.label, *term.synonyms, *term.ambiguous_synonyms)
            spellings = [_fold(c).replace("_", " ") for c in haystack]
            ranks = [
                (0 if s == needle else 1 if word and word.search(s) else 2, len(s))
                for s in spellings
                if needle in s
            ]
            if ranks:
                found.append((*min(ranks), position, term))
        return [term for *_, term in sorted(found, key=lambda f: f[:3])]


def bundled_vocabulary_path() -> Path:
    """The vocabulary shipped with the package: `harmonize/_bundled_vocab` in an installed
    wheel (pyproject force-includes `vocab/` there), `<repo>/vocab` in a source checkout."""
    package = Path(__file__).resolve().parent
    installed = package / "_bundled_vocab"
    checkout = package.parent / "vocab"
    if _has_vocabulary_files(installed):
        return installed
    # The checkout folder only counts beside the project's own pyproject.toml, so that an
    # unrelated 'vocab' folder next to an installed package is never picked up.
    if (package.parent / "pyproject.toml").is_file() and _has_vocabulary_files(checkout):
        return checkout
    raise VocabularyError(
        "no bundled vocabulary found",
        hint=f"looked in {installed.name}/ inside the package and in vocab/ of a source "
        "checkout; pass a vocabulary folder explicitly",
    )


def load_vocabulary(folder: Path | str | None = None) -> Vocabulary:
    """Read every `*.yaml`/`*.yml` file of `folder` (default: the bundled vocabulary).

    Raises VocabularyError (file, entry id, hint) for unreadable YAML, unknown or missing keys,
    bad kind/role/level, ids repeated within or across files, units `harmonize.units` cannot
    parse, and plausible ranges that are not two ordered numbers.
    """
    root = bundled_vocabulary_path() if folder is None else Path(folder)
    if not root.is_dir():
        raise VocabularyError(
            "vocabulary folder does not exist or is not a folder",
            file=str(root),
            hint="give the folder holding the vocabulary's .yaml files",
        )
    paths = _vocabulary_files(root)
    if not paths:
        raise VocabularyError(
            "vocabulary folder holds no .yaml files", file=str(root), hint="add at least one"
        )
    for path in paths:
        size = path.stat().st_size
        if size > YAML_MAX_BYTES:  # refused before reading: a vocabulary file is small
            raise VocabularyError(
                f"file is {size} bytes, more than the {YAML_MAX_BYTES} allowed for a YAML file",
                file=str(path),
                hint="split the vocabulary into several files",
            )
    contents = {path.name: path.read_bytes() for path in paths}
    terms: dict[str, Term] = {}
    for path in paths:
        for term in _read_file(path, contents[path.name]):
            if term.id in terms:
                earlier = terms[term.id].source_file
                raise VocabularyError(
                    f"entry '{term.id}': id already defined in {earlier}",
                    file=str(path),
                    hint="ids must be unique across all files of the vocabulary",
                )
            terms[term.id] = term
    return Vocabulary(
        terms=MappingProxyType(terms),
        version=vocabulary_version(contents),
        files=tuple(path.name for path in paths),
    )


def vocabulary_version(contents: Mapping[str, bytes]) -> str:
    """'sha256:' + first 16 hex digits of a hash over file names and contents, sorted by name.

    Line endings are normalised first so that a checkout with CRLF endings gives the same
    version as one with LF; each part is length-prefixed so that no two folders collide by
    shifting bytes between a name and a content.
    """
    digest = hashlib.sha256()
    for name in sorted(contents):
        body = contents[name].replace(b"\r\n", b"\n")
        for part in (name.encode("utf-8"), body):
            digest.update(len(part).to_bytes(8, "big"))
            digest.update(part)
    return "sha256:" + digest.hexdigest()[:16]


def check_vocabulary(vocab: Vocabulary) -> list[str]:
    """Cross-entry problems that do not stop loading, as one message each ([] when clean).

    Synonyms are compared case-, accent- and separator-insensitively ('CT max' = 'ctmax'),
    as a matcher would see them. Reported: a synonym claimed by two terms unless both list it
    under `ambiguous_synonyms`; a synonym equal to another term's id or label; a quantity or
    count without unit; a category without categories; a synonym ending in a statistic word.
    """
    problems: list[str] = []
    claims: dict[str, list[tuple[str, str, bool]]] = {}  # key -> [(term id, text, ambiguous)]
    names: dict[str, str] = {}  # folded id or label -> term id
    for term in vocab.terms.values():
        for own in (term.id, term.label):
            names.setdefault(_key(own), term.id)
        # Spellings that differ only in separators or accents are kept within one term on
        # purpose ('hind foot' / 'hindfoot'): a matcher may split words differently. Only the
        # very same text listed twice is a slip.
        seen: set[str] = set()
        for text, ambiguous in [(s, False) for s in term.synonyms] + [
            (s, True) for s in term.ambiguous_synonyms
        ]:
            if _fold(text) in seen:
                problems.append(
                    f"{term.source_file}: '{term.id}' lists '{text}' twice "
                    "(as synonym or ambiguous synonym)"
                )
                continue
            seen.add(_fold(text))
            claims.setdefault(_key(text), []).append((term.id, text, ambiguous))
            words = _fold(text).replace("_", " ").split()
            if len(words) > 1 and words[-1] in _STATISTIC_WORDS:
                problems.append(
                    f"{term.source_file}: '{term.id}' synonym '{text}' ends in a statistic "
                    "word; matching strips statistics from names itself"
                )
        if term.kind in _VALUED_KINDS and term.unit is None:
            problems.append(f"{term.source_file}: '{term.id}' is a {term.kind} without unit")
        if term.kind == "category" and not term.categories:
            problems.append(f"{term.source_file}: '{term.id}' is a category without categories")
    for key, holders in claims.items():
        owners = sorted({term_id for term_id, _, _ in holders})
        if len(owners) > 1 and not all(ambiguous for _, _, ambiguous in holders):
            strict = sorted({term_id for term_id, _, ambiguous in holders if not ambiguous})
            problems.append(
                f"synonym '{holders[0][1]}' is claimed by {', '.join(owners)}; list it under "
                f"ambiguous_synonyms of each, or remove it from {', '.join(strict)}"
            )
        name_owner = names.get(key)
        if name_owner is not None:
            for term_id, text, _ in holders:
                if term_id != name_owner:
                    problems.append(
                        f"synonym '{text}' of '{term_id}' is the id or label of '{name_owner}'"
                    )
    return problems


# --------------------------------------------------------------------------- reading one file


def _has_vocabulary_files(folder: Path) -> bool:
    return folder.is_dir() and bool(_vocabulary_files(folder))


def _vocabulary_files(folder: Path) -> list[Path]:
    found = {p for pattern in _FILE_PATTERNS for p in folder.glob(pattern) if p.is_file()}
    return sorted(found, key=lambda p: p.name)


def _read_file(path: Path, raw: bytes) -> list[Term]:
    where = str(path)
    try:
        text = raw.decode("utf-8")
        node, data = parse_yaml(text)  # refuses alias bombs as a YAMLError
    except UnicodeDecodeError as error:
        raise VocabularyError(
            f"not UTF-8 text ({error.reason})", file=where, hint="save the file as UTF-8"
        ) from error
    except yaml.YAMLError as error:
        mark = getattr(error, "problem_mark", None)
        line = f"line {mark.line + 1}, column {mark.column + 1}: " if mark else ""
        problem = getattr(error, "problem", None) or str(error)
        entry = _entry_before(text, mark.line if mark else None)
        raise VocabularyError(
            f"not valid YAML{entry}: {line}{problem}",
            file=where,
            hint="check indentation, colons and quoting near that line",
        ) from error
    if data is None:
        return []
    if not isinstance(data, list):
        raise VocabularyError(
            "the file must hold a list of entries",
            file=where,
            hint="start each entry with '- id: ...'",
        )
    lines = [item.start_mark.line + 1 for item in node.value] if node is not None else []
    return [
        _term(entry, path.name, where, lines[i] if i < len(lines) else None)
        for i, entry in enumerate(data)
    ]


def _entry_before(text: str, line_index: int | None) -> str:
    """' in entry 'x'' for the last '- id: x' at or above a line, to name it in YAML errors."""
    if line_index is None:
        return ""
    found = ""
    for line in text.splitlines()[: line_index + 1]:
        m = re.match(r"^\s*-\s*id:\s*['\"]?([^'\"#\s]+)", line)
        if m:
            found = f" in entry '{m.group(1)}'"
    return found


def _term(entry: Any, file_name: str, where: str, line: int | None) -> Term:
    at = f" (line {line})" if line else ""
    if not isinstance(entry, dict):
        raise VocabularyError(
            f"entry{at} is not a mapping of keys to values", file=where, hint="see vocab/README.md"
        )
    entry_id = entry.get("id")
    name = f"entry '{entry_id}'{at}" if isinstance(entry_id, str) else f"entry{at}"

    def fail(problem: str, hint: str) -> VocabularyError:
        return VocabularyError(f"{name}: {problem}", file=where, hint=hint)

    unknown = [key for key in entry if key not in _ALLOWED_KEYS]
    if unknown:
        close = difflib.get_close_matches(str(unknown[0]), _ALLOWED_KEYS, n=1)
        suggestion = f"did you mean '{close[0]}'? " if close else ""
        raise fail(
            f"unknown key(s) {', '.join(repr(k) for k in unknown)}",
            f"{suggestion}allowed keys: {', '.join(_ALLOWED_KEYS)}",
        )
    missing = [key for key in _REQUIRED_KEYS if key not in entry]
    if missing:
        raise fail(
            f"missing key(s) {', '.join(missing)}", "every entry needs " + ", ".join(_REQUIRED_KEYS)
        )
    if not isinstance(entry_id, str) or not _ID_PATTERN.match(entry_id):
        raise fail(f"id {entry_id!r} is not snake_case", "use lower-case letters, digits and '_'")
    for key in ("label", "definition"):
        if not isinstance(entry[key], str) or not entry[key].strip():
            raise fail(f"{key} must be non-empty text", f"write the {key} in words")
    kind, role = entry["kind"], entry["role"]
    if kind not in KINDS:
        raise fail(f"kind {kind!r} is not allowed", f"choose one of {', '.join(KINDS)}")
    if role not in ROLES:
        raise fail(f"role {role!r} is not allowed", f"choose one of {', '.join(ROLES)}")
    levels = _text_list(entry["levels"], "levels", fail)
    bad_levels = [level for level in levels if level not in LEVELS]
    if not levels or bad_levels or len(set(levels)) != len(levels):
        raise fail(
            f"levels {entry['levels']!r} are not allowed",
            f"give a non-empty list without repeats drawn from {', '.join(LEVELS)}",
        )
    rate = entry.get("rate", False)
    if not isinstance(rate, bool):
        raise fail(f"rate {rate!r} is not true or false", "write rate: true or rate: false")
    unit = _unit(entry, kind, fail)
    plausible = _plausible(entry, kind, fail)
    categories = _text_list(entry.get("categories", []), "categories", fail)
    if categories and kind != "category":
        raise fail(f"categories given for a {kind}", "only category entries list categories")
    if kind == "category" and len(set(categories)) != len(categories):
        raise fail("categories repeat a value", "list each category once")
    if rate and kind not in _VALUED_KINDS:
        raise fail(
            f"a {kind} cannot be a rate", "rate: true is for temperature-dependent quantities"
        )
    notes = entry.get("notes")
    if notes is not None and not isinstance(notes, str):
        raise fail("notes must be text", "write notes as one string")
    arrhenius = entry.get("arrhenius_temperature")
    if arrhenius is not None:
        if not rate:
            raise fail(
                "arrhenius_temperature given for a term that is not a rate",
                "only rate: true terms take it",
            )
        if (
            isinstance(arrhenius, bool)
            or not isinstance(arrhenius, (int, float))
            or not 0 < arrhenius < 1e5
        ):
            raise fail(
                f"arrhenius_temperature {arrhenius!r} is not a temperature in K",
                "e.g. arrhenius_temperature: 8000",
            )
        arrhenius = float(arrhenius)
    return Term(
        id=entry_id,
        label=entry["label"].strip(),
        definition=" ".join(entry["definition"].split()),
        kind=kind,
        unit=unit,
        role=role,
        levels=tuple(levels),
        synonyms=tuple(_text_list(entry.get("synonyms", []), "synonyms", fail)),
        ambiguous_synonyms=tuple(
            _text_list(entry.get("ambiguous_synonyms", []), "ambiguous_synonyms", fail)
        ),
        plausible=plausible,
        rate=rate,
        categories=tuple(categories),
        source_file=file_name,
        notes=" ".join(notes.split()) if notes else None,
        arrhenius_temperature=arrhenius,
    )


def _text_list(value: Any, key: str, fail) -> list[str]:
    if value is None:
        return []
    if not isinstance(value, list):
        raise fail(f"{key} must be a list", f"write {key}: [first, second]")
    for item in value:
        if not isinstance(item, str) or not item.strip():
            hint = "quote it" + (
                "; YAML reads bare yes/no/on/off as true/false" if isinstance(item, bool) else ""
            )
            raise fail(f"{key} holds {item!r}, which is not non-empty text", hint)
    return [item.strip() for item in value]


def _unit(entry: dict, kind: str, fail) -> str | None:
    unit = entry.get("unit")
    if unit is None:
        return None  # a quantity without unit is reported by check_vocabulary, not refused
    if kind not in _VALUED_KINDS:
        raise fail(f"a {kind} has no unit (got {unit!r})", "remove the unit key")
    if not isinstance(unit, str) or not unit.strip():
        raise fail(f"unit {unit!r} is not text", "write a pint unit such as g, mm or degC")
    # Imported here: harmonize.units builds the pint registry, which callers that only search
    # the vocabulary should not pay for at import time.
    from harmonize.units import UnitProblem, parse_unit

    try:
        parsed = parse_unit(unit)
    except UnitProblem as error:
        raise fail(
            f"unit {unit!r} cannot be parsed: {error}", "write a pint unit such as g, mm or degC"
        ) from error
    if kind == "count" and not parsed.dimensionless:
        raise fail(f"a count needs a dimensionless unit, not {unit!r}", "write unit: count")
    return unit.strip()


def _plausible(entry: dict, kind: str, fail) -> tuple[float, float] | None:
    value = entry.get("plausible")
    if value is None:
        return None
    if kind not in _VALUED_KINDS:
        raise fail(f"a {kind} has no plausible range", "remove the plausible key")
    numbers_hint = (
        "write two numbers [lo, hi]; YAML reads 1e-6 or 1.0e6 as text, write 1.0e-6 or 1.0e+6"
    )
    if not isinstance(value, list) or len(value) != 2:
        raise fail(f"plausible {value!r} is not a pair", numbers_hint)
    if any(isinstance(v, bool) or not isinstance(v, int | float) for v in value):
        raise fail(f"plausible {value!r} holds something that is not a number", numbers_hint)
    low, high = float(value[0]), float(value[1])
    if not (math.isfinite(low) and math.isfinite(high)):
        raise fail(f"plausible {value!r} is not finite", "give finite bounds")
    if not low < high:
        raise fail(f"plausible {value!r} is not ordered low < high", "swap or correct the bounds")
    return (low, high)


def _fold(text: str) -> str:
    return unicodedata.normalize("NFKC", text).casefold()


def _key(text: str) -> str:
    """Comparison form of a name: case, accents and separators ignored."""
    decomposed = unicodedata.normalize("NFKD", _fold(text).replace("ß", "ss"))
    plain = "".join(ch for ch in decomposed if not unicodedata.combining(ch))
    return re.sub(r"[\s_\-.]+", "", plain)
