"""Statistic spellings met in long tables and column names, read as our statistic codes."""

from __future__ import annotations

import re

# spelling (trimmed, lower case) -> statistic code
STATISTIC_ALIASES = {
    "value": "value", "individual": "value", "raw": "value",
    "mean": "mean", "avg": "mean", "average": "mean", "x̄": "mean", "mittelwert": "mean", "moyenne": "mean",
    "media": "mean",
    "sd": "sd", "s.d.": "sd", "std": "sd", "stdev": "sd", "std.dev": "sd", "std dev": "sd",
    "standard deviation": "sd",
    "se": "se", "s.e.": "se", "sem": "se", "s.e.m.": "se", "std.err": "se", "standard error": "se",
    "n": "n", "count": "n", "sample size": "n", "sample_size": "n",
    "min": "min", "minimum": "min", "max": "max", "maximum": "max", "median": "median",
    "q1": "q1", "lower quartile": "q1", "25%": "q1", "p25": "q1",
    "q3": "q3", "upper quartile": "q3", "75%": "q3", "p75": "q3",
    "ci_low": "ci_low", "lcl": "ci_low", "lower ci": "ci_low", "ci lower": "ci_low", "ci_lower": "ci_low",
    "ci low": "ci_low", "low ci": "ci_low", "ci lo": "ci_low", "lower confidence limit": "ci_low",
    "ci_high": "ci_high", "ucl": "ci_high", "upper ci": "ci_high", "ci upper": "ci_high", "ci_upper": "ci_high",
    "ci high": "ci_high", "high ci": "ci_high", "ci hi": "ci_high", "upper confidence limit": "ci_high",
    "variance": "variance", "var": "variance", "s2": "variance", "s²": "variance", "sd2": "variance",
    "varianz": "variance", "varianza": "variance",
    "standardabweichung": "sd", "écart-type": "sd", "ecart-type": "sd", "desviación estándar": "sd",
    "standardfehler": "se", "erreur standard": "se", "error estándar": "se",
    "stichprobenumfang": "n", "anzahl": "n", "effectif": "n", "tamaño de muestra": "n",
    "cv": "cv", "c.v.": "cv", "cv%": "cv", "coefficient of variation": "cv", "coef. var.": "cv",
    "range": "range", "min-max": "range", "min–max": "range", "spannweite": "range",
    "iqr": "iqr", "i.q.r.": "iqr", "interquartile range": "iqr",
    "mode": "mode", "modal": "mode", "modus": "mode", "most common": "mode",
}  # fmt: skip

# a confidence level written into a bound's name: '95% CI low', 'lower 95 % CI', 'CI (90%) upper'
_CI_LEVEL = re.compile(r"\(?\s*(\d{2}(?:\.\d+)?)\s*%\s*\)?")


def read_statistic(text: object) -> tuple[str | None, float | None]:
    """A statistic spelling's code and, for a confidence bound that names it, its level as a
    fraction ('95% CI low' -> ('ci_low', 0.95)); (None, None) when the spelling is unknown."""
    if not isinstance(text, str):
        return None, None
    spelled = text.strip().lower()
    code = STATISTIC_ALIASES.get(spelled)
    if code is not None:
        return code, None
    found = _CI_LEVEL.search(spelled)
    if found is None:
        return None, None
    rest = " ".join(_CI_LEVEL.sub(" ", spelled).replace("(", " ").replace(")", " ").split())
    code = STATISTIC_ALIASES.get(rest)
    if code not in ("ci_low", "ci_high"):
        return None, None
    return code, float(found.group(1)) / 100.0
