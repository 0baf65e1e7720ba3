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
import re
from dataclasses import dataclass
from typing import Callable

import numpy as np

from .errors import BivocabError
from .recipe import ConditionSpec, CleanSpec
from .segment import NUMBER, PUNCT, SPECIAL, SYMBOL, WORD, pre_tokenizer_json, token_class

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
    condition: str
    tags: tuple[str, ...]
    entries: tuple[Entry, ...]
    unk_ids: tuple[int, ...]            # per language (the same id twice when shared)
    eos_ids: tuple[int, ...] | None     # per language, or None without an end-of-sentence token
    pad_id: int | None
    luts: tuple[np.ndarray, ...]        # per language: type id -> vocabulary id

    def __len__(self) -> int:
        return len(self.entries)

    @property
    def special_count(self) -> int:
        return sum(1 for e in self.entries if e.cls == SPECIAL)

    @property
    def dtype(self) -> np.dtype:
        return np.dtype(np.uint16) if len(self.entries) <= 1 << 16 else np.dtype(np.uint32)

    def visible(self, lang_index: int) -> list[Entry]:
        """Entries a sentence of this language can be encoded to (shared + its own)."""
        tag = self.tags[lang_index]
        return [e for e in self.entries if e.lang in (SHARED, tag)]


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
    by_rank: tuple[str, ...]        # rank -> surface
    class_by_rank: np.ndarray       # rank -> class index


def index_types(surfaces: list[list[str]]) -> TypeIndex:
    """Classify and rank each language's types once (the costly per-type Python work)."""
    code = {name: i for i, name in enumerate(CLASS_NAMES)}
    classes = tuple(np.fromiter((code[token_class(s)] for s in types), dtype=np.uint8, count=len(types))
                    for types in surfaces)
    by_rank = tuple(sorted(set().union(*surfaces)))
    rank = {s: i for i, s in enumerate(by_rank)}
    ranks = tuple(np.fromiter((rank[s] for s in types), dtype=np.int64, count=len(types)) for types in surfaces)
    class_by_rank = np.zeros(len(by_rank), dtype=np.uint8)
    for c, r in zip(classes, ranks):
        class_by_rank[r] = c
    return TypeIndex(classes, ranks, by_rank, class_by_rank)


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
    chosen = chosen[np.lexsort((keys[chosen], -totals[chosen]))]
    specials = special_tokens(tags, spec.unknown, spec.eos, spec.pad)
    if spec.max_size:
        if spec.max_size <= len(specials):
            raise BivocabError(
                f"condition '{condition.name}': max_size {spec.max_size} leaves no room beyond the "
                f"{len(specials)} special tokens")
        chosen = chosen[: spec.max_size - len(specials)]

    ranks = (keys[chosen] // (n_lang + 1)).tolist()
    entry_langs = (keys[chosen] % (n_lang + 1)).tolist()
    entry_surfaces = [index.by_rank[r] for r in ranks]
    lang_names = [SHARED, *tags]
    langs = [lang_names[k] for k in entry_langs]
    tokens = [s if k == 0 else tagged_token(s, lang_names[k]) for s, k in zip(entry_surfaces, entry_langs)]
    special_names = [name for name, _ in specials]
    _check_unique(condition, special_names + tokens, [lang for _, lang in specials] + langs,
                  special_names + entry_surfaces)

    zero = (0,) * n_lang
    entries = [Entry(i, name, name, lang, SPECIAL, zero) for i, (name, lang) in enumerate(specials)]
    special_ids = {name: i for i, name in enumerate(special_names)}
    entries += map(Entry, range(len(specials), len(specials) + len(chosen)), tokens, entry_surfaces, langs,
                   [CLASS_NAMES[c] for c in index.class_by_rank[keys[chosen] // (n_lang + 1)].tolist()],
                   map(tuple, counts[chosen].tolist()))

    unk_ids = tuple(special_ids["<unk>"] if spec.unknown == "shared" else special_ids[f"<unk:{t}>"] for t in tags)
    if spec.eos == "none":
        eos_ids = None
    else:
        eos_ids = tuple(special_ids["<eos>"] if spec.eos == "shared" else special_ids[f"<eos:{t}>"] for t in tags)
    dtype = np.uint16 if len(entries) <= 1 << 16 else np.uint32
    id_of_key = np.full(len(keys), -1, dtype=np.int64)
    id_of_key[chosen] = np.arange(len(specials), len(specials) + len(chosen))
    luts = []
    start = 0
    for li in range(n_lang):
        ids = id_of_key[inverse[start:start + len(type_keys[li])]]
        start += len(type_keys[li])
        luts.append(np.where(ids < 0, unk_ids[li], ids).astype(dtype))
    return Vocabulary(condition.name, tags, tuple(entries), unk_ids, eos_ids,
                      special_ids.get("<pad>"), tuple(luts))


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


def vocab_tsv(vocab: Vocabulary) -> str:
    """The vocab.tsv contract: ``id token surface lang class count count_<tag>...``."""
    header = ["id", "token", "surface", "lang", "class", "count"] + [f"count_{t}" for t in vocab.tags]
    entries = vocab.entries
    counts = [[str(c) for c in column] for column in zip(*(e.counts for e in entries))]
    columns = [[str(e.id) for e in entries], quote_column([e.token for e in entries]),
               quote_column([e.surface for e in entries]), quote_column([e.lang for e in entries]),
               [e.cls for e in entries], [str(sum(e.counts)) for e in entries], *counts]
    return tsv_columns(header, columns)


def tsv_text(header: list[str], rows: list[list[str]]) -> str:
    """Tab-separated text with CSV quoting: a field holding a double quote is quoted and the quote
    doubled, so ``pandas.read_csv(path, sep="\\t", keep_default_na=False)`` reads every token back."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, delimiter="\t", quoting=csv.QUOTE_MINIMAL, lineterminator="\n")
    writer.writerow(header)
    writer.writerows(rows)
    return buffer.getvalue()


# Characters that can make the csv module quote a field (delimiter, quote, line ends).
_QUOTABLE = re.compile(r'[\t"\r\n]')


def quote_column(values: list[str]) -> list[str]:
    """Each string as :func:`tsv_text` writes it within a row of several fields; the rare
    strings that may need quoting are passed through the csv module itself.

    >>> quote_column(['Kai', 'a\\tb'])
    ['Kai', '"a\\tb"']
    """
    out = list(values)
    joined = "".join(out)
    if not _QUOTABLE.search(joined):
        return out
    # Find the few values holding such a character from match positions in the joined text.
    ends = np.cumsum(np.fromiter(map(len, out), dtype=np.int64, count=len(out)))
    positions = np.array([m.start() for m in _QUOTABLE.finditer(joined)], dtype=np.int64)
    for i in np.unique(np.searchsorted(ends, positions, side="right")).tolist():
        out[i] = tsv_text([out[i], ""], [])[:-2]
    return out


def tsv_columns(header: list[str], columns: list[list[str]]) -> str:
    """:func:`tsv_text` of the rows formed by ``columns`` (at least two), whose string fields
    went through :func:`quote_column` (fields of digits and class names never need it)."""
    lines = [tsv_text(header, [])[:-1], *map("\t".join, zip(*columns))]
    return "\n".join(lines) + "\n"


def tokenizer_doc(vocab: Vocabulary, lang_index: int, clean: CleanSpec) -> dict:
    """The ``tokenizers`` WordLevel tokenizer for one language that reproduces the shard ids, as JSON data.

    Its normalizer repeats our cleaning (whitespace, normal form, case), its pre-tokenizer is our
    segmentation regex, and its post-processor appends the end-of-sentence token.
    """
    mapping = {e.surface if e.cls != SPECIAL else e.token: e.id for e in vocab.visible(lang_index)}
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
        eos = vocab.entries[eos_id].token
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
        "model": {"type": "WordLevel", "vocab": dict(sorted(mapping.items(), key=lambda kv: kv[1])),
                  "unk_token": vocab.entries[vocab.unk_ids[lang_index]].token},
    }
    return doc


# Stands in for the vocabulary while the library writes the rest of the file.
_VOCAB_PLACEHOLDER = "\x00bivocab-vocab\x00"


def tokenizer_json(vocab: Vocabulary, lang_index: int, clean: CleanSpec) -> str:
    """The file text of :func:`tokenizer_doc`, exactly as ``tokenizers`` itself writes it.

    The library writes everything but the vocabulary (its pretty printer puts a WordLevel
    vocabulary one ``"token": id`` line each, in id order, with the JSON string escapes that
    ``json.dumps`` also uses); parsing and re-writing tens of thousands of entries through it
    would cost more than the rest of the vocabulary stage.
    """
    from tokenizers import Tokenizer

    doc = tokenizer_doc(vocab, lang_index, clean)
    mapping = doc["model"]["vocab"]
    doc["model"]["vocab"] = {_VOCAB_PLACEHOLDER: 0}
    skeleton = Tokenizer.from_str(json.dumps(doc, ensure_ascii=False)).to_str(pretty=True) + "\n"
    placeholder = json.dumps(_VOCAB_PLACEHOLDER) + ": 0"
    head, sep, tail = skeleton.partition(placeholder)
    if not sep or placeholder in tail:
        raise RuntimeError("tokenizers wrote the WordLevel vocabulary in an unexpected layout")
    indent = head[head.rfind("\n") + 1:]
    # One encoder call for all lines: the item separator carries the line break and indent
    # (a JSON string never holds a raw line break, so nothing else can look like one).
    lines = json.dumps(mapping, ensure_ascii=False, separators=(",\n" + indent, ": "))[1:-1]
    return head + lines + tail
