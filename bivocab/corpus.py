"""Re-reading a build's corpus sentence by sentence, exactly as the build saw it.

For the stages that need running text after the build (audit growth curves, probe
contamination scans): each sentence comes with its language, provenance and split.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterator

from .build import input_files
from .clean import clean_block
from .recipe import SPLITS, Recipe
from .segment import segment
from .sources import read_blocks
from .splits import assign_splits, split_thresholds


@dataclass(frozen=True)
class Sentence:
    lang: str
    input_index: int        # index into the recipe's input files (and build.json "inputs")
    path: str               # input path as recorded in build.json
    line: int               # 1-based line in that file
    split: str
    text: str               # normalised text


def iter_sentences(recipe: Recipe, splits: tuple[str, ...] = SPLITS, lang: str | None = None) -> Iterator[Sentence]:
    """Every kept sentence of the corpus in input order, filtered by split and language.
    Sentences dropped by the token-count filters are skipped, as in the build."""
    thresholds = split_thresholds(recipe.splits)
    wanted = {SPLITS.index(s) for s in splits}
    clean = recipe.clean
    for index, source in enumerate(input_files(recipe)):
        if lang is not None and source.language != lang:
            continue
        for block in read_blocks(source, index):
            cleaned = clean_block(block, clean, source.display)
            codes = assign_splits(cleaned.lines, recipe.seed, thresholds)
            for text, line, code in zip(cleaned.lines, cleaned.line_numbers, codes.tolist()):
                if code not in wanted:
                    continue
                if clean.min_tokens > 1 or clean.max_tokens:
                    n = len(segment(text))
                    if n < clean.min_tokens or (clean.max_tokens and n > clean.max_tokens):
                        continue
                yield Sentence(source.language, index, source.display, line, SPLITS[code], text)
