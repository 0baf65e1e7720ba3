"""Terminal reports: the build plan (``check``) and the build summary table."""

from __future__ import annotations

import os

from .build import BuildResult, input_files
from .clean import LONG_LINE_CHARS, clean_block
from .recipe import SPLITS, Recipe
from .sources import read_blocks


def check_inputs(recipe: Recipe) -> list[tuple[str, str, int, int]]:
    """Read every input once (decode and clean, nothing written): (language, path, bytes, lines).
    Raises the same one-line errors a build would."""
    rows = []
    for index, source in enumerate(input_files(recipe)):
        lines = 0
        for block in read_blocks(source, index):
            lines += len(clean_block(block, recipe.clean, source.display).lines)
        rows.append((source.language, source.display, os.path.getsize(source.path), lines))
    return rows


def plan_text(recipe: Recipe, inputs: list[tuple[str, str, int, int]]) -> str:
    out = [f"recipe {recipe.path}: build '{recipe.name}', seed {recipe.seed}", "inputs:"]
    for lang, path, size, lines in inputs:
        out.append(f"  {lang:<8} {path}  ({size:,} bytes, {lines:,} sentences after cleaning)")
    c = recipe.clean
    out.append(f"cleaning: {c.normal_form}, lowercase={str(c.lowercase).lower()}, invalid UTF-8: {c.invalid_utf8}, "
               f"tokens per sentence {c.min_tokens}..{c.max_tokens or 'any'}, max chars {c.max_chars or 'any'}")
    s = recipe.splits
    out.append(f"splits: train {s.train:g} / valid {s.valid:g} / test {s.test:g} (by seeded hash of the sentence)")
    m = recipe.mix
    balance = (f", balance {m.balance} (alpha {m.alpha:g}, {m.resample}sampling, splits {'/'.join(m.balance_splits)})"
               if m.balance != "none" else "")
    out.append(f"mixing: {m.order}{balance}; shards: {recipe.shards.format}, {recipe.shards.max_tokens:,} tokens each")
    h = recipe.hygiene
    out.append(f"hygiene: duplicates {h.duplicates}, cross-language {h.cross_language}, foreign {h.foreign}, "
               f"item files excluded {len(h.exclude_items)}")
    out.append("conditions:")
    for cond in recipe.conditions:
        v = cond.vocab
        classes = " ".join(f"{k}={val}" for k, val in cond.classes.items())
        extra = []
        if cond.share:
            extra.append(f"share {len(cond.share)} spellings")
        if cond.separate:
            extra.append(f"separate {len(cond.separate)} spellings")
        w = cond.subword
        sizing = (f"max_size {v.max_size or 'none'}, min_count {v.min_count}" if w is None else
                  f"{cond.units} ({w.engine}), " + (f"size {w.size}" if w.size else f"{w.size_per_language} pieces per language")
                  + f", sample {w.sample_sentences or 'all'} per language")
        out.append(f"  {cond.name:<16} {cond.policy:<13} {classes}; {sizing}, unknown {v.unknown}, eos {v.eos}"
                   + (f"; {', '.join(extra)}" if extra else ""))
    return "\n".join(out)


def summary_text(result: BuildResult) -> str:
    """Per condition: policy, vocabulary size, sentences and tokens per split, OOV rate per language."""
    tags = result.manifest["recipe"]["languages"]
    tags = [t["tag"] for t in tags]
    header = ["condition", "policy", "vocab", "split", "sentences", "tokens"] + [f"OOV {t}" for t in tags]
    rows = [header]
    for c in result.summaries:
        for i, split in enumerate(SPLITS):
            s = c.splits[split]
            oov = [f"{100 * o / n:.2f}%" if n else "-" for o, n in zip(s.oov, s.tokens_per_lang)]
            rows.append([c.name if i == 0 else "", c.policy if i == 0 else "", f"{c.size:,}" if i == 0 else "",
                         split, f"{s.sentences:,}", f"{s.tokens:,}", *oov])
    widths = [max(len(r[i]) for r in rows) for i in range(len(header))]
    lines = []
    for j, r in enumerate(rows):
        lines.append("  ".join(cell.ljust(w) if k < 4 else cell.rjust(w) for k, (cell, w) in enumerate(zip(r, widths))).rstrip())
        if j == 0:
            lines.append("  ".join("-" * w for w in widths))
    return f"build written to {result.out}\n" + "\n".join(lines)


# Counters of build.json inputs[].report worth a line after a build (docs/bad-input.md), in order.
_NOTE_TEXT = {
    "empty_file": "empty file (no lines)",
    "byte_order_marks_removed": "byte-order mark removed",
    "cr_line_ends": "{n:,} CR or CRLF line ends read as line breaks",
    "nul_characters": "{n:,} NUL characters replaced by spaces",
    "control_characters_replaced": "{n:,} control characters replaced by spaces",
    "invalid_utf8_replaced_lines": "{n:,} lines with invalid UTF-8 kept with U+FFFD",
    "invalid_utf8_skipped_lines": "{n:,} lines with invalid UTF-8 skipped",
    "empty_lines_dropped": "{n:,} empty lines dropped",
    "too_long_dropped": "{n:,} lines longer than [clean] max_chars dropped",
    "long_lines_kept": "{n:,} lines over " + f"{LONG_LINE_CHARS:,}"
                       + " characters kept as one sentence each (set [clean] max_chars to drop them)",
    "too_few_tokens_dropped": "{n:,} lines with fewer than [clean] min_tokens tokens dropped",
    "too_many_tokens_dropped": "{n:,} lines with more than [clean] max_tokens tokens dropped",
}


def input_notes(manifest: dict) -> list[str]:
    """One line per input whose report counted something the user should know about.

    >>> input_notes({"inputs": [{"path": "de/a.txt", "report": {"lines_read": 3, "cr_line_ends": 3,
    ...                                                              "empty_lines_dropped": 1}}]})
    ['de/a.txt: 3 CR or CRLF line ends read as line breaks, 1 empty lines dropped']
    """
    notes = []
    for entry in manifest.get("inputs", []):
        report = entry.get("report", {})
        parts = [text.format(n=report[key]) for key, text in _NOTE_TEXT.items() if report.get(key)]
        if parts:
            notes.append(f"{entry['path']}: " + ", ".join(parts))
    return notes
