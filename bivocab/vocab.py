"""Vocabulary of one condition: entries chosen by the sharing policy, the cap and ``min_count``.

An entry is ``(language or "*", surface)``.  Shared classes give one entry per spelling for both
languages together; tagged classes give one entry per spelling and language.  Ids are dense:
specials first, then entries by training count (descending), then the surface in Unicode code
point order, then language in recipe order.  Lookup tables map each language's token types to
ids, so encoding a language under any condition is ``lut[type_ids]``.
"""

from __future__ import annotations

import csv
import io
import json
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from itertools import compress
from typing import Callable, overload

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from .arrow import bool_numpy, int64_array, joined_bytes, numpy_view, string_array, string_scalar, strings_holding
from .errors import BivocabError
from .recipe import ConditionSpec, CleanSpec
from .segment import LATIN_LETTERS, NUMBER, PUNCT, SPECIAL, SYMBOL, WORD, pre_tokenizer_json, token_class

SHARED = "*"


@dataclass(frozen=True)
class Entry:
    id: int
    token: str                  # exported string, unique in the vocabulary
    surface: str
    lang: str                   # a language tag, or "*" for an entry shared by both
    cls: str
    counts: tuple[int, ...]     # training count per language (recipe order)

    @property
    def count(self) -> int:
        return sum(self.counts)


@dataclass(frozen=True)
class Vocabulary:
    """The entries of one condition as columns in id order (specials first; a special's surface
    is its token), so that building and writing a vocabulary of 100,000 entries needs no
    per-entry objects.  :attr:`entries` gives them as :class:`Entry` records on demand."""

    condition: str
    tags: tuple[str, ...]
    tokens: list[str]                   # exported strings, unique in the vocabulary
    surfaces: list[str]
    langs: list[str]                    # a language tag, or "*" for an entry shared by both
    classes: list[str]
    counts: np.ndarray                  # (entries, languages): training count per language (recipe order)
    unk_ids: tuple[int, ...]            # per language (the same id twice when shared)
    eos_ids: tuple[int, ...] | None     # per language, or None without an end-of-sentence token
    pad_id: int | None
    luts: tuple[np.ndarray, ...]        # per language: type id -> vocabulary id
    # The string columns as arrow arrays, made by build_vocabulary from the type index, so
    # that writing the vocabulary files converts no Python strings (None: made when needed).
    columns: VocabColumns | None = field(default=None, compare=False, repr=False)

    def __len__(self) -> int:
        return len(self.tokens)

    @property
    def entries(self) -> EntryView:
        return EntryView(self)

    @property
    def special_count(self) -> int:
        return self.classes.count(SPECIAL)

    @property
    def dtype(self) -> np.dtype:
        return np.dtype(np.uint16) if len(self) <= 1 << 16 else np.dtype(np.uint32)

    def visible_ids(self, lang_index: int) -> list[int]:
        """Ids a sentence of this language can be encoded to (shared entries + its own), ascending."""
        return list(compress(range(len(self)), map({SHARED, self.tags[lang_index]}.__contains__, self.langs)))

    def visible(self, lang_index: int) -> list[Entry]:
        """Entries a sentence of this language can be encoded to (shared + its own)."""
        tag = self.tags[lang_index]
        return [e for e in self.entries if e.lang in (SHARED, tag)]


@dataclass(frozen=True)
class VocabColumns:
    """A vocabulary's tokens, surfaces, languages and classes as arrow string arrays (id order)."""

    tokens: pa.Array
    surfaces: pa.Array
    langs: pa.Array
    classes: pa.Array
    # False when no two entries a language can use may share a surface (no surface holds "<",
    # so none is spelled like a special token): the tokenizer file then needs no duplicate check.
    may_repeat_keys: bool = True

    @staticmethod
    def of(vocab: Vocabulary) -> VocabColumns:
        if vocab.columns is not None:
            return vocab.columns
        return VocabColumns(string_array(vocab.tokens), string_array(vocab.surfaces), string_array(vocab.langs),
                            string_array(vocab.classes))


class EntryView(Sequence[Entry]):
    """A vocabulary's entries in id order, each made from the columns when it is read."""

    def __init__(self, vocab: Vocabulary):
        self._vocab = vocab

    def __len__(self) -> int:
        return len(self._vocab)

    @overload
    def __getitem__(self, index: int) -> Entry: ...

    @overload
    def __getitem__(self, index: slice) -> tuple[Entry, ...]: ...

    def __getitem__(self, index: int | slice) -> Entry | tuple[Entry, ...]:
        if isinstance(index, slice):
            return tuple(self._make(index))
        i = range(len(self))[index]     # a negative index counts from the end; IndexError past it
        v = self._vocab
        return Entry(i, v.tokens[i], v.surfaces[i], v.langs[i], v.classes[i], tuple(v.counts[i].tolist()))

    def __iter__(self) -> Iterator[Entry]:
        return self._make(slice(None))

    def _make(self, pick: slice) -> Iterator[Entry]:
        v = self._vocab
        return map(Entry, range(len(v))[pick], v.tokens[pick], v.surfaces[pick], v.langs[pick], v.classes[pick],
                   map(tuple, v.counts[pick].tolist()))


def tagged_token(surface: str, tag: str) -> str:
    """Exported string of a language-specific entry.

    >>> tagged_token("Kind", "de")
    'Kind@de'
    """
    return f"{surface}@{tag}"


def special_tokens(tags: tuple[str, ...], unknown: str, eos: str, pad: bool) -> list[tuple[str, str]]:
    """The special entries ``(token, lang)`` a vocabulary starts with, in id order.

    >>> special_tokens(("en", "de"), "per-language", "shared", True)
    [('<pad>', '*'), ('<unk:en>', 'en'), ('<unk:de>', 'de'), ('<eos>', '*')]
    """
    out: list[tuple[str, str]] = []
    if pad:
        out.append(("<pad>", SHARED))
    out += [("<unk>", SHARED)] if unknown == "shared" else [(f"<unk:{t}>", t) for t in tags]
    if eos == "shared":
        out.append(("<eos>", SHARED))
    elif eos == "per-language":
        out += [(f"<eos:{t}>", t) for t in tags]
    return out


def sharing_rule(condition: ConditionSpec) -> Callable[[str], bool]:
    """Whether a spelling is one entry for both languages under ``condition``: the forced
    ``share`` / ``separate`` lists first, then the policy's choice for the spelling's class."""
    share, separate = set(condition.share), set(condition.separate)

    def is_shared(surface: str) -> bool:
        if surface in share:
            return True
        if surface in separate:
            return False
        return condition.classes[token_class(surface)] == "shared"

    return is_shared


def entry_key(surface: str, tag: str, is_shared: Callable[[str], bool]) -> tuple[str, str]:
    """The entry ``(language or "*", surface)`` that a token of language ``tag`` belongs to.

    >>> entry_key("Kind", "de", lambda surface: False)
    ('de', 'Kind')
    """
    return (SHARED, surface) if is_shared(surface) else (tag, surface)


CLASS_NAMES = (WORD, NUMBER, PUNCT, SYMBOL)


@dataclass(frozen=True)
class TypeIndex:
    """Per-language facts about the token types that every condition reuses: the class of each
    type (an index into CLASS_NAMES) and its rank in the code point order of all surfaces of
    all languages (equal surfaces share a rank)."""

    classes: tuple[np.ndarray, ...]
    ranks: tuple[np.ndarray, ...]
    by_rank: np.ndarray             # rank -> surface (an object array, so that numpy can gather surfaces)
    class_by_rank: np.ndarray       # rank -> class index
    # rank -> whether the surface holds "@" or "<": only such a surface can be exported as the
    # same token as another entry (a tagged token is surface@tag; specials are <...>)
    may_clash: np.ndarray | None = None
    ordered: pa.Array | None = None     # rank -> surface, as an arrow string array


def _classify(types: list[str], column: pa.Array | None = None) -> np.ndarray:
    """:func:`token_class` of every type, as an index into CLASS_NAMES: a type holding a Latin
    letter is a word (one vectorised match for most of them), the others are asked one by one.
    ``column``: the types as an arrow string array, when already made."""
    code = {name: i for i, name in enumerate(CLASS_NAMES)}
    classes = np.full(len(types), code[WORD], dtype=np.uint8)
    column = string_array(types) if column is None else column
    latin = pc.match_substring_regex(column, f"[{LATIN_LETTERS}]")
    others = np.flatnonzero(~bool_numpy(latin)) if len(types) else np.zeros(0, np.int64)
    classes[others] = np.fromiter((code[token_class(types[i])] for i in others.tolist()), dtype=np.uint8,
                                  count=len(others))
    return classes


def index_types(surfaces: list[list[str]]) -> TypeIndex:
    """Classify and rank each language's types once (the costly per-type Python work).  The
    ranks come from arrow: its sort of UTF-8 strings is byte order, which is code point order."""
    columns = [string_array(types) for types in surfaces]
    classes = tuple(_classify(types, column) for types, column in zip(surfaces, columns))
    distinct = pc.unique(pa.chunked_array(columns, type=pa.large_string()))
    ordered = distinct.take(pc.sort_indices(distinct))
    ranks = tuple(numpy_view(pc.index_in(column, value_set=ordered)).astype(np.int64) if len(column)
                  else np.zeros(0, np.int64) for column in columns)
    by_rank = np.empty(len(ordered), dtype=object)
    by_rank[:] = ordered.to_pylist()
    class_by_rank = np.zeros(len(by_rank), dtype=np.uint8)
    for c, r in zip(classes, ranks):
        class_by_rank[r] = c
    may_clash = bool_numpy(pc.match_substring_regex(ordered, "[@<]")) if len(ordered) else np.zeros(0, bool)
    return TypeIndex(classes, ranks, by_rank, class_by_rank, may_clash, ordered)


def count_order(counts: np.ndarray, keys: np.ndarray) -> np.ndarray:
    """The permutation that sorts by count descending, then by key (distinct, >= 0) ascending.
    When a count and a key fit side by side in one int64, one sort of that number gives the
    order (faster than lexsort); else lexsort.

    >>> count_order(np.array([2, 5, 2]), np.array([9, 4, 1])).tolist()
    [1, 2, 0]
    """
    counts, keys = np.asarray(counts, dtype=np.int64), np.asarray(keys, dtype=np.int64)
    key_bits = int(keys.max(initial=0)).bit_length()
    top = int(counts.max(initial=0))
    if key_bits + top.bit_length() < 63:
        return np.argsort(((top - counts) << key_bits) + keys)
    return np.lexsort((keys, -counts))


def _shared_mask(condition: ConditionSpec, types: list[str], classes: np.ndarray) -> np.ndarray:
    """:func:`sharing_rule` for every type of one language at once."""
    by_class = np.array([condition.classes[name] == "shared" for name in CLASS_NAMES])
    mask = by_class[classes]
    if condition.share or condition.separate:
        share, separate = set(condition.share), set(condition.separate)
        for i, s in enumerate(types):
            if s in share:
                mask[i] = True
            elif s in separate:
                mask[i] = False
    return mask


def build_vocabulary(condition: ConditionSpec, tags: tuple[str, ...], surfaces: list[list[str]],
                     train_counts: list[np.ndarray], index: TypeIndex | None = None) -> Vocabulary:
    """Choose the entries of one condition and build each language's lookup table.

    ``surfaces[l]`` are language l's token types (its type ids index them) and
    ``train_counts[l]`` their counts in the train split; ``index`` (from :func:`index_types`
    on the same surfaces) saves classifying the types again for each condition.
    """
    if index is None:
        index = index_types(surfaces)
    n_lang = len(tags)
    # An entry key is rank * (n_lang + 1) + k, k = 0 for a shared entry and l + 1 for language
    # l's own, so sorting keys orders entries by surface code points, then language.
    type_keys = []
    for li, types in enumerate(surfaces):
        shared = _shared_mask(condition, types, index.classes[li])
        type_keys.append(index.ranks[li] * (n_lang + 1) + np.where(shared, 0, li + 1))
    keys, inverse = np.unique(np.concatenate(type_keys), return_inverse=True)
    counts = np.zeros((len(keys), n_lang), dtype=np.int64)
    start = 0
    for li, type_counts in enumerate(train_counts):
        here = inverse[start:start + len(type_keys[li])]
        np.add.at(counts[:, li], here, np.asarray(type_counts, dtype=np.int64))
        start += len(type_keys[li])
    totals = counts.sum(axis=1)

    spec = condition.vocab
    chosen = np.flatnonzero((totals > 0) & (totals >= spec.min_count))
    # Tie rule (DESIGN.md section 6): count descending, then code points of the surface, then language.
    chosen = chosen[count_order(totals[chosen], keys[chosen])]
    specials = special_tokens(tags, spec.unknown, spec.eos, spec.pad)
    if spec.max_size:
        if spec.max_size <= len(specials):
            raise BivocabError(
                f"condition '{condition.name}': max_size {spec.max_size} leaves no room beyond the "
                f"{len(specials)} special tokens")
        chosen = chosen[: spec.max_size - len(specials)]

    chosen_keys = keys[chosen]
    ranks, lang_codes = chosen_keys // (n_lang + 1), chosen_keys % (n_lang + 1)
    special_names = [name for name, _ in specials]
    chosen_surfaces = index.by_rank[ranks]
    entry_surfaces = special_names + chosen_surfaces.tolist()
    # A tagged token is the surface plus a suffix (tagged_token); adding object arrays runs that
    # concatenation in one numpy loop, and the empty suffix of a shared entry keeps the surface.
    suffixes = np.array(["", *(tagged_token("", t) for t in tags)], dtype=object)
    tokens = special_names + (chosen_surfaces + suffixes[lang_codes]).tolist()
    langs = [lang for _, lang in specials] + np.array([SHARED, *tags], dtype=object)[lang_codes].tolist()
    may_clash = index.may_clash is None or bool(index.may_clash[ranks].any())
    if may_clash:
        _check_unique(condition, tokens, langs, entry_surfaces)
    classes = [SPECIAL] * len(specials) + np.array(CLASS_NAMES, dtype=object)[index.class_by_rank[ranks]].tolist()
    entry_counts = np.zeros((len(tokens), n_lang), dtype=np.int64)
    entry_counts[len(specials):] = counts[chosen]

    special_ids = {name: i for i, name in enumerate(special_names)}
    unk_ids = tuple(special_ids["<unk>"] if spec.unknown == "shared" else special_ids[f"<unk:{t}>"] for t in tags)
    if spec.eos == "none":
        eos_ids = None
    else:
        eos_ids = tuple(special_ids["<eos>"] if spec.eos == "shared" else special_ids[f"<eos:{t}>"] for t in tags)
    columns = None
    if index.ordered is not None:
        picked = index.ordered.take(int64_array(ranks))
        codes = int64_array(lang_codes)
        head = string_array(special_names)
        columns = VocabColumns(
            pa.concat_arrays([head, pc.binary_join_element_wise(picked, string_array(list(suffixes)).take(codes),
                                                                string_scalar(""))]),
            pa.concat_arrays([head, picked]),
            pa.concat_arrays([string_array(langs[:len(specials)]), string_array([SHARED, *tags]).take(codes)]),
            pa.concat_arrays([string_array(classes[:len(specials)]),
                              string_array(list(CLASS_NAMES)).take(int64_array(index.class_by_rank[ranks]))]),
            may_repeat_keys=may_clash)
    dtype = np.uint16 if len(tokens) <= 1 << 16 else np.uint32
    id_of_key = np.full(len(keys), -1, dtype=np.int64)
    id_of_key[chosen] = np.arange(len(specials), len(specials) + len(chosen))
    luts = []
    start = 0
    for li in range(n_lang):
        ids = id_of_key[inverse[start:start + len(type_keys[li])]]
        start += len(type_keys[li])
        luts.append(np.where(ids < 0, unk_ids[li], ids).astype(dtype))
    return Vocabulary(condition.name, tags, tokens, entry_surfaces, langs, classes, entry_counts, unk_ids, eos_ids,
                      special_ids.get("<pad>"), tuple(luts), columns)


def _check_unique(condition: ConditionSpec, tokens: list[str], langs: list[str], surfaces: list[str]) -> None:
    """Every exported token names one entry; the first clash (in id order) is reported."""
    if len(set(tokens)) == len(tokens):
        return
    seen: dict[str, int] = {}
    for i, token in enumerate(tokens):
        j = seen.setdefault(token, i)
        if j != i:
            raise BivocabError(
                f"condition '{condition.name}': exported token {token!r} of entry ({langs[i]}, {surfaces[i]!r}) "
                f"collides with entry ({langs[j]}, {surfaces[j]!r})")


def vocab_tsv(vocab: Vocabulary) -> bytes:
    """The vocab.tsv contract: ``id token surface lang class count count_<tag>...`` (UTF-8)."""
    header = ["id", "token", "surface", "lang", "class", "count"] + [f"count_{t}" for t in vocab.tags]
    counts = vocab.counts
    strings = VocabColumns.of(vocab)
    columns = [decimal_column(np.arange(len(vocab))), quote_column(strings.tokens), quote_column(strings.surfaces),
               quote_column(strings.langs), strings.classes, decimal_column(counts.sum(axis=1)),
               *(decimal_column(column) for column in counts.T)]
    return tsv_columns(header, columns)


def language_types_tsv(surfaces: list[str], split_counts: np.ndarray, index: TypeIndex, lang_index: int) -> bytes:
    """All token types of one language with their class and count per split (``split_counts``,
    train/valid/test by type id), sorted by the tie rule: train count descending, then code
    points (``index`` ranks the surfaces); UTF-8."""
    order = count_order(split_counts[0], index.ranks[lang_index])
    picked = int64_array(order)
    column = (string_array(surfaces) if index.ordered is None
              else index.ordered.take(int64_array(index.ranks[lang_index])))
    columns = [quote_column(column).take(picked),
               string_array(list(CLASS_NAMES)).take(int64_array(index.classes[lang_index][order])),
               *(decimal_column(split_counts[split, order]) for split in range(3))]
    return tsv_columns(["surface", "class", "count_train", "count_valid", "count_test"], columns)


def decimal_column(values: np.ndarray) -> pa.Array:
    """Each integer as ``str`` writes it, as an arrow string column (one cast for the column).

    >>> decimal_column(np.array([3, -1, 0, 12])).to_pylist()
    ['3', '-1', '0', '12']
    """
    return pc.cast(int64_array(values), pa.large_string())


def tsv_text(header: list[str], rows: list[list[str]]) -> str:
    """Tab-separated text with CSV quoting: a field holding a double quote is quoted and the quote
    doubled, so ``pandas.read_csv(path, sep="\\t", keep_default_na=False)`` reads every token back."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, delimiter="\t", quoting=csv.QUOTE_MINIMAL, lineterminator="\n")
    writer.writerow(header)
    writer.writerows(rows)
    return buffer.getvalue()


def quote_column(values: pa.Array) -> pa.Array:
    """Each string as :func:`tsv_text` writes it within a row of several fields; the rare
    strings that may need quoting (a tab, double quote or line end) go through the csv module
    itself.

    >>> quote_column(string_array(['Kai', 'a\\tb'])).to_pylist()
    ['Kai', '"a\\tb"']
    """
    return _rewrite_holding(values, b'\t"\r\n', lambda value: tsv_text([value, ""], [])[:-2])


def _rewrite_holding(values: pa.Array, chars: bytes, rewrite: Callable[[str], str]) -> pa.Array:
    """``values`` with ``rewrite`` applied to the few strings that hold one of the ASCII
    ``chars`` (found by :func:`~bivocab.arrow.strings_holding`)."""
    hits = strings_holding(values, chars)
    if not len(hits):
        return values
    rewritten = string_array([rewrite(value) for value in values.take(int64_array(hits)).to_pylist()])
    picks = np.arange(len(values), dtype=np.int64)
    picks[hits] = len(values) + np.arange(len(hits))
    return pa.concat_arrays([values.cast(pa.large_string()), rewritten]).take(int64_array(picks))


def tsv_columns(header: list[str], columns: list[pa.Array]) -> bytes:
    """:func:`tsv_text` (UTF-8) of the rows formed by ``columns`` (arrow string columns, at
    least two), whose strings went through :func:`quote_column` (fields of digits and class
    names never need it); the rows are joined by arrow."""
    head = tsv_text(header, []).encode("utf-8")
    if not len(columns[0]):
        return head
    rows = pc.binary_join_element_wise(*(c.cast(pa.large_string()) for c in columns), string_scalar("\t"))
    return head + joined_bytes(rows, "\n") + b"\n"


def tokenizer_doc(vocab: Vocabulary, lang_index: int, clean: CleanSpec) -> dict:
    """The ``tokenizers`` WordLevel tokenizer for one language that reproduces the shard ids, as JSON data.

    Its normalizer repeats our cleaning (whitespace, normal form, case), its pre-tokenizer is our
    segmentation regex, and its post-processor appends the end-of-sentence token.
    """
    keys, ids = _word_level_vocab(vocab, lang_index)
    return _tokenizer_doc(vocab, lang_index, clean, dict(zip(keys.to_pylist(), ids.tolist())))


def same_tokenizer_for_every_language(vocab: Vocabulary) -> bool:
    """Whether :func:`tokenizer_json` writes the same file for every language: every entry is
    shared and the languages share their unknown (and end-of-sentence) ids."""
    return (set(vocab.langs) <= {SHARED} and len(set(vocab.unk_ids)) == 1
            and (vocab.eos_ids is None or len(set(vocab.eos_ids)) == 1))


def _word_level_vocab(vocab: Vocabulary, lang_index: int) -> tuple[pa.Array, np.ndarray]:
    """The tokenizer vocabulary of one language in id order, as keys and ids: the surface (a
    special's is its token) of each entry the language can use, and its id."""
    strings = VocabColumns.of(vocab)
    visible = pc.is_in(strings.langs, value_set=string_array([SHARED, vocab.tags[lang_index]]))
    ids = np.flatnonzero(bool_numpy(visible)) if len(strings.langs) else np.zeros(0, np.int64)
    keys = strings.surfaces.take(int64_array(ids))
    if strings.may_repeat_keys and pc.count_distinct(keys).as_py() < len(keys):
        # As in a dict display, a repeated key keeps its first place but takes the last id;
        # then the entries go back into id order.
        mapping = dict(sorted(dict(zip(keys.to_pylist(), ids.tolist())).items(), key=lambda kv: kv[1]))
        keys, ids = string_array(list(mapping)), np.array(list(mapping.values()), dtype=np.int64)
    return keys, ids


def _tokenizer_doc(vocab: Vocabulary, lang_index: int, clean: CleanSpec, mapping: dict[str, int]) -> dict:
    normalizers: list[dict] = [
        {"type": "Replace", "pattern": {"Regex": r"[\s\x00-\x08\x0e-\x1f\x7f-\x9f]+"}, "content": " "},
        {"type": "Strip", "strip_left": True, "strip_right": True},
    ]
    if clean.normal_form != "none":
        normalizers.insert(0, {"type": clean.normal_form})
    if clean.lowercase:
        normalizers.append({"type": "Lowercase"})
    post = None
    if vocab.eos_ids is not None:
        eos_id = vocab.eos_ids[lang_index]
        eos = vocab.tokens[eos_id]
        post = {"type": "TemplateProcessing",
                "single": [{"Sequence": {"id": "A", "type_id": 0}}, {"SpecialToken": {"id": eos, "type_id": 0}}],
                "pair": [{"Sequence": {"id": "A", "type_id": 0}}, {"SpecialToken": {"id": eos, "type_id": 0}},
                         {"Sequence": {"id": "B", "type_id": 1}}, {"SpecialToken": {"id": eos, "type_id": 1}}],
                "special_tokens": {eos: {"id": eos, "ids": [eos_id], "tokens": [eos]}}}
    doc = {
        "version": "1.0",
        "truncation": None,
        "padding": None,
        "added_tokens": [],
        "normalizer": {"type": "Sequence", "normalizers": normalizers},
        "pre_tokenizer": pre_tokenizer_json(),
        "post_processor": post,
        "decoder": None,
        "model": {"type": "WordLevel", "vocab": mapping, "unk_token": vocab.tokens[vocab.unk_ids[lang_index]]},
    }
    return doc


# Stands in for the vocabulary while the library writes the rest of the file.
_VOCAB_PLACEHOLDER = "\x00bivocab-vocab\x00"
# Characters that json.dumps(..., ensure_ascii=False) writes as an escape (json.encoder.ESCAPE).
_JSON_ESCAPED = bytes(range(0x20)) + b'\\"'


def tokenizer_json(vocab: Vocabulary, lang_index: int, clean: CleanSpec) -> bytes:
    """The file (UTF-8) of :func:`tokenizer_doc`, exactly as ``tokenizers`` itself writes it.

    The library writes everything but the vocabulary (its pretty printer puts a WordLevel
    vocabulary one ``"token": id`` line each, in id order, with the JSON string escapes that
    ``json.dumps`` also uses); parsing and re-writing tens of thousands of entries through it
    would cost more than the rest of the vocabulary stage.  The lines are joined by arrow.
    """
    from tokenizers import Tokenizer

    doc = _tokenizer_doc(vocab, lang_index, clean, {_VOCAB_PLACEHOLDER: 0})
    skeleton = Tokenizer.from_str(json.dumps(doc, ensure_ascii=False)).to_str(pretty=True) + "\n"
    placeholder = json.dumps(_VOCAB_PLACEHOLDER) + ": 0"
    head, sep, tail = skeleton.partition(placeholder)
    if not sep or placeholder in tail:
        raise RuntimeError("tokenizers wrote the WordLevel vocabulary in an unexpected layout")
    indent = head[head.rfind("\n") + 1:]
    keys, ids = _word_level_vocab(vocab, lang_index)
    keys = _rewrite_holding(keys, _JSON_ESCAPED, lambda key: json.dumps(key, ensure_ascii=False)[1:-1])
    lines = pc.binary_join_element_wise(string_scalar('"'), keys, string_scalar('": '), decimal_column(ids),
                                        string_scalar(""))
    return head.encode("utf-8") + joined_bytes(lines, ",\n" + indent) + tail.encode("utf-8")
