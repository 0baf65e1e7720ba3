"""Coverage-guided fuzzing (atheris) of recipe parsing and input reading/cleaning/scanning.

Any exception other than a BivocabError is a crash that atheris reports with the input that
caused it. A short bounded run for CI:

    python tests/fuzz/fuzz_inputs.py -atheris_runs=20000

(any libFuzzer flag works: -max_total_time=60, -seed=N, -max_len=N). Without a corpus directory
the run starts from seeds written here (a valid recipe; a small text in every input format), so
the fuzzer mutates real gzip, zstd, CSV and Parquet files instead of hoping to invent them.

An input is 4 header bytes and a payload: byte 0 even = the payload is a recipe; odd = it is an
input file whose suffix is SUFFIXES[byte 1 % 9], cleaned with the options of byte 2 and read in
blocks of byte 3 + 1 bytes.
"""

from __future__ import annotations

import shutil
import sys
import tempfile
from pathlib import Path

import atheris

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))  # the checkout, ahead of an installed bivocab
sys.path.insert(0, str(Path(__file__).resolve().parent))

with atheris.instrument_imports(include=["bivocab"]):
    import bivocab.clean  # noqa: F401  (instrumented for coverage feedback)
    import bivocab.recipe  # noqa: F401
    import bivocab.rows  # noqa: F401
    import bivocab.scan  # noqa: F401
    import bivocab.sources  # noqa: F401  (instrumented too)
    from bivocab.recipe import CleanSpec

from fuzz_targets import SUFFIXES, VALID_RECIPE, encode_as, parse_recipe, read_input

WORKDIR = Path(tempfile.mkdtemp(prefix="bivocab-atheris-"))
NORMAL_FORMS = ("NFC", "NFKC", "none")
INVALID_UTF8 = ("error", "replace", "skip")
SEED_TEXT = "The ferry is late.\r\nDie Fähre ist spät.\n\n\ufeffKai 3,50 €\x00!\rEnd".encode("utf-8")


def clean_spec(flags: int) -> CleanSpec:
    return CleanSpec(normal_form=NORMAL_FORMS[flags % 3], lowercase=bool(flags & 4),
                     invalid_utf8=INVALID_UTF8[(flags >> 3) % 3], max_chars=(0, 6, 80)[(flags >> 5) % 3],
                     min_tokens=(flags >> 6) % 3, max_tokens=(0, 3)[(flags >> 7) & 1])


def one_input(data: bytes) -> None:
    if len(data) < 4:
        return
    target, suffix, flags, block = data[:4]
    if target % 2 == 0:
        parse_recipe(data[4:], WORKDIR)
    else:
        read_input(data[4:], SUFFIXES[suffix % len(SUFFIXES)], clean_spec(flags), block + 1, WORKDIR)


def write_seeds(directory: Path) -> None:
    (directory / "recipe").write_bytes(b"\x00\x00\x00\x00" + VALID_RECIPE.encode("utf-8"))
    for i, suffix in enumerate(SUFFIXES):
        for flags, block in ((0x09, 0x3f), (0x10, 0x02)):  # replace / error, large / tiny reads
            (directory / f"input{suffix}-{flags}").write_bytes(bytes([1, i, flags, block]) + encode_as(suffix, SEED_TEXT))


def main() -> None:
    argv = list(sys.argv)
    seeds = None
    if not any(not arg.startswith("-") for arg in argv[1:]):  # no corpus directory given
        seeds = Path(tempfile.mkdtemp(prefix="bivocab-atheris-seeds-"))
        write_seeds(seeds)
        argv.append(str(seeds))
    atheris.Setup(argv, one_input)
    try:
        atheris.Fuzz()
    finally:
        shutil.rmtree(WORKDIR, ignore_errors=True)
        if seeds is not None:
            shutil.rmtree(seeds, ignore_errors=True)


if __name__ == "__main__":
    main()
