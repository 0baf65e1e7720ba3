"""Baseline (d): the word-level job for one condition with the tokenizers library: a WordLevel
model trained by its trainer on both files, then encode_batch in batches of 20,000 lines.

Same normaliser (NFC) and the same segmentation regex as bivocab's exported tokenizers, one
shared vocabulary, ids plus an end-of-sentence token per line written with numpy.
Usage: python benchmarks/baseline_tokenizers.py OUT FILE...
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
from tokenizers import Regex, Tokenizer, models, normalizers, pre_tokenizers, trainers

from bivocab.segment import TOKEN_PATTERN

BATCH = 20_000


def main(out: Path, files: list[Path]) -> None:
    out.mkdir(parents=True, exist_ok=True)
    tokenizer = Tokenizer(models.WordLevel(unk_token="<unk>"))
    tokenizer.normalizer = normalizers.NFC()
    tokenizer.pre_tokenizer = pre_tokenizers.Split(Regex(TOKEN_PATTERN), behavior="removed", invert=True)
    trainer = trainers.WordLevelTrainer(special_tokens=["<pad>", "<unk>", "<eos>"], show_progress=False)
    tokenizer.train([str(p) for p in files], trainer)
    eos = tokenizer.token_to_id("<eos>")
    for path in files:
        pieces = []
        with open(path, encoding="utf-8") as handle:
            while True:
                batch = [line.rstrip("\n") for _, line in zip(range(BATCH), handle)]
                if not batch:
                    break
                for encoding in tokenizer.encode_batch(batch, add_special_tokens=False):
                    pieces.append(np.array(encoding.ids + [eos], dtype=np.uint32))
        np.save(out / f"{path.stem}.npy", np.concatenate(pieces))
    tokenizer.save(str(out / "tokenizer.json"))


if __name__ == "__main__":
    main(Path(sys.argv[1]), [Path(p) for p in sys.argv[2:]])
