"""What the fuzzers exercise: recipe parsing and input reading/cleaning/scanning. Each target
accepts any input; it may end in a BivocabError (a clean one-line user error) and nothing else.
Shared by the hypothesis properties (tests/test_fuzz_properties.py) and the atheris harness."""

from __future__ import annotations

import bz2
import gzip
import io
import json
import lzma
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import zstandard

import bivocab.scan
from bivocab.errors import BivocabError
from bivocab.manifest import canonical_json
from bivocab.recipe import CleanSpec, SplitSpec, load_recipe, recipe_from_manifest
from bivocab.scan import ScanTask, scan_block
from bivocab.sources import InputFile, read_blocks
from bivocab.splits import split_thresholds

SUFFIXES = (".txt", ".gz", ".bz2", ".xz", ".zst", ".jsonl", ".csv", ".tsv", ".parquet")
THRESHOLDS = split_thresholds(SplitSpec())
VALID_RECIPE = """[build]
name = "kellhaven"
seed = 3
[languages.en]
inputs = ["en/*.txt"]
[languages.de]
inputs = ["de/*.txt"]
[[condition]]
name = "shared"
policy = "shared"
"""


def encode_as(suffix: str, text: bytes) -> bytes:
    """``text`` (lines) as the content of an input file with ``suffix``: compressed, or as rows
    of a JSON Lines, CSV/TSV or Parquet file with a ``text`` field."""
    lines = text.decode("utf-8", errors="replace").splitlines()
    if suffix == ".parquet":
        sink = io.BytesIO()
        pq.write_table(pa.table({"text": lines or [""]}), sink)
        return sink.getvalue()
    encoders = {".gz": gzip.compress, ".bz2": bz2.compress, ".xz": lzma.compress,
                ".zst": lambda b: zstandard.ZstdCompressor().compress(b),
                ".jsonl": lambda b: "".join(json.dumps({"text": line}) + "\n" for line in lines).encode("utf-8"),
                ".csv": lambda b: b"text\n" + b, ".tsv": lambda b: b"text\n" + b}
    return encoders.get(suffix, lambda b: b)(text)


def parse_recipe(text: bytes, workdir: Path) -> None:
    """Parse a recipe; one that parses must come back unchanged from its build.json form
    (bivocab verify rebuilds from that form)."""
    path = workdir / "recipe.toml"
    path.write_bytes(text)
    try:
        recipe = load_recipe(path, resolve_inputs=False)
    except BivocabError:
        return
    resolved = json.loads(canonical_json(recipe.resolved()))
    again = recipe_from_manifest({"recipe": resolved, "recipe_file": "recipe.toml"}, workdir)
    assert json.loads(canonical_json(again.resolved())) == resolved


def read_input(data: bytes, suffix: str, spec: CleanSpec, block_bytes: int, workdir: Path) -> int:
    """Read, clean and scan one input file; check the arrays of every block agree. Returns the
    number of sentences kept."""
    path = workdir / f"input{suffix}"
    path.write_bytes(data)
    # Each input starts from an empty segmentation cache, so that a failure never depends on the
    # inputs before it (and the cache, bounded by entries not bytes, cannot grow with noise).
    bivocab.scan.release_tables()
    kept = 0
    types = 0   # worker type ids reported so far (a block's tokens may use those of earlier blocks)
    try:
        for block in read_blocks(InputFile(path, path.name, "en"), 0, block_bytes=block_bytes):
            result = scan_block(ScanTask(block, path.name, "en", spec, 5, THRESHOLDS, session="fuzz"))
            types += len(result.new_types)
            assert int(result.lengths.sum()) == len(result.tokens)
            assert len(result.line_numbers) == len(result.lengths) == len(result.splits)
            numbers = {block.line_number(i) for i in range(block.line_count)}
            assert set(result.line_numbers.tolist()) <= numbers
            assert len(result.tokens) == 0 or int(result.tokens.max()) < types
            kept += len(result.lengths)
    except BivocabError:
        return kept
    return kept
