"""Read a trait name as written in a source table: its trait words, unit and statistic.

What it does: normalises each raw name (Unicode, case, separators, camelCase) and pulls out
the unit and statistic it carries ('SVL_mm_sd' -> 'svl', unit 'mm', statistic 'sd'); reads a
unit written in a name into pint text with a deliberately small grammar; and puts words into
the form used for scoring (accents off, lab words of other languages translated to the
vocabulary's English, German compounds split).

What it leaves to others: scoring names against the vocabulary and judging the matches
(`harmonize.match`, the only module that imports rapidfuzz), full unit parsing
(`harmonize.units`), the vocabulary itself (`harmonize.vocab`).
"""

from __future__ import annotations

import re
import unicodedata
from collections.abc import Iterable
from dataclasses import dataclass
from functools import lru_cache


@dataclass(frozen=True)
class NameHints:
    """A raw name reduced to its trait words, plus the unit and statistic found in it."""

    normalised: str
    unit_hint: str | None
    statistic_hint: str | None


# --------------------------------------------------------------------------- word tables


def _table(text: str) -> dict[str, str]:
    """'code = phrase | phrase' lines -> {phrase: code}."""
    out = {}
    for line in text.strip().splitlines():
        code, phrases = line.split("=")
        out.update({p.strip(): code.strip() for p in phrases.split("|")})
    return out


# Statistic phrases -> codes of the population_summaries columns. 'range' keeps its own code:
# a 'range' column may hold 'min-max' text or the width.
_STATISTIC_PHRASES = {
    tuple(p.split()): code
    for p, code in _table("""
        mean = mean | avg | average | mittelwert | moyenne | media | promedio
        sd = sd | std | stdev | stddev | sdev | s d | std dev | st dev | standard deviation
        se = se | sem | stderr | s e | s e m | std err | std error | standard error
        n = n | sample size | n ind | n obs
        min = min | minimum
        max = max | maximum
        median = median | mediane | mediana
        q1 = q1 | p25 | lower quartile | first quartile | 1st quartile
        q3 = q3 | p75 | upper quartile | third quartile | 3rd quartile
        ci_low = lcl | ci low | ci lo | ci lower | lower ci | low ci | lower cl
        ci_high = ucl | ci high | ci hi | ci upper | upper ci | high ci | upper cl
        range = range
        iqr = iqr | interquartile range""").items()
}

# Words of lab spreadsheets (English abbreviations with one reading in trait tables; German,
# French, Spanish, Portuguese) -> the English words of the vocabulary. Applied to both sides
# before scoring, so a vocabulary synonym in another language still matches itself.
# Keys are accent-free and lower-case.
_WORDS = _table("""
        temperature = temp | temperatur | temperatura
        length = len | lgth | lngth | lange | longueur | longitud | largo | comprimento
        weight = wt | wgt | gewicht | poids | peso
        width = wdth | breite | largeur | ancho | anchura | largura
        height = hgt | hohe | hauteur | altura
        diameter = diam | durchmesser | diametre
        volume = vol
        frequency = freq
        number = num | nr | nb | #
        critical = crit | kritisch | kritische | critique | critica | critico
        metabolic = met | stoffwechsel | metabolique | metabolica | metabolico
        assimilation = assim
        efficiency = eff
        point = pt
        respiratory = resp
        evaporative = evap
        performance = perf
        preferred = pref | vorzugs | bevorzugte | preferee | preferentielle | preferida
        reproductive = repro
        incubation = incub
        specific = spec
        body = korper | rumpf | corporelle | corporel | corporal
        mass = masse | masa | massa
        head = kopf | tete | cabeza | cabeca
        tail = schwanz | queue | cola | cauda
        wing = flugel | aile | ala
        clutch = gelege | ponte | puesta | nidada
        size = grosse | taille | tamano | tamanho
        egg = ei | oeuf | huevo
        eggs = eier | oeufs | huevos
        snout = schnauze | museau | hocico
        vent = kloake | cloaque | cloaca
        hindlimb = hinterbein
        forelimb = vorderbein
        limb = bein | patte | pata
        foot = fuss
        dry = trocken | seche | seca
        fresh = frisch | fraiche | fresca
        thermal = thermisch | thermische | thermique | termica | termico
        oxygen = sauerstoff | oxygene | oxigeno | oxigenio
        consumption = verbrauch | consommation | consumo
        forearm = unterarm | antebrazo
        eye = auge | oeil | ojo
        ear = ohr | oreille | oreja
        wingspan = spannweite | envergure | envergadura
        rate = taux | tasa | taxa
        hind = posterieure | trasera
        fore = anterieure | delantera | avant
        arm = bras
        maximum = maximale | maxima | maximo
        minimum = minimale | minima | minimo""")
_STOPWORDS = frozenset(
    "of the an and for at in to de del des du la le les el los las et der die das von und da do".split()
)
_GERMAN_LINKS = ("", "s", "n", "en", "e")  # Fugenlaute between parts of compound nouns

# A unit atom as met in column names: optional prefix, base, optional exponent.
_UNIT_ATOM = re.compile(
    r"(?:(?P<prefix>[kmcund]|da)?(?P<base>g|m|l|s|h|d|hr|min|j|cal|w|mol|hz|pa)"
    r"|(?P<word>%|‰|°c|degc|°f|degf|c|k|ev|gr|ha|ppm|yr|years?|days?|sec|hours?|percent"
    r"|pct|celsius|kelvin|grams?|bpm))(?P<exp>\^?-?[0-9]|[²³])?"
)
_WORD_UNITS = _table("""
    degC = °c | degc | c | celsius
    degF = °f | degf
    K = k | kelvin
    eV = ev
    percent = % | pct
    (percent/10) = ‰
    year = yr | years
    day = days
    second = sec
    hour = hours
    g = gr | grams | gram
    1/minute = bpm""")
_PINT_CASE = {"j": "J", "w": "W", "hz": "Hz", "pa": "Pa", "l": "L", "hr": "h"}
# a lone letter after a name is a unit only in these spellings; 'm'/'f' are usually sex codes,
# 'k' a rate constant, 'n' a sample size
_BARE_LETTER_UNITS = frozenset("gGcCKWJ")
_CHEMICAL = re.compile(r"(?i)(co2|o2|h2o)(?![a-z0-9])")

_BRACKETED = re.compile(r"[(\[{]([^()\[\]{}]*)[)\]}]")
_IN_UNIT = re.compile(r"\s+in\s+([^\s_]+)\s*$", re.IGNORECASE)
_SLASH_UNIT = re.compile(r"(?:^|[\s_])([^\s_()\[\]]*[a-zA-Zµμ°%][^\s_()\[\]]*/[^\s_()\[\]]+)\s*$")
# lower->Upper ('bodyMass'), digit->Upper ('VO2Max'), and an upper-case run of two or more
# before a capitalised word ('BMRWatts'); 'CTmax' stays one word on purpose.
_CAMEL = re.compile(r"(?<=[a-z0-9])(?=[A-Z])|(?<=[A-Z]{2})(?=[A-Z][a-z])")
_SEPARATORS = re.compile(r"[\s_\-./\\,;:|+*&'\"`´’‘“”!?=<>~^±]+")
_CI = re.compile(r"^(?:9[059]%?)?ci(?:9[059]%?)?$")


# --------------------------------------------------------------------------- normalising


@lru_cache(maxsize=8192)
def unit_to_pint(text: str) -> str | None:
    """The pint text a unit written in a name stands for, or None if it does not read as one.

    A deliberately small grammar (prefixed SI atoms, degrees, percent, exponents, joined by
    '/', '.', '·' or spaces; chemical qualifiers such as O2 dropped; a counted noun before
    '/' read as 1): a false 'unit' would eat part of a trait name. Full unit reading is
    `harmonize.units`' job.
    """
    folded = _CHEMICAL.sub(" ", unicodedata.normalize("NFKC", text)).casefold()
    folded = re.sub(r"\b(deg|°)\s+([cf])\b", r"°\2", folded.replace("µ", "u").replace("μ", "u"))
    pieces = [p for p in re.split(r"(/)|[\s.·*]+", folded.strip()) if p]
    out: list[str] = []
    for i, piece in enumerate(pieces):
        if piece == "/":
            out.append(piece)
            continue
        atom = _UNIT_ATOM.fullmatch(piece)
        if atom is None and i == 0 and pieces[1:2] == ["/"] and piece.isalpha() and len(piece) > 2:
            out.append("1")  # 'breaths/min', 'hairs/cm2': a counted noun per unit
            continue
        if atom is None:
            return None
        if atom.group("word") is not None:
            base = _WORD_UNITS.get(atom.group("word"), atom.group("word"))
        else:
            base = (atom.group("prefix") or "") + _PINT_CASE.get(
                atom.group("base"), atom.group("base")
            )
        if atom.group("exp"):
            base += "**" + {"²": "2", "³": "3"}.get(
                atom.group("exp"), atom.group("exp").lstrip("^")
            )
        out.append(base)
    if not out or out[0] == "/" or out[-1] in ("/", "1"):
        return None
    return " ".join(out).replace(" / ", "/")


def split_words(text: str) -> list[str]:
    """Words as written (case kept); camelCase split except inside units ('mW', 'mgO2')."""
    out: list[str] = []
    for token in _SEPARATORS.split(text):
        if token:
            out += [token] if unit_to_pint(token) else _CAMEL.sub(" ", token).split()
    return out


def _statistic(words: list[str], *, at_end: bool) -> tuple[str, int] | None:
    """A statistic phrase at the start or end of `words`: (code, words it spans)."""
    for width in (3, 2, 1):
        if len(words) > width:  # never take every word: a lone 'n' stays a name
            window = tuple(w.casefold() for w in (words[-width:] if at_end else words[:width]))
            if window in _STATISTIC_PHRASES:
                return _STATISTIC_PHRASES[window], width
    return None


def _trailing_unit(words: list[str]) -> int:
    """How many trailing words form a unit: 'mm' -> 1, 'ml_h' (ml/h) -> 2, none -> 0."""
    if len(words) < 2 or (len(words) > 2 and words[-2].casefold() == "per"):
        return 0  # 'clutches per year': the unit is part of the trait's name
    run = 0
    while run < min(3, len(words) - 1) and unit_to_pint(words[-1 - run]):
        run += 1
    while run >= 2 and len(words[-run]) == 1 and words[-run] not in _BARE_LETTER_UNITS:
        run -= 1  # a lone letter may end a run ('ml_h') but not start one ('TotL_mm')
    if run >= 2:
        return run
    last = words[-1]
    if last.casefold() in ("min", "max") or (len(last) == 1 and last not in _BARE_LETTER_UNITS):
        return 0
    return run


@dataclass(frozen=True)
class NameParts:
    """A raw name taken apart; `match` scores both word tuples and keeps the better reading."""

    all_words: tuple[str, ...]  # folded words without the unit, statistic words kept
    trait_words: tuple[str, ...]  # ... and without the statistic
    unit: str | None  # as written
    statistic: str | None


@lru_cache(maxsize=65536)
def parse_name(raw: str) -> NameParts:
    """Take a raw name apart: brackets, ' in <unit>', '/' compounds, trailing unit and
    statistic words in either order, a leading statistic word."""
    text = unicodedata.normalize("NFKC", raw).strip()
    unit: str | None = None
    statistic: str | None = None

    def bracket(m: re.Match[str]) -> str:
        nonlocal unit, statistic
        inner = m.group(1).strip()
        code = _STATISTIC_PHRASES.get(tuple(w.casefold() for w in split_words(inner)))
        if code is not None and inner.casefold() != "min" and statistic is None:
            statistic = code  # '(SD)'; but '(min)' after a name is minutes
            return " "
        if inner and unit is None and unit_to_pint(inner) is not None:
            unit = inner
            return " "
        return f" {inner} "

    text = _BRACKETED.sub(bracket, text)
    for pattern in (_IN_UNIT, _SLASH_UNIT):
        m = pattern.search(text)
        if m and unit is None and unit_to_pint(m.group(1)) is not None:
            unit, text = m.group(1), text[: m.start()] + " "
    if unit is None and (m := re.search(r"^\s*%|%\s*$", text)):
        unit, text = "%", text[: m.start()] + " " + text[m.end() :]
    text = re.sub(r"(?i)\bs\.\s?e\.\s?m\b\.?", " sem ", text)
    text = re.sub(r"(?i)\bs\.\s?([de])\b\.?", r" s\1 ", text)  # 's.d.', 's. e.'

    words = ["ci" if _CI.match(w.casefold()) else w for w in split_words(text)]  # 'ci95' -> 'ci'
    words = [
        w
        for i, w in enumerate(words)
        if not (re.fullmatch(r"9[059]%?", w) and "ci" in words[max(i - 1, 0) : i + 2])
    ]
    kept = list(words)  # statistic words stay here, the unit does not
    for _ in range(3):  # trailing unit and statistic in either order: 'mass_g_sd', 'mass_sd_g'
        if unit is None and (width := _trailing_unit(words)):
            unit = "/".join(words[-width:])  # 'ml_h' is written for ml/h
            words, kept = words[:-width], kept[:-width]
            if len(words) > 1 and words[-1].casefold() == "in":
                words, kept = words[:-1], kept[:-1]
            continue
        found = _statistic(words, at_end=True) if statistic is None else None
        if found is None:
            break
        statistic, words = found[0], words[: -found[1]]
    if statistic is None and (found := _statistic(words, at_end=False)) is not None:
        statistic, words = found[0], words[found[1] :]
    fold = lambda ws: tuple(w.casefold() for w in ws)  # noqa: E731
    return NameParts(fold(kept), fold(words), unit, statistic)


def normalise_name(raw: str) -> NameHints:
    """Reduce a raw column or trait name to its trait words and report unit/statistic hints.

    >>> normalise_name("SVL (mm)")
    NameHints(normalised='svl', unit_hint='mm', statistic_hint=None)
    >>> normalise_name("mean_mass_g")
    NameHints(normalised='mass', unit_hint='g', statistic_hint='mean')
    """
    parts = parse_name(raw)
    return NameHints(" ".join(parts.trait_words) or fold_name(raw), parts.unit, parts.statistic)


def fold_name(text: str) -> str:
    """The raw name itself, folded: the fallback when no trait words are left."""
    return unicodedata.normalize("NFKC", text).casefold().strip()


@lru_cache(maxsize=65536)
def _plain(word: str) -> str:
    decomposed = unicodedata.normalize("NFKD", word.replace("ß", "ss"))
    return "".join(ch for ch in decomposed if not unicodedata.combining(ch)).casefold()


@lru_cache(maxsize=65536)
def scoring_word(word: str) -> str:
    """One word in scoring form: accents off, translated, German compounds split."""
    plain = _plain(word)
    if plain in _WORDS:
        return _WORDS[plain]
    if len(plain) >= 7:  # 'korpermasse' -> 'body mass', 'schwanzlange' -> 'tail length'
        for cut in range(3, len(plain) - 2):
            head, tail = plain[:cut], plain[cut:]
            for link in _GERMAN_LINKS:
                stem = head[: len(head) - len(link)]
                if head.endswith(link) and stem in _WORDS:
                    rest = scoring_word(tail)
                    if rest != tail:
                        return f"{_WORDS[stem]} {rest}"
    return plain


def scoring_key(words: Iterable[str]) -> str:
    """Words in scoring form joined by spaces, stopwords ('of', 'der', 'de') left out."""
    return " ".join(scoring_word(w) for w in words if _plain(w) not in _STOPWORDS)
