"""What the audit needs beyond word level for a subword condition: coverage counted on pieces
(OOV = the unknown piece), and whether a homograph pair encodes to the same piece ids."""

from __future__ import annotations

from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np
import sentencepiece as spm

from .corpus import iter_sentences
from .recipe import SPLITS, Recipe
from .segment import SPECIAL
from .shards import open_shards
from .subword import _read_vocab_columns

TRAIN = "train"


def is_subword(manifest_entry: Mapping[str, Any]) -> bool:
    """Whether build.json records the condition as a subword condition."""
    return manifest_entry.get("units", "word") != "word"


def load_processors(out: Path, manifest_entry: Mapping[str, Any],
                    tags: Sequence[str]) -> tuple[spm.SentencePieceProcessor, ...]:
    """The condition's exported sentencepiece model of each language (recipe order)."""
    return tuple(spm.SentencePieceProcessor(model_file=str(out / manifest_entry["models"][t])) for t in tags)


def subword_coverage(out: Path, recipe: Recipe, name: str, manifest_entry: Mapping[str, Any],
                     processors: Sequence[spm.SentencePieceProcessor], top: int) -> dict[str, Any]:
    """Coverage of a subword condition in the layout of the word-level coverage: per language
    and split, ``tokens`` = pieces in the shards (end-of-sentence markers not counted),
    ``oov_tokens`` = pieces that are the unknown token, ``oov_share`` their share.  For valid and
    test, ``oov_types`` and ``top_oov`` name the distinct text spans sentencepiece mapped to the
    unknown piece (re-read from the corpus only when a split has any)."""
    tags = recipe.tags
    classes, tokens = _read_vocab_columns(out / manifest_entry["vocab"], "class", "token")
    unknown = np.asarray([c == SPECIAL and (t == "<unk>" or t.startswith("<unk:")) for c, t in zip(classes, tokens)])
    eos = np.asarray([c == SPECIAL and (t == "<eos>" or t.startswith("<eos:")) for c, t in zip(classes, tokens)])
    counts = {tag: {} for tag in tags}
    for split in SPLITS:
        pieces = np.zeros(len(tags), dtype=np.int64)
        unknowns = np.zeros(len(tags), dtype=np.int64)
        for shard in open_shards(out, name, split).shards:
            ids, offsets, langs = np.asarray(shard.tokens), np.asarray(shard.offsets), np.asarray(shard.langs)
            token_lang = np.repeat(langs, np.diff(offsets))
            for li in range(len(tags)):
                own = ids[token_lang == li]
                pieces[li] += int((~eos[own]).sum())
                unknowns[li] += int(unknown[own].sum())
        for li, tag in enumerate(tags):
            n, k = int(pieces[li]), int(unknowns[li])
            counts[tag][split] = {"tokens": n, "oov_tokens": k, "oov_share": k / n if n else None}
    held_out = [sp for sp in SPLITS if sp != TRAIN]
    spans: dict[tuple[str, str], dict[str, int]] = {(t, sp): {} for t in tags for sp in held_out}
    if any(counts[t][sp]["oov_tokens"] for t in tags for sp in held_out):
        for sentence in iter_sentences(recipe, tuple(held_out)):
            li = tags.index(sentence.lang)
            processor = processors[li]
            for piece in processor.encode(sentence.text, out_type="proto").pieces:
                if processor.is_unknown(piece.id):
                    found = spans[(sentence.lang, sentence.split)]
                    surface = piece.surface.strip()
                    found[surface] = found.get(surface, 0) + 1
    for (tag, split), found in spans.items():
        ranked = sorted(found.items(), key=lambda sc: (-sc[1], sc[0]))
        counts[tag][split]["oov_types"] = len(ranked)
        counts[tag][split]["top_oov"] = [{"surface": s, "count": c} for s, c in ranked[:top]]
    return counts


class PieceSpelling:
    """Per-condition homograph status of a spelling pair from the exported models: the spelling
    encoded as a word of running text (after a space, so with its leading boundary mark)."""

    def __init__(self, processors: Sequence[spm.SentencePieceProcessor], tags: Sequence[str]):
        self.processors = processors
        self.tags = tags
        self.cache: dict[tuple[int, str], tuple[int, ...]] = {}

    def ids(self, lang_index: int, surface: str) -> tuple[int, ...]:
        key = (lang_index, surface)
        if key not in self.cache:
            # add_dummy_prefix gives the word its boundary mark, as a space before it does in a sentence.
            self.cache[key] = tuple(self.processors[lang_index].encode(surface))
        return self.cache[key]

    def status(self, a: str, b: str) -> str:
        """``shared`` when both spellings encode to the same piece ids, ``separate`` when they
        encode to different ids, ``only-<tag>`` / ``absent`` when one / both hold the unknown piece."""
        ids_a, ids_b = self.ids(0, a), self.ids(1, b)
        known_a = not any(self.processors[0].is_unknown(i) for i in ids_a)
        known_b = not any(self.processors[1].is_unknown(i) for i in ids_b)
        if known_a and known_b:
            return "shared" if ids_a == ids_b else "separate"
        if known_a or known_b:
            return f"only-{self.tags[0] if known_a else self.tags[1]}"
        return "absent"


def subword_rows(statistics: Mapping[str, Any], tags: Sequence[str]) -> list[list[str]]:
    """One table row per subword condition (terminal and HTML): fertility and continued-word
    proportion per language, parity ratio, pieces used by both, their token share, identity."""
    rows = []
    a, b = tags
    for name, c in statistics["conditions"].items():
        langs = c["languages"]
        rows.append([name, c["policy"], c["units"], f"{c['size']:,}",
                     *[f"{langs[t]['fertility']:.3f}" for t in tags],
                     *[f"{100 * langs[t]['continued_word_proportion']:.2f}%" for t in tags],
                     f"{c['parity_ratio'][f'{a}/{b}']:.3f}", f"{c['pieces_used_by_both']:,}",
                     f"{100 * c['share_of_tokens_on_pieces_used_by_both']:.2f}%",
                     "holds" if c["size_identity"]["holds"] else "FAILS"])
    return rows


def subword_headers(tags: Sequence[str]) -> list[str]:
    a, b = tags
    return ["condition", "policy", "units", "size", *[f"fertility {t}" for t in tags],
            *[f"continued {t}" for t in tags], f"parity {a}/{b}", "pieces used by both",
            "token share on them", "size identity"]

