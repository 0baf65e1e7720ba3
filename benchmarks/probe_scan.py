"""Contamination scan of `bivocab probe`: time against baselines measured in the same run.

Prints ratios of the scan (``scan_contamination``: one pass, hashed item n-grams) to
(a) re-reading the training text alone (``iter_sentences``, the floor any scan pays) and
(b) a naive check that re-reads the training text once per item.

    python benchmarks/probe_scan.py [--sentences 100000] [--items 200]
"""

from __future__ import annotations

import argparse
import itertools
import json
import random
import tempfile
import time
from pathlib import Path

from bivocab import build
from bivocab.corpus import iter_sentences
from bivocab.probe import ngram_words, read_items, scan_contamination
from bivocab.recipe import recipe_from_manifest
from bivocab.segment import segment


def timed(fn) -> tuple[float, object]:
    start = time.perf_counter()
    value = fn()
    return time.perf_counter() - start, value


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sentences", type=int, default=100_000, help="sentences per language")
    parser.add_argument("--items", type=int, default=200)
    parser.add_argument("--naive-items", type=int, default=5, help="items for the per-item baseline")
    args = parser.parse_args()
    rng = random.Random(1)
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        vocab = [f"wort{i}" for i in range(20_000)]
        cumulative = list(itertools.accumulate(1 / (rank + 1) for rank in range(len(vocab))))  # Zipf-like
        for tag in ("en", "de"):
            (root / tag).mkdir()
            lines = (" ".join(rng.choices(vocab, cum_weights=cumulative, k=rng.randint(5, 25))) + " ."
                     for _ in range(args.sentences))
            (root / tag / "a.txt").write_text("\n".join(lines) + "\n", encoding="utf-8")
        (root / "recipe.toml").write_text(
            '[build]\nname = "bench"\nseed = 1\n[languages.en]\ninputs = ["en/*.txt"]\n'
            '[languages.de]\ninputs = ["de/*.txt"]\n[[condition]]\nname = "shared"\npolicy = "shared"\n',
            encoding="utf-8")
        out = root / "build"
        build(root / "recipe.toml", out)
        recipe = recipe_from_manifest(json.loads((out / "build.json").read_text(encoding="utf-8")), out)
        rows = ["id\tlang\tsentence\tcritical"] + [
            f"i{n}\ten\tkritisch " + " ".join(rng.choices(vocab, cum_weights=cumulative, k=15)) + " .\tkritisch"
            for n in range(args.items)]
        (root / "items.tsv").write_text("\n".join(rows) + "\n", encoding="utf-8")
        items = read_items(root / "items.tsv", recipe.tags, recipe.clean)

        read_s, count = timed(lambda: sum(1 for _ in iter_sentences(recipe, splits=("train",))))
        scan_s, _ = timed(lambda: scan_contamination(recipe, items, 8))

        def naive() -> None:
            for item in items[:args.naive_items]:
                words = ngram_words(item.tokens)
                grams = {tuple(words[i:i + 8]) for i in range(len(words) - 7)}
                for sentence in iter_sentences(recipe, splits=("train",)):
                    w = ngram_words(segment(sentence.text))
                    any(tuple(w[i:i + 8]) in grams for i in range(len(w) - 7))

        naive_s, _ = timed(naive)
        per_item_naive = naive_s / args.naive_items
        print(f"training sentences: {count:,}; items: {len(items)}")
        print(f"(a) read the training text:        {read_s:8.2f} s")
        print(f"    scan for {len(items)} items:            {scan_s:8.2f} s   ratio to (a): {scan_s / read_s:.2f}")
        print(f"(b) naive, per item (x{args.naive_items} measured): {per_item_naive:8.2f} s   "
              f"projected for {len(items)} items: {per_item_naive * len(items):.1f} s, "
              f"ratio scan / (b): {scan_s / (per_item_naive * len(items)):.4f}")


if __name__ == "__main__":
    main()
