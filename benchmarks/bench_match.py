"""Time `match_names` on 10,000 distinct messy names against the bundled vocabulary.

Run: `python benchmarks/bench_match.py [count]`. The names are generated here (fixed seed)
from the vocabulary's own labels and synonyms, bent the way spreadsheets bend them: case,
separators, camelCase, a unit, a statistic, a typo, a stray word; plus some names unrelated
to any trait. Target: under 2 s on a 2-core machine. Not run by pytest.
"""

from __future__ import annotations

import random
import sys
import time

from harmonize.match import match_names
from harmonize.vocab import load_vocabulary

UNITS = ["mm", "(mm)", "[g]", "_g", "(°C)", "C", "(ml O2/h)", "(W)", "(%)", "in cm", "(kJ/d)"]
STATISTICS = ["mean", "sd", "SE", "n", "min", "max", "median", "s.d.", "CI low"]
STRAY = ["adult", "female", "trial2", "field", "lab", "corrected", "v2", "raw", "final"]
LETTERS = "abcdefghijklmnopqrstuvwxyz"


def _typo(rng: random.Random, word: str) -> str:
    if len(word) < 4:
        return word
    i = rng.randrange(1, len(word) - 1)
    kind = rng.randrange(3)
    if kind == 0:  # swap neighbours
        return word[:i] + word[i + 1] + word[i] + word[i + 2 :]
    if kind == 1:  # drop a letter
        return word[:i] + word[i + 1 :]
    return word[:i] + rng.choice(LETTERS) + word[i:]  # insert a letter


def _messy(rng: random.Random, base: str) -> str:
    words = base.split()
    if rng.random() < 0.3:
        words = [_typo(rng, w) for w in words]
    if rng.random() < 0.2:
        words.append(rng.choice(STRAY))
    style = rng.randrange(4)
    if style == 0:
        name = "_".join(words)
    elif style == 1:
        name = "".join(w[:1].upper() + w[1:] for w in words)
    elif style == 2:
        name = ".".join(words).upper()
    else:
        name = " ".join(words)
    if rng.random() < 0.4:
        name = (
            f"{rng.choice(STATISTICS)}_{name}"
            if rng.random() < 0.3
            else f"{name}_{rng.choice(STATISTICS)}"
        )
    if rng.random() < 0.5:
        name = f"{name} {rng.choice(UNITS)}"
    return name


def messy_names(count: int, seed: int = 20261201) -> list[str]:
    vocabulary = load_vocabulary()
    rng = random.Random(seed)
    bases = [t.label for t in vocabulary.terms.values()]
    bases += [s for t in vocabulary.terms.values() for s in t.synonyms]
    names: dict[str, None] = {}
    while len(names) < count:
        if rng.random() < 0.1:  # a name that is no trait at all
            name = "".join(rng.choice(LETTERS) for _ in range(rng.randint(3, 12)))
        else:
            name = _messy(rng, rng.choice(bases))
        names[name] = None
    return list(names)


def main() -> None:
    count = int(sys.argv[1]) if len(sys.argv) > 1 else 10_000
    names = messy_names(count)
    vocabulary = load_vocabulary()
    match_names(["warm-up"], vocabulary)  # registry and import costs are not the matcher's
    started = time.perf_counter()
    result = match_names(names, vocabulary)
    seconds = time.perf_counter() - started
    accepted = sum(m.status == "accepted" for m in result.values())
    print(f"{len(names)} distinct names, {len(vocabulary.terms)} terms: {seconds:.2f} s")
    print(f"accepted automatically: {accepted}; for review: {len(names) - accepted}")


if __name__ == "__main__":
    main()
