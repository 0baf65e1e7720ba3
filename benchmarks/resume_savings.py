"""What `build --resume` saves after a killed build, against a rerun without it, in the same run.

A build is started as a subprocess, paused at a chosen point (the crash-safety test hook
BIVOCAB_TEST_PAUSE) and killed with SIGKILL; the killed directory is copied, then finished once
with ``resume=True`` and once without. Points: ``half`` (killed while writing the middle train
shard) and ``all`` (killed after every shard, before the vocabulary files). Prints times and the
ratio resume / rerun (below 1 = resume is faster), in total and for the shard stage alone (the
scan and the vocabularies are always redone), and checks both give the reference bytes.

    python benchmarks/resume_savings.py                      # the sample corpus recipe
    python benchmarks/resume_savings.py --sentences 200000   # a generated corpus, small shards
"""

from __future__ import annotations

import argparse
import json
import os
import random
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from bivocab import build
from bivocab.manifest import PAUSE_ENV

ROOT = Path(__file__).resolve().parents[1]
WORDS = {"en": "the ferry is late and the wind is cold over Kellhaven harbour quay boat rope tide gull".split(),
         "de": "die Fähre ist spät und der Wind ist kalt über Kellhaven Hafen Kai Boot Tau Flut Möwe".split()}


def generated_recipe(root: Path, sentences: int, max_tokens: int) -> Path:
    rng = random.Random(5)
    for tag, words in WORDS.items():
        (root / tag).mkdir(parents=True)
        lines = (" ".join(rng.choice(words) for _ in range(rng.randint(3, 14))) + f" {i}." for i in range(sentences))
        (root / tag / "part.txt").write_text("\n".join(lines) + "\n", encoding="utf-8")
    recipe = (ROOT / "recipes" / "three-conditions.toml").read_text(encoding="utf-8")
    recipe = recipe.replace("../sample_corpus/", "") + f"\n[shards]\nmax_tokens = {max_tokens}\n"
    (root / "recipe.toml").write_text(recipe, encoding="utf-8")
    return root / "recipe.toml"


def killed_build(recipe: Path, out: Path, point: str) -> None:
    env = {**os.environ, PAUSE_ENV: point, "PYTHONPATH": str(ROOT)}
    proc = subprocess.Popen([sys.executable, "-m", "bivocab", "build", str(recipe), "--out", str(out), "--quiet"],
                            env=env, stderr=subprocess.PIPE, text=True)
    line = proc.stderr.readline()
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    proc.stderr.close()
    if not line.startswith("paused at"):
        raise SystemExit(f"the build did not pause at {point}: {line}")


def tree(out: Path) -> dict[str, bytes]:
    return {p.relative_to(out).as_posix(): p.read_bytes() for p in out.rglob("*")
            if p.is_file() and p.name != ".bivocab.lock"}


def timed_finish(recipe: Path, killed: Path, out: Path, resume: bool) -> tuple[float, float, int]:
    """Total time and time of the shard stage (the only stage resume can shorten) of finishing
    a copy of the killed directory, and the number of shards reused."""
    shutil.copytree(killed, out)
    stages: dict[str, float] = {}
    start = time.perf_counter()
    result = build(recipe, out, resume=resume, progress=lambda stage: stages.setdefault(stage, time.perf_counter()))
    total = time.perf_counter() - start
    return total, stages["vocab files"] - stages["shards"], len(result.reused_shards)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sentences", type=int, default=0, help="generate this many sentences per language "
                        "(default: use the sample corpus)")
    parser.add_argument("--max-tokens", type=int, default=50_000, help="tokens per shard of the generated corpus")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="bivocab-resume-") as tmp:
        work = Path(tmp)
        recipe = (generated_recipe(work / "corpus", args.sentences, args.max_tokens) if args.sentences
                  else ROOT / "recipes" / "three-conditions.toml")
        start = time.perf_counter()
        reference = build(recipe, work / "reference")
        full = time.perf_counter() - start
        manifest = reference.manifest
        train = manifest["conditions"][next(iter(manifest["conditions"]))]["shards"]["train"]
        middle = train[len(train) // 2].split("/", 1)[1]  # "<condition>/train/shard-N" -> "train/shard-N"
        print(f"corpus: {'generated, ' + format(args.sentences, ',') + ' sentences per language' if args.sentences else 'sample'}; "
              f"{reference.total_shards} shards, {len(manifest['files'])} files; full build {full:.2f} s")
        expected = tree(work / "reference")
        for label, point in (("half", f"write:*/provenance/{middle}.npy"), ("all", "stage:vocab files")):
            killed = work / f"killed-{label}"
            killed_build(recipe, killed, point)
            rerun, rerun_shards, _ = timed_finish(recipe, killed, work / f"rerun-{label}", resume=False)
            resumed, resumed_shards, reused = timed_finish(recipe, killed, work / f"resume-{label}", resume=True)
            same = tree(work / f"rerun-{label}") == expected == tree(work / f"resume-{label}")
            print(json.dumps({"killed": label, "reused_shards": reused, "of": reference.total_shards,
                              "rerun_s": round(rerun, 3), "resume_s": round(resumed, 3),
                              "resume_over_rerun": round(resumed / rerun, 3),
                              "shard_stage_rerun_s": round(rerun_shards, 3), "shard_stage_resume_s": round(resumed_shards, 3),
                              "shard_stage_ratio": round(resumed_shards / rerun_shards, 3), "byte_identical": same}))


if __name__ == "__main__":
    main()
