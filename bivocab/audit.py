"""Audit of a build: per-language statistics, overlap of the two vocabularies, the size each
policy would give, coverage of every condition, the homograph tables, and the statistics of
subword conditions (bivocab.subword.subword_statistics).

Every statistic is defined with its formula in docs/audit.md; the functions here are written
so that each one can be checked on its own.  Written to ``DIR/audit/`` by :func:`write_audit`.
"""

from __future__ import annotations

import csv
import math
import os
import shutil
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable, Mapping, Sequence

import numpy as np

from .clean import normalise_text
from .corpus import iter_sentences
from .errors import BivocabError, InputError, OutputError
from .build import INCOMPLETE
from .homographs import (CASE, CASE_AND_MARKS, MARKS, TRANSLATION_LABELS, Lexicon, Translations, near_homographs,
                         read_lexicon, read_translations, spelling_variants)
from .manifest import MANIFEST, build_lock, canonical_json, read_manifest, sha256_file
from .probe import frequency_per_million, zipf_value
from .recipe import POLICIES, SPLITS, ConditionSpec, Recipe, VocabSpec, recipe_from_manifest
from .segment import SPECIAL, TOKEN_CLASSES, WORD, segment
from .subword import subword_statistics
from .subword_audit import PieceSpelling, is_subword, load_processors, subword_coverage, subword_headers, subword_rows
from .vocab import entry_key, sharing_rule, special_tokens, tsv_text

AUDIT_DIR = "audit"
TRAIN = "train"
GROWTH_POINTS = 64            # log-spaced points of the type-token growth curve
HEAPS_FIT_FROM = 0.01         # the Heaps fit uses the points with N >= this share of the tokens
ZIPF_MIN_COUNT = 5            # the Zipf fit uses the ranks whose count is at least this
ZIPF_POINTS_PER_DECADE = 10
BAND_BASE = 10                # frequency bands: ranks 1-10, 11-100, 101-1000, ...


# --- reading the build ----------------------------------------------------------------------------

@dataclass(frozen=True)
class LanguageTypes:
    """One language's types file: every type with its class and count per split."""

    tag: str
    surfaces: tuple[str, ...]
    classes: tuple[str, ...]
    counts: np.ndarray            # int64 (types, 3), columns in SPLITS order

    def counts_in(self, split: str) -> dict[str, int]:
        """Surface -> count in ``split``, types that occur in it only."""
        column = self.counts[:, SPLITS.index(split)].tolist()
        return {s: c for s, c in zip(self.surfaces, column) if c}

    def class_of(self) -> dict[str, str]:
        return dict(zip(self.surfaces, self.classes))


def _tsv_rows(path: Path, header: Sequence[str]) -> Iterable[tuple[int, list[str]]]:
    """Rows of a build TSV (tab-separated with CSV quoting, as bivocab.vocab.tsv_text writes it)
    after checking its leading header columns; every field stays a string ("NA" too)."""
    try:
        handle = open(path, encoding="utf-8", newline="")
    except FileNotFoundError:
        raise InputError(f"{path}: missing from the build directory") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read: {exc.strerror or exc}") from None
    with handle:
        reader = csv.reader(handle, delimiter="\t")
        try:
            first = next(reader, [])
            if first[:len(header)] != list(header):
                raise InputError(f"{path}:1: header must start with {' '.join(header)}")
            for fields in reader:
                if len(fields) != len(first):
                    raise InputError(f"{path}:{reader.line_num}: expected {len(first)} tab-separated fields, "
                                     f"found {len(fields)}")
                yield reader.line_num, fields
        except (UnicodeDecodeError, csv.Error) as exc:
            raise InputError(f"{path}:{reader.line_num}: cannot read: {exc}") from None


def read_types(path: Path, tag: str) -> LanguageTypes:
    """Read ``types/<tag>.tsv`` (surface class count_train count_valid count_test)."""
    surfaces, classes, counts = [], [], []
    for number, fields in _tsv_rows(path, ("surface", "class", "count_train", "count_valid", "count_test")):
        try:
            counts.append([int(v) for v in fields[2:5]])
        except ValueError:
            raise InputError(f"{path}:{number}: counts must be whole numbers") from None
        surfaces.append(fields[0])
        classes.append(fields[1])
    array = np.asarray(counts, dtype=np.int64).reshape(-1, 3)
    return LanguageTypes(tag, tuple(surfaces), tuple(classes), array)


@dataclass(frozen=True)
class VocabEntries:
    """A condition's vocab.tsv: its size and its non-special entries ``(lang or "*", surface)``."""

    size: int
    entries: frozenset[tuple[str, str]]


def read_vocab_entries(path: Path) -> VocabEntries:
    entries, size = set(), 0
    for _, fields in _tsv_rows(path, ("id", "token", "surface", "lang", "class", "count")):
        size += 1
        if fields[4] != SPECIAL:
            entries.add((fields[3], fields[2]))
    return VocabEntries(size, frozenset(entries))


# --- per-language statistics ----------------------------------------------------------------------

def class_statistics(counts: Mapping[str, int], sentences: int) -> dict[str, float | int | None]:
    """Tokens, types, hapax legomena and their share, type-token ratio and tokens per sentence.

    >>> class_statistics({"a": 3, "b": 1}, 2)["hapax_share"]
    0.5
    """
    tokens = sum(counts.values())
    types = len(counts)
    hapax = sum(1 for c in counts.values() if c == 1)
    return {
        "tokens": tokens, "types": types, "hapax_legomena": hapax,
        "hapax_share": hapax / types if types else None,
        "type_token_ratio": types / tokens if tokens else None,
        "mean_sentence_length": tokens / sentences if sentences else None,
    }


def growth_curve(tokens: Iterable[str], total: int, points: int = GROWTH_POINTS) -> list[tuple[int, int]]:
    """Types seen after the first N tokens, V(N), at log-spaced N from 1 to ``total``.

    >>> growth_curve("a b a c".split(), 4, points=4)
    [(1, 1), (2, 2), (3, 2), (4, 3)]
    """
    if total <= 0:
        return []
    marks = np.unique(np.round(np.geomspace(1, total, points)).astype(np.int64)).tolist()
    curve, seen, n, m = [], set(), 0, 0
    for token in tokens:
        seen.add(token)
        n += 1
        if m < len(marks) and n == marks[m]:
            curve.append((n, len(seen)))
            m += 1
    return curve


@dataclass(frozen=True)
class PowerFit:
    """``y = coefficient * x ** exponent`` fitted by least squares on log10 y against log10 x."""

    coefficient: float
    exponent: float
    r_squared: float
    points: int
    x_min: int
    x_max: int

    def predict(self, x: float) -> float:
        return self.coefficient * x ** self.exponent


def _fit_loglog(x: np.ndarray, y: np.ndarray) -> PowerFit | None:
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    if len(np.unique(x)) < 3:
        return None
    lx, ly = np.log10(x), np.log10(y)
    slope, intercept = np.polyfit(lx, ly, 1)
    residual = ly - (intercept + slope * lx)
    total = ((ly - ly.mean()) ** 2).sum()
    r2 = 1.0 - (residual ** 2).sum() / total if total > 0 else 1.0
    return PowerFit(float(10 ** intercept), float(slope), float(r2), len(x), int(x.min()), int(x.max()))


def heaps_vocabulary(k: float, beta: float, tokens: float) -> float:
    """Heaps' law V = K * N^beta.

    >>> round(heaps_vocabulary(44, 0.49, 1_000_020))
    38323
    """
    return k * tokens ** beta


def fit_heaps(curve: Sequence[tuple[int, int]], total: int) -> PowerFit | None:
    """Fit Heaps' law to a growth curve: least squares of log10 V on log10 N over the points
    with N >= HEAPS_FIT_FROM * total (the start, where nearly every token is new, is left out).
    K is ``coefficient`` and beta ``exponent``; None with fewer than three points."""
    chosen = [(n, v) for n, v in curve if n >= HEAPS_FIT_FROM * total]
    if not chosen:
        return None
    n, v = zip(*chosen)
    return _fit_loglog(np.array(n), np.array(v))


def rank_frequency(counts: Iterable[int]) -> np.ndarray:
    """Counts sorted from the most frequent type down (index 0 is rank 1)."""
    return np.sort(np.fromiter(counts, dtype=np.int64))[::-1]


def fit_zipf(counts: Iterable[int]) -> PowerFit | None:
    """Zipf's law f(r) = C * r^-s: least squares of log10 f on log10 r at log-spaced ranks
    (ZIPF_POINTS_PER_DECADE per decade) among the ranks whose count is >= ZIPF_MIN_COUNT.
    The returned ``exponent`` is -s."""
    freq = rank_frequency(counts)
    usable = int((freq >= ZIPF_MIN_COUNT).sum())
    if usable < 3:
        return None
    steps = max(2, int(math.ceil(math.log10(usable) * ZIPF_POINTS_PER_DECADE)) + 1)
    ranks = np.unique(np.round(np.geomspace(1, usable, steps)).astype(np.int64))
    return _fit_loglog(ranks, freq[ranks - 1])


# --- overlap and policy sizes ---------------------------------------------------------------------

def overlap_statistics(tags: Sequence[str], train: Sequence[Mapping[str, int]],
                       class_of: Mapping[str, str]) -> dict[str, Any]:
    """Shared types, union, Jaccard index and shared token share, in total and per class."""
    sets = [set(t) for t in train]
    shared_all = sets[0] & sets[1]
    union_all = sets[0] | sets[1]

    def by_class(items: set[str]) -> dict[str, int]:
        out = {"total": len(items), **{c: 0 for c in TOKEN_CLASSES}}
        for s in items:
            out[class_of[s]] += 1
        return out

    shared, union = by_class(shared_all), by_class(union_all)
    jaccard = {k: (shared[k] / union[k] if union[k] else None) for k in shared}
    token_share: dict[str, dict[str, float | None]] = {}
    for tag, counts in zip(tags, train):
        tokens = {"total": 0, **{c: 0 for c in TOKEN_CLASSES}}
        shared_tokens = dict(tokens)
        for s, c in counts.items():
            cls = class_of[s]
            tokens["total"] += c
            tokens[cls] += c
            if s in shared_all:
                shared_tokens["total"] += c
                shared_tokens[cls] += c
        token_share[tag] = {k: (shared_tokens[k] / tokens[k] if tokens[k] else None) for k in tokens}
    return {"shared_types": shared, "union_types": union, "jaccard": jaccard, "shared_token_share": token_share}


def ranked(counts: Mapping[str, int]) -> list[tuple[str, int]]:
    """Types by count descending, then code points of the surface (the build's tie rule)."""
    return sorted(counts.items(), key=lambda sc: (-sc[1], sc[0]))


def frequency_bands(counts: Mapping[str, int], other: set[str], base: int = BAND_BASE) -> list[dict[str, Any]]:
    """Share of types and of tokens that are shared spellings, per band of frequency rank:
    ranks 1..base, base+1..base^2, ...

    >>> [(b["first_rank"], b["last_rank"], b["shared_types"]) for b in frequency_bands({"a": 9, "b": 5, "c": 1}, {"b"}, base=2)]
    [(1, 2, 1), (3, 3, 0)]
    """
    order = ranked(counts)
    bands, start, upper = [], 0, base
    while start < len(order):
        chunk = order[start:upper]
        tokens = sum(c for _, c in chunk)
        shared = [(s, c) for s, c in chunk if s in other]
        shared_tokens = sum(c for _, c in shared)
        bands.append({"first_rank": start + 1, "last_rank": start + len(chunk), "types": len(chunk),
                      "shared_types": len(shared), "shared_type_share": len(shared) / len(chunk),
                      "tokens": tokens, "shared_tokens": shared_tokens,
                      "shared_token_share": shared_tokens / tokens if tokens else None})
        start, upper = upper, upper * base
    return bands


def uncapped_size(condition: ConditionSpec, tags: Sequence[str], train_types: Sequence[Iterable[str]]) -> int:
    """Entries the condition would have with no size cap and min_count 1: the distinct entry
    keys of both languages' training types (the rule of bivocab.vocab) plus the specials."""
    rule = sharing_rule(condition)
    keys = {entry_key(s, tag, rule) for tag, types in zip(tags, train_types) for s in types}
    v = condition.vocab
    return len(keys) + len(special_tokens(tuple(tags), v.unknown, v.eos, v.pad))


def policy_sizes(tags: Sequence[str], train_types: Sequence[Iterable[str]], vocab: VocabSpec) -> dict[str, int]:
    """Uncapped vocabulary size of each policy (with the recipe's default specials), and the
    entries that sharing saves: fully-tagged minus shared (= shared spellings)."""
    types = [set(t) for t in train_types]
    sizes = {name: uncapped_size(ConditionSpec(name=name, policy=name, classes=dict(classes), vocab=vocab),
                                 tags, types)
             for name, classes in POLICIES.items()}
    v = vocab
    sizes["specials"] = len(special_tokens(tuple(tags), v.unknown, v.eos, v.pad))
    sizes["saved_by_sharing"] = sizes["fully-tagged"] - sizes["shared"]
    return sizes


# --- coverage -------------------------------------------------------------------------------------

def coverage(condition: ConditionSpec, vocab: VocabEntries, languages: Sequence[LanguageTypes],
             top: int) -> dict[str, Any]:
    """OOV tokens and OOV share per language and split, and the most frequent OOV types of
    valid and test.  A type is OOV when its entry key is not an entry of the vocabulary."""
    rule = sharing_rule(condition)
    result: dict[str, Any] = {}
    for lang in languages:
        missing = np.array([entry_key(s, lang.tag, rule) not in vocab.entries for s in lang.surfaces], dtype=bool)
        per_split: dict[str, Any] = {}
        for si, split in enumerate(SPLITS):
            column = lang.counts[:, si] if len(lang.surfaces) else np.zeros(0, np.int64)
            tokens, oov = int(column.sum()), int(column[missing].sum()) if len(column) else 0
            entry: dict[str, Any] = {"tokens": tokens, "oov_tokens": oov, "oov_share": oov / tokens if tokens else None}
            if split != TRAIN:
                pairs = [(lang.surfaces[i], int(column[i])) for i in np.flatnonzero(missing & (column > 0))]
                pairs.sort(key=lambda sc: (-sc[1], sc[0]))
                entry["oov_types"] = len(pairs)
                entry["top_oov"] = [{"surface": s, "count": c} for s, c in pairs[:top]]
            per_split[split] = entry
        result[lang.tag] = per_split
    return result


# --- homographs -----------------------------------------------------------------------------------

@dataclass(frozen=True)
class HomographPair:
    """A spelling of language A matched with one of language B (the same string when exact)."""

    kind: str                     # exact | case | marks | case+marks | near
    surface_a: str
    surface_b: str
    cls: str
    count_a: int
    count_b: int
    per_million_a: float          # per million word tokens of the language's training text
    per_million_b: float
    in_vocab: tuple[str, ...]     # per condition: shared | separate | only-<tag> | absent
    attested_a: bool | None = None
    attested_b: bool | None = None
    translation: str | None = None

    @property
    def zipf_a(self) -> float:
        return zipf_value(self.per_million_a)   # > 0: a matched spelling occurs in training text

    @property
    def zipf_b(self) -> float:
        return zipf_value(self.per_million_b)

    @property
    def log10_ratio(self) -> float:
        return math.log10(self.per_million_a / self.per_million_b)

    @property
    def combined_per_million(self) -> float:
        return self.per_million_a + self.per_million_b


def vocab_status(a: str, b: str, tags: Sequence[str], rule: Callable[[str], bool], vocab: VocabEntries) -> str:
    """Whether the pair is one shared entry, two separate entries, one of them, or absent, under
    a condition's sharing rule (:func:`bivocab.vocab.sharing_rule`) and vocabulary."""
    key_a, key_b = entry_key(a, tags[0], rule), entry_key(b, tags[1], rule)
    has_a, has_b = key_a in vocab.entries, key_b in vocab.entries
    if key_a == key_b:
        return "shared" if has_a else "absent"
    if has_a and has_b:
        return "separate"
    if has_a or has_b:
        return f"only-{tags[0] if has_a else tags[1]}"
    return "absent"


Status = Callable[[str, str], str]   # (spelling in language A, in B) -> shared | separate | only-<tag> | absent


def word_status(condition: ConditionSpec, vocab: VocabEntries, tags: Sequence[str]) -> Status:
    rule = sharing_rule(condition)
    return lambda a, b: vocab_status(a, b, tags, rule, vocab)


def _pairs(kind_pairs: Iterable[tuple[str, str, str]], tags: Sequence[str], train: Sequence[Mapping[str, int]],
           words: Sequence[int], class_of: Mapping[str, str], statuses: Sequence[Status],
           lexicons: Mapping[str, Lexicon], translations: Translations | None) -> tuple[HomographPair, ...]:
    lex_a, lex_b = lexicons.get(tags[0]), lexicons.get(tags[1])
    rows = []
    for kind, a, b in kind_pairs:
        rows.append(HomographPair(
            kind, a, b, class_of[a], train[0][a], train[1][b],
            frequency_per_million(train[0][a], words[0]), frequency_per_million(train[1][b], words[1]),
            tuple(status(a, b) for status in statuses),
            lex_a.attests(a) if lex_a else None, lex_b.attests(b) if lex_b else None,
            translations.label(a, b) if translations else None))
    rows.sort(key=lambda r: (-r.combined_per_million, r.surface_a, r.surface_b))
    return tuple(rows)


def label_counts(rows: Sequence[HomographPair], translations: bool, lexicons: Mapping[str, Lexicon],
                 tags: Sequence[str]) -> dict[str, Any]:
    out: dict[str, Any] = {"count": len(rows)}
    if translations:
        out["translation_labels"] = {label: sum(1 for r in rows if r.translation == label)
                                     for label in TRANSLATION_LABELS}
    if lexicons:
        attested: dict[str, int] = {}
        if tags[0] in lexicons:
            attested[tags[0]] = sum(1 for r in rows if r.attested_a)
        if tags[1] in lexicons:
            attested[tags[1]] = sum(1 for r in rows if r.attested_b)
        if len(attested) == 2:
            attested["both"] = sum(1 for r in rows if r.attested_a and r.attested_b)
            attested["neither"] = sum(1 for r in rows if not r.attested_a and not r.attested_b)
        out["attested"] = attested
    return out


def pair_columns(tags: Sequence[str], conditions: Sequence[str], lexicon_tags: Iterable[str],
                 translations: bool) -> list[str]:
    """Column names of a pair record (JSON summary rows and TSV headers share them)."""
    a, b = tags
    columns = ["kind", f"surface_{a}", f"surface_{b}", "class", f"count_{a}", f"count_{b}",
               f"per_million_{a}", f"per_million_{b}", f"zipf_{a}", f"zipf_{b}", "log10_ratio"]
    columns += [f"in_{c}" for c in conditions]
    columns += [f"attested_{t}" for t in tags if t in set(lexicon_tags)]
    return columns + (["translation"] if translations else [])


def pair_record(row: HomographPair, tags: Sequence[str], conditions: Sequence[str]) -> dict[str, Any]:
    """A pair as a flat record with the columns of :func:`pair_columns`."""
    a, b = tags
    record: dict[str, Any] = {"kind": row.kind, f"surface_{a}": row.surface_a, f"surface_{b}": row.surface_b,
                              "class": row.cls, f"count_{a}": row.count_a, f"count_{b}": row.count_b,
                              f"per_million_{a}": row.per_million_a, f"per_million_{b}": row.per_million_b,
                              f"zipf_{a}": row.zipf_a, f"zipf_{b}": row.zipf_b, "log10_ratio": row.log10_ratio}
    record.update({f"in_{c}": s for c, s in zip(conditions, row.in_vocab)})
    if row.attested_a is not None:
        record[f"attested_{a}"] = row.attested_a
    if row.attested_b is not None:
        record[f"attested_{b}"] = row.attested_b
    if row.translation is not None:
        record["translation"] = row.translation
    return record


# --- the whole audit ------------------------------------------------------------------------------

@dataclass(frozen=True)
class LanguageText:
    """What the pass over running text gives for one language."""

    sentences: dict[str, int]             # per split
    growth: list[tuple[int, int]]         # V(N) over the training text, in corpus order


@dataclass(frozen=True)
class AuditResult:
    out: Path
    tags: tuple[str, ...]
    conditions: tuple[str, ...]
    summary: dict[str, Any]
    homographs: tuple[HomographPair, ...]
    variants: tuple[HomographPair, ...]
    near: tuple[HomographPair, ...]
    lexicon_tags: tuple[str, ...]
    has_translations: bool
    rank_frequency: dict[str, np.ndarray] = field(repr=False)


def parse_lexicon_options(values: Iterable[str], tags: Sequence[str] | None = None) -> dict[str, Path]:
    """``TAG=FILE`` strings as given to ``--lexicon`` -> {tag: path}.

    >>> parse_lexicon_options(["en=/usr/share/dict/american-english"])
    {'en': PosixPath('/usr/share/dict/american-english')}
    """
    out: dict[str, Path] = {}
    for value in values:
        tag, sep, path = value.partition("=")
        if not sep or not tag or not path:
            raise BivocabError(f"--lexicon {value!r}: expected TAG=FILE, e.g. en=/usr/share/dict/american-english")
        if tags is not None and tag not in tags:
            raise BivocabError(f"--lexicon {value!r}: '{tag}' is not a language of this build ({', '.join(tags)})")
        if tag in out:
            raise BivocabError(f"--lexicon: language '{tag}' given twice")
        out[tag] = Path(path)
    return out


def _open_build(out: Path) -> dict[str, Any]:
    if not out.is_dir():
        raise BivocabError(f"{out}: not a directory (expected a build directory)")
    if (out / INCOMPLETE).exists():
        raise BivocabError(f"{out}: the build is incomplete (interrupted or still running); rebuild it first")
    manifest = read_manifest(out)
    if manifest is None:
        raise BivocabError(f"{out}: not a build directory (no {MANIFEST})")
    for key in ("recipe", "recipe_file", "inputs", "languages", "conditions"):
        if key not in manifest:
            raise BivocabError(f"{out / MANIFEST}: missing key '{key}'")
    if AUDIT_DIR in manifest["conditions"]:
        raise BivocabError(f"{out}: condition '{AUDIT_DIR}' uses the directory the audit writes to; "
                           "rename the condition to audit this build")
    return manifest


def _check_build_files(out: Path, manifest: dict[str, Any], paths: Iterable[str]) -> None:
    """The types and vocab files the audit reads must be the ones build.json lists."""
    hashes = {f["path"]: f["sha256"] for f in manifest.get("files", [])}
    for rel in paths:
        path = out / rel
        if not path.exists():
            raise InputError(f"{path}: missing from the build directory; rebuild it")
        if rel not in hashes or sha256_file(path) != hashes[rel]:
            raise InputError(f"{path}: changed since the build (sha256 differs from {MANIFEST}); rebuild it")


def _check_inputs(recipe: Recipe, manifest: dict[str, Any]) -> None:
    """The running text is re-read from the inputs: refuse if one changed since the build."""
    for entry in manifest["inputs"]:
        path = recipe.base_dir / entry["path"]
        try:
            digest = sha256_file(path)
        except FileNotFoundError:
            raise InputError(f"{entry['path']}: input of the build not found (needed for the running-text "
                             "statistics); restore it or rebuild") from None
        except OSError as exc:
            raise InputError(f"{entry['path']}: cannot read input: {exc.strerror or exc}") from None
        if digest != entry["sha256"]:
            raise InputError(f"{entry['path']}: changed since the build (sha256 differs from build.json); "
                             "rebuild before auditing")


def read_language_text(recipe: Recipe, tag: str, train_tokens: int) -> LanguageText:
    """Sentences per split and the growth curve of the training text, in corpus order."""
    sentences = {s: 0 for s in SPLITS}
    counted = 0

    def training_tokens() -> Iterable[str]:
        nonlocal counted
        for sentence in iter_sentences(recipe, SPLITS, lang=tag):
            sentences[sentence.split] += 1
            if sentence.split == TRAIN:
                tokens = segment(sentence.text)
                counted += len(tokens)
                yield from tokens

    growth = growth_curve(training_tokens(), train_tokens)
    if counted != train_tokens:
        raise InputError(f"{recipe.path}: the running text of '{tag}' has {counted:,} training tokens, the "
                         f"build's types file {train_tokens:,}; the build does not match its inputs: rebuild")
    return LanguageText(sentences, growth)


def language_summary(lang: LanguageTypes, counts: Mapping[str, int], text: LanguageText,
                     class_of: Mapping[str, str]) -> dict[str, Any]:
    """The statistics of one language's training text (key ``languages.<tag>`` of the summary)."""
    n_train = text.sentences[TRAIN]
    stats: dict[str, Any] = {"sentences": n_train, **class_statistics(counts, n_train)}
    by_class: dict[str, dict[str, int]] = {c: {} for c in TOKEN_CLASSES}
    for s, c in counts.items():
        by_class[class_of[s]][s] = c
    stats["by_class"] = {c: class_statistics(by_class[c], n_train) for c in TOKEN_CLASSES}
    stats["splits"] = {s: {"sentences": text.sentences[s], "tokens": int(lang.counts[:, i].sum())}
                       for i, s in enumerate(SPLITS)}
    heaps = fit_heaps(text.growth, stats["tokens"])
    stats["heaps"] = None if heaps is None else {
        "K": heaps.coefficient, "beta": heaps.exponent, "r_squared": heaps.r_squared,
        "points": heaps.points, "fit_from_tokens": heaps.x_min}
    zipf = fit_zipf(counts.values())
    stats["zipf"] = None if zipf is None else {
        "s": -zipf.exponent, "C": zipf.coefficient, "r_squared": zipf.r_squared,
        "points": zipf.points, "max_rank": zipf.x_max}
    stats["growth"] = [list(p) for p in text.growth]
    return stats


Progress = Callable[[str], None]


def _quiet(_: str) -> None:
    pass


def audit_build(out: str | os.PathLike[str], lexicons: Mapping[str, Path] | None = None,
                translations: Path | None = None, top: int = 20, progress: Progress = _quiet) -> AuditResult:
    """Compute every statistic of the audit for the build in ``out`` (nothing is written)."""
    out = Path(out)
    manifest = _open_build(out)
    recipe = recipe_from_manifest(manifest, out)
    tags = recipe.tags
    lexicons = dict(lexicons or {})
    for tag in lexicons:
        if tag not in tags:
            raise BivocabError(f"--lexicon {tag}=...: '{tag}' is not a language of this build ({', '.join(tags)})")

    def normalise(text: str) -> str:
        return normalise_text(text, recipe.clean)

    lexicon_data = {tag: read_lexicon(tag, path, normalise) for tag, path in lexicons.items()}
    translation_data = read_translations(translations, normalise) if translations is not None else None
    progress("checking inputs")
    _check_inputs(recipe, manifest)

    types_files = [manifest["languages"][tag]["types_file"] for tag in tags]
    vocab_files = [manifest["conditions"][c.name]["vocab"] for c in recipe.conditions]
    subword = [c.name for c in recipe.conditions if is_subword(manifest["conditions"][c.name])]
    model_files = [manifest["conditions"][n]["models"][t] for n in subword for t in tags]
    _check_build_files(out, manifest, [*types_files, *vocab_files, *model_files])
    languages = [read_types(out / path, tag) for path, tag in zip(types_files, tags)]
    train = [lang.counts_in(TRAIN) for lang in languages]
    class_of = {**languages[1].class_of(), **languages[0].class_of()}
    conditions = recipe.conditions
    vocabs = [read_vocab_entries(out / path) for path in vocab_files]

    summary: dict[str, Any] = {
        "build": {"name": recipe.name, "languages": list(tags), "statistics_split": TRAIN,
                  "build_json_sha256": sha256_file(out / MANIFEST)},
        "languages": {},
    }
    words = []
    for lang, counts in zip(languages, train):
        progress(f"running text {lang.tag}")
        text = read_language_text(recipe, lang.tag, sum(counts.values()))
        stats = language_summary(lang, counts, text, class_of)
        words.append(stats["by_class"][WORD]["tokens"] or stats["tokens"])
        summary["languages"][lang.tag] = stats

    progress("overlap and coverage")
    overlap = overlap_statistics(tags, train, class_of)
    shared = set(train[0]) & set(train[1])
    overlap["bands"] = {tag: frequency_bands(counts, shared) for tag, counts in zip(tags, train)}
    summary["overlap"] = overlap
    sizes = policy_sizes(tags, [set(t) for t in train], recipe.vocab)
    sizes.update({f"types_{tag}": len(t) for tag, t in zip(tags, train)})
    summary["policy_sizes"] = sizes

    processors = {n: load_processors(out, manifest["conditions"][n], tags) for n in subword}
    summary["conditions"] = {}
    statuses: list[Status] = []
    for c, v in zip(conditions, vocabs):
        if c.name in processors:
            # A subword condition has no word entries: no uncapped word-level size, no word cap,
            # and coverage counted on pieces (OOV = the unknown piece).
            summary["conditions"][c.name] = {
                "policy": c.policy, "units": manifest["conditions"][c.name]["units"], "size": v.size,
                "uncapped_size": None, "max_size": None, "min_count": None,
                "coverage": subword_coverage(out, recipe, c.name, manifest["conditions"][c.name],
                                             processors[c.name], top)}
            statuses.append(PieceSpelling(processors[c.name], tags).status)
        else:
            summary["conditions"][c.name] = {
                "policy": c.policy, "units": "word", "size": v.size,
                "uncapped_size": uncapped_size(c, tags, [set(t) for t in train]),
                "max_size": c.vocab.max_size, "min_count": c.vocab.min_count,
                "coverage": coverage(c, v, languages, top)}
            statuses.append(word_status(c, v, tags))
    if subword:
        progress("subword statistics")
        summary["subword"] = subword_statistics(out)

    progress("homographs")
    only_a, only_b = set(train[0]) - shared, set(train[1]) - shared
    common = (tags, train, words, class_of, statuses, lexicon_data, translation_data)
    homographs = _pairs((("exact", s, s) for s in shared), *common)
    variants = _pairs(((kind, a, b) for a, b, kind in spelling_variants(only_a, only_b)), *common)
    near_words = ({s for s in only_a if class_of[s] == WORD}, {s for s in only_b if class_of[s] == WORD})
    near = _pairs((("near", a, b) for a, b in near_homographs(*near_words)), *common)
    names = tuple(c.name for c in conditions)
    for key, rows in (("homographs", homographs), ("variants", variants), ("near_homographs", near)):
        section = label_counts(rows, translation_data is not None, lexicon_data, tags)
        if key == "variants":
            section["by_kind"] = {k: sum(1 for r in rows if r.kind == k) for k in (CASE, MARKS, CASE_AND_MARKS)}
        section["top"] = [pair_record(r, tags, names) for r in rows[:top]]
        summary[key] = section
    summary["inputs"] = {"lexicons": {t: l.path for t, l in lexicon_data.items()},
                         "translations": translation_data.path if translation_data else None}
    return AuditResult(out, tags, names, summary, homographs, variants, near,
                       tuple(t for t in tags if t in lexicon_data), translation_data is not None,
                       {tag: rank_frequency(t.values()) for tag, t in zip(tags, train)})


# --- writing --------------------------------------------------------------------------------------

def _cell(value: Any) -> str:
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:.6g}"
    return str(value)


def pairs_tsv(result: AuditResult, rows: Sequence[HomographPair], exact: bool) -> str:
    """homographs.tsv (``exact``: one ``surface`` column) or the variants / near-homographs TSV."""
    tags = result.tags
    header = pair_columns(tags, result.conditions, result.lexicon_tags, result.has_translations)
    if exact:
        header = ["surface"] + [h for h in header if h not in ("kind", f"surface_{tags[0]}", f"surface_{tags[1]}")]
    records = []
    for row in rows:
        record = pair_record(row, tags, result.conditions)
        record["surface"] = row.surface_a
        records.append([_cell(record[h]) for h in header])
    return tsv_text(header, records)


AUDIT_FILES = ("summary.json", "homographs.tsv", "variants.tsv", "near-homographs.tsv", "report.html")


def write_audit(result: AuditResult) -> Path:
    """Write ``DIR/audit/`` as a whole: files go to a temporary directory that replaces the old
    audit directory only when every file is complete."""
    from .htmlreport import render_report

    out = result.out
    target = out / AUDIT_DIR
    if target.exists() and (not target.is_dir() or {p.name for p in target.iterdir()} - set(AUDIT_FILES)):
        raise OutputError(f"{target}: holds files that are not an audit; move them away first")
    contents = {
        "summary.json": canonical_json(result.summary),
        "homographs.tsv": pairs_tsv(result, result.homographs, exact=True),
        "variants.tsv": pairs_tsv(result, result.variants, exact=False),
        "near-homographs.tsv": pairs_tsv(result, result.near, exact=False),
        "report.html": render_report(result),
    }
    tmp = out / f".{AUDIT_DIR}.tmp-{os.getpid()}"
    old = out / f".{AUDIT_DIR}.old-{os.getpid()}"
    try:
        shutil.rmtree(tmp, ignore_errors=True)
        tmp.mkdir()
        for name, text in contents.items():
            (tmp / name).write_text(text, encoding="utf-8")
        if target.exists():
            os.replace(target, old)
        os.replace(tmp, target)
    except OSError as exc:
        raise OutputError(f"{target}: cannot write the audit: {exc.strerror or exc}") from None
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
        shutil.rmtree(old, ignore_errors=True)
    return target


def run_audit(out: str | os.PathLike[str], lexicons: Mapping[str, Path] | None = None,
              translations: Path | None = None, top: int = 20, progress: Progress = _quiet) -> AuditResult:
    """Audit the build in ``out`` and write ``out/audit/``, holding the build lock meanwhile."""
    out = Path(out)
    if not (out / MANIFEST).exists():
        _open_build(out)  # the clear error, before the lock file would be created
    with build_lock(out):
        # Left by an audit that was killed; under the lock no other audit is writing them.
        for stale in [*out.glob(f".{AUDIT_DIR}.tmp-*"), *out.glob(f".{AUDIT_DIR}.old-*")]:
            shutil.rmtree(stale, ignore_errors=True)
        result = audit_build(out, lexicons, translations, top, progress)
        progress("report")
        write_audit(result)
    return result


# --- terminal summary -----------------------------------------------------------------------------

def _pct(value: float | None) -> str:
    return "-" if value is None else f"{100 * value:.2f}%"


def _table(rows: list[list[str]], left: int = 1) -> list[str]:
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    lines = []
    for j, row in enumerate(rows):
        lines.append("  ".join(c.ljust(w) if k < left else c.rjust(w)
                               for k, (c, w) in enumerate(zip(row, widths))).rstrip())
        if j == 0:
            lines.append("  ".join("-" * w for w in widths))
    return lines


def audit_text(result: AuditResult) -> str:
    """The readable terminal summary of an audit."""
    s, tags = result.summary, result.tags
    lines = [f"audit of build '{s['build']['name']}' in {result.out} (statistics of the {TRAIN} split)", ""]
    rows = [["language", "sentences", "tokens", "types", "hapax", "TTR", "tokens/sent", "Heaps K", "beta", "Zipf s"]]
    for tag in tags:
        L = s["languages"][tag]
        h, z = L["heaps"], L["zipf"]
        rows.append([tag, f"{L['sentences']:,}", f"{L['tokens']:,}", f"{L['types']:,}", _pct(L["hapax_share"]),
                     f"{L['type_token_ratio']:.4f}" if L["type_token_ratio"] is not None else "-",
                     f"{L['mean_sentence_length']:.2f}" if L["mean_sentence_length"] is not None else "-",
                     f"{h['K']:.1f}" if h else "-", f"{h['beta']:.3f}" if h else "-", f"{z['s']:.3f}" if z else "-"])
    lines += _table(rows)
    o = s["overlap"]
    lines += ["", f"overlap: {o['shared_types']['total']:,} shared spellings of {o['union_types']['total']:,} "
              f"(Jaccard {o['jaccard']['total']:.4f}); shared spellings are "
              + ", ".join(f"{_pct(o['shared_token_share'][t]['total'])} of {t} tokens" for t in tags)]
    lines.append("  by class: " + ", ".join(f"{c} {o['shared_types'][c]:,}" for c in TOKEN_CLASSES))
    p = s["policy_sizes"]
    lines.append(f"uncapped vocabulary size: shared {p['shared']:,}, word-tagged {p['word-tagged']:,}, "
                 f"fully-tagged {p['fully-tagged']:,} ({p['specials']} specials each); "
                 f"sharing saves {p['saved_by_sharing']:,} entries")
    lines += ["", "coverage: share of tokens out of vocabulary"]
    rows = [["condition", "policy", "size", *[f"{t} {sp}" for t in tags for sp in SPLITS]]]
    for name in result.conditions:
        c = s["conditions"][name]
        rows.append([name, c["policy"], f"{c['size']:,}",
                     *[_pct(c["coverage"][t][sp]["oov_share"]) for t in tags for sp in SPLITS]])
    lines += _table(rows, left=2)
    if "subword" in s:
        lines += ["  (subword conditions: share of pieces that are the unknown piece)", "",
                  f"subword conditions ({s['subword']['split']} split; fertility = pieces per word; parity on "
                  "comparable, not parallel, text):"]
        lines += _table([subword_headers(tags), *subword_rows(s["subword"], tags)], left=3)
    h, v, n = s["homographs"], s["variants"], s["near_homographs"]
    lines += ["", f"homographs: {h['count']:,} exact, {v['count']:,} case/diacritic variants, "
              f"{n['count']:,} near-homographs (edit distance 1)"]
    if "translation_labels" in h:
        lines.append("  translation labels (exact): " + ", ".join(f"{k} {c:,}" for k, c in h["translation_labels"].items()))
    if "attested" in h:
        lines.append("  attested in word lists (exact): " + ", ".join(f"{k} {c:,}" for k, c in h["attested"].items()))
    top = [r for r in result.homographs if r.cls == WORD][:10]
    if top:
        lines.append("  most frequent words: " + ", ".join(
            r.surface_a + (f" ({r.translation})" if r.translation else "") for r in top))
    lines += ["", f"wrote {result.out / AUDIT_DIR}/: {', '.join(AUDIT_FILES)}"]
    return "\n".join(lines)
