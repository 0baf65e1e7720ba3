"""Baseline (c): the word-level job for one condition with pyarrow compute kernels (its own
thread pool; no Python object per token).

Punctuation is spaced out with a regex, lines are split on whitespace, the tokens of both files
are dictionary-encoded together, counted with numpy.bincount, ranked, and each file's ids (plus
an end-of-sentence token per line) written with numpy.  Usage: python benchmarks/baseline_pyarrow.py OUT FILE...
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pv

# pyarrow's regex engine is RE2: spell the classes with \p{...} (its \w is ASCII-only).
PUNCT = r"([^\p{L}\p{M}\p{N}\s'])"


def read_lines(path: Path) -> pa.Array:
    table = pv.read_csv(path, read_options=pv.ReadOptions(column_names=["text"], block_size=16 << 20),
                        parse_options=pv.ParseOptions(delimiter="\x01", quote_char=False, escape_char=False),
                        convert_options=pv.ConvertOptions(column_types={"text": pa.large_string()}))
    return table.column("text").combine_chunks()


def main(out: Path, files: list[Path]) -> None:
    out.mkdir(parents=True, exist_ok=True)
    per_file = []
    for path in files:
        lines = pc.utf8_normalize(read_lines(path), "NFC")
        spaced = pc.replace_substring_regex(lines, PUNCT, r" \1 ")
        words = pc.utf8_split_whitespace(spaced)
        flat = words.flatten()
        keep = pc.not_equal(pc.binary_length(flat), 0)      # split_whitespace leaves "" at the ends
        per_file.append((pc.filter(flat, keep), pc.list_value_length(words).to_numpy(), keep))
    # One dictionary over both files: chunked dictionary_encode unifies it.
    encoded = pc.dictionary_encode(pa.chunked_array([f for f, _, _ in per_file])).unify_dictionaries()
    dictionary = encoded.chunk(0).dictionary
    indices = [c.indices.to_numpy() for c in encoded.chunks]
    counts = np.bincount(np.concatenate(indices), minlength=len(dictionary))
    order = np.lexsort((np.arange(len(counts)), -counts))
    lut = np.empty(len(counts), dtype=np.uint32)
    lut[order] = np.arange(3, 3 + len(counts), dtype=np.uint32)
    for path, ids, (_, lengths, keep) in zip(files, indices, per_file):
        # Sentence lengths after dropping the empty strings, then interleave the <eos> id 2.
        kept = np.add.reduceat(keep.to_numpy(zero_copy_only=False).astype(np.int64),
                               np.concatenate(([0], np.cumsum(lengths)[:-1]))) if len(lengths) else lengths
        kept = np.where(lengths == 0, 0, kept)
        offsets = np.concatenate(([0], np.cumsum(kept + 1)))
        tokens = np.full(int(offsets[-1]), 2, dtype=np.uint32)
        body = np.ones(len(tokens), dtype=bool)
        body[offsets[1:] - 1] = False
        tokens[body] = lut[ids]
        np.save(out / f"{path.stem}.npy", tokens)
    with open(out / "vocab.txt", "w", encoding="utf-8") as handle:
        handle.write("\n".join(["<pad>", "<unk>", "<eos>"] + dictionary.take(pa.array(order)).to_pylist()) + "\n")


if __name__ == "__main__":
    main(Path(sys.argv[1]), [Path(p) for p in sys.argv[2:]])
