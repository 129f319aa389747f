"""Write a pint unit as a UCUM code (e.g. 'micromole/meter**2/second' -> 'umol.m-2.s-1').

No library maps pint to UCUM (ECOSYSTEM-NOTES §3), so this module walks the parsed unit's
factors, splits each into prefix and base name with the package registry, and looks both up in
two small tables below. Codes follow the UCUM specification (unitsofmeasure.org): '.' joins
factors, exponents follow the symbol, annotations sit in braces ('mL{O2}.h-1', '{ind}.m-2').

Left to others: parsing raw spellings (`harmonize.units`), checking UCUM codes written by
others (ucumvert can do that in tests), and choosing which units the package records.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

from harmonize.errors import ConfigError
from harmonize.units import parse_unit, registry

# pint prefix name -> (UCUM prefix symbol, power of ten)
_PREFIXES: dict[str, tuple[str, int]] = {
    "": ("", 0),
    "yocto": ("y", -24),
    "zepto": ("z", -21),
    "atto": ("a", -18),
    "femto": ("f", -15),
    "pico": ("p", -12),
    "nano": ("n", -9),
    "micro": ("u", -6),
    "milli": ("m", -3),
    "centi": ("c", -2),
    "deci": ("d", -1),
    "deca": ("da", 1),
    "hecto": ("h", 2),
    "kilo": ("k", 3),
    "mega": ("M", 6),
    "giga": ("G", 9),
    "tera": ("T", 12),
    "peta": ("P", 15),
    "exa": ("E", 18),
    "zetta": ("Z", 21),
    "yotta": ("Y", 24),
}


@dataclass(frozen=True)
class _Atom:
    code: str
    metric: bool  # UCUM allows prefixes on metric atoms only
    power: int = 1  # e.g. cubic_centimeter is 'cm' cubed


_M, _N = True, False  # metric / non-metric, to keep the table readable

# pint base unit name -> UCUM atom. Offset temperatures: degC -> Cel, degF -> [degF];
# a temperature difference has no UCUM atom of its own, so delta_degC -> K (same size) and
# delta_degF -> [degR] (the Rankine degree has the Fahrenheit degree's size).
_ATOMS: dict[str, _Atom] = {
    "meter": _Atom("m", _M),
    "gram": _Atom("g", _M),
    "second": _Atom("s", _M),
    "minute": _Atom("min", _N),
    "hour": _Atom("h", _N),
    "day": _Atom("d", _N),
    "week": _Atom("wk", _N),
    "month": _Atom("mo", _N),
    "year": _Atom("a", _N),
    "liter": _Atom("L", _M),
    "cubic_centimeter": _Atom("cm", _N, 3),
    "mole": _Atom("mol", _M),
    "kelvin": _Atom("K", _M),
    "degree_Celsius": _Atom("Cel", _M),
    "degree_Fahrenheit": _Atom("[degF]", _N),
    "delta_degree_Celsius": _Atom("K", _M),
    "delta_degree_Fahrenheit": _Atom("[degR]", _N),
    "degree_Rankine": _Atom("[degR]", _N),
    "joule": _Atom("J", _M),
    "watt": _Atom("W", _M),
    "calorie": _Atom("cal", _M),  # UCUM 'cal' is the thermochemical calorie, as in pint
    "electron_volt": _Atom("eV", _M),
    "newton": _Atom("N", _M),
    "pascal": _Atom("Pa", _M),
    "bar": _Atom("bar", _M),
    "standard_atmosphere": _Atom("atm", _N),
    "meter_Hg": _Atom("m[Hg]", _M),
    "meter_H2O": _Atom("m[H2O]", _M),
    "coulomb": _Atom("C", _M),
    "volt": _Atom("V", _M),
    "ampere": _Atom("A", _M),
    "ohm": _Atom("Ohm", _M),
    "siemens": _Atom("S", _M),
    "farad": _Atom("F", _M),
    "hertz": _Atom("Hz", _M),
    "tesla": _Atom("T", _M),
    "weber": _Atom("Wb", _M),
    "henry": _Atom("H", _M),
    "katal": _Atom("kat", _M),
    "becquerel": _Atom("Bq", _M),
    "gray": _Atom("Gy", _M),
    "sievert": _Atom("Sv", _M),
    "lux": _Atom("lx", _M),
    "lumen": _Atom("lm", _M),
    "candela": _Atom("cd", _M),
    "radian": _Atom("rad", _M),
    "steradian": _Atom("sr", _M),
    "degree": _Atom("deg", _N),
    "are": _Atom("ar", _M),
    "hectare": _Atom("har", _N),
    "metric_ton": _Atom("t", _M),
    "inch": _Atom("[in_i]", _N),
    "foot": _Atom("[ft_i]", _N),
    "yard": _Atom("[yd_i]", _N),
    "mile": _Atom("[mi_i]", _N),
    "pound": _Atom("[lb_av]", _N),
    "ounce": _Atom("[oz_av]", _N),
    "grain": _Atom("[gr]", _N),
    "percent": _Atom("%", _N),
    "ppth": _Atom("[ppth]", _N),
    "ppm": _Atom("[ppm]", _N),
    "ppb": _Atom("[ppb]", _N),
    "pptr": _Atom("[pptr]", _N),
    "ten": _Atom("10*", _N),  # '×10^3' in a unit -> '10*3'
    # counts: dimensionless in UCUM, kept readable as annotations
    "count": _Atom("{count}", _N),
    "individual": _Atom("{ind}", _N),
    "base_pair": _Atom("{bp}", _N),
}

# pint names for a unit that UCUM writes as a quotient
_QUOTIENTS: dict[str, tuple[tuple[str, int], ...]] = {
    "molar": (("mol", 1), ("L", -1)),
}


def _no_code(unit_text: str, detail: str) -> ConfigError:
    return ConfigError(
        f"unit {unit_text!r} has no UCUM code: {detail}",
        hint="choose a canonical unit with a UCUM equivalent, or extend the tables in "
        "harmonize/ucum.py",
    )


def _exponent(value: float, unit_text: str) -> int:
    if float(value) != int(value):
        raise _no_code(unit_text, f"UCUM has no fractional exponent ({value})")
    return int(value)


def _terms(name: str, exponent: int, unit_text: str) -> list[tuple[str, int]]:
    """UCUM (symbol, exponent) pairs for one pint factor such as ('micromole', -1)."""
    if name in _ATOMS:
        prefix, base = "", name
    else:
        candidates = registry().parse_unit_name(name)
        if not candidates:
            raise _no_code(unit_text, f"pint cannot split {name!r} into prefix and unit")
        prefix, base, _suffix = candidates[0]
    if prefix not in _PREFIXES:
        raise _no_code(unit_text, f"no UCUM prefix for {prefix!r}")
    symbol, power = _PREFIXES[prefix]
    if base in _QUOTIENTS:
        (first, first_exp), *rest = _QUOTIENTS[base]
        return [(symbol + first, first_exp * exponent)] + [(s, e * exponent) for s, e in rest]
    atom = _ATOMS.get(base)
    if atom is None:
        raise _no_code(unit_text, f"no UCUM atom for pint unit {base!r}")
    if power and atom.code.startswith("{"):
        return [(f"10*{power}{atom.code}", exponent)]  # 'kilobase_pair' -> '10*3{bp}'
    if power and not atom.metric:
        raise _no_code(unit_text, f"UCUM allows no prefix on the non-metric unit {atom.code!r}")
    return [(symbol + atom.code, atom.power * exponent)]


def _write(symbol: str, exponent: int) -> str:
    return symbol if exponent == 1 else f"{symbol}{exponent}"


@functools.lru_cache(maxsize=1024)
def to_ucum(unit_text: str, annotation: str | None = None) -> str:
    """UCUM code for a pint-readable unit, e.g. 'mL/h' with annotation 'O2' -> 'mL{O2}.h-1'.

    Raises `ConfigError` when the unit has no UCUM equivalent in our tables, and
    `harmonize.units.UnitProblem` when the text is not a readable unit.
    """
    unit = parse_unit(unit_text)
    terms: list[tuple[str, int]] = []
    for name, exponent in unit._units.items():  # pint has no public accessor for the factors
        terms.extend(_terms(name, _exponent(exponent, unit_text), unit_text))
    # numerator first, as people write rates: 'umol.m-2.s-1'
    ordered = [t for t in terms if t[1] > 0] + [t for t in terms if t[1] < 0]
    parts = [_write(symbol, exponent) for symbol, exponent in ordered]
    if annotation:
        label = "{" + annotation.strip("{}") + "}"
        if ordered and ordered[0][1] > 0:
            parts[0] += label  # the annotation names what the first factor measures
        else:
            parts.insert(0, label)
    return ".".join(parts) or "1"
