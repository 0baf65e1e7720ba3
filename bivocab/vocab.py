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
from dataclasses import dataclass
from typing import Callable

import numpy as np

from .errors import BivocabError
from .recipe import ConditionSpec, CleanSpec
from .segment import SPECIAL, pre_tokenizer_json, token_class

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


def build_vocabulary(condition: ConditionSpec, tags: tuple[str, ...], surfaces: list[list[str]],
                     train_counts: list[np.ndarray]) -> Vocabulary:
    """Choose the entries of one condition and build each language's lookup table.

    ``surfaces[l]`` are language l's token types (its type ids index them) and
    ``train_counts[l]`` their counts in the train split.
    """
    is_shared = sharing_rule(condition)
    n_lang = len(tags)
    counts: dict[tuple[str, str], list[int]] = {}
    keys_per_lang: list[list[tuple[str, str]]] = []
    for li, (types, type_counts) in enumerate(zip(surfaces, train_counts)):
        keys = []
        for surface, count in zip(types, type_counts.tolist()):
            key = entry_key(surface, tags[li], is_shared)
            keys.append(key)
            if count:
                slot = counts.get(key)
                if slot is None:
                    slot = counts[key] = [0] * n_lang
                slot[li] += count
        keys_per_lang.append(keys)

    spec = condition.vocab
    lang_rank = {SHARED: -1, **{t: i for i, t in enumerate(tags)}}
    candidates = [(key, c) for key, c in counts.items() if sum(c) >= spec.min_count]
    # Tie rule (DESIGN.md section 6): count descending, then code points of the surface, then language.
    candidates.sort(key=lambda kc: (-sum(kc[1]), kc[0][1], lang_rank[kc[0][0]]))
    specials = special_tokens(tags, spec.unknown, spec.eos, spec.pad)
    if spec.max_size:
        if spec.max_size <= len(specials):
            raise BivocabError(
                f"condition '{condition.name}': max_size {spec.max_size} leaves no room beyond the "
                f"{len(specials)} special tokens")
        candidates = candidates[: spec.max_size - len(specials)]

    entries: list[Entry] = []
    by_token: dict[str, Entry] = {}

    def add(token: str, surface: str, lang: str, cls: str, c: tuple[int, ...]) -> int:
        entry = Entry(len(entries), token, surface, lang, cls, c)
        other = by_token.get(token)
        if other is not None:
            raise BivocabError(
                f"condition '{condition.name}': exported token {token!r} of entry ({lang}, {surface!r}) "
                f"collides with entry ({other.lang}, {other.surface!r})")
        by_token[token] = entry
        entries.append(entry)
        return entry.id

    zero = (0,) * n_lang
    special_ids = {name: add(name, name, lang, SPECIAL, zero) for name, lang in specials}
    ids: dict[tuple[str, str], int] = {}
    for (lang, surface), c in candidates:
        token = surface if lang == SHARED else tagged_token(surface, lang)
        ids[(lang, surface)] = add(token, surface, lang, token_class(surface), tuple(c))

    unk_ids = tuple(special_ids["<unk>"] if spec.unknown == "shared" else special_ids[f"<unk:{t}>"] for t in tags)
    if spec.eos == "none":
        eos_ids = None
    else:
        eos_ids = tuple(special_ids["<eos>"] if spec.eos == "shared" else special_ids[f"<eos:{t}>"] for t in tags)
    dtype = np.uint16 if len(entries) <= 1 << 16 else np.uint32
    luts = tuple(np.fromiter((ids.get(k, unk_ids[li]) for k in keys), dtype=dtype, count=len(keys))
                 for li, keys in enumerate(keys_per_lang))
    return Vocabulary(condition.name, tags, tuple(entries), unk_ids, eos_ids,
                      special_ids.get("<pad>"), luts)


def vocab_tsv(vocab: Vocabulary) -> str:
    """The vocab.tsv contract: ``id token surface lang class count count_<tag>...``."""
    header = ["id", "token", "surface", "lang", "class", "count"] + [f"count_{t}" for t in vocab.tags]
    rows = [[str(e.id), e.token, e.surface, e.lang, e.cls, str(e.count), *map(str, e.counts)]
            for e in vocab.entries]
    return tsv_text(header, rows)


def tsv_text(header: list[str], rows: list[list[str]]) -> str:
    """Tab-separated text with CSV quoting: a field holding a double quote is quoted and the quote
    doubled, so ``pandas.read_csv(path, sep="\\t", keep_default_na=False)`` reads every token back."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, delimiter="\t", quoting=csv.QUOTE_MINIMAL, lineterminator="\n")
    writer.writerow(header)
    writer.writerows(rows)
    return buffer.getvalue()


def tokenizer_json(vocab: Vocabulary, lang_index: int, clean: CleanSpec) -> str:
    """A ``tokenizers`` WordLevel tokenizer for one language that reproduces the shard ids.

    Its normalizer repeats our cleaning (whitespace, normal form, case), its pre-tokenizer is our
    segmentation regex, and its post-processor appends the end-of-sentence token.
    """
    from tokenizers import Tokenizer

    tag = vocab.tags[lang_index]
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
    # Round-trip through the library so the file is exactly what tokenizers itself writes.
    text = json.dumps(doc, ensure_ascii=False)
    return Tokenizer.from_str(text).to_str(pretty=True) + "\n"
