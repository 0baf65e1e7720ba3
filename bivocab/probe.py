"""Probe: encode experimental test items under every condition of a build and check them.

Reads an items file (CSV or TSV, see docs/probe.md), encodes each item with every condition's
vocabulary (word-level lookup, or the exported sentencepiece model of a subword condition), looks up the critical words' training frequencies in both languages, and scans the
training split once for items that leaked into it (whole sentences and word n-grams).
"""

from __future__ import annotations

import contextlib
import csv
import dataclasses
import difflib
import hashlib
import io
import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Sequence

import sentencepiece as spm

from .build import INCOMPLETE
from .clean import normalise_text
from .corpus import iter_sentences
from .errors import InputError, OutputError, where
from .manifest import MANIFEST, atomic_write_text, build_lock, canonical_json, read_manifest, sha256_file
from .recipe import CleanSpec, ConditionSpec, Recipe, recipe_from_manifest
from .defaults import DEFAULT_NGRAM
from .segment import NUMBER, SPECIAL, WORD, segment, token_class
from .sources import file_sha256
from .subword import word_spans
from .vocab import tsv_text

NGRAM_CLASSES: tuple[str, ...] = (WORD, NUMBER)   # the token classes that make up word n-grams
MAX_HITS_PER_ITEM = 20                            # locations listed per item and kind (all are counted)
PROBE_DIR = "probe"
SUMMARY_FILE = "summary.json"

REQUIRED_COLUMNS: tuple[str, ...] = ("id", "lang", "sentence", "critical")
OPTIONAL_COLUMNS: tuple[str, ...] = ("occurrence",)
# Columns of the TSV view; a carried-through column may not reuse one of these names.
TSV_COLUMNS: tuple[str, ...] = ("id", "lang", "sentence", "tokens", "vocab_tokens", "ids",
                                "critical_positions", "oov")
# Further columns of a subword condition's TSV view (also reserved).
SUBWORD_TSV_COLUMNS: tuple[str, ...] = ("critical_span", "critical_aligned", "byte_fallback")


# --- items -------------------------------------------------------------------------------------

@dataclass(frozen=True)
class Item:
    """One test item as read from the items file, normalised and segmented like the corpus."""

    id: str
    lang: str                           # the build's spelling of the tag
    row: int                            # 1-based line of the row in the items file
    text: str                           # normalised sentence
    tokens: tuple[str, ...]             # segmented sentence
    critical: str                       # normalised critical word(s)
    span: tuple[int, int]               # critical tokens: tokens[span[0]:span[1]]
    columns: tuple[tuple[str, str], ...]  # carried-through columns, in file order, unchanged

    @property
    def critical_tokens(self) -> tuple[str, ...]:
        return self.tokens[self.span[0]:self.span[1]]


def _decode_items(data: bytes, path: str) -> str:
    if data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        raise InputError(f"{where(path, line)}: not valid UTF-8 (byte value 0x{data[exc.start]:02x}); "
                         f"save the items file as UTF-8") from None


def _is_tsv(path: str, text: str) -> bool:
    suffix = Path(path).suffix.lower()
    if suffix in (".tsv", ".tab"):
        return True
    if suffix == ".csv":
        return False
    return "\t" in text.split("\n", 1)[0]


def _rows(text: str, path: str, tsv: bool) -> Iterable[tuple[int, list[str]]]:
    """Non-blank records with the line each one starts on.  TSV uses CSV quoting too (as the
    build's own TSV files and spreadsheet exports do): a field that starts with a double quote
    is quoted whole, with inner quotes doubled."""
    reader = csv.reader(io.StringIO(text, newline=""), delimiter="\t" if tsv else ",", strict=True)
    start = 1
    while True:
        try:
            record = next(reader)
        except StopIteration:
            return
        except csv.Error as exc:
            raise InputError(f"{where(path, start)}: cannot parse the row ({exc}); a field that starts "
                             f"with a double quote must be quoted whole, inner quotes doubled") from None
        if any(field.strip() for field in record):
            yield start, record
        start = reader.line_num + 1


def _find_runs(tokens: tuple[str, ...], wanted: tuple[str, ...]) -> list[int]:
    n = len(wanted)
    return [i for i in range(len(tokens) - n + 1) if tokens[i:i + n] == wanted]


def read_items(path: str | Path, tags: tuple[str, ...], clean: CleanSpec) -> tuple[Item, ...]:
    """Read, validate, normalise and segment an items file for a build with languages ``tags``.

    Raises :class:`InputError` naming the file and row for every problem (see docs/probe.md)."""
    path = str(path)
    try:
        data = Path(path).read_bytes()
    except FileNotFoundError:
        raise InputError(f"{path}: items file not found") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read items file: {exc.strerror}") from None
    text = _decode_items(data, path)
    rows = _rows(text, path, _is_tsv(path, text))
    expected = ", ".join(REQUIRED_COLUMNS)
    first = next(rows, None)
    if first is None:
        raise InputError(f"{where(path, 1)}: the items file is empty (expected a header row with "
                         f"the columns {expected})")
    header_line, header = first
    header = [name.strip() for name in header]
    for index, name in enumerate(header):
        if not name:
            raise InputError(f"{where(path, header_line)}: column {index + 1} of the header has no name")
        if header.index(name) != index:
            raise InputError(f"{where(path, header_line)}: column '{name}' appears twice in the header")
    missing = [name for name in REQUIRED_COLUMNS if name not in header]
    if missing:
        raise InputError(f"{where(path, header_line)}: missing column '{missing[0]}' (the header has "
                         f"{', '.join(header)}; required: {expected})")
    carried = [name for name in header if name not in REQUIRED_COLUMNS + OPTIONAL_COLUMNS]
    reserved = [name for name in carried if name in TSV_COLUMNS + SUBWORD_TSV_COLUMNS]
    if reserved:
        raise InputError(f"{where(path, header_line)}: column '{reserved[0]}' is a name the probe output "
                         f"uses; rename it")
    tag_of = {tag.lower(): tag for tag in tags}   # BCP 47 tags compare case-insensitively
    seen: dict[str, int] = {}
    items: list[Item] = []
    for line, record in rows:
        place = where(path, line)
        if len(record) != len(header):
            raise InputError(f"{place}: the row has {len(record)} fields, the header has {len(header)}")
        values = dict(zip(header, record))
        item_id = values["id"].strip()
        if not item_id:
            raise InputError(f"{place}: empty id")
        if item_id in seen:
            raise InputError(f"{place}: item '{item_id}': duplicate id (first used on line {seen[item_id]})")
        seen[item_id] = line
        lang = tag_of.get(values["lang"].strip().lower())
        if lang is None:
            raise InputError(f"{place}: item '{item_id}': unknown language tag '{values['lang'].strip()}' "
                             f"(this build has {', '.join(tags)})")
        sentence = normalise_text(values["sentence"], clean)
        tokens = tuple(segment(sentence))
        if not tokens:
            raise InputError(f"{place}: item '{item_id}': empty sentence")
        critical = normalise_text(values["critical"], clean)
        wanted = tuple(segment(critical))
        if not wanted:
            raise InputError(f"{place}: item '{item_id}': empty critical word")
        starts = _find_runs(tokens, wanted)
        if not starts:
            raise InputError(f"{place}: item '{item_id}': critical word '{critical}' not found in the "
                             f"sentence (tokens: {' '.join(tokens)})")
        start = _choose_occurrence(values.get("occurrence", "").strip(), starts, place, item_id, critical)
        items.append(Item(item_id, lang, line, sentence, tokens, critical, (start, start + len(wanted)),
                          tuple((name, values[name]) for name in carried)))
    if not items:
        raise InputError(f"{where(path, header_line)}: the items file has a header but no items")
    return tuple(items)


def _choose_occurrence(raw: str, starts: list[int], place: str, item_id: str, critical: str) -> int:
    positions = ", ".join(str(s + 1) for s in starts)
    if not raw:
        if len(starts) > 1:
            raise InputError(f"{place}: item '{item_id}': critical word '{critical}' occurs {len(starts)} "
                             f"times (at tokens {positions}); say which in the occurrence column")
        return starts[0]
    if not raw.isdigit() or int(raw) < 1:
        raise InputError(f"{place}: item '{item_id}': occurrence must be a whole number >= 1, got '{raw}'")
    if int(raw) > len(starts):
        raise InputError(f"{place}: item '{item_id}': occurrence {raw} asked for, but critical word "
                         f"'{critical}' occurs {len(starts)} time(s) (at tokens {positions})")
    return starts[int(raw) - 1]


# --- the build ---------------------------------------------------------------------------------

class _BuildFiles:
    """Reads files of a finished build, checking each against its sha256 in build.json."""

    def __init__(self, out: Path, manifest: dict[str, Any]):
        self.out = out
        self.hashes = {f["path"]: f["sha256"] for f in manifest.get("files", [])}

    def read_text(self, rel: str) -> str:
        return self.read_bytes(rel).decode("utf-8")

    def read_bytes(self, rel: str) -> bytes:
        path = self.out / rel
        expected = self.hashes.get(rel)
        if expected is None:
            raise OutputError(f"{path}: not listed in {self.out / MANIFEST}; is this build complete?")
        try:
            data = path.read_bytes()
        except FileNotFoundError:
            raise OutputError(f"{path}: missing from the build; rebuild it") from None
        except OSError as exc:
            raise OutputError(f"{path}: cannot read: {exc.strerror or exc}") from None
        if hashlib.sha256(data).hexdigest() != expected:
            raise OutputError(f"{path}: changed since the build (sha256 differs from {MANIFEST}); rebuild it")
        return data

    def read_tsv(self, rel: str, header: tuple[str, ...]) -> list[list[str]]:
        """Rows of a build TSV (tab-separated with CSV quoting, as vocab.tsv and types/*.tsv are
        written), after checking that the header starts with ``header``."""
        rows = list(csv.reader(io.StringIO(self.read_text(rel), newline=""), delimiter="\t"))
        if not rows or tuple(rows[0][:len(header)]) != header:
            raise OutputError(f"{self.out / rel}:1: expected a header starting {' '.join(header)}")
        return rows[1:]


@dataclass(frozen=True)
class ConditionLexicon:
    """What encoding needs from one condition's vocab.tsv."""

    name: str
    tokens: tuple[str, ...]                 # exported token string by id
    ids: tuple[dict[str, int], ...]         # per language (recipe order): surface -> id
    unk_ids: tuple[int, ...]
    eos_ids: tuple[int, ...] | None

    def encode(self, lang_index: int, tokens: tuple[str, ...]) -> tuple[list[int], list[bool]]:
        """Ids of a segmented sentence as the shards hold it (end-of-sentence id last, when the
        condition has one) and an OOV flag per id."""
        lookup, unk = self.ids[lang_index], self.unk_ids[lang_index]
        ids = [lookup.get(t, unk) for t in tokens]
        oov = [i == unk for i in ids]
        if self.eos_ids is not None:
            ids.append(self.eos_ids[lang_index])
            oov.append(False)
        return ids, oov


@dataclass(frozen=True)
class SubwordLexicon:
    """What encoding needs from a subword condition: its exported sentencepiece model per
    language (piece i of the model is vocab.tsv entry i, docs/subword.md) and vocab.tsv's tokens."""

    name: str
    units: str
    tokens: tuple[str, ...]                 # exported token string by id
    processors: tuple[spm.SentencePieceProcessor, ...]   # per language (recipe order)
    eos_ids: tuple[int, ...] | None


def _vocab_rows(files: _BuildFiles, manifest_entry: dict[str, Any]) -> list[list[str]]:
    return files.read_tsv(manifest_entry["vocab"], ("id", "token", "surface", "lang", "class", "count"))


def _special_ids(files: _BuildFiles, condition: ConditionSpec, tags: tuple[str, ...], rel: str,
                 rows: list[list[str]]) -> tuple[tuple[int, ...], tuple[int, ...] | None]:
    """Unknown and end-of-sentence ids per language, as the condition's specials choose them."""
    specials = {token: int(entry_id) for entry_id, token, _, _, cls, *_ in rows if cls == SPECIAL}
    spec = condition.vocab
    unk_names = ["<unk>"] * len(tags) if spec.unknown == "shared" else [f"<unk:{t}>" for t in tags]
    eos_names = (None if spec.eos == "none" else
                 ["<eos>"] * len(tags) if spec.eos == "shared" else [f"<eos:{t}>" for t in tags])
    for name in unk_names + (eos_names or []):
        if name not in specials:
            raise OutputError(f"{files.out / rel}: special token {name} is missing")
    return (tuple(specials[n] for n in unk_names),
            None if eos_names is None else tuple(specials[n] for n in eos_names))


def load_lexicon(files: _BuildFiles, condition: ConditionSpec, tags: tuple[str, ...],
                 manifest_entry: dict[str, Any]) -> ConditionLexicon | SubwordLexicon:
    """Read what encoding needs: vocab.tsv for a word-level condition, vocab.tsv and the exported
    sentencepiece models for a subword condition."""
    rel = manifest_entry["vocab"]
    if manifest_entry.get("units", "word") != "word":
        rows = _vocab_rows(files, manifest_entry)
        _, eos_ids = _special_ids(files, condition, tags, rel, rows)
        processors = []
        for tag in tags:
            model_rel = manifest_entry["models"][tag]
            processor = spm.SentencePieceProcessor()
            try:
                processor.LoadFromSerializedProto(files.read_bytes(model_rel))
            except RuntimeError as exc:
                raise OutputError(f"{files.out / model_rel}: not a sentencepiece model ({exc})") from None
            if processor.get_piece_size() != len(rows):
                raise OutputError(f"{files.out / model_rel}: {processor.get_piece_size()} pieces, but "
                                  f"{files.out / rel} has {len(rows)} entries; rebuild")
            processors.append(processor)
        return SubwordLexicon(condition.name, manifest_entry["units"], tuple(row[1] for row in rows),
                              tuple(processors), eos_ids)
    for tag in tags:
        tok_rel = manifest_entry["tokenizers"][tag]
        model = json.loads(files.read_text(tok_rel)).get("model", {}).get("type")
        if model != "WordLevel":
            raise OutputError(f"{files.out / tok_rel}: condition '{condition.name}' is recorded as word-level "
                              f"but its tokenizer uses a {model} model; rebuild")
    rows = _vocab_rows(files, manifest_entry)
    tokens: list[str] = []
    ids: list[dict[str, int]] = [{} for _ in tags]
    for entry_id, token, surface, lang, cls, *_ in rows:
        tokens.append(token)
        if cls == SPECIAL:
            continue
        for li, tag in enumerate(tags):
            if lang in ("*", tag):
                ids[li][surface] = int(entry_id)
    unk_ids, eos_ids = _special_ids(files, condition, tags, rel, rows)
    return ConditionLexicon(condition.name, tuple(tokens), tuple(ids), unk_ids, eos_ids)


# --- frequencies -------------------------------------------------------------------------------

def frequency_per_million(count: int, total: int) -> float:
    """Occurrences per million tokens.

    >>> frequency_per_million(3, 1_500_000)
    2.0
    """
    return count * 1_000_000 / total if total else 0.0


def zipf_value(per_million: float) -> float | None:
    """Zipf scale of van Heuven et al. (2014): log10(frequency per million words) + 3;
    undefined (None) for a word that does not occur.

    >>> zipf_value(1.0), zipf_value(1000.0), zipf_value(0.0)
    (3.0, 6.0, None)
    """
    return math.log10(per_million) + 3 if per_million > 0 else None


@dataclass(frozen=True)
class Frequency:
    lang: str
    count: int              # occurrences in that language's training split
    per_million: float      # per million word tokens of that training split
    zipf: float | None


@dataclass(frozen=True)
class CriticalWord:
    item: str
    lang: str
    surface: str
    position: int           # 0-based token position in the item's sentence
    own: Frequency
    other: Frequency
    homograph: bool         # the spelling occurs in the training text of both languages


def training_counts(files: _BuildFiles, manifest: dict[str, Any], tag: str,
                    wanted: set[str]) -> tuple[dict[str, int], int]:
    """Training counts of the ``wanted`` surfaces in one language, and that language's number
    of word tokens in the training split (the per-million denominator)."""
    rel = manifest["languages"][tag]["types_file"]
    counts: dict[str, int] = {}
    words = 0
    for surface, cls, train, *_ in files.read_tsv(rel, ("surface", "class", "count_train")):
        count = int(train)
        if cls == WORD:
            words += count
        if surface in wanted:
            counts[surface] = count
    return counts, words


def critical_frequencies(items: tuple[Item, ...], tags: tuple[str, ...], files: _BuildFiles,
                         manifest: dict[str, Any]) -> tuple[CriticalWord, ...]:
    wanted = {t for item in items for t in item.critical_tokens}
    tables = {tag: training_counts(files, manifest, tag, wanted) for tag in tags}

    def frequency(tag: str, surface: str) -> Frequency:
        counts, total = tables[tag]
        count = counts.get(surface, 0)
        per_million = frequency_per_million(count, total)
        return Frequency(tag, count, per_million, zipf_value(per_million))

    out = []
    for item in items:
        other_tag = next(t for t in tags if t != item.lang)
        for position in range(*item.span):
            surface = item.tokens[position]
            own, other = frequency(item.lang, surface), frequency(other_tag, surface)
            out.append(CriticalWord(item.id, item.lang, surface, position, own, other,
                                    own.count > 0 and other.count > 0))
    return tuple(out)


# --- contamination -----------------------------------------------------------------------------

def ngram_words(tokens: Iterable[str]) -> list[str]:
    """The tokens that make up word n-grams: words and numbers, case-folded; punctuation and
    symbols are left out, so they neither hide nor create an overlap.

    >>> ngram_words(["The", "ferry", ",", "at", "7", "€", "!"])
    ['the', 'ferry', 'at', '7']
    """
    return [t.casefold() for t in tokens if token_class(t) in NGRAM_CLASSES]


class _ChunkWords:
    """``ngram_words(segment(text))`` computed per space-separated chunk with a cache, as the
    build's scan segments: a corpus repeats its chunks, so most are segmented once."""

    LIMIT = 2_000_000

    def __init__(self) -> None:
        self.cache: dict[str, list[str]] = {}

    def __call__(self, text: str) -> list[str]:
        out: list[str] = []
        cache = self.cache
        for chunk in text.split(" "):
            words = cache.get(chunk)
            if words is None:
                if len(cache) >= self.LIMIT:
                    cache.clear()
                words = cache[chunk] = ngram_words(segment(chunk))
            out += words
        return out


def longest_shared_run(a: list[str], b: list[str]) -> tuple[int, int]:
    """Start in ``b`` and length of the longest run of words that ``a`` and ``b`` share.

    >>> longest_shared_run("a b c d".split(), "x b c d y b".split())
    (1, 3)
    """
    match = difflib.SequenceMatcher(None, a, b, autojunk=False).find_longest_match(0, len(a), 0, len(b))
    return match.b, match.size


@dataclass(frozen=True)
class Hit:
    kind: str               # "sentence": the whole normalised sentence; "ngram": a shared word n-gram
    path: str               # training input as recorded in build.json
    line: int
    words: int              # length of the longest run of n-gram words shared with that line
    text: str               # the training sentence, or that longest shared run (case-folded words)


@dataclass(frozen=True)
class Contamination:
    item: str
    lang: str
    sentence_hits: int
    ngram_hits: int         # training lines sharing an n-gram (lines with a sentence hit not counted)
    hits: tuple[Hit, ...]   # up to MAX_HITS_PER_ITEM of each kind, in corpus order


def scan_contamination(recipe: Recipe, items: tuple[Item, ...], n: int) -> tuple[Contamination, ...]:
    """Read the training split once; find items equal to a training sentence and items sharing
    a word n-gram of length ``n`` with a training sentence (n-grams never cross sentences)."""
    words_of = _ChunkWords()   # items and training text get their words the same way
    by_text: dict[str, list[int]] = {}
    by_gram: dict[tuple[str, ...], list[int]] = {}
    item_words = [words_of(item.text) for item in items]
    for index, item in enumerate(items):
        by_text.setdefault(item.text, []).append(index)
        words = item_words[index]
        for start in range(len(words) - n + 1):
            owners = by_gram.setdefault(tuple(words[start:start + n]), [])
            if not owners or owners[-1] != index:
                owners.append(index)
    first_words = {gram[0] for gram in by_gram}
    sentence_hits = [0] * len(items)
    gram_hits = [0] * len(items)
    hits: list[list[Hit]] = [[] for _ in items]
    for sentence in iter_sentences(recipe, splits=("train",)):
        whole = by_text.get(sentence.text, ())
        for index in whole:
            sentence_hits[index] += 1
            if sentence_hits[index] <= MAX_HITS_PER_ITEM:
                hits[index].append(Hit("sentence", sentence.path, sentence.line, len(item_words[index]),
                                       sentence.text))
        if not by_gram:
            continue
        words = words_of(sentence.text)
        found: set[int] = set(whole)
        for start in range(len(words) - n + 1):
            if words[start] not in first_words:
                continue
            gram = tuple(words[start:start + n])
            for index in by_gram.get(gram, ()):
                if index in found:
                    continue
                found.add(index)
                gram_hits[index] += 1
                if gram_hits[index] <= MAX_HITS_PER_ITEM:
                    at, size = longest_shared_run(item_words[index], words)
                    hits[index].append(Hit("ngram", sentence.path, sentence.line, size,
                                           " ".join(words[at:at + size])))
    return tuple(Contamination(item.id, item.lang, sentence_hits[i], gram_hits[i], tuple(hits[i]))
                 for i, item in enumerate(items) if sentence_hits[i] or gram_hits[i])


def _check_inputs_unchanged(recipe: Recipe, manifest: dict[str, Any]) -> None:
    """The contamination scan names lines: refuse to scan inputs that changed since the build."""
    base = recipe.base_dir
    for entry in manifest["inputs"]:
        path = base / entry["path"]
        try:
            digest = file_sha256(path)
        except OSError as exc:
            raise InputError(f"{entry['path']}: cannot read training input: {exc.strerror or exc}") from None
        if digest != entry["sha256"]:
            raise InputError(f"{entry['path']}: changed since the build (sha256 differs from {MANIFEST}); "
                             f"rebuild before probing")


# --- the whole probe ---------------------------------------------------------------------------

@dataclass(frozen=True)
class SubwordDetail:
    """What a subword condition adds to an encoded item."""

    units: str                          # unigram | bpe
    critical_span: tuple[int, int]      # pieces ids[start:end] cover the critical word
    critical_aligned: bool              # those pieces hold nothing but the critical word (and a leading ▁)
    byte_fallback: tuple[bool, ...]     # per id: a UTF-8 byte piece (a character without a piece)


@dataclass(frozen=True)
class EncodedItem:
    item: Item
    ids: tuple[int, ...]
    tokens: tuple[str, ...]             # per id: the word, or the piece as in the model; <eos> by name
    vocab_tokens: tuple[str, ...]       # exported token string of each id
    oov: tuple[bool, ...]               # per id: mapped to the unknown token
    critical_positions: tuple[int, ...]  # 0-based indices into ids
    subword: SubwordDetail | None = None

    @property
    def oov_tokens(self) -> tuple[str, ...]:
        return tuple(t for t, flag in zip(self.tokens, self.oov) if flag)

    @property
    def critical_pieces(self) -> tuple[str, ...]:
        return tuple(self.tokens[p] for p in self.critical_positions)

    @property
    def critical_oov(self) -> bool:
        return any(self.oov[p] for p in self.critical_positions)


@dataclass(frozen=True)
class ProbeResult:
    out: Path
    items_path: str
    items_sha256: str
    tags: tuple[str, ...]
    ngram: int
    items: tuple[Item, ...]
    encoded: dict[str, tuple[EncodedItem, ...]]   # condition -> one per item, in item order
    critical: tuple[CriticalWord, ...]
    contamination: tuple[Contamination, ...]
    files: tuple[str, ...]                        # written, relative to the build directory

    @property
    def critical_oov_items(self) -> tuple[str, ...]:
        return tuple(item.id for i, item in enumerate(self.items)
                     if any(enc[i].critical_oov for enc in self.encoded.values()))

    @property
    def subword_conditions(self) -> tuple[str, ...]:
        return tuple(c for c, enc in self.encoded.items() if enc and enc[0].subword is not None)

    @property
    def failing_items(self) -> tuple[str, ...]:
        """Items that fail ``--strict``: an OOV critical word in some condition, or contaminated."""
        bad = set(self.critical_oov_items) | {c.item for c in self.contamination}
        return tuple(item.id for item in self.items if item.id in bad)


def critical_piece_span(text: str, span: tuple[int, int],
                        pieces: Sequence[tuple[int, int]]) -> tuple[tuple[int, int], bool]:
    """The pieces covering tokens ``span`` of ``text``, as (start, end) piece positions, and
    whether they hold nothing else but a leading boundary space.  ``pieces`` are sentencepiece's
    (begin, end) UTF-8 byte offsets; a zero-width piece (a leading byte of a byte-fallback
    character) covers the character at its offset.

    >>> critical_piece_span("Die Fähre legt", (1, 2), [(0, 3), (3, 10), (10, 15)])
    ((1, 2), True)
    >>> critical_piece_span("Kell-Brücke", (2, 3), [(0, 4), (4, 7), (7, 12)])
    ((1, 3), False)
    """
    words = word_spans(text)
    begin, end = words[span[0]][0], words[span[1] - 1][1]
    covering = [k for k, (b, e) in enumerate(pieces) if (b < end and e > begin if e > b else begin <= b < end)]
    first, last = covering[0], covering[-1]
    lead = pieces[first][0]
    aligned = pieces[last][1] == end and not text.encode("utf-8")[lead:begin].strip()
    return (first, last + 1), aligned


def encode_subword_item(item: Item, lexicon: SubwordLexicon, lang_index: int) -> EncodedItem:
    """Encode an item with its language's exported sentencepiece model, as the build encoded
    the corpus: ids of the normalised sentence, then the end-of-sentence id when there is one."""
    processor = lexicon.processors[lang_index]
    proto = processor.encode(item.text, out_type="proto")
    ids = [p.id for p in proto.pieces]
    tokens = [p.piece for p in proto.pieces]
    span, aligned = critical_piece_span(item.text, item.span, [(p.begin, p.end) for p in proto.pieces])
    oov = [processor.is_unknown(i) for i in ids]
    byte = [processor.is_byte(i) for i in ids]
    if lexicon.eos_ids is not None:
        ids.append(lexicon.eos_ids[lang_index])
        tokens.append(lexicon.tokens[ids[-1]])
        oov.append(False)
        byte.append(False)
    return EncodedItem(item, tuple(ids), tuple(tokens), tuple(lexicon.tokens[i] for i in ids), tuple(oov),
                       tuple(range(*span)), SubwordDetail(lexicon.units, span, aligned, tuple(byte)))


def encode_items(items: tuple[Item, ...], lexicon: ConditionLexicon | SubwordLexicon,
                 tags: tuple[str, ...]) -> tuple[EncodedItem, ...]:
    out = []
    for item in items:
        li = tags.index(item.lang)
        if isinstance(lexicon, SubwordLexicon):
            out.append(encode_subword_item(item, lexicon, li))
            continue
        ids, oov = lexicon.encode(li, item.tokens)
        vocab_tokens = tuple(lexicon.tokens[i] for i in ids)
        # The end-of-sentence token (when the condition has one) has no surface: show its token string.
        out.append(EncodedItem(item, tuple(ids), item.tokens + vocab_tokens[len(item.tokens):], vocab_tokens,
                               tuple(oov), tuple(range(*item.span))))
    return tuple(out)


def probe(out: str | Path, items_path: str | Path, ngram: int = DEFAULT_NGRAM) -> ProbeResult:
    """Encode the items under every condition of the build in ``out``, check them, and write
    ``out/probe/<condition>.jsonl`` and ``.tsv`` plus ``out/probe/summary.json``."""
    out = Path(out)
    if ngram < 1:
        raise InputError(f"n-gram length must be >= 1, got {ngram}")
    manifest = read_manifest(out)
    if manifest is None or (out / INCOMPLETE).exists():
        raise OutputError(f"{out}: not a finished bivocab build (no {MANIFEST}); build it first")
    try:
        with build_lock(out):
            return _write_outputs(_analyse(out, manifest, items_path, ngram))
    except OSError as exc:
        raise OutputError(f"{out / PROBE_DIR}: cannot write the probe outputs: {exc.strerror or exc}") from None


def _analyse(out: Path, manifest: dict[str, Any], items_path: str | Path, ngram: int) -> ProbeResult:
    recipe = recipe_from_manifest(manifest, out)
    tags = recipe.tags
    items = read_items(items_path, tags, recipe.clean)
    files = _BuildFiles(out, manifest)
    encoded = {cond.name: encode_items(items, load_lexicon(files, cond, tags, manifest["conditions"][cond.name]), tags)
               for cond in recipe.conditions}
    critical = critical_frequencies(items, tags, files, manifest)
    _check_inputs_unchanged(recipe, manifest)
    contamination = scan_contamination(recipe, items, ngram)
    return ProbeResult(out, str(items_path), sha256_file(Path(items_path)), tags, ngram, items,
                       encoded, critical, contamination, ())


def _record(condition: str, enc: EncodedItem) -> dict[str, Any]:
    item = enc.item
    record = {"id": item.id, "lang": item.lang, "condition": condition, "sentence": item.text,
              "tokens": list(enc.tokens),
              "vocab_tokens": list(enc.vocab_tokens), "ids": list(enc.ids), "oov": list(enc.oov),
              "critical_word": item.critical, "critical_positions": list(enc.critical_positions)}
    if enc.subword is not None:
        record.update({"units": enc.subword.units, "critical_span": list(enc.subword.critical_span),
                       "critical_aligned": enc.subword.critical_aligned,
                       "byte_fallback": list(enc.subword.byte_fallback)})
    record["columns"] = dict(item.columns)
    return record


def _flags(values: Iterable[bool]) -> str:
    return " ".join("1" if f else "0" for f in values)


def _tsv(encoded: tuple[EncodedItem, ...], records: list[dict[str, Any]]) -> str:
    carried = [name for name, _ in encoded[0].item.columns]
    subword = encoded[0].subword is not None
    rows = []
    for r in records:
        row = [r["id"], r["lang"], r["sentence"], " ".join(r["tokens"]), " ".join(r["vocab_tokens"]),
               " ".join(map(str, r["ids"])), " ".join(map(str, r["critical_positions"])), _flags(r["oov"])]
        if subword:
            row += [" ".join(map(str, r["critical_span"])), "1" if r["critical_aligned"] else "0",
                    _flags(r["byte_fallback"])]
        rows.append(row + list(r["columns"].values()))
    return tsv_text([*TSV_COLUMNS, *(SUBWORD_TSV_COLUMNS if subword else ()), *carried], rows)


def _write_outputs(result: ProbeResult) -> ProbeResult:
    probe_dir = result.out / PROBE_DIR
    # Until summary.json is back in place, the probe directory does not describe a finished run.
    with contextlib.suppress(FileNotFoundError):
        (probe_dir / SUMMARY_FILE).unlink()
    written = []
    for condition, encoded in result.encoded.items():
        records = [_record(condition, enc) for enc in encoded]
        for suffix, text in (("jsonl", "".join(json.dumps(r, ensure_ascii=False) + "\n" for r in records)),
                             ("tsv", _tsv(encoded, records))):
            rel = f"{PROBE_DIR}/{condition}.{suffix}"
            atomic_write_text(result.out / rel, text)
            written.append(rel)
    for stale in probe_dir.iterdir():
        if stale.suffix in (".jsonl", ".tsv") and f"{PROBE_DIR}/{stale.name}" not in written:
            stale.unlink()
    result = dataclasses.replace(result, files=tuple(written))
    atomic_write_text(probe_dir / SUMMARY_FILE, canonical_json(summary_json(result)))
    return result


# --- reports -----------------------------------------------------------------------------------

def _frequency_json(f: Frequency) -> dict[str, Any]:
    return {"lang": f.lang, "count": f.count, "per_million": f.per_million, "zipf": f.zipf}


def summary_json(result: ProbeResult) -> dict[str, Any]:
    """The summary as data (what ``--json`` prints and ``probe/summary.json`` holds)."""
    oov = []
    for i, item in enumerate(result.items):
        by_condition = {c: list(enc[i].oov_tokens) for c, enc in result.encoded.items() if enc[i].oov_tokens}
        if by_condition:
            oov.append({"id": item.id, "lang": item.lang, "tokens": by_condition,
                        "critical_oov": [c for c, enc in result.encoded.items() if enc[i].critical_oov]})
    return {
        "build": str(result.out),
        "items_file": result.items_path,
        "items_sha256": result.items_sha256,
        "items": len(result.items),
        "items_per_language": {t: sum(1 for it in result.items if it.lang == t) for t in result.tags},
        "conditions": list(result.encoded),
        "ngram_length": result.ngram,
        "ngram_classes": list(NGRAM_CLASSES),
        "oov": oov,
        "critical_words": [{"id": c.item, "lang": c.lang, "word": c.surface, "position": c.position,
                            "own": _frequency_json(c.own), "other": _frequency_json(c.other),
                            "homograph": c.homograph} for c in result.critical],
        "contamination": [{"id": c.item, "lang": c.lang, "sentence_hits": c.sentence_hits,
                           "ngram_hits": c.ngram_hits,
                           "hits": [{"kind": h.kind, "path": h.path, "line": h.line, "words": h.words,
                                     "text": h.text}
                                    for h in c.hits]} for c in result.contamination],
        "failing_items": list(result.failing_items),
        "files": list(result.files),
    } | ({"critical_pieces": _critical_pieces_json(result)} if result.subword_conditions else {})


def _critical_pieces_json(result: ProbeResult) -> list[dict[str, Any]]:
    """Per item, the pieces of its critical word under every subword condition."""
    out = []
    for i, item in enumerate(result.items):
        by_condition = {}
        for c in result.subword_conditions:
            enc = result.encoded[c][i]
            detail = enc.subword
            assert detail is not None
            by_condition[c] = {"pieces": list(enc.critical_pieces), "span": list(detail.critical_span),
                               "aligned": detail.critical_aligned,
                               "byte_fallback": sum(detail.byte_fallback[p] for p in enc.critical_positions),
                               "oov": sum(enc.oov[p] for p in enc.critical_positions)}
        out.append({"id": item.id, "lang": item.lang, "word": item.critical, "conditions": by_condition})
    return out


def _table(rows: list[list[str]], right: set[int]) -> list[str]:
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    lines = []
    for j, row in enumerate(rows):
        cells = [c.rjust(w) if k in right else c.ljust(w) for k, (c, w) in enumerate(zip(row, widths))]
        lines.append("  " + "  ".join(cells).rstrip())
        if j == 0:
            lines.append("  " + "  ".join("-" * w for w in widths))
    return lines


def _zipf(z: float | None) -> str:
    return "-" if z is None else f"{z:.2f}"


def summary_text(result: ProbeResult) -> str:
    """The summary as terminal tables."""
    tags = result.tags
    per_lang = ", ".join(f"{t} {sum(1 for it in result.items if it.lang == t)}" for t in tags)
    conditions = list(result.encoded)
    out = [f"probe of {result.items_path}: {len(result.items)} items ({per_lang}) under "
           f"{len(conditions)} conditions; outputs in {result.out / PROBE_DIR}/"]

    out.append("")
    oov_rows = [["item", "lang", *conditions, "critical OOV in"]]
    for i, item in enumerate(result.items):
        cells = [" ".join(enc[i].oov_tokens) or "-" for enc in result.encoded.values()]
        if any(c != "-" for c in cells):
            crit = [c for c, enc in result.encoded.items() if enc[i].critical_oov]
            oov_rows.append([item.id, item.lang, *cells, ", ".join(crit) or "-"])
    if len(oov_rows) > 1:
        out.append("Out-of-vocabulary tokens, by condition:")
        out += _table(oov_rows, set())
    else:
        out.append("Out-of-vocabulary tokens: none in any condition.")

    out.append("")
    out.append("Critical words: training count, per million word tokens, Zipf = log10(per million) + 3:")
    header = ["item", "lang", "word"]
    for t in tags:
        header += [f"count {t}", f"pm {t}", f"Zipf {t}"]
    rows = [header + ["homograph"]]
    for c in result.critical:
        freq = {c.own.lang: c.own, c.other.lang: c.other}
        cells = [c.item, c.lang, c.surface]
        for t in tags:
            f = freq[t]
            cells += [str(f.count), f"{f.per_million:.1f}", _zipf(f.zipf)]
        rows.append(cells + ["yes" if c.homograph else "no"])
    out += _table(rows, set(range(3, 3 + 3 * len(tags))))

    if result.subword_conditions:
        out.append("")
        out.append("Critical words under subword conditions: the pieces of the critical span "
                   "(* = a piece also holds text beyond the word, b = byte-fallback pieces):")
        rows = [["item", "lang", "word", *result.subword_conditions]]
        for row in _critical_pieces_json(result):
            cells = []
            for c in result.subword_conditions:
                entry = row["conditions"][c]
                marks = ("" if entry["aligned"] else " *") + (" b" if entry["byte_fallback"] else "")
                cells.append(" ".join(entry["pieces"]) + marks)
            rows.append([row["id"], row["lang"], row["word"], *cells])
        out += _table(rows, set())

    out.append("")
    if result.contamination:
        out.append(f"Contamination (training split; whole sentences, and word n-grams of {result.ngram}):")
        rows = [["item", "lang", "found", "words", "where", "text"]]
        for c in result.contamination:
            for h in c.hits:
                rows.append([c.item, c.lang, h.kind, str(h.words), where(h.path, h.line), h.text])
            listed = sum(1 for h in c.hits if h.kind == "sentence"), sum(1 for h in c.hits if h.kind == "ngram")
            if (c.sentence_hits, c.ngram_hits) != listed:
                rows.append([c.item, c.lang, "more", "", "", f"{c.sentence_hits} sentence and {c.ngram_hits} "
                             f"n-gram lines in all; first {MAX_HITS_PER_ITEM} of each kind listed"])
        out += _table(rows, {3})
    else:
        out.append(f"Contamination: no item equals a training sentence or shares a word {result.ngram}-gram "
                   f"with the training split.")

    failing = result.failing_items
    out.append("")
    out.append(f"{len(failing)} item(s) would fail --strict" + (f": {', '.join(failing)}" if failing else "."))
    return "\n".join(out)
