"""Time subword training on a generated sample of N sentences per language (default 1 M).

Prints wall-clock seconds and ratios against baselines measured in the same run:
(a) reading the sample text once, (b) the raw sentencepiece trainer on the same text, read by
sentencepiece from files (the direct way to use the library), (c) raw sentencepiece encoding of
every sentence with that model.  "bivocab" is the whole subword stage for one condition: seeded sample, training from
an iterator, merged model export and encoding of every sentence.

    python benchmarks/subword_train.py --sentences 1000000 --size 8000
"""

from __future__ import annotations

import argparse
import io
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import sentencepiece as spm

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from bivocab import load_recipe  # noqa: E402
from bivocab.subword import SentenceText, build_subword_condition, trainer_settings  # noqa: E402

RECIPE = """
[build]
name = "subword-benchmark"
seed = 1
[languages.en]
inputs = ["en.txt"]
[languages.de]
inputs = ["de.txt"]
[[condition]]
name = "joint"
policy = "shared"
units = "unigram"
size = {size}
train_threads = {threads}
[[condition]]
name = "separate"
policy = "fully-tagged"
units = "unigram"
size = {size}
train_threads = {threads}
"""

_ONSETS = "b d f g h k l m n p r s t v w z br dr kr st sch tr".split()
_VOWELS = "a e i o u ä ö ü ei au ie".split()
_CODAS = ["", "n", "r", "s", "t", "l", "ng", "ck", "ft"]


def generate(path: Path, sentences: int, seed: int, vocabulary: int = 60_000) -> None:
    """Zipf-distributed invented words (harbour-town flavour), 5-20 words a sentence."""
    rng = np.random.default_rng(seed)
    parts = [rng.choice(_ONSETS, vocabulary * 3), rng.choice(_VOWELS, vocabulary * 3), rng.choice(_CODAS, vocabulary * 3)]
    syllables = np.char.add(np.char.add(parts[0], parts[1]), parts[2]).reshape(vocabulary, 3)
    lengths = rng.integers(1, 4, vocabulary)
    words = ["".join(row[:n]) for row, n in zip(syllables.tolist(), lengths.tolist())]
    words[:6] = ["Kellhaven", ",", ".", "3,50", "€", "!"]
    ranks = np.arange(1, vocabulary + 1)
    p = 1.0 / ranks
    p /= p.sum()
    with open(path, "w", encoding="utf-8") as handle:
        for _ in range(0, sentences, 10_000):
            n = min(10_000, sentences - _)
            counts = rng.integers(5, 21, n)
            ids = rng.choice(vocabulary, int(counts.sum()), p=p)
            starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
            handle.write("\n".join(" ".join(words[i] for i in ids[s:s + c]) for s, c in zip(starts, counts)) + "\n")


def timed(fn):
    start = time.perf_counter()
    value = fn()
    return time.perf_counter() - start, value


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sentences", type=int, default=1_000_000, help="sentences per language")
    parser.add_argument("--size", type=int, default=8000, help="vocabulary size of each condition")
    parser.add_argument("--threads", type=int, default=1, help="sentencepiece training threads")
    parser.add_argument("--jobs", type=int, default=2, help="encoding threads")
    args = parser.parse_args()

    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        gen_s, _ = timed(lambda: [generate(root / f"{t}.txt", args.sentences, seed) for seed, t in enumerate(("en", "de"))])
        print(f"generated {args.sentences:,} sentences per language in {gen_s:.1f} s "
              f"({sum((root / f'{t}.txt').stat().st_size for t in ('en', 'de')) / 1e6:.0f} MB)")
        (root / "recipe.toml").write_text(RECIPE.format(size=args.size, threads=args.threads), encoding="utf-8")
        recipe = load_recipe(root / "recipe.toml")

        def read_all() -> int:
            return sum(len(line) for t in ("en", "de") for line in open(root / f"{t}.txt", encoding="utf-8"))
        read_s, _ = timed(read_all)

        joint = recipe.conditions[0]
        settings = trainer_settings("unigram", args.size - 2, joint.subword)
        raw_model = io.BytesIO()
        raw_s, _ = timed(lambda: spm.SentencePieceTrainer.train(
            input=f"{root / 'en.txt'},{root / 'de.txt'}", model_writer=raw_model, minloglevel=2,
            **{**settings, "input_sentence_size": 0}))
        processor = spm.SentencePieceProcessor(model_proto=raw_model.getvalue())

        def encode_all() -> int:
            pieces = 0
            for t in ("en", "de"):
                lines = (root / f"{t}.txt").read_text(encoding="utf-8").splitlines()
                for first in range(0, len(lines), 20_000):
                    pieces += sum(map(len, processor.encode(lines[first:first + 20_000], num_threads=args.jobs)))
            return pieces
        encode_s, _ = timed(encode_all)

        texts = [SentenceText(root / f"{t}.txt", args.sentences) for t in ("en", "de")]
        splits = [np.zeros(args.sentences, dtype=np.uint8) for _ in texts]
        rows = [("baseline (a): read the text once", read_s),
                ("baseline (b): raw sentencepiece trainer, joint unigram, from files", raw_s),
                ("baseline (c): raw sentencepiece encoding of every sentence", encode_s),
                ("baseline (b) + (c)", raw_s + encode_s)]
        for condition in recipe.conditions:
            work = root / f"work-{condition.name}"
            work.mkdir()
            seconds, _ = timed(lambda: build_subword_condition(condition, recipe, texts, splits, work, args.jobs))
            rows.append((f"bivocab {condition.name} unigram: sample + train + export + encode all", seconds))
        print(f"vocabulary size {args.size}, training threads {args.threads}, encoding threads {args.jobs}")
        for label, seconds in rows:
            print(f"  {label:<72} {seconds:8.1f} s  x{seconds / (raw_s + encode_s):5.2f} of (b)+(c)"
                  f"  x{seconds / read_s:6.1f} of (a)")


if __name__ == "__main__":
    main()
