"""End-to-end benchmark of the word-level build against baselines measured in the same run.

Methods: ``wc -w`` (the read limit), a hand-written Python script, pyarrow compute kernels and
the tokenizers library (each doing the one-condition job), and ``bivocab build`` with one and
three conditions.  Every method runs as its own process; its time is wall-clock, its peak
memory the largest sum of resident set sizes over the process and all its descendants
(sampled from /proc every 50 ms; pages shared between processes are counted in each).
Throughput is always the corpus's ``wc -w`` word count divided by the time.

    python benchmarks/run.py --size 5m                   # medians of 3, all methods
    python benchmarks/run.py --size 50m --repeat 1 --methods wc,pyarrow,bivocab-3,bivocab-3-jobs1

Prints one table and writes benchmarks/results/<size>-<date>.json (and <size>-latest.json).
``--markdown FILE...`` prints earlier JSON results as the Markdown kept in benchmarks/RESULTS.md.
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import platform
import shutil
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
BASELINES = ("wc", "python", "pyarrow", "tokenizers")
METHODS = BASELINES + ("bivocab-1", "bivocab-3", "bivocab-3-jobs1")
CONDITIONS = (("shared", "shared"), ("word-tagged", "word-tagged"), ("fully-tagged", "fully-tagged"))


def recipe_text(corpus: Path, conditions: int) -> str:
    lines = ["[build]", 'name = "benchmark"', "seed = 7", ""]
    for lang in ("en", "de"):
        lines += [f"[languages.{lang}]", f'inputs = ["{(corpus / f"{lang}.txt").as_posix()}"]', ""]
    lines += ["[splits]", "train = 0.8", "valid = 0.1", "test = 0.1", ""]
    for name, policy in CONDITIONS[:conditions]:
        lines += ["[[condition]]", f'name = "{name}"', f'policy = "{policy}"', ""]
    return "\n".join(lines)


def _children() -> dict[int, list[int]]:
    tree: dict[int, list[int]] = {}
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            with open(f"/proc/{entry}/stat", "rb") as handle:
                stat = handle.read()
        except OSError:
            continue
        ppid = int(stat[stat.rfind(b")") + 2:].split()[1])
        tree.setdefault(ppid, []).append(int(entry))
    return tree


def tree_rss(pid: int) -> int:
    """Sum of VmRSS (bytes) of ``pid`` and all its descendants."""
    tree, total, todo = _children(), 0, [pid]
    page = os.sysconf("SC_PAGE_SIZE")
    while todo:
        p = todo.pop()
        todo += tree.get(p, [])
        try:
            with open(f"/proc/{p}/statm") as handle:
                total += int(handle.read().split()[1]) * page
        except OSError:
            pass
    return total


def measure(command: list[str], env: dict[str, str]) -> tuple[float, int]:
    """Run ``command``; return (wall seconds, peak resident bytes of its process tree)."""
    peak = 0
    start = time.perf_counter()
    proc = subprocess.Popen(command, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    done = threading.Event()

    def sample() -> None:
        nonlocal peak
        while not done.is_set():
            peak = max(peak, tree_rss(proc.pid))
            done.wait(0.05)

    sampler = threading.Thread(target=sample, daemon=True)
    sampler.start()
    _, err = proc.communicate()
    seconds = time.perf_counter() - start
    done.set()
    sampler.join()
    if proc.returncode != 0:
        raise SystemExit(f"{' '.join(command)} failed ({proc.returncode}):\n{err.decode(errors='replace')}")
    return seconds, peak


def commands(method: str, corpus: Path, scratch: Path, jobs: int) -> list[str]:
    files = [str(corpus / "en.txt"), str(corpus / "de.txt")]
    out = str(scratch / method)
    if method == "wc":
        return ["wc", "-w", *files]
    if method in ("python", "pyarrow", "tokenizers"):
        return [sys.executable, str(HERE / f"baseline_{method}.py"), out, *files]
    conditions = 1 if method == "bivocab-1" else 3
    recipe = scratch / f"recipe-{conditions}.toml"
    recipe.write_text(recipe_text(corpus, conditions), encoding="utf-8")
    return [sys.executable, "-m", "bivocab", "build", str(recipe), "--out", out, "--force", "--quiet",
            "--jobs", str(1 if method.endswith("jobs1") else jobs)]


def word_count(corpus: Path) -> int:
    out = subprocess.run(["wc", "-w", str(corpus / "en.txt"), str(corpus / "de.txt")],
                         capture_output=True, text=True, check=True).stdout
    return int(out.strip().splitlines()[-1].split()[0])


def machine() -> dict[str, object]:
    model = ""
    with open("/proc/cpuinfo") as handle:
        for line in handle:
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    with open("/proc/meminfo") as handle:
        mem_kib = int(handle.readline().split()[1])
    return {"cpu": model, "cores": os.cpu_count(), "memory_gib": round(mem_kib / 2**20, 1),
            "python": platform.python_version(), "system": platform.platform()}


def git_commit() -> str:
    try:
        return subprocess.run(["git", "-C", str(ROOT), "rev-parse", "--short", "HEAD"], capture_output=True,
                              text=True, check=True).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return ""


def table_text(rows: list[dict], baselines: list[str]) -> str:
    head = f"{'method':<18} {'words/s':>12} " + " ".join(f"{'x ' + b:>12}" for b in baselines) + f" {'peak RSS':>10}"
    lines = [head, "-" * len(head)]
    rate = {r["method"]: r["words_per_second"] for r in rows}
    for r in rows:
        ratios = " ".join(f"{r['words_per_second'] / rate[b]:>12.2f}" if b in rate else f"{'':>12}" for b in baselines)
        lines.append(f"{r['method']:<18} {r['words_per_second'] / 1e6:>10.2f} M {ratios} "
                     f"{r['peak_rss_bytes'] / 2**20:>7.0f} MiB")
    return "\n".join(lines)


def checks(rows: dict[str, dict], size: str, results_dir: Path) -> dict[str, object]:
    """The issue's targets, computed from this run (and the other corpus size's latest run)."""
    out: dict[str, object] = {}
    three = rows.get("bivocab-3")
    if three and "python" in rows:
        out["three_conditions_vs_python_one"] = round(three["words_per_second"] / rows["python"]["words_per_second"], 2)
        out["target_three_vs_python_at_least_3x"] = out["three_conditions_vs_python_one"] >= 3
    if three and "pyarrow" in rows:
        out["three_conditions_vs_pyarrow_one"] = round(three["words_per_second"] / rows["pyarrow"]["words_per_second"], 2)
        out["target_three_vs_pyarrow_at_least_1x"] = out["three_conditions_vs_pyarrow_one"] >= 1
    if three and "bivocab-1" in rows:
        extra = (three["median_seconds"] / rows["bivocab-1"]["median_seconds"] - 1) / 2
        out["time_added_per_extra_condition"] = round(extra, 3)
        out["target_extra_condition_under_10_percent"] = extra < 0.10
    if three and "bivocab-3-jobs1" in rows:
        speedup = rows["bivocab-3-jobs1"]["median_seconds"] / three["median_seconds"]
        out["jobs2_speedup_over_jobs1"] = round(speedup, 2)
        out["target_jobs2_at_least_1_6x"] = speedup >= 1.6
    if three:
        out["peak_rss_gib"] = round(three["peak_rss_bytes"] / 2**30, 3)
        out["target_peak_rss_under_4_gib"] = three["peak_rss_bytes"] < 4 * 2**30
    small, big = results_dir / "5m-latest.json", results_dir / "50m-latest.json"
    other = big if size == "5m" else small
    if three and other.exists():
        theirs = {r["method"]: r for r in json.loads(other.read_text())["methods"]}.get("bivocab-3")
        if theirs:
            rss = {size: three["peak_rss_bytes"], other.name.split("-")[0]: theirs["peak_rss_bytes"]}
            if "5m" in rss and "50m" in rss:
                out["peak_rss_50m_over_5m"] = round(rss["50m"] / rss["5m"], 2)
                out["target_rss_50m_at_most_1_5x_5m"] = rss["50m"] <= 1.5 * rss["5m"]
    return out


def markdown(paths: list[Path]) -> str:
    """The figures of saved runs as Markdown tables (one per run)."""
    out = []
    for path in paths:
        report = json.loads(path.read_text())
        m, c = report["machine"], report["corpus"]
        rows = report["methods"]
        rate = {r["method"]: r["words_per_second"] for r in rows}
        baselines = [b for b in BASELINES if b in rate]
        out += [f"## {c['size']} corpus ({c['words']:,} words), {report['date']}, commit {report['commit']}", "",
                f"Machine: {m['cpu']}, {m['cores']} cores, {m['memory_gib']} GiB, Python {m['python']}; "
                f"bivocab --jobs {report['jobs']}; median of {report['repeat']} run(s).", "",
                "| method | words/s | " + " | ".join(f"x {b}" for b in baselines) + " | peak RSS |",
                "|---|---:|" + "---:|" * len(baselines) + "---:|"]
        for r in rows:
            ratios = " | ".join(f"{r['words_per_second'] / rate[b]:.2f}" for b in baselines)
            out.append(f"| {r['method']} | {r['words_per_second'] / 1e6:.2f} M | {ratios} | "
                       f"{r['peak_rss_bytes'] / 2**20:.0f} MiB |")
        out += ["", "| check | value |", "|---|---|"]
        out += [f"| {k} | {v} |" for k, v in report["checks"].items()]
        out.append("")
    return "\n".join(out)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", default="5m", help="corpus under benchmarks/data/ (made if missing): 5m or 50m")
    parser.add_argument("--repeat", type=int, default=3, help="runs per method; the median is reported")
    parser.add_argument("--jobs", type=int, default=2, help="--jobs of the bivocab runs")
    parser.add_argument("--methods", default=",".join(METHODS), help=f"comma-separated subset of {','.join(METHODS)}")
    parser.add_argument("--markdown", nargs="+", type=Path, metavar="JSON", help="print saved results as Markdown")
    args = parser.parse_args()
    if args.markdown:
        print(markdown(args.markdown))
        return
    methods = [m for m in args.methods.split(",") if m]
    unknown = set(methods) - set(METHODS)
    if unknown:
        parser.error(f"unknown methods: {', '.join(sorted(unknown))}")
    corpus = HERE / "data" / args.size
    if not (corpus / "en.txt").exists():
        words = int(args.size.rstrip("m")) * 1_000_000
        subprocess.run([sys.executable, str(HERE / "make_corpus.py"), "--words", str(words), "--out", str(corpus)],
                       check=True)
    words = word_count(corpus)
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""),
               RAYON_NUM_THREADS=str(args.jobs), TOKENIZERS_PARALLELISM="true")
    scratch = Path(tempfile.mkdtemp(prefix="bivocab-bench-"))
    rows = []
    try:
        for method in methods:
            runs = []
            for _ in range(args.repeat):
                runs.append(measure(commands(method, corpus, scratch, args.jobs), env))
                shutil.rmtree(scratch / method, ignore_errors=True)
            seconds = [s for s, _ in runs]
            median = statistics.median(seconds)
            rows.append({"method": method, "seconds": [round(s, 3) for s in seconds], "median_seconds": round(median, 3),
                         "words_per_second": words / median, "peak_rss_bytes": max(p for _, p in runs)})
            print(f"{method:<18} {median:8.2f} s  {words / median / 1e6:6.2f} M words/s", file=sys.stderr)
    finally:
        shutil.rmtree(scratch, ignore_errors=True)
    baselines = [b for b in BASELINES if b in methods]
    print(table_text(rows, baselines))
    results_dir = HERE / "results"
    results_dir.mkdir(exist_ok=True)
    by_method = {r["method"]: r for r in rows}
    report = {"date": datetime.date.today().isoformat(), "commit": git_commit(), "machine": machine(),
              "corpus": {"size": args.size, "words": words, "files": ["en.txt", "de.txt"]},
              "jobs": args.jobs, "repeat": args.repeat, "methods": rows}
    report["checks"] = checks(by_method, args.size, results_dir)
    for key, value in report["checks"].items():
        print(f"{key}: {value}")
    text = json.dumps(report, indent=2) + "\n"
    (results_dir / f"{args.size}-{report['date']}-{report['commit'] or 'nocommit'}.json").write_text(text)
    (results_dir / f"{args.size}-latest.json").write_text(text)


if __name__ == "__main__":
    main()
