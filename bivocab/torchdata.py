"""PyTorch adapter for the shard reader (optional: importing this module needs torch)."""

from __future__ import annotations

from typing import Iterator

import numpy as np
import torch
from torch.utils.data import IterableDataset, get_worker_info

from .shards import open_shards


class ShardDataset(IterableDataset):
    """Blocks of ``length`` ids of the token stream (or whole sentences when ``length`` is
    None) of one condition and split, as int64 tensors.  The shards are opened in each worker
    process, so the dataset pickles as four strings and an int."""

    def __init__(self, out: str, condition: str, split: str, length: int | None, lang: str | None):
        super().__init__()
        self.out, self.condition, self.split, self.length, self.lang = out, condition, split, length, lang

    def __iter__(self) -> Iterator[torch.Tensor]:
        reader = open_shards(self.out, self.condition, self.split)
        items = (reader.blocks(self.length, self.lang) if self.length is not None
                 else (ids for _, ids in reader.sentences(self.lang)))
        worker = get_worker_info()
        count, index = (1, 0) if worker is None else (worker.num_workers, worker.id)
        for position, ids in enumerate(items):
            if position % count == index:
                yield torch.from_numpy(np.asarray(ids, dtype=np.int64))
