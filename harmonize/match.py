"""Match trait names as written in source tables to vocabulary terms.

What it does: takes each raw name apart (`harmonize.names`), looks its trait words up among
the vocabulary's ids, labels and synonyms; scores what is left with rapidfuzz; and returns one
`NameMatch` per raw name with a status: accepted (safe to use unattended), review (a person
must look) or rejected (a person said no).

Precision comes before recall: a wrong automatic match silently corrupts a dataset, a missed
one costs a reviewer a minute. Hence ambiguous synonyms are never accepted; a fuzzy match
needs a high score *and* a clear margin over the best other trait; a name word that is itself
a vocabulary word but absent from the candidate ('tail' against 'total length') is read as a
different meaning, not a typo; a misspelt word is corrected only when exactly one vocabulary
word is one edit away; and a unit in the name whose dimension does not fit a term's canonical
unit demotes that term.

What it leaves to others: reading names into words, unit and statistic (`harmonize.names`;
`normalise_name` and `NameHints` are re-exported here), reading and writing decisions
(`harmonize.review`), unit parsing (`harmonize.units`), the vocabulary (`harmonize.vocab`).
This is the only module that imports rapidfuzz.
"""

from __future__ import annotations

import unicodedata
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from functools import lru_cache
from typing import TYPE_CHECKING, Any

import numpy as np
from rapidfuzz import fuzz, process
from rapidfuzz.distance import OSA

from harmonize.errors import ConfigError
from harmonize.names import (
    NameHints,
    fold_name,
    normalise_name,
    parse_name,
    scoring_key,
    scoring_word,
    split_words,
    unit_to_pint,
)

__all__ = [
    "MatchSettings",
    "NameHints",
    "NameMatch",
    "did_you_mean",
    "match_names",
    "normalise_name",
    "suggest_trait_ids",
]

if TYPE_CHECKING:
    from harmonize.review import Decision
    from harmonize.vocab import Term, Vocabulary

SHORTLIST_SIZE = 12  # choice strings re-scored per name; the cheap score bounds all others
LEXICON_PENALTY = 15.0  # per name word that is a vocabulary word missing from the candidate
UNIT_PENALTY = 25.0  # the name's unit has another dimension than the term's canonical unit
CORRECTION_COST = 4.0  # per misspelt word corrected: one typo still passes, three do not
_CHUNK = 2048  # names per cdist call: bounds the score matrices to a few MB
# The three constants above are our own choices, tuned on tests/data/messy_names.csv;
# no published source.


@dataclass(frozen=True)
class MatchSettings:
    """Score thresholds on a 0-100 scale; the project file may override them."""

    accept: float = 92.0
    review: float = 75.0
    margin: float = 4.0

    def __post_init__(self) -> None:
        if not 0 <= self.review <= self.accept <= 100:
            raise ConfigError(
                f"match thresholds must satisfy 0 <= review ({self.review}) <= "
                f"accept ({self.accept}) <= 100",
                hint="check the fuzzy-match thresholds in harmonize.yaml",
            )
        if self.margin < 0:
            raise ConfigError(f"match margin must not be negative, got {self.margin}")


@dataclass(frozen=True)
class NameMatch:
    """What one raw name was matched to, how, and whether a person must look at it."""

    name: str
    normalised: str
    trait_id: str | None
    method: str  # exact | synonym | fuzzy | manual | rejected | unmatched
    score: float
    status: str  # accepted | review | rejected
    runner_up: str | None
    runner_up_score: float | None
    unit_hint: str | None
    statistic_hint: str | None
    note: str


# ------------------------------------------------------------------------------ the index


@dataclass(frozen=True)
class _Choice:
    key: str  # scoring words joined by spaces
    trait_id: str
    kind: str  # exact (id or label) | synonym | ambiguous


@dataclass(frozen=True)
class _Candidate:
    trait_id: str
    score: float
    kind: str  # as _Choice.kind, or 'bound' for a trait outside the shortlist
    why: str  # what lowered the score, for the note


_KIND_ORDER = {"exact": 0, "synonym": 1, "ambiguous": 2, "bound": 3}


class _Index:
    """Every vocabulary string in scoring form, grouped for exact and fuzzy lookup."""

    def __init__(self, vocabulary: Vocabulary) -> None:
        found: dict[tuple[str, str], str] = {}
        for term in vocabulary.terms.values():
            texts = [(term.id.replace("_", " "), "exact"), (term.label, "exact")]
            texts += [(s, "synonym") for s in term.synonyms]
            texts += [(s, "ambiguous") for s in term.ambiguous_synonyms]
            for text, kind in texts:
                key = scoring_key(split_words(unicodedata.normalize("NFKC", text)))
                old = found.get((key, term.id))
                if key and (old is None or _KIND_ORDER[kind] > _KIND_ORDER[old]):
                    found[(key, term.id)] = kind  # a text also marked ambiguous stays ambiguous
        ordered = sorted(found.items(), key=lambda item: (item[0][1], item[0][0]))
        self.choices = [_Choice(key, trait_id, kind) for (key, trait_id), kind in ordered]
        self.keys = [c.key for c in self.choices]
        self.by_key: dict[str, list[_Choice]] = {}
        self.by_compact: dict[str, list[_Choice]] = {}
        for c in self.choices:
            self.by_key.setdefault(c.key, []).append(c)
            self.by_compact.setdefault(c.key.replace(" ", ""), []).append(c)
        self.lexicon = frozenset(w for k in self.keys for w in k.split() if len(w) > 1)
        self._lexicon_list = sorted(self.lexicon)
        self.trait_ids = list(dict.fromkeys(c.trait_id for c in self.choices))
        self.position = {t: i for i, t in enumerate(self.trait_ids)}
        trait_of = np.array([self.position[c.trait_id] for c in self.choices])
        self.group_starts = np.flatnonzero(np.r_[True, np.diff(trait_of) != 0])
        self.dimension = {t: _term_dimension(vocabulary.terms[t]) for t in self.trait_ids}
        self._word_fix: dict[str, tuple[str, int]] = {}
        self._conflicts: dict[str | None, np.ndarray] = {}

    def unit_conflict(self, trait_id: str, hint_dimension: str | None) -> bool:
        wanted = self.dimension.get(trait_id)
        return hint_dimension is not None and wanted is not None and wanted != hint_dimension

    def conflicts(self, hint_dimension: str | None) -> np.ndarray:
        """Per trait (in `trait_ids` order): does the unit hint's dimension rule it out?"""
        if hint_dimension not in self._conflicts:
            flags = [self.unit_conflict(t, hint_dimension) for t in self.trait_ids]
            self._conflicts[hint_dimension] = np.array(flags, dtype=bool)
        return self._conflicts[hint_dimension]

    def refine(self, key: str) -> tuple[str, int]:
        """Split run-together words and correct misspelt ones: (new key, corrections made).

        'bodytemp' -> 'body temperature' (two known words, no cost); 'tempreature' ->
        'temperature' only if it is the one vocabulary word within one edit (optimal string
        alignment, so a swap of neighbours is one edit) and the word has five letters or more.
        """
        words = key.split()
        self.learn_words(words)
        fixed = [self._word_fix.get(w, (w, 0)) for w in words]
        return " ".join(w for w, _ in fixed), sum(cost for _, cost in fixed)

    def learn_words(self, words: Iterable[str]) -> None:
        """Work out the split or correction of every new unknown word, all in one batch."""
        new = {
            w for w in words if w not in self._word_fix and w not in self.lexicon and w.isalpha()
        }
        unsplit = []
        for word in new:
            split = self._split(word) if len(word) >= 6 else None
            self._word_fix[word] = (split, 0) if split else (word, 0)
            if split is None and len(word) >= 5:
                unsplit.append(word)
        if unsplit and self._lexicon_list:
            distance = process.cdist(
                unsplit,
                self._lexicon_list,
                scorer=OSA.distance,
                score_cutoff=1,
                dtype=np.int32,
                workers=-1,
            )
            close = distance <= 1
            for row in np.flatnonzero(close.sum(axis=1) == 1):
                self._word_fix[unsplit[row]] = (self._lexicon_list[int(np.argmax(close[row]))], 1)

    def _split(self, word: str) -> str | None:
        for cut in range(3, len(word) - 2):
            head = scoring_word(word[:cut])
            if head in self.lexicon and (tail := scoring_word(word[cut:])) in self.lexicon:
                return f"{head} {tail}"
        return None


def _term_dimension(term: Term) -> str | None:
    """Dimension of the term's canonical unit; '-' for terms that take no unit at all."""
    if term.unit is None:
        return "-" if term.kind in ("category", "text") else None
    return _dimension(str(term.unit))


@lru_cache(maxsize=4096)
def _dimension(pint_text: str | None) -> str | None:
    if pint_text is None:
        return None
    from harmonize.units import UnitProblem, dimensionality  # noqa: PLC0415 - light import

    try:
        return dimensionality(pint_text)
    except UnitProblem:
        return None


# ----------------------------------------------------------------------------- matching


def match_names(
    names: Iterable[str],
    vocabulary: Vocabulary,
    settings: MatchSettings = MatchSettings(),  # noqa: B008 - frozen, so a safe default
    decisions: Mapping[str, Decision] | None = None,
) -> dict[str, NameMatch]:
    """Match each distinct raw name; a name with a decision is taken from it, never re-scored."""
    index = _Index(vocabulary)
    decisions = decisions or {}
    results: dict[str, NameMatch] = {}
    # scored once per distinct (words with statistic, words without, unit), not per raw name
    groups: dict[tuple[str, str, str | None], list[str]] = {}
    for raw in dict.fromkeys(names):
        decision = decisions.get(raw, decisions.get(raw.strip()))
        if decision is not None:
            results[raw] = _decided(raw, decision, vocabulary)
            continue
        parts = parse_name(raw)
        unit = unit_to_pint(parts.unit) if parts.unit else None
        key = (scoring_key(parts.all_words), scoring_key(parts.trait_words), unit)
        groups.setdefault(key, []).append(raw)

    index.learn_words({w for group in groups for key in group[:2] for w in key.split()})
    outcomes: dict[tuple[str, str, str | None], tuple[str, dict[str, Any]]] = {}
    for group in groups:
        full, trait_words, unit = group
        for variant in dict.fromkeys((full, trait_words)):
            refined, fixes = index.refine(variant)
            for key, cost in dict.fromkeys(((variant, 0), (refined, fixes))):
                if found := _exact_candidates(index, key, _dimension(unit)):
                    outcomes[group] = (variant, _judge_exact(found, cost))
                    break
            if group in outcomes:
                break
    to_score = {index.refine(k)[0] for g in groups if g not in outcomes for k in g[:2] if k}
    scored = _fuzzy_scores(index, sorted(to_score))
    for group in groups:
        if group in outcomes:
            continue
        full, trait_words, unit = group
        options = []
        for variant in dict.fromkeys((trait_words, full)):  # ties go to the first: keeps the hint
            if variant:
                refined, fixes = index.refine(variant)
                ranked = _rank(index, refined, scored[refined], _dimension(unit), fixes)
                options.append((variant, ranked))
        variant, ranked = max(options, key=lambda o: o[1][0].score, default=("", []))
        outcome = _judge_fuzzy(ranked, settings)
        # 'maximum metabolic rate field': is 'maximum' a statistic or part of the name? When
        # the two readings point at different traits and the other is nearly reviewable,
        # a person decides (heuristic: one vocabulary-word penalty below the review bar).
        other = [o for o in options if o[0] != variant and o[1][0].trait_id != ranked[0].trait_id]
        if outcome["status"] == "accepted" and other:
            rival = other[0][1][0]
            if rival.score >= settings.review - LEXICON_PENALTY:
                note = f"the statistic word may belong to the name: could also be {rival.trait_id}"
                outcome |= {"status": "review", "runner_up": rival.trait_id,
                            "runner_up_score": round(rival.score, 1), "note": note}  # fmt: skip
        outcomes[group] = (variant, outcome)

    for group, raws in groups.items():
        full, trait_words, _ = group
        variant, outcome = outcomes[group]
        keeps_statistic = variant == trait_words or full == trait_words
        for raw in raws:
            parts = parse_name(raw)
            words = parts.trait_words if keeps_statistic else parts.all_words
            results[raw] = NameMatch(
                name=raw,
                normalised=" ".join(words) or fold_name(raw),
                unit_hint=parts.unit,
                statistic_hint=parts.statistic if keeps_statistic else None,
                **outcome,
            )
    return {raw: results[raw] for raw in dict.fromkeys(names)}


def _decided(raw: str, decision: Decision, vocabulary: Vocabulary) -> NameMatch:
    if decision.trait_id is not None and decision.trait_id not in vocabulary.terms:
        raise ConfigError(
            f"decision for '{raw}' names unknown trait id '{decision.trait_id}'",
            hint=did_you_mean(decision.trait_id, vocabulary),
        )
    parts = parse_name(raw)
    rejected = decision.method == "rejected"
    score = decision.score if decision.score is not None else (0.0 if rejected else 100.0)
    return NameMatch(
        name=raw,
        normalised=" ".join(parts.trait_words) or fold_name(raw),
        trait_id=None if rejected else decision.trait_id,
        method=decision.method,
        score=float(score),
        status="rejected" if rejected else "accepted",
        runner_up=None,
        runner_up_score=None,
        unit_hint=parts.unit,
        statistic_hint=parts.statistic,
        note=f"decided by {decision.decided_by} {decision.decided_at}".strip(),
    )


def _exact_candidates(index: _Index, key: str, dim: str | None) -> list[_Candidate]:
    hits = index.by_key.get(key) or index.by_compact.get(key.replace(" ", "")) or []
    best: dict[str, _Candidate] = {}
    for c in hits:
        why = "unit" if index.unit_conflict(c.trait_id, dim) else ""
        old = best.get(c.trait_id)
        if old is None or _KIND_ORDER[c.kind] > _KIND_ORDER[old.kind]:
            best[c.trait_id] = _Candidate(c.trait_id, 100.0, c.kind, why)
    # unit-compatible first, then the least ambiguous
    return sorted(best.values(), key=lambda c: (c.why == "unit", _KIND_ORDER[c.kind], c.trait_id))


def _judge_exact(candidates: list[_Candidate], fixes: int) -> dict[str, Any]:
    top = candidates[0]
    runner = candidates[1] if len(candidates) > 1 else None
    score = 100.0 - CORRECTION_COST * fixes
    outcome: dict[str, Any] = {
        "trait_id": top.trait_id,
        "method": "fuzzy" if fixes else ("exact" if top.kind == "exact" else "synonym"),
        "score": score,
        "runner_up": runner.trait_id if runner else None,
        "runner_up_score": score if runner else None,
    }
    fixed = f"{fixes} misspelt word(s) corrected" if fixes else ""
    if runner is not None or top.kind == "ambiguous":
        names = ", ".join(c.trait_id for c in candidates)
        return outcome | {"status": "review", "note": f"ambiguous synonym: could be {names}"}
    if top.why == "unit":
        note = f"unit in the name does not fit the canonical unit of {top.trait_id}"
        return outcome | {"status": "review", "note": note}
    return outcome | {"status": "accepted", "note": fixed}


@dataclass(frozen=True)
class _Scores:
    shortlist: list[tuple[int, float]]  # (choice position, cheap score)
    trait_bound: np.ndarray  # best cheap score per trait: an upper bound of its re-score


def _fuzzy_scores(index: _Index, keys: list[str]) -> dict[str, _Scores]:
    """Cheap scores of every key against every choice string, then a shortlist per key.

    ratio catches typos and token_sort_ratio reordered words ('length tail'); both are cheap
    enough for the whole matrix. WRatio and token_set_ratio are far slower and score a name
    contained in another ('length' in 'tail length') as near-perfect: wrong for trait names.
    """
    out: dict[str, _Scores] = {}
    width = min(SHORTLIST_SIZE, len(index.keys))
    for start in range(0, len(keys), _CHUNK):
        chunk = keys[start : start + _CHUNK]
        cheap = np.maximum(
            process.cdist(chunk, index.keys, scorer=fuzz.ratio, dtype=np.float32, workers=-1),
            process.cdist(
                chunk, index.keys, scorer=fuzz.token_sort_ratio, dtype=np.float32, workers=-1
            ),
        )
        top = np.argpartition(-cheap, width - 1, axis=1)[:, :width]
        bounds = np.maximum.reduceat(cheap, index.group_starts, axis=1)
        for row, key in enumerate(chunk):
            out[key] = _Scores([(int(c), float(cheap[row, c])) for c in top[row]], bounds[row])
    return out


def _rank(
    index: _Index, key: str, scores: _Scores, dim: str | None, fixes: int
) -> list[_Candidate]:
    """Re-score a shortlist with the vocabulary-word, unit and correction costs; best first.

    A name word that is a vocabulary word yet absent from the candidate ('dry' against 'wet
    body mass', 'tail' against 'total length') signals another meaning, where a typo makes a
    non-word ('lenght'). Ratio alone cannot tell the two apart.
    """
    words = key.split()
    cost = CORRECTION_COST * fixes
    best: dict[str, _Candidate] = {}
    for pos, cheap in scores.shortlist:
        choice = index.choices[pos]
        compact = choice.key.replace(" ", "")
        extra = [
            w
            for w in words
            if w in index.lexicon and w not in choice.key.split() and w not in compact
        ]
        score = cheap - cost - LEXICON_PENALTY * len(extra)
        why = f"'{' '.join(extra)}' is not in '{choice.key}'" if extra else ""
        if index.unit_conflict(choice.trait_id, dim):
            score, why = score - UNIT_PENALTY, "unit in the name does not fit"
        old = best.get(choice.trait_id)
        if old is None or score > old.score:
            best[choice.trait_id] = _Candidate(choice.trait_id, max(score, 0.0), choice.kind, why)
    ranked = list(best.values())
    # outside the shortlist the cheap score bounds a trait's re-score from above: the best
    # such bound stands in for every other trait as a possible runner-up
    bounds = scores.trait_bound - UNIT_PENALTY * index.conflicts(dim)
    bounds[[index.position[t] for t in best]] = -np.inf
    if len(bounds) and np.isfinite(top := bounds.max()):
        outside = index.trait_ids[int(np.argmax(bounds))]
        ranked.append(_Candidate(outside, max(float(top), 0.0), "bound", ""))
    return sorted(ranked, key=lambda c: (-c.score, _KIND_ORDER[c.kind], c.trait_id))


def _judge_fuzzy(candidates: list[_Candidate], settings: MatchSettings) -> dict[str, Any]:
    if not candidates:
        return {"trait_id": None, "method": "unmatched", "score": 0.0, "status": "review",
                "runner_up": None, "runner_up_score": None, "note": "no words left to match"}  # fmt: skip
    top = candidates[0]
    runner_score = candidates[1].score if len(candidates) > 1 else 0.0
    score, margin = round(top.score, 1), round(top.score - runner_score, 1)
    if score < settings.review:
        note = f"best candidate {top.trait_id} scores {score} (below {settings.review})"
        return {"trait_id": None, "method": "unmatched", "score": score, "status": "review",
                "runner_up": top.trait_id, "runner_up_score": score, "note": note}  # fmt: skip
    runner = candidates[1] if len(candidates) > 1 else None
    outcome = {
        "trait_id": top.trait_id,
        "method": "fuzzy",
        "score": score,
        "runner_up": runner.trait_id if runner else None,
        "runner_up_score": round(runner_score, 1) if runner else None,
    }
    if top.kind == "ambiguous":
        note = "close to an ambiguous synonym"
    elif score < settings.accept:
        note = f"score {score} below {settings.accept}"
    elif margin < settings.margin:
        note = f"margin {margin} below {settings.margin} over runner-up {outcome['runner_up']}"
    else:
        return outcome | {"status": "accepted", "note": top.why}
    return outcome | {"status": "review", "note": f"{note}; {top.why}" if top.why else note}


def suggest_trait_ids(text: str, vocabulary: Vocabulary, limit: int = 3) -> list[str]:
    """Vocabulary ids closest to `text`, for 'did you mean' hints on mistyped ids."""
    hits = process.extract(
        text, list(vocabulary.terms), scorer=fuzz.ratio, limit=limit, score_cutoff=60
    )
    return [hit[0] for hit in hits]


def did_you_mean(text: str, vocabulary: Vocabulary) -> str | None:
    close = suggest_trait_ids(text, vocabulary)
    return f"did you mean {' or '.join(close)}?" if close else None
