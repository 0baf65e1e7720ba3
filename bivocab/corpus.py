"""Re-reading a build's corpus sentence by sentence, exactly as the build saw it.

For the stages that need running text after the build (audit growth curves, probe
contamination scans): each sentence comes with its language, provenance and split.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass
from typing import Iterator

import numpy as np

from .build import input_files
from .clean import clean_block
from .hygiene import prepare_hygiene
from .recipe import SPLITS, CleanSpec, Recipe
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
    Sentences dropped by the token-count filters or by the recipe's hygiene steps are
    skipped, as in the build."""
    thresholds = split_thresholds(recipe.splits)
    wanted = {SPLITS.index(s) for s in splits}
    clean = recipe.clean
    files = input_files(recipe)
    hygiene = prepare_hygiene(recipe, files)
    for index, source in enumerate(files):
        if lang is not None and source.language != lang:
            continue
        for block in read_blocks(source, index):
            cleaned = clean_block(block, clean, source.display)
            kept = [(text, line) for text, line in zip(cleaned.lines, cleaned.line_numbers)
                    if _length_ok(text, clean)]
            texts = [text for text, _ in kept]
            codes = assign_splits(texts, recipe.seed, thresholds)
            keep = hygiene.keep_mask(recipe.tags.index(source.language), index, texts,
                                     np.array([line for _, line in kept], dtype=np.int64), codes, Counter())
            for (text, line), code, k in zip(kept, codes.tolist(), keep.tolist()):
                if k and code in wanted:
                    yield Sentence(source.language, index, source.display, line, SPLITS[code], text)


def _length_ok(text: str, clean: CleanSpec) -> bool:
    if clean.min_tokens <= 1 and not clean.max_tokens:
        return True
    n = len(segment(text))
    return n >= clean.min_tokens and not (clean.max_tokens and n > clean.max_tokens)
