"""Read unit spellings from trait tables and turn them into one affine conversion per unit pair.

This module is the adapter to pint. It owns the single unit registry, the
normaliser that rewrites spellings pint misreads (`g m-2`, `deg C`, `per day`, `µ`), the alias
table in `harmonize/data/unit_aliases.yaml` (case- and dimension-aware), and `conversion()`,
which gives `canonical = value * scale + offset` once per (raw unit, canonical unit) pair so
that values are converted with numpy, never one by one.

Left to others: choosing the canonical unit (the vocabulary), deciding which statistic is a
difference (`values`/`stats` call `apply_difference` for SD, SE and widths), writing reject rows
(callers turn `Conversion.reason` into rows), and UCUM codes (`harmonize.ucum`).
"""

from __future__ import annotations

import functools
import importlib.util
import itertools
import re
import unicodedata
from dataclasses import dataclass
from importlib.resources import files
from pathlib import Path

import numpy as np
import pint
import yaml

from harmonize.errors import ConfigError, RejectReason

_ALIAS_FILE = "data/unit_aliases.yaml"
_MAX_UNIT_TEXT = 200  # longer "units" are text pasted into the wrong column
_MAX_AMBIGUOUS_TOKENS = 3  # readings are tried as a product; keep it small


class UnitProblem(ValueError):
    """A unit text that cannot be used; `reason` is the reject code, `message` names the fix."""

    def __init__(self, reason: RejectReason, message: str) -> None:
        super().__init__(message)
        self.reason = reason
        self.message = message

    def __reduce__(self):  # keep the reason when pickled (e.g. across Dask workers)
        return (type(self), (self.reason, self.message))


# --------------------------------------------------------------------------- registry


@functools.cache
def registry() -> pint.UnitRegistry:
    """The one pint registry of the package, built on first use."""
    ureg = pint.UnitRegistry()
    spec = importlib.util.find_spec("ucumvert")
    if spec is not None and spec.origin is not None:
        # Only the definitions file is read; importing ucumvert itself would also load its
        # UCUM units into pint's global application registry (ECOSYSTEM-NOTES §3).
        ucum_definitions = Path(spec.origin).parent / "pint_ucum_defs.txt"
        if ucum_definitions.is_file():
            ureg.load_definitions(str(ucum_definitions))
    # Trait data count things: individuals, base pairs. All are dimensionless counts.
    ureg.define("individual = count = ind")
    ureg.define("base_pair = count")
    # '×10^3 cells/mL' keeps its power of ten as a unit factor so parse_unit can return a Unit.
    ureg.define("ten = 10")
    for name, factor in (("ppth", "1e-3"), ("ppb", "1e-9"), ("pptr", "1e-12")):
        if name not in ureg:  # ucumvert's file defines these; keep them without it too
            ureg.define(f"{name} = {factor}")
    return ureg


# --------------------------------------------------------------------------- alias table


@dataclass(frozen=True)
class _Alias:
    spelling: str
    readings: tuple[str, ...]  # pint texts, or '{X}' for "chemical qualifier X"
    ambiguous: bool
    qualifier: str | None
    note: str


@dataclass(frozen=True)
class _AliasTable:
    aliases: dict[str, _Alias]
    missing: frozenset[str]
    qualifier_pattern: re.Pattern[str] | None


@functools.cache
def _alias_table() -> _AliasTable:
    document = yaml.safe_load(files("harmonize").joinpath(_ALIAS_FILE).read_text("utf-8"))
    aliases: dict[str, _Alias] = {}
    for spelling, entry in (document.get("aliases") or {}).items():
        spelling = str(spelling)
        if isinstance(entry, str):
            aliases[spelling] = _Alias(spelling, (entry,), False, None, "")
        elif isinstance(entry, dict) and entry.get("ambiguous"):
            readings = tuple(str(r) for r in entry.get("readings") or ())
            if len(readings) < 2:
                raise ConfigError(
                    f"ambiguous unit alias {spelling!r} needs two or more readings",
                    file=_ALIAS_FILE,
                )
            aliases[spelling] = _Alias(spelling, readings, True, None, entry.get("note", ""))
        elif isinstance(entry, dict) and "unit" in entry:
            aliases[spelling] = _Alias(
                spelling,
                (str(entry["unit"]),),
                False,
                entry.get("qualifier"),
                entry.get("note", ""),
            )
        else:
            raise ConfigError(
                f"unit alias {spelling!r} has no 'unit' and is not 'ambiguous'", file=_ALIAS_FILE
            )
    qualifiers = [str(q) for q in document.get("chemical_qualifiers") or ()]
    pattern = None
    if qualifiers:
        names = "|".join(re.escape(q) for q in sorted(qualifiers, key=len, reverse=True))
        pattern = re.compile(rf"\(\s*({names})\s*\)|(?<![\w])({names})(?![\w])")
    missing = frozenset(str(m) for m in document.get("missing") or ())
    return _AliasTable(aliases, missing, pattern)


# --------------------------------------------------------------------------- normaliser

_SUPERSCRIPTS = str.maketrans("⁰¹²³⁴⁵⁶⁷⁸⁹⁻⁺", "0123456789-+")
_SUPERSCRIPT_RUN = re.compile(r"[⁰¹²³⁴⁵⁶⁷⁸⁹⁻⁺]+")
_WRAPPED = re.compile(r"[(\[]([^()\[\]]*)[)\]]")
_ANNOTATION = re.compile(r"\{([^{}]*)\}")
_POWER_OF_TEN = re.compile(r"(?:(?<=\s)|^)(?:[x*]\s*)?10\s*(?:\^|\*\*)\s*([-+]?\d+)(?![\d.])")
# 'deg C', '° C', 'degrees Celsius', '°F', 'deg. K' -> degC, degF, K
_DEGREE_PHRASE = re.compile(
    r"(?:\b[Dd]eg(?:ree)?s?\.?\s*|°\s*)(C|F|K)(?:elsius|ahrenheit|elvin)?(?![A-Za-z])"
)
_PER = re.compile(r"(?:^|(?<=\s))per\s+")
_DOT_BETWEEN_UNITS = re.compile(r"(?<=[A-Za-z0-9)])\s*\.\s*(?=[A-Za-z(])")
# ECOSYSTEM-NOTES §2: a bare exponent after a unit name ('m2', 's-1') -> 'm**2', 's**-1'
_BARE_EXPONENT = re.compile(r"(?<=[A-Za-z)])([-+]?\d+)(?![\d.])")
_TOKEN = re.compile(r"(?<![\w.])([A-Za-z_]+)(?![\w])")
# 'umol/m**2 s': after '/' one factor, then a space and another factor with no operator
_SLASH_THEN_PRODUCT = re.compile(r"/\s*[^\s/*()]+(?:\s*\*\*\s*[-+]?[\d.]+)?\s+(?=[A-Za-z_(\d])")
_NESTED_GROUP = re.compile(r"\([^()]*\)")
_STRAY_CHARACTER = re.compile(r"[^\w\s*/().+\-%]")


_INVISIBLE = re.compile(r"[\u00ad\u200b-\u200f\u2060-\u2064\ufeff]")


def _clean_characters(raw: str) -> str:
    # zero-width spaces, joiners, soft hyphens and stray BOMs come with copied text and
    # cannot be seen in a spreadsheet, so they are not what the author wrote as the unit
    text = _INVISIBLE.sub("", raw)
    text = text.replace("º", "°").replace("˚", "°")  # ordinal and ring signs typed for degree
    text = _SUPERSCRIPT_RUN.sub(lambda m: "^" + m.group(0).translate(_SUPERSCRIPTS), text)
    text = unicodedata.normalize("NFKC", text)  # '℃' -> '°C', micro sign -> Greek mu
    text = text.replace("μ", "u").replace("−", "-").replace("×", " x ")
    for product_sign in ("·", "⋅", "∙"):
        text = text.replace(product_sign, " ")
    text = " ".join(text.split())
    while match := _WRAPPED.fullmatch(text):  # '(mm)', '[g]' from column headers
        text = match.group(1).strip()
    return text


def _normalise(raw: str) -> tuple[str, tuple[str, ...]]:
    """Pint-readable text and the chemical qualifiers found in it ('' means no unit)."""
    table = _alias_table()
    text = _clean_characters(raw)
    if text in table.missing:
        return "", ()
    whole = table.aliases.get(text)
    if whole is not None and not whole.ambiguous:
        return whole.readings[0], ((whole.qualifier,) if whole.qualifier else ())

    qualifiers: list[str] = []

    def keep_qualifier(match: re.Match[str]) -> str:
        found = next((g for g in match.groups() if g), None)
        if found:  # an empty annotation '{}' qualifies nothing
            qualifiers.append(found)
        return " "

    text = _ANNOTATION.sub(keep_qualifier, text)
    if table.qualifier_pattern is not None:
        text = table.qualifier_pattern.sub(keep_qualifier, text)
    text = _POWER_OF_TEN.sub(r" ten**\1 ", text)
    text = text.replace(" x ", " ")
    text = _DEGREE_PHRASE.sub(lambda m: "K" if m.group(1) == "K" else f"deg{m.group(1)}", text)
    text = text.replace("°", " degree ")
    text = _PER.sub("/ ", text)
    text = _DOT_BETWEEN_UNITS.sub(" ", text)
    text = text.replace("^", "**")
    text = _BARE_EXPONENT.sub(r"**\1", text)
    text = " ".join(text.split())
    if text.startswith("/"):
        text = "1" + text  # '/h', 'per day'

    def plain_alias(match: re.Match[str]) -> str:
        alias = table.aliases.get(match.group(1))
        if alias is None or alias.ambiguous:
            return match.group(1)
        if alias.qualifier:
            qualifiers.append(alias.qualifier)
        reading = alias.readings[0]
        return reading if reading.isidentifier() else f"({reading})"

    text = _TOKEN.sub(plain_alias, text)
    return text, tuple(dict.fromkeys(qualifiers))


def normalise_unit_text(raw: str) -> str:
    """Rewrite a raw unit spelling into text pint reads correctly; '' when no unit was given.

    Ambiguous spellings (bare 'C', 'ppt', 'MM', ...) are left as they are: only `parse_unit`
    with the trait's canonical unit can settle them.
    """
    return _normalise(raw)[0]


# --------------------------------------------------------------------------- parsing


@dataclass(frozen=True)
class _Reading:
    unit: pint.Unit
    flags: tuple[str, ...]


def _pint_parse(text: str) -> pint.Unit:
    # pint lets TypeError, AssertionError and ValueError escape for malformed text
    # (ECOSYSTEM-NOTES §2); the caller reports the cause, so nothing is hidden.
    if not text.strip():
        raise ValueError("nothing left to parse")
    return registry().parse_units(text)


def _describe_failure(error: Exception) -> str:
    if isinstance(error, pint.UndefinedUnitError):
        return f"{', '.join(map(repr, error.unit_names))} is not a known unit"
    if "scaling factor" in str(error):
        return "a plain number cannot be part of a unit; write a power of ten as '10^3'"
    return f"{type(error).__name__}: {error}"


def _ambiguous_slash_message(raw: str) -> str:
    return (
        f"unit {raw!r} has '/' followed by a space-separated product: it can be read as "
        "a/(b c), which is usual in papers, or as (a/b) c, which is what unit parsers and UCUM do; "
        "write it with parentheses ('umol/(m2 s)') or negative exponents ('umol m-2 s-1')"
    )


@functools.lru_cache(maxsize=4096)
def _read(raw: str, expected_key: str | None) -> _Reading | UnitProblem:
    """Cached reading of one raw unit text for one expected dimensionality (or none)."""
    if len(raw) > _MAX_UNIT_TEXT:
        return UnitProblem(
            RejectReason.UNKNOWN_UNIT,
            f"unit text is {len(raw)} characters long; this is not a unit",
        )
    text, qualifiers = _normalise(raw)
    if not text:
        return UnitProblem(
            RejectReason.MISSING_UNIT,
            f"no unit given ({raw!r}); declare the unit in the mapping (quick mode: --unit COLUMN=UNIT)",
        )
    if stray := _STRAY_CHARACTER.search(text):
        # pint's tokenizer silently drops characters such as '!' or ';' ('g !!' -> gram)
        return UnitProblem(
            RejectReason.UNKNOWN_UNIT,
            f"unit {raw!r} contains {stray.group(0)!r}, which is not part of a unit",
        )
    if _SLASH_THEN_PRODUCT.search(_flatten_groups(text)):
        return UnitProblem(RejectReason.AMBIGUOUS_UNIT, _ambiguous_slash_message(raw))
    flags = tuple(f"chemical-qualifier:{q}" for q in qualifiers)

    table = _alias_table()
    ambiguous = list(
        dict.fromkeys(
            t
            for t in _TOKEN.findall(text)
            if (a := table.aliases.get(t)) is not None and a.ambiguous
        )
    )
    if not ambiguous:
        try:
            return _Reading(_pint_parse(text), flags)
        except Exception as error:  # noqa: BLE001 - pint leaks several builtin types; reported
            return UnitProblem(
                RejectReason.UNKNOWN_UNIT,
                f"unit {raw!r} is not recognised ({_describe_failure(error)}); "
                "declare the unit in the mapping or add the spelling to "
                "harmonize/data/unit_aliases.yaml",
            )
    if len(ambiguous) > _MAX_AMBIGUOUS_TOKENS:
        return UnitProblem(
            RejectReason.AMBIGUOUS_UNIT,
            f"unit {raw!r} has too many ambiguous parts: {', '.join(ambiguous)}",
        )
    return _settle_by_dimension(raw, text, ambiguous, expected_key, flags)


def _flatten_groups(text: str) -> str:
    # '(...)' groups are explicit, so only what lies outside them can be ambiguous
    while (flat := _NESTED_GROUP.sub("X", text)) != text:
        text = flat
    return text


def _settle_by_dimension(
    raw: str, text: str, ambiguous: list[str], expected_key: str | None, flags: tuple[str, ...]
) -> _Reading | UnitProblem:
    """Try every reading of the ambiguous spellings; keep the one with the expected dimension."""
    table = _alias_table()
    fitting: list[tuple[pint.Unit, dict[str, str]]] = []
    tried: list[str] = []
    for combination in itertools.product(*(table.aliases[t].readings for t in ambiguous)):
        choice = dict(zip(ambiguous, combination, strict=True))
        candidate = _TOKEN.sub(lambda m, c=choice: _substitute(c.get(m.group(1), m.group(1))), text)
        try:
            unit = _pint_parse(candidate)
        except Exception:  # noqa: BLE001 - an unreadable reading is simply not a candidate
            continue
        tried.append(f"{format(unit, 'C')} ({unit.dimensionality})")
        if expected_key is None or _dimension_key(unit) == expected_key:
            fitting.append((unit, choice))
    notes = "; ".join(table.aliases[t].note for t in ambiguous if table.aliases[t].note)
    # Without a trait unit nothing can settle the spelling, even if only one reading parses.
    if len(fitting) == 1 and expected_key is not None:
        unit, choice = fitting[0]
        extra = [f"unit-alias:{spelling}->{reading}" for spelling, reading in choice.items()]
        extra += [f"chemical-qualifier:{r[1:-1]}" for r in choice.values() if r.startswith("{")]
        return _Reading(unit, flags + tuple(extra))
    wanted = f"trait dimension {expected_key}" if expected_key else "no trait unit given"
    verdict = "several readings fit" if fitting else "no reading fits"
    return UnitProblem(
        RejectReason.AMBIGUOUS_UNIT,
        f"unit {raw!r} is ambiguous ({wanted}; {verdict}): it can be read as "
        f"{' or '.join(tried) or 'nothing pint knows'}"
        + (f" [{notes}]" if notes else "")
        + f"; declare the intended unit in the mapping ({_examples(ambiguous)})",
    )


def _examples(ambiguous: list[str]) -> str:
    table = _alias_table()
    readings = [r for t in ambiguous for r in table.aliases[t].readings if not r.startswith("{")]
    return "e.g. " + " or ".join(repr(r) for r in readings)


def _dimension_key(unit: pint.Unit) -> str:
    """Dimensionality as text with a fixed factor order, usable as a cache key."""
    return str(pint.util.UnitsContainer(dict(sorted(dict(unit.dimensionality).items()))))


def _substitute(reading: str) -> str:
    if reading.startswith("{"):
        return " "  # chemical qualifier: not part of the unit
    return reading if reading.isidentifier() else f"({reading})"


@functools.lru_cache(maxsize=512)
def _canonical(canonical_unit: str) -> pint.Unit:
    """The trait's canonical unit; an unreadable one is a vocabulary error, not a data problem."""
    result = _read(canonical_unit, None)
    if isinstance(result, UnitProblem):
        # an ambiguous spelling ('C', 'N') is refused here too: the vocabulary must say 'newton'
        raise ConfigError(
            f"canonical unit {canonical_unit!r} cannot be used: {result.message}",
            hint="fix the 'unit' of this trait in the vocabulary",
        )
    return result.unit


def _reading_for(text: str | None, expected_unit: str | None) -> _Reading:
    if text is None:
        raise UnitProblem(RejectReason.MISSING_UNIT, "no unit given; declare it in the mapping")
    expected_key = None
    if expected_unit is not None:
        expected_key = _dimension_key(_canonical(expected_unit))
    result = _read(str(text), expected_key)
    if isinstance(result, UnitProblem):
        raise UnitProblem(result.reason, result.message)  # fresh object: no shared traceback
    return result


def parse_unit(text: str | None, expected_unit: str | None = None) -> pint.Unit:
    """Parse a raw unit spelling; `expected_unit` (the trait's canonical unit) settles
    dimension-dependent spellings such as bare 'C'. Raises `UnitProblem` with a reject reason."""
    return _reading_for(text, expected_unit).unit


def format_unit(text: str) -> str:
    """Canonical pint text ('C' format, ASCII full names): 'g' -> 'gram', 'mL/h' -> 'milliliter/hour'."""
    return format(parse_unit(text), "C")


def dimensionality(text: str) -> str:
    """Pint dimensionality as text, e.g. '[mass]', '[length] ** 3 / [time]', 'dimensionless'."""
    return str(parse_unit(text).dimensionality)


def is_temperature(text: str) -> bool:
    """True for a temperature unit (degC, K, degF); False for rates such as degC/d."""
    return str(parse_unit(text).dimensionality) == "[temperature]"


# --------------------------------------------------------------------------- conversion


@dataclass(frozen=True)
class Conversion:
    """`canonical = value * scale + offset` for one (raw unit, canonical unit) pair.

    A failed conversion has `reason` set, NaN scale and offset (so applying it gives NaN), and a
    message naming the fix.
    """

    scale: float
    offset: float
    source_unit: str | None
    reason: RejectReason | None
    message: str
    flags: tuple[str, ...]

    @property
    def ok(self) -> bool:
        return self.reason is None

    @property
    def zero(self) -> float:
        """The value that converts to 0 (32 for degF -> degC), so that a location converts as
        `(value - zero) * scale`: pint's offset carries binary noise (-17.777777777777743 for
        degF), which `value * scale + offset` leaves in the result (32 degF gave 3.6e-14 degC).
        Snapped to 12 significant digits where that moves it by less than 1e-13 of itself."""
        if not self.offset or not self.scale:
            return 0.0
        zero = -self.offset / self.scale
        snapped = float(f"{zero:.12g}")
        return snapped if abs(snapped - zero) <= 1e-13 * abs(zero) else zero

    def apply(self, values: np.ndarray) -> np.ndarray:
        """Convert values, means, medians, quantiles, minima and maxima (affine)."""
        converted = (np.asarray(values, dtype=np.float64) - self.zero) * self.scale
        return converted if self.scale == 1.0 and not self.offset else digits_of_a_double(converted)

    def apply_difference(self, values: np.ndarray) -> np.ndarray:
        """Convert SD, SE and interval widths: a difference of temperatures has no offset."""
        converted = np.asarray(values, dtype=np.float64) * self.scale
        return converted if self.scale == 1.0 else digits_of_a_double(converted)


def digits_of_a_double(values: np.ndarray) -> np.ndarray:
    """Converted numbers rounded to 15 significant digits, the decimal digits a double always
    holds (DBL_DIG in C's float.h), to drop the binary noise a conversion leaves past them:
    7100 mg is 7.1 g, not 7100 x 0.001 = 7.1000000000000005, and 310.15 K is 37 degC, not
    36.99999999999997. A value moves by at most 5e-15 of itself. Values below 1e-8 or from 1e15
    up (where the powers of ten used are not exact) are left as they are."""
    x = np.array(values, dtype=np.float64)  # a copy, of any shape
    flat = x.reshape(-1)  # a view of it
    magnitude = np.abs(flat)
    here = np.flatnonzero(np.isfinite(flat) & (magnitude >= 1e-8) & (magnitude < 1e15))
    if len(here):
        power = 10.0 ** (14 - np.floor(np.log10(magnitude[here])))  # 10**0 .. 10**22: exact
        flat[here] = np.round(flat[here] * power) / power
    return x


def _failed(reason: RejectReason, message: str, source_unit: str | None = None) -> Conversion:
    return Conversion(float("nan"), float("nan"), source_unit, reason, message, ())


def _difference_unit(unit: pint.Unit) -> pint.Unit:
    """degC -> delta_degC; other units unchanged (pint already uses deltas inside compounds)."""
    items = list(unit._units.items())  # pint has no public accessor for a unit's factors
    if len(items) == 1 and items[0][1] == 1:
        delta = f"delta_{items[0][0]}"
        if delta in registry():
            return registry().Unit(delta)
    return unit


def _affine(source: pint.Unit, target: pint.Unit) -> tuple[float, float]:
    # ECOSYSTEM-NOTES §2 "Cost": one pint conversion per pair, then numpy. The scale comes from
    # converting a difference, so degF -> degC gives exactly 5/9 instead of f(1) - f(0).
    ureg = registry()
    offset = float(ureg.Quantity(0.0, source).to(target).magnitude)
    scale = float(
        ureg.Quantity(1.0, _difference_unit(source)).to(_difference_unit(target)).magnitude
    )
    return scale, offset


def _as_text(raw_unit: object) -> str | None:
    """Unit cells from pandas may be NaN or pd.NA instead of None."""
    if raw_unit is None or isinstance(raw_unit, str):
        return raw_unit
    try:
        if bool(raw_unit != raw_unit):  # NaN
            return None
    except TypeError:  # pd.NA refuses bool()
        return None
    return str(raw_unit)


@functools.lru_cache(maxsize=4096)
def conversion(raw_unit: str | None, canonical_unit: str) -> Conversion:
    """The affine conversion from a raw unit spelling to a trait's canonical unit (cached)."""
    target = _canonical(canonical_unit)
    raw_unit = _as_text(raw_unit)
    if raw_unit is None or not _normalise(raw_unit)[0]:
        if target.dimensionless:
            return Conversion(1.0, 0.0, None, None, "", ())
        return _failed(
            RejectReason.MISSING_UNIT,
            f"no unit given for trait unit {canonical_unit!r}; declare the unit in the mapping (quick mode: --unit COLUMN=UNIT)",
        )
    try:
        reading = _reading_for(raw_unit, canonical_unit)
    except UnitProblem as problem:
        return _failed(problem.reason, f"for trait unit {canonical_unit!r}: {problem.message}")
    source_text = format(reading.unit, "C")
    if reading.unit.dimensionality != target.dimensionality:
        return _failed(
            RejectReason.DIMENSION_MISMATCH,
            f"unit {raw_unit!r} ({reading.unit.dimensionality}) cannot be converted to trait "
            f"unit {canonical_unit!r} ({target.dimensionality}); check the column or the unit",
            source_text,
        )
    source, flags = reading.unit, reading.flags
    if _difference_unit(source) != source and any(n.startswith("delta_") for n in target._units):
        # a trait that is a temperature difference (tolerance breadth) recorded as 'degC':
        # the values are differences, so they take the scale and no offset
        source, flags = _difference_unit(source), flags + ("temperature-difference",)
    try:
        scale, offset = _affine(source, target)
    except (pint.DimensionalityError, pint.OffsetUnitCalculusError) as error:
        return _failed(
            RejectReason.DIMENSION_MISMATCH,
            f"unit {raw_unit!r} cannot be converted to trait unit {canonical_unit!r}: {error}; "
            "a temperature difference cannot become an absolute temperature",
            source_text,
        )
    return Conversion(scale, offset, source_text, None, "", flags)


@functools.lru_cache(maxsize=1024)
def variance_conversion(raw_unit: str | None, canonical_unit: str) -> Conversion:
    """The conversion of a variance to a trait's canonical unit. A variance may be given in the
    trait unit squared ('g²', 'mm^2', 'K2') or, as sources often write it, in the trait unit
    itself ('g'). Either way `scale` is the factor of the trait unit, which the variance takes
    squared (and never an offset: a variance of temperatures is one of differences)."""
    linear = conversion(raw_unit, canonical_unit)
    if linear.reason != RejectReason.DIMENSION_MISMATCH:
        return linear
    square = _difference_unit(_canonical(canonical_unit)) ** 2
    reading = _read(str(_as_text(raw_unit)), _dimension_key(square))
    if isinstance(reading, UnitProblem) or reading.unit.dimensionality != square.dimensionality:
        return _failed(
            RejectReason.DIMENSION_MISMATCH,
            f"{linear.message}; a variance may be given in the trait unit or its square",
            linear.source_unit,
        )
    squared_scale, _ = _affine(reading.unit, square)
    return Conversion(
        float(np.sqrt(squared_scale)), 0.0, format(reading.unit, "C"), None, "", reading.flags
    )


def same_unit(first: str, second: str) -> bool:
    """Whether two unit spellings name the same unit ('g' and 'gram' do; 'mm' and 'cm' do
    not), e.g. a cell's unit and the one in its column's name. An unreadable one does not."""
    if first.strip() == second.strip():
        return True
    for source, target in ((first, second), (second, first)):
        try:
            same = conversion(source, target)
        except ConfigError:  # a target must be unambiguous ('C' is not): try the other way
            continue
        return same.ok and same.scale == 1.0 and same.offset == 0.0
    return False
