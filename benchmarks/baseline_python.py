"""Baseline (b): the word-level job for one condition written by hand in plain Python, as a
researcher would: regex split, collections.Counter, dict look-up, numpy write.

One shared vocabulary over both files (count pass, then encode pass), ids with an end-of-sentence
token per line, one .npy per input.  Usage: python benchmarks/baseline_python.py OUT FILE...
"""

from __future__ import annotations

import re
import sys
import unicodedata
from collections import Counter
from pathlib import Path

import numpy as np

TOKEN = re.compile(r"\w+(?:'\w+)*|[^\w\s]")


def main(out: Path, files: list[Path]) -> None:
    out.mkdir(parents=True, exist_ok=True)
    counts: Counter = Counter()
    for path in files:
        with open(path, encoding="utf-8") as handle:
            for line in handle:
                counts.update(TOKEN.findall(unicodedata.normalize("NFC", line)))
    vocab = {"<pad>": 0, "<unk>": 1, "<eos>": 2}
    for token, _ in sorted(counts.items(), key=lambda kv: (-kv[1], kv[0])):
        vocab[token] = len(vocab)
    for path in files:
        ids: list[int] = []
        with open(path, encoding="utf-8") as handle:
            for line in handle:
                ids.extend(vocab.get(t, 1) for t in TOKEN.findall(unicodedata.normalize("NFC", line)))
                ids.append(2)
        np.save(out / f"{path.stem}.npy", np.array(ids, dtype=np.uint32))
    with open(out / "vocab.txt", "w", encoding="utf-8") as handle:
        handle.write("\n".join(vocab) + "\n")


if __name__ == "__main__":
    main(Path(sys.argv[1]), [Path(p) for p in sys.argv[2:]])
