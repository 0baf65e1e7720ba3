"""Seeded generator of the two benchmark corpora (invented languages, Zipf-distributed words).

Each language gets ~50,000 invented word types; about 10% of the second language's types are
spelled exactly like a type of the first.  Word frequencies follow a Zipf-Mandelbrot law,
sentences carry commas, closing punctuation, quotes and numbers, and the second language
uses accented letters.  Usage::

    python benchmarks/make_corpus.py --words 5000000            # -> benchmarks/data/5m/{en,de}.txt
    python benchmarks/make_corpus.py --words 50000000 --seed 3
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
TYPES = 45_000            # + capitalised sentence starts and numbers: ~50,000 types
SHARED_FRACTION = 0.10
CHUNK_WORDS = 1_000_000

ONSETS = {
    "en": ["b", "c", "d", "f", "g", "h", "k", "l", "m", "n", "p", "r", "s", "t", "v", "w",
           "br", "cl", "dr", "fl", "gr", "pl", "sh", "st", "th", "tr", "wh", ""],
    "de": ["b", "d", "f", "g", "h", "k", "l", "m", "n", "p", "r", "s", "t", "w", "z",
           "sch", "st", "pf", "kr", "gr", "br", "fl", "ch", ""],
}
VOWELS = {
    "en": ["a", "e", "i", "o", "u", "ea", "oo", "ai", "y"],
    "de": ["a", "e", "i", "o", "u", "ä", "ö", "ü", "ei", "au", "ie", "eu"],
}
CODAS = {
    "en": ["", "", "n", "r", "s", "t", "ck", "ng", "ll", "nd", "st"],
    "de": ["", "", "n", "r", "s", "t", "ß", "ch", "ng", "nd", "tz", "rg"],
}


def invent_words(lang: str, count: int, rng: np.random.Generator) -> list[str]:
    """``count`` distinct invented words: 1-4 syllables of onset + vowel + coda."""
    onsets, vowels, codas = ONSETS[lang], VOWELS[lang], CODAS[lang]
    words: dict[str, None] = {}
    while len(words) < count:
        n = 4 * (count - len(words))
        syllables = rng.choice([1, 2, 3, 4], size=n, p=[0.25, 0.4, 0.25, 0.1])
        o = rng.integers(0, len(onsets), size=(n, 4))
        v = rng.integers(0, len(vowels), size=(n, 4))
        c = rng.integers(0, len(codas), size=(n, 4))
        for k in range(n):
            word = "".join(onsets[o[k, j]] + vowels[v[k, j]] + codas[c[k, j]] for j in range(syllables[k]))
            if len(word) > 1:
                words.setdefault(word)
            if len(words) == count:
                break
    return list(words)


def vocabularies(seed: int) -> dict[str, np.ndarray]:
    rng = np.random.default_rng([seed, 0])
    en = invent_words("en", TYPES, rng)
    de = invent_words("de", TYPES, rng)
    # ~10% of German-like types take the spelling of an English-like type at a random rank.
    taken = set(de)
    positions = rng.choice(TYPES, size=int(SHARED_FRACTION * TYPES), replace=False)
    donors = rng.permutation(TYPES)
    d = 0
    for pos in positions:
        while en[donors[d]] in taken:
            d += 1
        taken.discard(de[pos])
        de[pos] = en[donors[d]]
        taken.add(de[pos])
        d += 1
    return {"en": np.array(en, dtype=object), "de": np.array(de, dtype=object)}


def zipf_probabilities(n: int) -> np.ndarray:
    ranks = np.arange(1, n + 1, dtype=np.float64)
    weights = 1.0 / (ranks + 2.7) ** 1.05
    return weights / weights.sum()


def write_language(path: Path, words: np.ndarray, total: int, rng: np.random.Generator) -> int:
    """Write ``total`` whitespace-separated words (punctuation attached, as in real text)."""
    p = zipf_probabilities(len(words))
    cumulative = np.cumsum(p)
    written = 0
    with open(path, "w", encoding="utf-8", newline="\n") as out:
        while written < total:
            n = min(CHUNK_WORDS, total - written)
            ids = np.minimum(np.searchsorted(cumulative, rng.random(n)), len(words) - 1)
            tokens = words[ids]
            numbers = rng.random(n) < 0.015
            values = rng.integers(0, 1_000, size=int(numbers.sum())) * rng.choice([1, 7, 13], size=int(numbers.sum()))
            styles = rng.integers(0, 3, size=len(values))
            tokens[numbers] = [f"{v:,}" if s == 0 else (f"{v / 100:.2f}" if s == 1 else str(v % 2100))
                               for v, s in zip(values.tolist(), styles.tolist())]
            # Sentence ends: lengths drawn from a gamma distribution with mean ~18 words.
            lengths = np.maximum(1, rng.gamma(3.0, 6.0, size=n // 4 + 10).astype(np.int64))
            ends = np.cumsum(lengths)
            ends = ends[ends <= n]
            if len(ends) == 0 or ends[-1] != n:
                ends = np.append(ends, n)
            last = ends - 1
            starts = np.concatenate(([0], ends[:-1]))
            suffix = np.full(n, "", dtype=object)
            comma = rng.random(n) < 0.06
            suffix[comma] = ","
            suffix[rng.random(n) < 0.01] = ";"
            suffix[last] = rng.choice([".", ".", ".", ".", "?", "!", "...", ".\""], size=len(last))
            prefix = np.full(n, "", dtype=object)
            prefix[rng.random(n) < 0.005] = "("
            suffix[(prefix == "(") & (suffix == "")] = ")"
            # Sentence starts are capitalised when they are frequent words (as function words are).
            capital = starts[(rng.random(len(starts)) < 0.9) & (ids[starts] < 3_000)]
            tokens[capital] = [t[:1].upper() + t[1:] for t in tokens[capital].tolist()]
            sep = np.full(n, " ", dtype=object)
            sep[last] = "\n"
            out.write("".join((prefix + tokens + suffix + sep).tolist()))
            written += n
    return written


def make_corpus(words: int, seed: int, out_dir: Path) -> dict[str, Path]:
    """Write ``out_dir/en.txt`` and ``out_dir/de.txt`` of ``words`` words each."""
    out_dir.mkdir(parents=True, exist_ok=True)
    vocab = vocabularies(seed)
    paths = {}
    for i, lang in enumerate(("en", "de")):
        path = out_dir / f"{lang}.txt"
        write_language(path, vocab[lang], words, np.random.default_rng([seed, 1 + i, words]))
        paths[lang] = path
    return paths


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--words", type=int, default=5_000_000, help="words per language")
    parser.add_argument("--seed", type=int, default=3)
    parser.add_argument("--out", type=Path, help="default: benchmarks/data/<N>m")
    args = parser.parse_args()
    out = args.out or HERE / "data" / f"{args.words // 1_000_000}m"
    for lang, path in make_corpus(args.words, args.seed, out).items():
        print(f"{path}: {path.stat().st_size / 1e6:.1f} MB")


if __name__ == "__main__":
    main()
