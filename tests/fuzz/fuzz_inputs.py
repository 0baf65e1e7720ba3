"""Coverage-guided fuzzing (atheris) of recipe parsing and input reading/cleaning/scanning.

Any exception other than a BivocabError is a crash that atheris reports with the input that
caused it. A short bounded run for CI:

    python tests/fuzz/fuzz_inputs.py -atheris_runs=20000

(any libFuzzer flag works: -max_total_time=60, a corpus directory, -seed=N for a fixed run).
"""

from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path

import atheris

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))  # the checkout, ahead of an installed bivocab
sys.path.insert(0, str(Path(__file__).resolve().parent))

with atheris.instrument_imports(include=["bivocab"]):
    import bivocab.clean  # noqa: F401  (instrumented for coverage feedback)
    import bivocab.recipe  # noqa: F401
    import bivocab.scan  # noqa: F401
    import bivocab.sources  # noqa: F401
    from bivocab.recipe import CleanSpec

from fuzz_targets import SUFFIXES, parse_recipe, read_input

WORKDIR = Path(tempfile.mkdtemp(prefix="bivocab-atheris-"))
NORMAL_FORMS = ("NFC", "NFKC", "none")
INVALID_UTF8 = ("error", "replace", "skip")


def one_input(data: bytes) -> None:
    fdp = atheris.FuzzedDataProvider(data)
    if fdp.ConsumeBool():
        parse_recipe(fdp.ConsumeBytes(fdp.remaining_bytes()), WORKDIR)
        return
    suffix = SUFFIXES[fdp.ConsumeIntInRange(0, len(SUFFIXES) - 1)]
    spec = CleanSpec(normal_form=NORMAL_FORMS[fdp.ConsumeIntInRange(0, 2)], lowercase=fdp.ConsumeBool(),
                     invalid_utf8=INVALID_UTF8[fdp.ConsumeIntInRange(0, 2)],
                     max_chars=fdp.ConsumeIntInRange(0, 100), min_tokens=fdp.ConsumeIntInRange(0, 3),
                     max_tokens=fdp.ConsumeIntInRange(0, 50))
    block_bytes = fdp.ConsumeIntInRange(1, 128)
    read_input(fdp.ConsumeBytes(fdp.remaining_bytes()), suffix, spec, block_bytes, WORKDIR)


def main() -> None:
    atheris.Setup(sys.argv, one_input)
    try:
        atheris.Fuzz()
    finally:
        for name in os.listdir(WORKDIR):
            os.unlink(WORKDIR / name)
        os.rmdir(WORKDIR)


if __name__ == "__main__":
    main()
