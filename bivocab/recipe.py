"""Recipe: the TOML file that fully describes a build, parsed into frozen dataclasses.

Every option has its default here and nowhere else.  Unknown keys, wrong types and bad values
are errors that name the file, the line and the key.
"""

from __future__ import annotations

import glob
import math
import os
import re
import tomllib
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import langcodes

from .errors import InputError, RecipeError

POLICIES: dict[str, dict[str, str]] = {
    # class -> "shared" | "tagged"   (DESIGN.md section 2, contract names)
    "shared": {"word": "shared", "number": "shared", "punct": "shared", "symbol": "shared"},
    "word-tagged": {"word": "tagged", "number": "tagged", "punct": "shared", "symbol": "shared"},
    "fully-tagged": {"word": "tagged", "number": "tagged", "punct": "tagged", "symbol": "tagged"},
}
SPLITS: tuple[str, ...] = ("train", "valid", "test")


INPUT_FORMATS: tuple[str, ...] = ("auto", "text", "jsonl", "csv", "tsv", "parquet", "datasets")


@dataclass(frozen=True)
class ReadSpec:
    """How a language's input files are read (docs/inputs.md)."""

    format: str = "auto"              # auto (by file extension) | text | jsonl | csv | tsv | parquet | datasets
    field: str = "text"               # the JSON key / column holding the sentence (row formats)
    split_sentences: bool = False     # split paragraph-per-line input into sentences (rule-based)
    dataset_split: str = ""           # split of a saved datasets.DatasetDict ("" = its only split)


@dataclass(frozen=True)
class LanguageSpec:
    tag: str
    inputs: tuple[str, ...]           # globs as written, relative to the recipe directory
    files: tuple[str, ...] = ()       # resolved, sorted, relative to the recipe directory
    read: ReadSpec = field(default_factory=ReadSpec)


@dataclass(frozen=True)
class CleanSpec:
    normal_form: str = "NFC"          # NFC | NFKC | none
    lowercase: bool = False
    invalid_utf8: str = "error"       # error | replace | skip
    max_chars: int = 0                # 0 = no limit; longer sentences are dropped (counted)
    min_tokens: int = 1
    max_tokens: int = 0               # 0 = no limit


@dataclass(frozen=True)
class SplitSpec:
    train: float = 0.8
    valid: float = 0.1
    test: float = 0.1


@dataclass(frozen=True)
class VocabSpec:
    max_size: int = 0                 # 0 = no cap; the cap counts the specials
    min_count: int = 1
    unknown: str = "shared"           # shared | per-language
    eos: str = "shared"               # shared | per-language | none
    pad: bool = True                  # reserve id 0 for <pad>


MIX_ORDERS: tuple[str, ...] = ("shuffled", "alternating", "blocked")
BALANCE_UNITS: tuple[str, ...] = ("none", "sentences", "tokens")


@dataclass(frozen=True)
class MixSpec:
    """Order and balance of the two languages in each split (docs/mixing.md)."""

    order: str = "shuffled"           # shuffled | alternating | blocked
    within_language: str = "shuffled"  # alternating/blocked: shuffled (seeded) | input order
    balance: str = "none"             # none | sentences | tokens: the unit of the sizes n_i
    alpha: float = 0.0                # q_i ∝ p_i^alpha; 0 = equal sizes, 1 = as found
    resample: str = "down"            # down (drop from larger) | up (repeat the smaller)
    balance_splits: tuple[str, ...] = ("train",)


SHARD_FORMATS: tuple[str, ...] = ("npy", "parquet", "npy+parquet")


@dataclass(frozen=True)
class ShardSpec:
    format: str = "npy"               # npy | parquet | npy+parquet (both, same sentences)
    max_tokens: int = 1_000_000       # a shard is closed after the sentence that reaches this


SUBWORD_UNITS: tuple[str, ...] = ("unigram", "bpe")


@dataclass(frozen=True)
class SubwordSpec:
    """Subword model of a condition (docs/subword.md). Exactly one of ``size`` and
    ``size_per_language`` is set (0 = unset)."""

    size: int = 0                     # entries of the condition's vocabulary, specials included
    size_per_language: int = 0        # pieces trained per language (separate models only)
    engine: str = "sentencepiece"
    sample_sentences: int = 0         # training sentences per language (0 = the whole train split)
    sample_alpha: float = 1.0         # joint model: language shares q_i ~ p_i^alpha (1 = as available)
    character_coverage: float = 1.0
    byte_fallback: bool = True        # unseen characters become byte pieces instead of <unk>
    max_sentence_bytes: int = 65536   # longer train sentences are left out of the sample (counted)
    train_threads: int = 1            # fixed, so the model does not depend on --jobs or the machine
    exact_size: bool = True           # false: sentencepiece may stop short of the size on a small corpus


@dataclass(frozen=True)
class HygieneSpec:
    """Corpus hygiene steps applied after cleaning, each off by default (docs/inputs.md)."""

    duplicates: str = "keep"          # keep | drop (later exact copies within a language)
    cross_language: str = "off"       # off | keep (report only) | drop-both | keep-first
    foreign: str = "off"              # off | report | drop: sentences that look like the other language
    foreign_min_chars: int = 20       # shorter sentences are never judged foreign
    foreign_margin: float = 0.1       # mean log-likelihood ratio per n-gram needed to flag
    examples: int = 10                # examples per finding recorded in build.json
    exclude_items: tuple[str, ...] = ()   # item files (CSV/TSV) whose sentences are excluded
    exclude_column: str = "sentence"  # the column of the item files holding the sentence
    exclude_from: str = "train"       # train | all: the splits the items are excluded from


@dataclass(frozen=True)
class ConditionSpec:
    name: str
    policy: str
    classes: dict[str, str]           # resolved class -> shared | tagged
    share: tuple[str, ...] = ()       # spellings forced to one entry
    separate: tuple[str, ...] = ()    # spellings forced to one entry per language
    vocab: VocabSpec = field(default_factory=VocabSpec)
    units: str = "word"               # word | unigram | bpe
    subword: SubwordSpec | None = None  # set when units is not "word"


@dataclass(frozen=True)
class Recipe:
    path: str                         # the recipe file as given
    name: str
    seed: int
    languages: tuple[LanguageSpec, ...]
    clean: CleanSpec
    splits: SplitSpec
    vocab: VocabSpec
    mix: MixSpec
    shards: ShardSpec
    conditions: tuple[ConditionSpec, ...]
    hygiene: HygieneSpec = field(default_factory=HygieneSpec)

    @property
    def base_dir(self) -> Path:
        return Path(self.path).resolve().parent

    @property
    def tags(self) -> tuple[str, ...]:
        return tuple(lang.tag for lang in self.languages)

    def resolved(self) -> dict[str, Any]:
        """The recipe with every default filled in, as recorded in build.json."""
        data = asdict(self)
        data.pop("path")
        return data


# --- parsing -----------------------------------------------------------------------------------

_HEADER_RE = re.compile(r"^\s*(\[\[?)\s*([^\]]+?)\s*\]\]?")


def _key_line(text: str, table: str, index: int, key: str) -> int | None:
    """Line (1-based) where ``key`` is set inside the ``index``-th occurrence of ``table``."""
    current, seen = "", {}
    key_re = re.compile(r"^\s*(?:\"?" + re.escape(key) + r"\"?)\s*=")
    for number, line in enumerate(text.splitlines(), start=1):
        header = _HEADER_RE.match(line)
        if header:
            current = header.group(2).strip()
            seen[current] = seen.get(current, -1) + 1
            if key == "" and current == table and seen[current] == index:
                return number
            continue
        if current == table and seen.get(current, 0) == index and key and key_re.match(line):
            return number
    return None


class _Reader:
    """Walks the parsed TOML, checks keys and types, and reports errors with their line."""

    def __init__(self, path: str, text: str, data: dict[str, Any]):
        self.path, self.text, self.data = path, text, data

    def fail(self, table: str, index: int, key: str, problem: str) -> RecipeError:
        line = _key_line(self.text, table, index, key) or _key_line(self.text, table, index, "")
        place = f"{self.path}:{line}" if line else self.path
        label = f"[{table}] {key}".strip() if key else f"[{table}]"
        return RecipeError(f"{place}: {label}: {problem}")

    def table(self, name: str, allowed: dict[str, Any], index: int = 0,
              value: dict[str, Any] | None = None, required: tuple[str, ...] = ()) -> dict[str, Any]:
        raw = self.data.get(name, {}) if value is None else value
        if not isinstance(raw, dict):
            raise self.fail(name, index, "", "must be a table")
        out: dict[str, Any] = {}
        for key, val in raw.items():
            if key not in allowed:
                known = ", ".join(sorted(allowed))
                raise self.fail(name, index, key, f"unknown key (known keys: {known})")
            out[key] = self.typed(name, index, key, val, allowed[key])
        for key in required:
            if key not in raw:
                raise self.fail(name, index, "", f"missing required key '{key}'")
        return out

    def typed(self, table: str, index: int, key: str, val: Any, kind: Any) -> Any:
        if kind is float and isinstance(val, int) and not isinstance(val, bool):
            val = float(val)
        if kind == "strings":
            if not isinstance(val, list) or not all(isinstance(v, str) for v in val):
                raise self.fail(table, index, key, f"expected a list of strings, got {_describe(val)}")
            return tuple(val)
        if kind == "table":
            if not isinstance(val, dict):
                raise self.fail(table, index, key, f"expected a table, got {_describe(val)}")
            return val
        if isinstance(kind, tuple):  # a choice of strings
            if not isinstance(val, str) or val not in kind:
                raise self.fail(table, index, key, f"expected one of {', '.join(map(repr, kind))}, got {val!r}")
            return val
        if kind is int and isinstance(val, bool) or not isinstance(val, kind):
            raise self.fail(table, index, key, f"expected {kind.__name__}, got {_describe(val)}")
        return val


def _describe(val: Any) -> str:
    return f"{type(val).__name__} {val!r}"[:80]


_CLASS_CHOICE = ("shared", "tagged")
_SUBWORD_KEYS: dict[str, Any] = {
    "size": int, "size_per_language": int, "engine": ("sentencepiece",), "sample_sentences": int,
    "sample_alpha": float, "character_coverage": float, "byte_fallback": bool,
    "max_sentence_bytes": int, "train_threads": int, "exact_size": bool,
}
_VOCAB_KEYS: dict[str, Any] = {
    "max_size": int, "min_count": int, "unknown": ("shared", "per-language"),
    "eos": ("shared", "per-language", "none"), "pad": bool,
}


def is_valid_language_tag(tag: str) -> bool:
    """BCP 47 (RFC 5646) well-formedness and validity, checked by the langcodes library.

    langcodes also accepts "en_US"; RFC 5646 section 2.1 allows only ASCII letters, digits and "-".

    >>> is_valid_language_tag("zh-Hant"), is_valid_language_tag("en_US")
    (True, False)
    """
    if not re.fullmatch(r"[A-Za-z0-9]{1,8}(-[A-Za-z0-9]{1,8})*", tag):
        return False
    try:
        return langcodes.tag_is_valid(tag)
    except Exception:  # langcodes raises on some malformed input instead of returning False
        return False


def load_recipe(path: str | os.PathLike[str], resolve_inputs: bool = True) -> Recipe:
    """Read and validate a recipe file; with ``resolve_inputs`` also expand the input globs.

    Raises :class:`RecipeError` (or :class:`InputError` for inputs) with a one-line message.
    """
    path = str(path)
    try:
        raw_bytes = Path(path).read_bytes()
    except FileNotFoundError:
        raise RecipeError(f"{path}: recipe file not found") from None
    except OSError as exc:
        raise RecipeError(f"{path}: cannot read recipe: {exc.strerror}") from None
    try:
        text = raw_bytes.decode("utf-8")
        data = tomllib.loads(text)
    except UnicodeDecodeError as exc:
        raise RecipeError(f"{path}: recipe is not valid UTF-8 (byte {exc.start})") from None
    except tomllib.TOMLDecodeError as exc:
        raise RecipeError(f"{path}: invalid TOML: {exc}") from None

    r = _Reader(path, text, data)
    top_allowed = {"build", "languages", "clean", "splits", "vocab", "mix", "shards", "condition", "hygiene"}
    for key in data:
        if key not in top_allowed:
            raise r.fail(key, 0, "", f"unknown table (known tables: {', '.join(sorted(top_allowed))})")
    if "build" not in data:
        raise RecipeError(f"{path}: missing table [build]")
    build = r.table("build", {"name": str, "seed": int}, required=("name", "seed"))
    if not build["name"].strip():
        raise r.fail("build", 0, "name", "must not be empty")
    if build["seed"] < 0:  # numpy's SeedSequence, which the mixing uses, takes no negative seed
        raise r.fail("build", 0, "seed", "must be >= 0")

    languages = _read_languages(r, path)
    clean = CleanSpec(**r.table("clean", {
        "normal_form": ("NFC", "NFKC", "none"), "lowercase": bool,
        "invalid_utf8": ("error", "replace", "skip"), "max_chars": int,
        "min_tokens": int, "max_tokens": int}))
    for key in ("max_chars", "min_tokens", "max_tokens"):
        if getattr(clean, key) < 0:
            raise r.fail("clean", 0, key, "must be >= 0")

    splits = SplitSpec(**r.table("splits", {"train": float, "valid": float, "test": float}))
    fractions = (splits.train, splits.valid, splits.test)
    if any(f < 0 for f in fractions) or not math.isclose(sum(fractions), 1.0, abs_tol=1e-9):
        raise r.fail("splits", 0, "", f"fractions must be >= 0 and add up to 1 (they add up to {sum(fractions)})")
    if splits.train <= 0:
        raise r.fail("splits", 0, "train", "must be > 0: the vocabulary is counted on train")

    vocab = _vocab_spec(r, "vocab", 0, r.table("vocab", _VOCAB_KEYS), VocabSpec())
    mix = MixSpec(**r.table("mix", {"order": MIX_ORDERS, "within_language": ("shuffled", "input"),
                                    "balance": BALANCE_UNITS, "alpha": float, "resample": ("down", "up"),
                                    "balance_splits": "strings"}))
    if mix.order == "shuffled" and mix.within_language != "shuffled":
        raise r.fail("mix", 0, "within_language", 'applies to order = "alternating" or "blocked" only')
    if not 0.0 <= mix.alpha <= 1.0:
        raise r.fail("mix", 0, "alpha", f"must be between 0 and 1, got {mix.alpha}")
    for split in mix.balance_splits:
        if split not in SPLITS:
            raise r.fail("mix", 0, "balance_splits", f"unknown split {split!r} (splits: {', '.join(SPLITS)})")
    shards = ShardSpec(**r.table("shards", {"format": SHARD_FORMATS, "max_tokens": int}))
    if shards.max_tokens <= 0:
        raise r.fail("shards", 0, "max_tokens", "must be > 0")

    hygiene = HygieneSpec(**r.table("hygiene", {
        "duplicates": ("keep", "drop"), "cross_language": ("off", "keep", "drop-both", "keep-first"),
        "foreign": ("off", "report", "drop"), "foreign_min_chars": int, "foreign_margin": float,
        "examples": int, "exclude_items": "strings", "exclude_column": str, "exclude_from": ("train", "all")}))
    for key in ("foreign_min_chars", "examples"):
        if getattr(hygiene, key) < 0:
            raise r.fail("hygiene", 0, key, "must be >= 0")

    conditions = _read_conditions(r, path, vocab)
    recipe = Recipe(path=path, name=build["name"], seed=build["seed"], languages=languages,
                    clean=clean, splits=splits, vocab=vocab, mix=mix, shards=shards,
                    conditions=conditions, hygiene=hygiene)
    if resolve_inputs:
        recipe = resolve_recipe_inputs(recipe)
    return recipe


def _vocab_spec(r: _Reader, table: str, index: int, values: dict[str, Any], base: VocabSpec) -> VocabSpec:
    spec = VocabSpec(**{**asdict(base), **values})
    if spec.max_size < 0:
        raise r.fail(table, index, "max_size", "must be >= 0 (0 = no cap)")
    if spec.min_count < 1:
        raise r.fail(table, index, "min_count", "must be >= 1")
    return spec


def _read_languages(r: _Reader, path: str) -> tuple[LanguageSpec, ...]:
    raw = r.data.get("languages")
    if not isinstance(raw, dict) or not raw:
        raise RecipeError(f"{path}: missing table [languages.<tag>] (two languages are needed)")
    out = []
    for tag, spec in raw.items():
        table = f"languages.{tag}"
        if not is_valid_language_tag(tag):
            raise r.fail(table, 0, "", f"'{tag}' is not a valid BCP 47 language tag")
        values = r.table(table, {"inputs": "strings", "format": INPUT_FORMATS, "field": str,
                                 "split_sentences": bool, "dataset_split": str},
                         value=spec, required=("inputs",))
        inputs = values.pop("inputs")
        if not inputs:
            raise r.fail(table, 0, "inputs", "must list at least one file or glob")
        if "field" in values and not values["field"]:
            raise r.fail(table, 0, "field", "must not be empty")
        out.append(LanguageSpec(tag=tag, inputs=inputs, read=ReadSpec(**values)))
    if len(out) != 2:
        raise RecipeError(f"{path}: [languages] must define exactly two languages, found {len(out)}")
    if out[0].tag.lower() == out[1].tag.lower():
        raise RecipeError(f"{path}: the two language tags must differ")
    return tuple(out)


def _read_conditions(r: _Reader, path: str, vocab: VocabSpec) -> tuple[ConditionSpec, ...]:
    raw = r.data.get("condition")
    if raw is None:
        raise RecipeError(f"{path}: missing [[condition]] table (at least one condition is needed)")
    if not isinstance(raw, list):
        raise r.fail("condition", 0, "", "must be written as [[condition]] (an array of tables)")
    allowed = {"name": str, "policy": tuple(POLICIES), "classes": "table",
               "share": "strings", "separate": "strings", **_VOCAB_KEYS,
               "units": ("word", *SUBWORD_UNITS), **_SUBWORD_KEYS}
    out: list[ConditionSpec] = []
    seen: dict[str, int] = {}
    for index, spec in enumerate(raw):
        values = r.table("condition", allowed, index=index, value=spec, required=("name", "policy"))
        name = values["name"]
        if not re.fullmatch(r"[A-Za-z0-9][A-Za-z0-9._-]*", name):
            raise r.fail("condition", index, "name",
                         f"'{name}' must be letters, digits, '.', '_' or '-' (it names a directory)")
        if name in seen:
            raise r.fail("condition", index, "name", f"duplicate condition name '{name}'")
        seen[name] = index
        classes = dict(POLICIES[values["policy"]])
        for cls, choice in values.get("classes", {}).items():
            if cls not in classes:
                raise r.fail("condition", index, "classes", f"unknown token class '{cls}' (known: {', '.join(classes)})")
            if choice not in _CLASS_CHOICE:
                raise r.fail("condition", index, "classes", f"class '{cls}' must be 'shared' or 'tagged', got {choice!r}")
            classes[cls] = choice
        share, separate = values.get("share", ()), values.get("separate", ())
        both = sorted(set(share) & set(separate))
        if both:
            raise r.fail("condition", index, "separate", f"spelling {both[0]!r} is both in share and separate")
        cond_vocab = _vocab_spec(r, "condition", index,
                                 {k: v for k, v in values.items() if k in _VOCAB_KEYS}, vocab)
        units = values.get("units", "word")
        subword = _subword_spec(r, index, values, units, classes)
        out.append(ConditionSpec(name=name, policy=values["policy"], classes=classes,
                                 share=tuple(sorted(set(share))), separate=tuple(sorted(set(separate))),
                                 vocab=cond_vocab, units=units, subword=subword))
    if not out:
        raise RecipeError(f"{path}: at least one [[condition]] is needed")
    return tuple(out)


def _subword_spec(r: _Reader, index: int, values: dict[str, Any], units: str,
                  classes: dict[str, str]) -> SubwordSpec | None:
    given = [k for k in _SUBWORD_KEYS if k in values]
    if units == "word":
        if given:
            raise r.fail("condition", index, given[0], "applies to subword units only (set units = \"unigram\" or \"bpe\")")
        return None
    for key in ("share", "separate", "max_size", "min_count"):
        if key in values:
            raise r.fail("condition", index, key, "applies to units = \"word\" only (subword sizes are set with size or size_per_language)")
    spec = SubwordSpec(**{k: values[k] for k in given})
    joint = all(choice == "shared" for choice in classes.values())
    if bool(spec.size) == bool(spec.size_per_language):
        raise r.fail("condition", index, "", "a subword condition needs exactly one of size and size_per_language")
    if spec.size < 0 or spec.size_per_language < 0:
        raise r.fail("condition", index, "size" if spec.size < 0 else "size_per_language", "must be > 0")
    if joint and spec.size_per_language:
        raise r.fail("condition", index, "size_per_language",
                     "a shared condition trains one joint model: set its total with size")
    if not joint and "sample_alpha" in values:
        raise r.fail("condition", index, "sample_alpha",
                     "applies to the joint model of a shared condition (separate models train on one language each)")
    if spec.sample_sentences < 0:
        raise r.fail("condition", index, "sample_sentences", "must be >= 0 (0 = the whole train split)")
    if not 0 <= spec.sample_alpha <= 1:
        raise r.fail("condition", index, "sample_alpha", "must be between 0 (equal shares) and 1 (shares as available)")
    if not 0.9 <= spec.character_coverage <= 1.0:
        raise r.fail("condition", index, "character_coverage", "must be between 0.9 and 1.0")
    if spec.max_sentence_bytes < 16:
        raise r.fail("condition", index, "max_sentence_bytes", "must be >= 16")
    if not 1 <= spec.train_threads <= 256:
        raise r.fail("condition", index, "train_threads", "must be between 1 and 256")
    return spec


def is_saved_dataset(path: str) -> bool:
    """A directory written by ``datasets`` ``save_to_disk`` (a Dataset or a DatasetDict)."""
    return any(os.path.exists(os.path.join(path, name)) for name in ("state.json", "dataset_dict.json"))


def resolve_recipe_inputs(recipe: Recipe) -> Recipe:
    """Expand each language's globs into a sorted file list; a glob matching nothing is an error."""
    base = recipe.base_dir
    languages = []
    seen: dict[str, str] = {}  # real path -> path as matched, across both languages
    for lang in recipe.languages:
        files: list[str] = []
        for pattern in lang.inputs:
            absolute = pattern if os.path.isabs(pattern) else str(base / pattern)
            try:
                matches = sorted(glob.glob(absolute, recursive=True))
            except (OSError, RecursionError) as exc:
                raise InputError(f"{recipe.path}: [languages.{lang.tag}] inputs: cannot expand {pattern!r}: {exc}") from None
            # A directory is an input only as a saved `datasets` dataset.
            matches = [m for m in matches if not os.path.isdir(m) or lang.read.format in ("auto", "datasets")
                       and is_saved_dataset(m)]
            if not matches:
                raise InputError(f"{recipe.path}: [languages.{lang.tag}] inputs: {pattern!r} matches no file")
            for m in matches:
                rel = os.path.relpath(m, base)
                if not os.path.exists(m):  # glob lists links it cannot follow
                    raise InputError(f"{rel}: broken symbolic link or symbolic link loop "
                                     f"(matched by {pattern!r} in [languages.{lang.tag}])")
                # The same file reached twice (a symlinked directory, a cycle under **) would be read twice.
                real = os.path.realpath(m)
                if real in seen and seen[real] != rel:
                    raise InputError(f"{rel}: is the same file as {seen[real]} (reached through a symbolic "
                                     f"link); make the globs of [languages.{lang.tag}] match each file once")
                seen[real] = rel
                if rel not in files:
                    files.append(rel)
        languages.append(LanguageSpec(tag=lang.tag, inputs=lang.inputs, files=tuple(files), read=lang.read))
    return Recipe(**{**{f: getattr(recipe, f) for f in recipe.__dataclass_fields__}, "languages": tuple(languages)})


STARTER_RECIPE = '''\
# bivocab recipe: one file describes the whole build. Paths are relative to this file.
# Check it with `bivocab check recipe.toml`, build with `bivocab build recipe.toml --out build`.

[build]
name = "my-study"        # names the build; recorded in build.json
seed = 1                 # the only source of randomness (splits, mixing)

# Exactly two languages; each key is a BCP 47 tag. Inputs are globs of UTF-8 text files,
# one sentence per line (.txt, or compressed .gz / .bz2 / .xz / .zst), or of row formats.
[languages.en]
inputs = ["corpus/en/*.txt"]
# format = "auto"        # auto (by extension) | text | jsonl | csv | tsv | parquet | datasets
# field = "text"         # the JSON key / column with the sentence (row formats)
# split_sentences = false  # true: split paragraph-per-line text into sentences (rule-based)

[languages.de]
inputs = ["corpus/de/*.txt"]

[clean]
normal_form = "NFC"      # NFC | NFKC | none
lowercase = false        # true folds case before counting (then "Kind" and "kind" meet)
invalid_utf8 = "error"   # error | replace (U+FFFD) | skip (drop the line); all counted
max_chars = 0            # drop sentences longer than this many characters (0 = keep all)
min_tokens = 1           # drop sentences with fewer tokens
max_tokens = 0           # drop sentences with more tokens (0 = keep all)

[splits]                 # a sentence's split depends only on its normalised text and the seed
train = 0.8
valid = 0.1
test = 0.1

[vocab]                  # defaults for every condition; a condition may override any of these
max_size = 0             # 0 = no cap; the cap includes the special tokens
min_count = 1            # training count needed for an entry
unknown = "shared"       # shared: one <unk>; per-language: <unk:en>, <unk:de>
eos = "shared"           # shared | per-language | none: the end-of-sentence token after each sentence
pad = true               # reserve id 0 for <pad>

[hygiene]                # each step is optional and counted in build.json
duplicates = "keep"      # keep | drop: later exact copies within a language
cross_language = "off"   # off | keep (report) | drop-both | keep-first: same sentence in both corpora
foreign = "off"          # off | report | drop: sentences that look like the other language
# exclude_items = ["items.tsv"]   # stimulus files (CSV/TSV); their sentences are kept out of training
# exclude_column = "sentence"
# exclude_from = "train"          # train | all

[mix]
order = "shuffled"       # shuffled | alternating | blocked; the same order in every condition
balance = "none"         # none | sentences | tokens: resample the languages (train split by default)
alpha = 0.0              # with balance: target share q_i ∝ p_i^alpha (0 = equal, 1 = as found)
resample = "down"        # down: drop from the larger language | up: repeat the smaller one

[shards]
format = "npy"           # npy | parquet | npy+parquet
max_tokens = 1000000     # tokens per shard file (a shard ends after the sentence that reaches it)

# One [[condition]] per vocabulary-sharing condition, all built from the same corpus.
# policy: shared | word-tagged | fully-tagged
[[condition]]
name = "shared"
policy = "shared"

[[condition]]
name = "word-tagged"
policy = "word-tagged"

[[condition]]
name = "fully-tagged"
policy = "fully-tagged"
# classes = { number = "shared" }   # override the policy for single token classes
# share = ["Hotel", "Radio"]        # force these spellings to one shared entry
# separate = ["also", "bald"]       # force these spellings to one entry per language

# A subword condition trains sentencepiece models on a seeded sample of the train split
# (docs/subword.md): one joint model under "shared", one model per language otherwise.
# [[condition]]
# name = "joint-unigram"
# policy = "shared"
# units = "unigram"                 # word (default) | unigram | bpe
# size = 8000                       # vocabulary entries, specials included
# sample_alpha = 0.5                # exponent-smoothed language shares of the joint sample
'''


def recipe_from_manifest(manifest: dict[str, Any], out: str | os.PathLike[str]) -> Recipe:
    """Rebuild the resolved :class:`Recipe` recorded in a build's ``build.json``.

    Input files are located relative to the recipe file recorded in ``recipe_file`` (a path
    relative to the build directory), so a project moved as a whole still resolves."""
    data = manifest["recipe"]
    recipe_path = os.path.normpath(os.path.join(str(out), manifest["recipe_file"]))
    conditions = tuple(ConditionSpec(**{**c, "share": tuple(c["share"]), "separate": tuple(c["separate"]),
                                        "vocab": VocabSpec(**c["vocab"]),
                                        "subword": SubwordSpec(**c["subword"]) if c.get("subword") else None})
                       for c in data["conditions"])
    languages = tuple(LanguageSpec(tag=l["tag"], inputs=tuple(l["inputs"]), files=tuple(l["files"]),
                                   read=ReadSpec(**l.get("read", {})))
                      for l in data["languages"])
    return Recipe(path=recipe_path, name=data["name"], seed=data["seed"], languages=languages,
                  clean=CleanSpec(**data["clean"]), splits=SplitSpec(**data["splits"]),
                  vocab=VocabSpec(**data["vocab"]),
                  mix=MixSpec(**{**data["mix"], "balance_splits": tuple(data["mix"].get("balance_splits", ("train",)))}),
                  shards=ShardSpec(**data["shards"]), conditions=conditions,
                  hygiene=HygieneSpec(**{**data.get("hygiene", {}),
                                         "exclude_items": tuple(data.get("hygiene", {}).get("exclude_items", ()))}))
