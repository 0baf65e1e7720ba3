"""Subword conditions: seeded training samples, sentencepiece models trained per sharing policy,
one merged id space per condition, and the subword statistics the audit reports.

The rules (sample, models, merge, exported files, statistics) are documented in docs/subword.md.
"""

from __future__ import annotations

import csv
import importlib
import io
import json
import unicodedata
import zlib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator, Sequence

import numpy as np

from .errors import BivocabError
from .mix import smoothed_probabilities
from .recipe import SPLITS, CleanSpec, ConditionSpec, Recipe, SubwordSpec
from .scan import ragged_gather
from .segment import NUMBER, PUNCT, SPECIAL, SYMBOL, WORD, segment
from .vocab import SHARED, Entry, EntryView, Vocabulary, special_tokens, tagged_token, tokenizer_json

BOUNDARY = "\u2581"                   # sentencepiece's visible space, written before a word
SPACE, BYTE = "space", "byte"         # piece classes beyond the token classes


class _OnFirstUse:
    """A module (or an attribute path in it) imported when first used: sentencepiece and its
    protobuf classes cost a word-level build about 30 ms of start-up it has no use for."""

    def __init__(self, module: str, *attributes: str) -> None:
        self._module, self._attributes = module, attributes

    def __getattr__(self, name: str) -> Any:
        target = importlib.import_module(self._module)
        for attribute in self._attributes:
            target = getattr(target, attribute)
        return getattr(target, name)


spm = _OnFirstUse("sentencepiece")
model_pb2 = _OnFirstUse("sentencepiece.sentencepiece_model_pb2")
_Piece = _OnFirstUse("sentencepiece.sentencepiece_model_pb2", "ModelProto", "SentencePiece")
_SALT = zlib.crc32(b"bivocab subword sample")   # separates this stream from the other seeded draws
_ENCODE_BATCH = 20_000
# Marks the string of another language's piece inside a per-language model file.  Cleaning turns
# U+001F into a space, so no normalised sentence holds it and no merge can ever form such a piece.
_FOREIGN = "\x1f"


# --- sampling ------------------------------------------------------------------------------------

def allocate(total: int, shares: Sequence[float]) -> list[int]:
    """Split ``total`` into integers proportional to ``shares`` (largest remainder; ties go to
    the earlier language), so the parts always add up to ``total``.

    >>> allocate(10, [0.75, 0.25])
    [8, 2]
    """
    exact = np.asarray(shares, dtype=np.float64) * total
    parts = np.floor(exact).astype(np.int64)
    remainder = exact - parts
    order = sorted(range(len(parts)), key=lambda i: (-remainder[i], i))
    for i in order[: total - int(parts.sum())]:
        parts[i] += 1
    return [int(p) for p in parts]


def draw_rows(eligible: np.ndarray, count: int, seed: int, lang_index: int) -> np.ndarray:
    """``count`` rows of ``eligible`` in a seeded order that depends only on the seed and the
    language, so smaller samples are prefixes of larger ones.  Asking for more rows than exist
    repeats the whole permutation (upsampling) and then a prefix of it.

    >>> draw_rows(np.arange(4), 6, seed=1, lang_index=0)[:4].tolist() == draw_rows(np.arange(4), 4, 1, 0).tolist()
    True
    """
    rng = np.random.Generator(np.random.PCG64(np.random.SeedSequence([seed, _SALT, lang_index])))
    order = eligible[rng.permutation(len(eligible))]
    if len(order) == 0:
        return order
    repeats, rest = divmod(count, len(order))
    return np.concatenate([order] * repeats + [order[:rest]])


# --- the work-dir text ---------------------------------------------------------------------------

class SentenceText:
    """The normalised sentences of one language as the scan wrote them (``<tag>.text``: one LF
    after each sentence, in the row order of the scan arrays)."""

    def __init__(self, path: Path, sentences: int):
        size = path.stat().st_size
        self.data = np.memmap(path, dtype=np.uint8, mode="r") if size else np.zeros(0, np.uint8)
        self.ends = np.flatnonzero(self.data == 10)
        if len(self.ends) != sentences:
            raise BivocabError(f"{path}: holds {len(self.ends)} sentences, the scan counted {sentences}")
        self.starts = np.concatenate(([0], self.ends[:-1] + 1)).astype(np.int64)

    def __len__(self) -> int:
        return len(self.ends)

    def byte_lengths(self) -> np.ndarray:
        return self.ends - self.starts

    def sentence(self, row: int) -> str:
        return bytes(self.data[self.starts[row]:self.ends[row]]).decode("utf-8")

    def batches(self, size: int = _ENCODE_BATCH) -> Iterator[list[str]]:
        for first in range(0, len(self), size):
            last = min(first + size, len(self)) - 1
            yield bytes(self.data[self.starts[first]:self.ends[last]]).decode("utf-8").split("\n")


# --- training ------------------------------------------------------------------------------------

def is_joint(condition: ConditionSpec) -> bool:
    """One model for both languages exactly when the condition shares every token class."""
    return all(choice == "shared" for choice in condition.classes.values())


def trainer_settings(units: str, vocab_size: int, spec: SubwordSpec) -> dict[str, Any]:
    """Every sentencepiece option that can change the model, set explicitly (docs/subword.md)."""
    return {
        "model_type": units, "vocab_size": vocab_size,
        "character_coverage": spec.character_coverage, "byte_fallback": spec.byte_fallback,
        # Our cleaning already normalised the text; sentencepiece must not rewrite it again,
        # so that a shared spelling means the same at word and at subword level.
        "normalization_rule_name": "identity", "add_dummy_prefix": True,
        "remove_extra_whitespaces": False, "split_by_whitespace": True,
        "split_by_unicode_script": True, "split_by_number": True, "split_digits": False,
        "max_sentencepiece_length": 16, "max_sentence_length": spec.max_sentence_bytes,
        "input_sentence_size": 0, "shuffle_input_sentence": False, "num_threads": spec.train_threads,
        "hard_vocab_limit": spec.exact_size, "unk_id": 0, "bos_id": -1, "eos_id": -1, "pad_id": -1,
    }


def train_model(sentences: Iterator[str], units: str, vocab_size: int, spec: SubwordSpec,
                label: str) -> model_pb2.ModelProto:
    """Train one sentencepiece model from an iterator; machine-specific fields are cleared."""
    buffer = io.BytesIO()
    try:
        spm.SentencePieceTrainer.train(sentence_iterator=sentences, model_writer=buffer, minloglevel=2,
                                       **trainer_settings(units, vocab_size, spec))
    except RuntimeError as exc:
        reason = str(exc).split("] ", 1)[-1]
        raise BivocabError(f"{label}: sentencepiece could not train {vocab_size} pieces: {reason}") from None
    proto = model_pb2.ModelProto()
    proto.ParseFromString(buffer.getvalue())
    proto.trainer_spec.ClearField("input")
    proto.trainer_spec.ClearField("model_prefix")
    return proto


def piece_class(piece: str, piece_type: int) -> str:
    """Class of a sentencepiece piece: ``special``, ``byte``, ``space`` (the bare word boundary),
    else by its characters without the boundary mark: ``word`` if it holds a letter, ``number``
    if it holds a digit, ``punct`` if it starts with punctuation, otherwise ``symbol``.

    >>> [piece_class(p, _Piece.NORMAL) for p in ["\u2581Hafen", "\u25813,50", "\u2581,", "\u20ac", "\u2581"]]
    ['word', 'number', 'punct', 'symbol', 'space']
    """
    if piece_type in (_Piece.UNKNOWN, _Piece.CONTROL):
        return SPECIAL
    if piece_type == _Piece.BYTE:
        return BYTE
    core = piece.replace(BOUNDARY, "")
    if not core:
        return SPACE
    categories = [unicodedata.category(ch)[0] for ch in core]
    if "L" in categories:
        return WORD
    if "N" in categories:
        return NUMBER
    return PUNCT if categories[0] == "P" else SYMBOL


@dataclass
class _MergedPiece:
    surface: str
    piece_type: int
    cls: str
    lang: str                        # a tag, or SHARED once both languages' models hold it
    scores: dict[int, float]         # language index -> score in that language's model


def merge_pieces(models: Sequence[model_pb2.ModelProto], tags: tuple[str, ...],
                 condition: ConditionSpec) -> list[_MergedPiece]:
    """The condition's pieces in id order (specials excluded).

    Joint model: its pieces in model order, all shared.  Separate models: the first language's
    pieces in model order, then the second's; a piece both models learned becomes one shared
    entry when its class is shared under the condition (``space`` and ``byte`` pieces are never
    merged between separate models: they stand for whitespace and for unseen characters of any
    class)."""
    if len(models) == 1:
        return [_MergedPiece(p.piece, p.type, piece_class(p.piece, p.type), SHARED,
                             {li: p.score for li in range(len(tags))})
                for p in models[0].pieces if p.type != _Piece.UNKNOWN]
    merged: list[_MergedPiece] = []
    shareable: dict[str, _MergedPiece] = {}
    for li, model in enumerate(models):
        for p in model.pieces:
            if p.type == _Piece.UNKNOWN:
                continue
            cls = piece_class(p.piece, p.type)
            share = condition.classes.get(cls) == "shared"
            earlier = shareable.get(p.piece) if share else None
            if earlier is not None:
                earlier.lang = SHARED
                earlier.scores[li] = p.score
                continue
            item = _MergedPiece(p.piece, p.type, cls, tags[li], {li: p.score})
            merged.append(item)
            if share:
                shareable[p.piece] = item
    return merged


def export_model(template: model_pb2.ModelProto, lang_index: int, tags: tuple[str, ...],
                 specials: list[tuple[str, str]], pieces: list[_MergedPiece], unk_id: int,
                 eos_id: int | None, pad_id: int | None) -> bytes:
    """The model file of one language in the condition's id space: piece i of the file is entry
    i of vocab.tsv.  The language's own pieces keep their type and score; another language's
    pieces are UNUSED placeholders named ``U+001F tag U+001F piece`` that encoding never emits."""
    proto = model_pb2.ModelProto()
    proto.CopyFrom(template)
    del proto.pieces[:]
    for i, (token, _) in enumerate(specials):
        proto.pieces.add(piece=token, score=0.0, type=_Piece.UNKNOWN if i == unk_id else _Piece.CONTROL)
    for item in pieces:
        if lang_index in item.scores:
            proto.pieces.add(piece=item.surface, score=item.scores[lang_index], type=item.piece_type)
        else:
            proto.pieces.add(piece=f"{_FOREIGN}{item.lang}{_FOREIGN}{item.surface}", score=0.0,
                             type=_Piece.UNUSED)
    spec = proto.trainer_spec
    spec.vocab_size = len(proto.pieces)
    spec.unk_id, spec.unk_piece = unk_id, specials[unk_id][0]
    spec.bos_id = -1
    spec.eos_id = -1 if eos_id is None else eos_id
    if eos_id is not None:
        spec.eos_piece = specials[eos_id][0]
    spec.pad_id = -1 if pad_id is None else pad_id
    if pad_id is not None:
        spec.pad_piece = specials[pad_id][0]
    return proto.SerializeToString(deterministic=True)


def unigram_tokenizer_json(model: bytes, vocab: Vocabulary, lang_index: int, clean: CleanSpec) -> str:
    """A ``tokenizers`` Unigram tokenizer for one language of a unigram condition, giving the
    shard ids (end-of-sentence token included) for that language's sentences.

    It keeps the word-level tokenizer's normalizer (our cleaning) and end-of-sentence
    post-processor and swaps in the model: sentencepiece's pieces and scores in the condition's
    id space, a Metaspace pre-tokenizer (sentencepiece's pieces never hold U+2581 past their first
    character, so splitting there changes nothing) and byte fallback.  Specials, and the other
    language's placeholders, are named with a leading U+001F in the model's vocabulary so that no
    text can match them, as sentencepiece never matches control pieces in text."""
    from tokenizers import Tokenizer

    proto = model_pb2.ModelProto()
    proto.ParseFromString(model)
    pieces = [[f"{_FOREIGN}{p.piece}" if p.type in (_Piece.CONTROL, _Piece.UNKNOWN) else p.piece,
               p.score if p.type in (_Piece.NORMAL, _Piece.BYTE) else 0.0] for p in proto.pieces]
    doc = json.loads(tokenizer_json(vocab, lang_index, clean))
    doc["model"] = {"type": "Unigram", "unk_id": proto.trainer_spec.unk_id, "vocab": pieces,
                    "byte_fallback": proto.trainer_spec.byte_fallback}
    doc["pre_tokenizer"] = {"type": "Metaspace", "replacement": BOUNDARY, "prepend_scheme": "always", "split": True}
    doc["decoder"] = {"type": "Sequence", "decoders": [
        {"type": "ByteFallback"},
        {"type": "Metaspace", "replacement": BOUNDARY, "prepend_scheme": "always", "split": True}]}
    return Tokenizer.from_str(json.dumps(doc, ensure_ascii=False)).to_str(pretty=True) + "\n"


def tokenizer_path(condition: str, tag: str) -> str:
    return f"{condition}/tokenizer.{tag}.json"


# --- one condition -------------------------------------------------------------------------------

@dataclass(frozen=True)
class SubwordCondition:
    """A trained and encoded subword condition: the vocabulary (identity lookup tables), the
    exported model file per language, and every sentence's piece ids (row order of the scan)."""

    name: str
    vocab: Vocabulary
    models: tuple[bytes, ...]
    ids: tuple[np.ndarray, ...]
    lengths: tuple[np.ndarray, ...]
    starts: tuple[np.ndarray, ...]
    record: dict[str, Any]             # what build.json records under the condition's "subword"

    def gather(self, lang_index: int, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Lengths and concatenated piece ids of the given rows of one language."""
        lengths = self.lengths[lang_index][rows]
        return lengths, np.asarray(self.ids[lang_index])[ragged_gather(self.starts[lang_index][rows], lengths)]


def model_path(condition: str, tag: str) -> str:
    return f"{condition}/sentencepiece.{tag}.model"


def _vocab_sizes(condition: ConditionSpec, n_specials: int, n_models: int) -> list[int]:
    """sentencepiece ``vocab_size`` per model (each model's own <unk> is one of our specials)."""
    spec = condition.subword
    assert spec is not None
    if spec.size_per_language:
        return [spec.size_per_language + 1] * n_models
    room = spec.size - n_specials
    if room < n_models:
        raise BivocabError(f"condition '{condition.name}': size {spec.size} leaves no room beyond the "
                           f"{n_specials} special tokens")
    base, extra = divmod(room, n_models)
    return [base + 1 + (1 if i < extra else 0) for i in range(n_models)]


def training_sample(condition: ConditionSpec, recipe: Recipe, texts: Sequence[SentenceText],
                    splits: Sequence[np.ndarray]) -> tuple[list[np.ndarray], dict[str, Any]]:
    """The rows each language contributes to training (docs/subword.md, "Training sample") and
    what build.json records about them."""
    spec = condition.subword
    assert spec is not None
    train_code = SPLITS.index("train")
    eligible, record = [], {}
    for li, tag in enumerate(recipe.tags):
        in_train = np.flatnonzero(np.asarray(splits[li]) == train_code)
        fits = texts[li].byte_lengths()[in_train] <= spec.max_sentence_bytes
        eligible.append(in_train[fits])
        record[tag] = {"train_sentences": int(len(in_train)), "too_long": int((~fits).sum())}
        if not fits.any():
            raise BivocabError(f"condition '{condition.name}': language '{tag}' has no train sentence of at "
                               f"most {spec.max_sentence_bytes} bytes to train on")
    available = [len(e) for e in eligible]
    if is_joint(condition):
        total = spec.sample_sentences * len(available) if spec.sample_sentences else sum(available)
        shares = smoothed_probabilities(available, spec.sample_alpha)
        counts = allocate(total, shares)
        for tag, share in zip(recipe.tags, shares.tolist()):
            record[tag]["share"] = share
    else:
        counts = [min(spec.sample_sentences, n) if spec.sample_sentences else n for n in available]
    for tag, count in zip(recipe.tags, counts):
        record[tag]["drawn"] = count
    return [draw_rows(e, c, recipe.seed, li) for li, (e, c) in enumerate(zip(eligible, counts))], record


def train_models(condition: ConditionSpec, recipe: Recipe, texts: Sequence[SentenceText],
                 drawn: Sequence[np.ndarray], sizes: Sequence[int]) -> list[model_pb2.ModelProto]:
    """One joint model on the seeded mix of both samples, or one model per language."""
    spec = condition.subword
    assert spec is not None
    if is_joint(condition):
        langs = np.concatenate([np.full(len(d), li, np.uint8) for li, d in enumerate(drawn)])
        rows = np.concatenate(drawn)
        rng = np.random.Generator(np.random.PCG64(np.random.SeedSequence([recipe.seed, _SALT, len(drawn)])))
        stream = (texts[langs[i]].sentence(int(rows[i])) for i in rng.permutation(len(rows)))
        return [train_model(stream, condition.units, sizes[0], spec, f"condition '{condition.name}'")]
    return [train_model((texts[li].sentence(int(r)) for r in drawn[li]), condition.units, sizes[li], spec,
                        f"condition '{condition.name}' (language '{tag}')")
            for li, tag in enumerate(recipe.tags)]


def build_subword_condition(condition: ConditionSpec, recipe: Recipe, texts: Sequence[SentenceText],
                            splits: Sequence[np.ndarray], work: Path, jobs: int) -> SubwordCondition:
    """Sample, train, merge, export and encode one subword condition.

    ``texts[l]`` and ``splits[l]`` are language l's sentences and split codes (scan row order)."""
    spec = condition.subword
    assert spec is not None
    tags = recipe.tags
    joint = is_joint(condition)
    vs = condition.vocab
    specials = special_tokens(tags, vs.unknown, vs.eos, vs.pad)
    index = {token: i for i, (token, _) in enumerate(specials)}
    unk_ids = tuple(index["<unk>"] if vs.unknown == "shared" else index[f"<unk:{t}>"] for t in tags)
    eos_ids = None if vs.eos == "none" else tuple(
        index["<eos>"] if vs.eos == "shared" else index[f"<eos:{t}>"] for t in tags)
    pad_id = index.get("<pad>")

    train_code = SPLITS.index("train")
    drawn, sample_record = training_sample(condition, recipe, texts, splits)
    sizes = _vocab_sizes(condition, len(specials), 1 if joint else len(tags))
    models = train_models(condition, recipe, texts, drawn, sizes)
    pieces = merge_pieces(models, tags, condition)
    files = tuple(export_model(models[0 if joint else li], li, tags, specials, pieces, unk_ids[li],
                               None if eos_ids is None else eos_ids[li], pad_id) for li in range(len(tags)))

    n_entries = len(specials) + len(pieces)
    dtype = np.uint16 if n_entries <= 1 << 16 else np.uint32
    counts_per_lang = np.zeros((len(tags), n_entries), dtype=np.int64)
    ids_out, lengths_out, starts_out = [], [], []
    for li, tag in enumerate(tags):
        processor = spm.SentencePieceProcessor(model_proto=files[li])
        ids, lengths = _encode_language(processor, texts[li], work / f"{condition.name}.{tag}", jobs)
        starts = np.concatenate(([0], np.cumsum(lengths)[:-1])).astype(np.int64)
        train_tokens = np.repeat(np.asarray(splits[li]) == train_code, lengths)
        counts_per_lang[li] = np.bincount(np.asarray(ids)[train_tokens], minlength=n_entries)[:n_entries]
        ids_out.append(ids)
        lengths_out.append(lengths)
        starts_out.append(starts)

    counts = counts_per_lang.T.copy()
    counts[:len(specials)] = 0          # a special's count stays 0, as in a word-level vocabulary
    names = [token for token, _ in specials]
    tokens = names + [item.surface if item.lang == SHARED else tagged_token(item.surface, item.lang) for item in pieces]
    identity = np.arange(n_entries, dtype=dtype)
    vocab = Vocabulary(condition.name, tags, tokens, names + [item.surface for item in pieces],
                       [lang for _, lang in specials] + [item.lang for item in pieces],
                       [SPECIAL] * len(specials) + [item.cls for item in pieces], counts,
                       unk_ids, eos_ids, pad_id, tuple(identity for _ in tags))
    _check_unique(condition.name, vocab.entries)
    record = {
        "units": condition.units, "engine": spec.engine, "engine_version": spm.__version__,
        "joint_model": joint,
        "trainer": trainer_settings(condition.units, 0, spec) | {"vocab_size": sizes},
        "model_pieces": {tag: sum(1 for p in pieces if li in p.scores) for li, tag in enumerate(tags)},
        "merged_pieces": sum(1 for p in pieces if p.lang == SHARED) if not joint else 0,
        "sample": sample_record,
    }
    return SubwordCondition(condition.name, vocab, files, tuple(ids_out), tuple(lengths_out),
                            tuple(starts_out), record)


def _encode_language(processor: spm.SentencePieceProcessor, text: SentenceText, stem: Path,
                     jobs: int) -> tuple[np.ndarray, np.ndarray]:
    """Encode every sentence of one language, in row order, into work files; return memory maps
    of the flat ids (uint32) and the per-sentence lengths (int64).  Encoding is deterministic,
    so it may use ``jobs`` threads."""
    ids_path, lengths_path = Path(f"{stem}.ids.bin"), Path(f"{stem}.lengths.bin")
    with open(ids_path, "wb") as ids_file, open(lengths_path, "wb") as lengths_file:
        for batch in text.batches():
            encoded = processor.encode(batch, num_threads=jobs)
            lengths = np.fromiter((len(e) for e in encoded), dtype=np.int64, count=len(encoded))
            flat = np.fromiter((i for e in encoded for i in e), dtype=np.uint32, count=int(lengths.sum()))
            ids_file.write(flat.tobytes())
            lengths_file.write(lengths.tobytes())
    load = lambda path, dtype: (np.memmap(path, dtype=dtype, mode="r") if path.stat().st_size
                                else np.zeros(0, dtype=dtype))
    return load(ids_path, np.uint32), np.asarray(load(lengths_path, np.int64))


def _check_unique(condition: str, entries: EntryView) -> None:
    seen: dict[str, Entry] = {}
    for e in entries:
        other = seen.setdefault(e.token, e)
        if other is not e:
            raise BivocabError(f"condition '{condition}': exported token {e.token!r} of piece ({e.lang}, "
                               f"{e.surface!r}) collides with piece ({other.lang}, {other.surface!r})")


# --- statistics (for the audit) ------------------------------------------------------------------

def word_spans(text: str) -> list[tuple[int, int]]:
    """UTF-8 byte spans of the words of a sentence; a word is a token of bivocab's segmentation
    (any class), the unit of the word-level conditions.

    >>> word_spans("Kellhaven harbour.")
    [(0, 9), (10, 17), (17, 18)]
    """
    data = text.encode("utf-8")
    spans, position = [], 0
    for token in segment(text):
        raw = token.encode("utf-8")
        begin = data.index(raw, position)
        position = begin + len(raw)
        spans.append((begin, position))
    return spans


def pieces_per_word(words: Sequence[tuple[int, int]], pieces: Sequence[tuple[int, int, bool]]) -> np.ndarray:
    """How many pieces make up each word.  ``pieces`` are (begin, end, is_byte) byte spans in
    the sentence as sentencepiece reports them.  A piece belongs to the word holding its last
    byte; a zero-width byte piece (a leading byte of a byte-fallback character) to the word at
    its position; a piece of whitespace only (the boundary mark) to no word.

    >>> pieces_per_word([(0, 4), (5, 7)], [(0, 2, False), (2, 4, False), (4, 7, False)]).tolist()
    [2, 1]
    """
    starts = np.asarray([w[0] for w in words], dtype=np.int64)
    ends = np.asarray([w[1] for w in words], dtype=np.int64)
    counts = np.zeros(len(words), dtype=np.int64)
    for begin, end, is_byte in pieces:
        if end > begin:
            position = end - 1
        elif is_byte:
            position = begin
        else:
            continue
        w = int(np.searchsorted(starts, position, side="right")) - 1
        if w >= 0 and position < ends[w]:
            counts[w] += 1
    return counts


@dataclass(frozen=True)
class WordPieceCounts:
    """Words, pieces and continued words (words of two or more pieces) of some sentences."""

    words: int
    pieces: int
    continued: int

    def __add__(self, other: WordPieceCounts) -> WordPieceCounts:
        return WordPieceCounts(self.words + other.words, self.pieces + other.pieces,
                               self.continued + other.continued)

    @property
    def fertility(self) -> float:
        """Pieces per word (Rust et al. 2021)."""
        return self.pieces / self.words if self.words else 0.0

    @property
    def continued_proportion(self) -> float:
        """Share of words split into two or more pieces (Rust et al. 2021)."""
        return self.continued / self.words if self.words else 0.0


def count_word_pieces(processor: spm.SentencePieceProcessor, text: str) -> WordPieceCounts:
    """Encode one sentence and count its words, pieces (no end-of-sentence marker) and
    continued words."""
    encoded = processor.encode(text, out_type="proto")
    spans = [(p.begin, p.end, processor.is_byte(p.id)) for p in encoded.pieces]
    per_word = pieces_per_word(word_spans(text), spans)
    return WordPieceCounts(len(per_word), len(spans), int((per_word >= 2).sum()))


def _read_vocab_columns(path: Path, *names: str) -> list[list[str]]:
    """Columns of a vocab.tsv (tab-separated with CSV quoting, see ``vocab.tsv_text``)."""
    with open(path, encoding="utf-8", newline="") as handle:
        rows = list(csv.reader(handle, delimiter="\t"))
    header = rows[0]
    return [[row[header.index(name)] for row in rows[1:]] for name in names]


def subword_statistics(build_dir: str | Path, split: str = "test", max_sentences: int = 0) -> dict[str, Any]:
    """Statistics of every subword condition of a build, as a JSON-ready dict (keys in
    docs/subword.md).  Words and pieces are counted on ``split`` (the first ``max_sentences``
    sentences per language in input order when > 0); id sharing on that split's shards."""
    from .corpus import iter_sentences
    from .manifest import read_manifest
    from .recipe import recipe_from_manifest
    from .shards import open_shards

    out = Path(build_dir)
    manifest = read_manifest(out)
    if manifest is None:
        raise BivocabError(f"{out}: no build.json: not a complete bivocab build")
    if split not in SPLITS:
        raise BivocabError(f"unknown split {split!r} (known: {', '.join(SPLITS)})")
    names = [n for n, c in sorted(manifest["conditions"].items()) if c.get("units", "word") != "word"]
    recipe = recipe_from_manifest(manifest, out)
    tags = recipe.tags
    processors = {n: [spm.SentencePieceProcessor(model_file=str(out / manifest["conditions"][n]["models"][t]))
                      for t in tags] for n in names}
    counts = {n: [WordPieceCounts(0, 0, 0) for _ in tags] for n in names}
    seen = [0] * len(tags)
    sentences = [0] * len(tags)
    for sentence in (iter_sentences(recipe, (split,)) if names else ()):
        li = tags.index(sentence.lang)
        seen[li] += 1
        if max_sentences and seen[li] > max_sentences:
            continue
        sentences[li] += 1
        for n in names:
            counts[n][li] = counts[n][li] + count_word_pieces(processors[n][li], sentence.text)

    result: dict[str, Any] = {
        "split": split,
        "text": "comparable (not parallel): the parity ratio compares pieces per word, not pieces per translated sentence",
        "conditions": {},
    }
    for n in names:
        entry = manifest["conditions"][n]
        classes, entry_langs, entry_tokens = _read_vocab_columns(out / entry["vocab"], "class", "lang", "token")
        special = np.asarray([c == SPECIAL for c in classes])
        usage = np.zeros((len(tags), len(classes)), dtype=np.int64)
        reader = open_shards(out, n, split)
        for shard in reader.shards:
            tokens, offsets, langs = np.asarray(shard.tokens), np.asarray(shard.offsets), np.asarray(shard.langs)
            token_lang = np.repeat(langs, np.diff(offsets))
            for li in range(len(tags)):
                usage[li] += np.bincount(tokens[token_lang == li], minlength=len(classes))[:len(classes)]
        unknown_ids = [i for i, (c, t) in enumerate(zip(classes, entry_tokens))
                       if c == SPECIAL and (t == "<unk>" or t.startswith("<unk:"))]
        unknown_tokens = usage[:, unknown_ids].sum(axis=1)
        usage[:, special] = 0
        both = (usage > 0).all(axis=0)
        usable = [np.asarray([not (p.is_unused(i) or p.is_control(i) or p.is_unknown(i))
                              for i in range(p.get_piece_size())]) for p in processors[n]]
        in_both = int(np.logical_and.reduce(usable).sum())
        n_specials = int(special.sum())
        shared_entries = sum(1 for c, l in zip(classes, entry_langs) if c != SPECIAL and l == SHARED)
        languages = {}
        for li, tag in enumerate(tags):
            c = counts[n][li]
            total = int(usage[li].sum())
            languages[tag] = {
                "sentences": sentences[li], "words": c.words, "pieces": c.pieces,
                "fertility": c.fertility, "continued_words": c.continued,
                "continued_word_proportion": c.continued_proportion,
                "shard_tokens": total + int(unknown_tokens[li]),
                "unknown_tokens": int(unknown_tokens[li]),
                "tokens_on_pieces_used_by_both": int(usage[li][both].sum()),
                "share_of_tokens_on_pieces_used_by_both": float(usage[li][both].sum() / total) if total else 0.0,
            }
        fertilities = [counts[n][li].fertility for li in range(len(tags))]
        all_tokens = int(usage.sum())
        result["conditions"][n] = {
            "policy": entry["policy"], "units": entry["units"], "size": entry["size"],
            "languages": languages,
            "parity_ratio": {f"{tags[0]}/{tags[1]}": fertilities[0] / fertilities[1] if fertilities[1] else 0.0},
            "pieces_used_by_both": int(both.sum()),
            "share_of_tokens_on_pieces_used_by_both": float(usage[:, both].sum() / all_tokens) if all_tokens else 0.0,
            "size_identity": {
                "specials": n_specials,
                "model_pieces": {t: int(u.sum()) for t, u in zip(tags, usable)},
                "pieces_in_both_models": in_both,
                "size": len(classes),
                "shared_entries": shared_entries,
                # |V| = specials + |P_a| + |P_b| - |P_a & P_b|, and the ids both models can emit are
                # exactly the entries vocab.tsv marks as shared.
                "holds": (n_specials + sum(int(u.sum()) for u in usable) - in_both == len(classes)
                          and in_both == shared_entries),
            },
        }
    return result
