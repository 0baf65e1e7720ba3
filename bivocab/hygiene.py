"""Corpus hygiene after cleaning: exact duplicates, cross-language duplicates, foreign-language
sentences and stimulus exclusion, each optional and counted (docs/inputs.md).

Sentences are compared by a 64-bit keyed BLAKE2b hash of their normalised text, so memory
grows with 8 bytes per distinct sentence (sorted numpy arrays), never with the text.  The
foreign-sentence detector is a naive Bayes classifier over character n-grams trained on a
seeded sample of the two corpora themselves.
"""

from __future__ import annotations

import hashlib
import math
from collections import Counter
from dataclasses import dataclass, replace
from itertools import repeat
from typing import Any, Iterable

import numpy as np

from .clean import clean_block, normalise_text
from .errors import InputError
from .recipe import ReadSpec, Recipe
from .scan import ScanResult, ordered_map
from .sources import InputFile, file_sha256, read_blocks

NGRAM_ORDERS = (1, 2, 3)
TRAINING_SAMPLE = 20000          # sentences per language for the n-gram model (smallest hashes)


def sentence_hashes(texts: Iterable[str], seed: int) -> np.ndarray:
    """64-bit keyed BLAKE2b of each UTF-8 text (key: the seed), as uint64.

    With n distinct sentences the chance of any collision is about n^2 / 2^65 (birthday
    bound): 3e-4 for 100 million sentences.
    """
    key = b"hygiene" + seed.to_bytes(16, "little", signed=True)
    blake = hashlib.blake2b
    return np.fromiter((int.from_bytes(blake(t.encode("utf-8", "surrogatepass"), digest_size=8, key=key).digest(),
                                       "little") for t in texts), dtype=np.uint64)


def _contains(sorted_values: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Membership of ``values`` in the sorted uint64 array ``sorted_values``."""
    if not len(sorted_values) or not len(values):
        return np.zeros(len(values), dtype=bool)
    at = np.searchsorted(sorted_values, values)
    at[at == len(sorted_values)] = 0
    return sorted_values[at] == values


class SeenHashes:
    """The set of hashes seen so far, as sorted uint64 arrays of decreasing size (each at
    least twice the next); a new block's unseen hashes become the smallest array, and two
    arrays are merged (a linear merge of two sorted runs) when the smaller reaches half the
    larger.  Memory: 8 bytes per distinct hash, plus one merge's copy while merging."""

    def __init__(self) -> None:
        self.levels: list[np.ndarray] = []

    def __len__(self) -> int:
        return sum(len(level) for level in self.levels)

    @property
    def nbytes(self) -> int:
        return sum(level.nbytes for level in self.levels)

    def first_occurrences(self, hashes: np.ndarray) -> np.ndarray:
        """True for each hash never seen before (earlier in this array or in earlier calls);
        the hashes are then remembered.

        >>> seen = SeenHashes()
        >>> seen.first_occurrences(np.array([5, 7, 5], np.uint64)).tolist()
        [True, True, False]
        >>> seen.first_occurrences(np.array([7, 9], np.uint64)).tolist()
        [False, True]
        """
        unique, first = np.unique(np.asarray(hashes, dtype=np.uint64), return_index=True)
        known = np.zeros(len(unique), dtype=bool)
        for level in self.levels:
            known |= _contains(level, unique)
        mask = np.zeros(len(hashes), dtype=bool)
        mask[first[~known]] = True
        if (~known).any():
            self.levels.append(unique[~known])
            while len(self.levels) > 1 and 2 * len(self.levels[-1]) >= len(self.levels[-2]):
                merged = np.concatenate(self.levels[-2:])
                merged.sort(kind="stable")   # timsort: two sorted runs merge in linear time
                self.levels[-2:] = [merged]
        return mask


# --- foreign-sentence detection --------------------------------------------------------------

def char_ngrams(text: str) -> list[str]:
    """Character n-grams (n = 1, 2, 3) of the lowercased text padded with one space each side.

    >>> char_ngrams("Ab")
    [' ', 'a', 'b', ' ', ' a', 'ab', 'b ', ' ab', 'ab ']
    """
    padded = f" {text.lower()} "
    return [padded[i:i + n] for n in NGRAM_ORDERS for i in range(len(padded) - n + 1)]


@dataclass(frozen=True)
class NgramModel:
    """Multinomial naive Bayes over character n-grams, two classes (the languages), add-one
    smoothed over the union of n-grams seen in training, equal priors.  Stored as the
    log-likelihood ratio log P(g | second) - log P(g | first) of each n-gram, so scoring a
    sentence is one table look-up per n-gram."""

    log_ratio: dict[str, float]
    unseen_ratio: float            # the ratio for an n-gram neither language saw

    @classmethod
    def train(cls, samples: list[list[str]]) -> "NgramModel":
        first, second = (Counter(g for text in texts for g in char_ngrams(text)) for texts in samples)
        vocabulary = len(first.keys() | second.keys()) + 1
        log_first = math.log(sum(first.values()) + vocabulary)
        log_second = math.log(sum(second.values()) + vocabulary)
        ratio = {g: (math.log(second[g] + 1) - log_second) - (math.log(first[g] + 1) - log_first)
                 for g in first.keys() | second.keys()}
        return cls(ratio, log_first - log_second)

    def mean_log_ratio(self, text: str) -> float:
        """Mean over the text's n-grams of log P(g | second) - log P(g | first).

        >>> model = NgramModel.train([["the harbour"], ["der hafen"]])
        >>> model.mean_log_ratio("the") < 0 < model.mean_log_ratio("der")
        True
        """
        grams = char_ngrams(text)
        return sum(map(self.log_ratio.get, grams, repeat(self.unseen_ratio, len(grams)))) / len(grams)


def is_foreign(model: NgramModel, text: str, own: int, min_chars: int, margin: float) -> bool:
    """True when ``text`` is at least ``min_chars`` long and its mean log-likelihood ratio
    (other language against its own, per n-gram) exceeds ``margin``."""
    if len(text) < min_chars:
        return False
    ratio = model.mean_log_ratio(text)
    return (ratio if own == 0 else -ratio) > margin


# --- the pre-pass and the filter -----------------------------------------------------------

@dataclass(frozen=True)
class _PrepassTask:
    source: InputFile
    index: int
    lang: int
    recipe: Recipe


def _prepass_file(task: _PrepassTask) -> tuple[int, np.ndarray, np.ndarray, list[str]]:
    """Distinct sentence hashes of one input and its training-sample candidates (the
    sentences with the smallest sample hashes)."""
    recipe = task.recipe
    parts = []
    sample_hashes, sample_texts = np.zeros(0, np.uint64), []
    for block in read_blocks(task.source, task.index):
        lines = clean_block(block, recipe.clean, task.source.display).lines
        parts.append(np.unique(sentence_hashes(lines, recipe.seed)))
        if recipe.hygiene.foreign != "off" and lines:
            h = sentence_hashes(lines, recipe.seed + 1)
            merged_h = np.concatenate([sample_hashes, h])
            merged_t = sample_texts + lines
            keep = np.argsort(merged_h, kind="stable")[:TRAINING_SAMPLE]
            sample_hashes, sample_texts = merged_h[keep], [merged_t[i] for i in keep]
    hashes = np.unique(np.concatenate(parts)) if parts else np.zeros(0, np.uint64)
    return task.lang, hashes, sample_hashes, sample_texts


def _read_items(recipe: Recipe) -> tuple[np.ndarray, list[dict[str, Any]]]:
    """Hashes of the normalised sentences of the item files, and a record of each file."""
    spec = recipe.hygiene
    hashes, record = [], []
    for path in spec.exclude_items:
        absolute = recipe.base_dir / path
        source = InputFile(absolute, path, "", ReadSpec(field=spec.exclude_column))
        if absolute.suffix.lower() not in (".csv", ".tsv"):
            raise InputError(f"{path}: item file must be .csv or .tsv ([hygiene] exclude_items)")
        texts = []
        for block in read_blocks(source, 0):
            for offset, raw in enumerate(block.data.split(b"\n") if block.line_count else []):
                try:
                    texts.append(normalise_text(raw.decode("utf-8"), recipe.clean))
                except UnicodeDecodeError:
                    raise InputError(f"{path}:{block.line_number(offset)}: invalid UTF-8 in the item file") from None
        hashes.append(sentence_hashes(texts, recipe.seed))
        record.append({"path": path, "sha256": file_sha256(absolute), "items": len(texts)})
    return (np.unique(np.concatenate(hashes)) if hashes else np.zeros(0, np.uint64)), record


class HygieneFilter:
    """Decides, sentence by sentence in input order, which sentences stay; keeps the counts
    and examples for the build report.  Steps, in this order (a sentence is counted under
    the first step that drops it): stimulus exclusion, cross-language duplicates, exact
    duplicates within the language, foreign-language sentences."""

    def __init__(self, recipe: Recipe, files: list[InputFile], cross: np.ndarray, model: NgramModel | None,
                 items: np.ndarray, item_files: list[dict[str, Any]]):
        self.recipe, self.spec, self.files = recipe, recipe.hygiene, files
        self.tags = recipe.tags
        self.cross, self.model, self.items, self.item_files = cross, model, items, item_files
        self.seen = [SeenHashes() for _ in self.tags]
        self.counts: list[Counter] = [Counter() for _ in self.tags]
        self.examples: dict[str, list[list[dict[str, Any]]]] = {
            "foreign": [[] for _ in self.tags], "cross_language": [[] for _ in self.tags]}
        self.active = (self.spec.duplicates == "drop" or self.spec.cross_language != "off"
                       or self.spec.foreign != "off" or bool(self.spec.exclude_items))

    def _example(self, kind: str, lang: int, file_index: int, line: int, text: str) -> None:
        found = self.examples[kind][lang]
        if len(found) < self.spec.examples:
            found.append({"path": self.files[file_index].display, "line": int(line), "text": text})

    def keep_mask(self, lang: int, file_index: int, lines: list[str], line_numbers: np.ndarray,
                  splits: np.ndarray, counters: Counter) -> np.ndarray:
        """Which of these sentences (one input's, in order) stay; adds the counts to
        ``counters`` (the input's report)."""
        spec = self.spec
        keep = np.ones(len(lines), dtype=bool)
        if not self.active or not lines:
            return keep
        hashes = sentence_hashes(lines, self.recipe.seed)
        if len(self.items):
            hit = _contains(self.items, hashes)
            if spec.exclude_from == "train":
                hit &= np.asarray(splits) == 0
            self._drop(keep, hit, "stimulus_sentences_excluded", lang, counters)
        if spec.cross_language != "off":
            hit = _contains(self.cross, hashes) & keep
            found = int(hit.sum())
            if found:
                counters["cross_language_duplicates_found"] += found
                self.counts[lang]["cross_language_duplicates_found"] += found
                for i in np.flatnonzero(hit)[:spec.examples]:
                    self._example("cross_language", lang, file_index, line_numbers[i], lines[i])
            if spec.cross_language == "drop-both" or (spec.cross_language == "keep-first" and lang == 1):
                self._drop(keep, hit, "cross_language_duplicates_dropped", lang, counters)
        if spec.duplicates == "drop":
            # Every sentence enters the seen set, so a later copy of a sentence dropped for
            # another reason is still a duplicate.
            first = self.seen[lang].first_occurrences(hashes)
            self._drop(keep, ~first & keep, "duplicates_dropped", lang, counters)
        if self.model is not None:
            hit = np.array([bool(k) and is_foreign(self.model, text, lang, spec.foreign_min_chars, spec.foreign_margin)
                            for k, text in zip(keep, lines)], dtype=bool)
            found = int(hit.sum())
            if found:
                counters["foreign_sentences_found"] += found
                self.counts[lang]["foreign_sentences_found"] += found
                for i in np.flatnonzero(hit):
                    self._example("foreign", lang, file_index, line_numbers[i], lines[i])
            if spec.foreign == "drop":
                self._drop(keep, hit, "foreign_sentences_dropped", lang, counters)
        return keep

    def _drop(self, keep: np.ndarray, hit: np.ndarray, name: str, lang: int, counters: Counter) -> None:
        hit = hit & keep
        n = int(hit.sum())
        if n:
            keep &= ~hit
            counters[name] += n
            self.counts[lang][name] += n

    def filter_scan(self, result: ScanResult, lang: int) -> ScanResult:
        """The scan result without the sentences hygiene drops (counts in its counters).
        Needs the result's text (``ScanTask.keep_text``) whenever a step is active."""
        if not self.active or not len(result.lengths):
            return result
        lines = result.text.split("\n")
        if not result.text or len(lines) != len(result.lengths):   # kept sentences are never empty
            raise RuntimeError("hygiene needs the sentences' text: scan with ScanTask.keep_text = True")
        counters = Counter(result.counters)
        keep = self.keep_mask(lang, result.file_index, lines, result.line_numbers, result.splits, counters)
        if keep.all():
            return replace(result, counters=counters)
        dropped = ~keep
        counters["sentences_kept"] -= int(dropped.sum())
        counters["tokens_kept"] -= int(result.lengths[dropped].sum())
        return replace(result, tokens=result.tokens[np.repeat(keep, result.lengths)],
                       lengths=result.lengths[keep], splits=result.splits[keep],
                       line_numbers=result.line_numbers[keep],
                       text="\n".join(t for t, k in zip(lines, keep) if k), counters=counters)

    def report(self) -> dict[str, Any]:
        """The build-level hygiene report recorded in build.json ``hygiene``."""
        spec = self.spec
        out: dict[str, Any] = {"steps": {"duplicates": spec.duplicates, "cross_language": spec.cross_language,
                                         "foreign": spec.foreign, "exclude_items": len(spec.exclude_items) > 0}}
        out["languages"] = {tag: {k: int(v) for k, v in sorted(self.counts[i].items())}
                            for i, tag in enumerate(self.tags)}
        if spec.cross_language != "off":
            out["cross_language"] = {"distinct_sentences": int(len(self.cross)),
                                     "examples": {tag: self.examples["cross_language"][i]
                                                  for i, tag in enumerate(self.tags)}}
        if self.model is not None:
            out["foreign"] = {"method": "naive Bayes over character 1-3-grams, trained on the corpora",
                              "min_chars": spec.foreign_min_chars, "margin": spec.foreign_margin,
                              "examples": {tag: self.examples["foreign"][i] for i, tag in enumerate(self.tags)}}
        if self.item_files:
            out["exclude_items"] = {"files": self.item_files, "column": spec.exclude_column,
                                    "from": spec.exclude_from}
        return out


def prepare_hygiene(recipe: Recipe, files: list[InputFile], jobs: int = 1) -> HygieneFilter:
    """Run the pre-pass the recipe's hygiene steps need (sentence hashes per language for the
    cross-language check, a training sample for the foreign-sentence model) and return the
    filter for pass 1.  With no step that needs it, nothing is read."""
    spec = recipe.hygiene
    tags = recipe.tags
    cross = np.zeros(0, dtype=np.uint64)
    model = None
    if spec.cross_language != "off" or spec.foreign != "off":
        per_lang: list[list[np.ndarray]] = [[] for _ in tags]
        samples: list[tuple[np.ndarray, list[str]]] = [(np.zeros(0, np.uint64), []) for _ in tags]
        tasks = [_PrepassTask(f, i, tags.index(f.language), recipe) for i, f in enumerate(files)]
        for lang, hashes, sample_h, sample_t in ordered_map(_prepass_file, tasks, jobs):
            per_lang[lang].append(hashes)
            if spec.foreign != "off":
                merged_h = np.concatenate([samples[lang][0], sample_h])
                merged_t = samples[lang][1] + sample_t
                keep = np.argsort(merged_h, kind="stable")[:TRAINING_SAMPLE]
                samples[lang] = (merged_h[keep], [merged_t[i] for i in keep])
        if spec.cross_language != "off":
            distinct = [np.unique(np.concatenate(p)) if p else np.zeros(0, np.uint64) for p in per_lang]
            cross = np.intersect1d(distinct[0], distinct[1], assume_unique=True)
        if spec.foreign != "off":
            model = NgramModel.train([texts for _, texts in samples])
    items, item_files = _read_items(recipe)
    return HygieneFilter(recipe, files, cross, model, items, item_files)
