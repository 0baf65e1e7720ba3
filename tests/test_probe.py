"""Specification of `bivocab probe`: item encoding, frequencies, contamination, bad item files."""

from __future__ import annotations

import json
import math
import random
from collections import Counter
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from tokenizers import Tokenizer

import bivocab.probe as probe_module
from bivocab.build import build
from bivocab.cli import main
from bivocab.probe import frequency_per_million, probe, zipf_value
from conftest import ROOT, copy_tree, write_recipe

EN_HARBOUR = [
    "Gulls circle above the old lighthouse of Kellhaven every morning.",
    "The ferry captain counts seven crates of salted herring before noon.",
    'A kind net mender sells "rope" to the Hotel Seeblick.',
    "Children watch the tide come in from the stone steps.",
    "The harbour master rings the bell at 6 o'clock.",
    "Fog rolls over the breakwater and hides the fishing boats.",
]
EN_MARKET = [
    "The fish market opens when the first boat is tied up.",
    "Fresh bread and smoked eel are sold near the crane.",
    "The Hotel Seeblick has a kind owner and a loud parrot.",
]
DE_HAFEN = [
    "Möwen kreisen jeden Morgen über dem alten Leuchtturm von Kellhaven.",
    "Der Fährkapitän zählt vor Mittag sieben Kisten Salzhering.",
    "Das Kind wartet am Kai auf das Postschiff.",
    "Im Hotel Seeblick gibt es heute Fischsuppe.",
    "Der Nebel zieht um 6 Uhr über die Mole.",
]
DE_MARKT = [
    "Der Markt öffnet, wenn das erste Boot festgemacht ist.",
    "Ein Kind kauft Brot und Räucheraal am Kran.",
]

# Beside conftest's three conditions: per-language unknown and end-of-sentence tokens, and none.
EXTRA_CONDITIONS = """
[[condition]]
name = "tagged-unknown"
policy = "word-tagged"
unknown = "per-language"

[[condition]]
name = "tagged-eos"
policy = "fully-tagged"
eos = "per-language"

[[condition]]
name = "shared-no-eos"
policy = "shared"
eos = "none"
"""


def make_build(root: Path, files: dict[str, list[str]], splits: tuple[float, float, float] = (1.0, 0.0, 0.0)) -> Path:
    """Write ``files`` (path relative to root -> lines) and conftest's recipe with these splits
    and the extra conditions, and build it into root/build."""
    for rel, lines in files.items():
        path = root / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    train, valid, test = splits
    recipe = write_recipe(root, extra=f"[splits]\ntrain = {train}\nvalid = {valid}\ntest = {test}\n"
                                      + EXTRA_CONDITIONS)
    build(recipe, root / "build")
    return root / "build"


HARBOUR_FILES = {"en/harbour.txt": EN_HARBOUR, "en/market.txt": EN_MARKET,
                 "de/hafen.txt": DE_HAFEN, "de/markt.txt": DE_MARKT}


@pytest.fixture(scope="module")
def harbour_build(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return make_build(tmp_path_factory.mktemp("harbour"), HARBOUR_FILES)


def write_items(path: Path, rows: list[list[str]], header: list[str] | None = None, sep: str = "\t") -> Path:
    header = header or ["id", "lang", "sentence", "critical"]
    path.write_text("\n".join(sep.join(r) for r in [header, *rows]) + "\n", encoding="utf-8")
    return path


def run_cli(*args: str):
    return CliRunner().invoke(main, [str(a) for a in args])


def read_jsonl(path: Path) -> list[dict]:
    return [json.loads(line) for line in path.read_text(encoding="utf-8").splitlines()]


# --- encoding ----------------------------------------------------------------------------------

ENCODING_ITEMS = [
    ["e-known", "en", 'The kind  owner of the Hotel Seeblick sells "bread".', "owner"],
    ["e-oov", "en", "A walrus sleeps on the breakwater at 7 o'clock!", "walrus"],
    ["d-english-word", "de", "Die ferry kommt um 6 Uhr.", "ferry"],
    ["d-nfd", "de", "Das Kind wartet am Kai auf die Fa\u0308hre.", "Kind"],
    ["d-homograph", "DE", "Das Hotel Seeblick liegt in Kellhaven.", "Hotel"],
]


def test_item_ids_equal_the_exported_tokenizer_encoding_in_every_condition(harbour_build: Path, tmp_path: Path) -> None:
    items = write_items(tmp_path / "items.tsv", ENCODING_ITEMS)
    result = probe(harbour_build, items)
    manifest = json.loads((harbour_build / "build.json").read_text(encoding="utf-8"))
    assert set(result.encoded) == set(manifest["conditions"])
    raw = {row[0]: row for row in ENCODING_ITEMS}
    for condition, entry in manifest["conditions"].items():
        for record in read_jsonl(harbour_build / "probe" / f"{condition}.jsonl"):
            # Reference library: Hugging Face `tokenizers` loading the build's exported tokenizer.json.
            tokenizer = Tokenizer.from_file(str(harbour_build / entry["tokenizers"][record["lang"]]))
            assert record["ids"] == tokenizer.encode(raw[record["id"]][2]).ids, (condition, record["id"])


def test_a_word_seen_only_in_the_other_language_is_oov_only_where_words_are_tagged(harbour_build: Path, tmp_path: Path) -> None:
    items = write_items(tmp_path / "items.tsv", ENCODING_ITEMS)
    result = probe(harbour_build, items)
    by_condition = {c: {e.item.id: e for e in enc} for c, enc in result.encoded.items()}
    assert by_condition["shared"]["d-english-word"].critical_oov is False
    assert by_condition["word-tagged"]["d-english-word"].critical_oov is True
    assert by_condition["tagged-unknown"]["d-english-word"].vocab_tokens[1] == "<unk:de>"
    assert by_condition["fully-tagged"]["d-english-word"].critical_oov is True
    assert by_condition["shared"]["e-oov"].oov_tokens == ("walrus", "sleeps", "on", "7", "!")


def test_language_tags_match_case_insensitively_and_take_the_builds_spelling(harbour_build: Path, tmp_path: Path) -> None:
    # BCP 47 (RFC 5646, section 2.1.1): tags are case-insensitive.
    result = probe(harbour_build, write_items(tmp_path / "items.tsv", ENCODING_ITEMS))
    assert [item.lang for item in result.items] == ["en", "en", "de", "de", "de"]


def test_critical_positions_index_the_critical_word_in_the_ids(harbour_build: Path, tmp_path: Path) -> None:
    items = write_items(tmp_path / "items.tsv", [
        ["twice", "de", "Das Kind sieht ein Kind am Kai.", "Kind", "2"],
        ["compound", "en", "The Kell-Seeblick ferry is late.", "Kell-Seeblick", ""],
    ], header=["id", "lang", "sentence", "critical", "occurrence"])
    probe(harbour_build, items)
    records = {r["id"]: r for r in read_jsonl(harbour_build / "probe" / "tagged-eos.jsonl")}
    assert records["twice"]["critical_positions"] == [4]
    assert [records["twice"]["tokens"][p] for p in records["twice"]["critical_positions"]] == ["Kind"]
    assert records["compound"]["critical_positions"] == [1, 2, 3]
    assert records["compound"]["tokens"][-1] == "<eos:en>"


def test_carried_columns_come_through_unchanged_in_jsonl_and_tsv(harbour_build: Path, tmp_path: Path) -> None:
    items = write_items(tmp_path / "items.tsv", [["x1", "en", "The fish market opens.", "market", "yes ", 'a "b" c']],
                        header=["id", "lang", "sentence", "critical", "homograph", "note"])
    probe(harbour_build, items)
    record = read_jsonl(harbour_build / "probe" / "shared.jsonl")[0]
    assert record["columns"] == {"homograph": "yes ", "note": 'a "b" c'}
    import csv
    with open(harbour_build / "probe" / "shared.tsv", encoding="utf-8", newline="") as handle:
        row = next(csv.DictReader(handle, delimiter="\t"))
    assert (row["homograph"], row["note"], row["critical_positions"]) == ("yes ", 'a "b" c', "2")
    assert row["ids"].split() == [str(i) for i in record["ids"]]


def test_tsv_items_use_csv_quoting_like_the_builds_own_tsv_files(harbour_build: Path, tmp_path: Path) -> None:
    items = tmp_path / "items.tsv"
    items.write_text('id\tlang\tsentence\tcritical\n'
                     'q1\ten\t"""Ahoy!"" shouts the ferry captain."\tcaptain\n'
                     'q2\tde\tDer "Kapitän" ruft.\tKapitän\n', encoding="utf-8")
    result = probe(harbour_build, items)
    assert [item.text for item in result.items] == ['"Ahoy!" shouts the ferry captain.', 'Der "Kapitän" ruft.']


def test_a_csv_items_file_reads_like_the_same_tsv(harbour_build: Path, tmp_path: Path) -> None:
    tsv = write_items(tmp_path / "items.tsv", [["c1", "en", "Fresh bread, smoked eel and rope.", "eel"]])
    csv_file = tmp_path / "items.csv"
    csv_file.write_text('id,lang,sentence,critical\nc1,en,"Fresh bread, smoked eel and rope.",eel\n', encoding="utf-8")
    probe(harbour_build, tsv)
    from_tsv = read_jsonl(harbour_build / "probe" / "shared.jsonl")
    probe(harbour_build, csv_file)
    assert read_jsonl(harbour_build / "probe" / "shared.jsonl") == from_tsv


# --- frequencies -------------------------------------------------------------------------------

def test_zipf_scale_matches_van_heuven_et_al_2014() -> None:
    # van Heuven, Mandera, Keuleers & Brysbaert (2014), QJEP: Zipf = log10(frequency per million) + 3,
    # so a word occurring once per million words has Zipf 3.0.
    assert zipf_value(frequency_per_million(1, 1_000_000)) == pytest.approx(3.0)
    # Same paper, from memory: Zipf 1 is one occurrence per 100 million words, Zipf 6 is 1,000 per million.
    assert zipf_value(frequency_per_million(1, 100_000_000)) == pytest.approx(1.0)
    assert zipf_value(1000.0) == pytest.approx(6.0)
    assert zipf_value(0.0) is None


def generated_corpus(seed: int) -> tuple[dict[str, list[str]], dict[str, Counter]]:
    """Random lower-case sentences with a final full stop, and the word counts the generator emitted."""
    rng = random.Random(seed)
    words = {"en": ["quay", "rope", "gull", "tide", "net", "hotel", "radio", "boat"],
             "de": ["kai", "seil", "möwe", "flut", "netz", "hotel", "radio", "boot"]}
    files: dict[str, list[str]] = {}
    counts = {lang: Counter() for lang in words}
    for lang, vocab in words.items():
        weights = [2 ** i for i in range(len(vocab))]
        lines = []
        for _ in range(300):
            sentence = rng.choices(vocab, weights=weights, k=rng.randint(3, 9))
            counts[lang].update(sentence)
            lines.append(" ".join(sentence) + ".")
        files[f"{lang}/gen.txt"] = lines
    return files, counts


def test_training_counts_and_zipf_values_equal_an_independent_count(tmp_path: Path) -> None:
    files, counts = generated_corpus(seed=11)
    out = make_build(tmp_path, files)
    items = write_items(tmp_path / "items.tsv", [
        ["e1", "en", "the gull sat on the quay.", "gull"],
        ["e2", "en", "the hotel radio.", "radio"],
        ["d1", "de", "die möwe am kai.", "kai"],
        ["d2", "de", "das hotel am meer.", "hotel"],
        ["d3", "de", "ein walross.", "walross"],
    ])
    result = probe(out, items)
    totals = {lang: sum(c.values()) for lang, c in counts.items()}
    assert len(result.critical) == 5
    for word in result.critical:
        for freq in (word.own, word.other):
            expected = counts[freq.lang][word.surface]
            per_million = expected / totals[freq.lang] * 1e6
            assert freq.count == expected
            assert freq.per_million == pytest.approx(per_million)
            assert freq.zipf == (pytest.approx(math.log10(per_million) + 3) if expected else None)
        assert word.homograph == (counts["en"][word.surface] > 0 and counts["de"][word.surface] > 0)
    assert [w.homograph for w in result.critical] == [False, True, False, True, False]


# --- contamination -----------------------------------------------------------------------------

CONTAMINATION_ITEMS = [
    # DE_HAFEN line 3, with extra spaces that normalisation removes
    ["verbatim", "de", "Das  Kind wartet am Kai auf das Postschiff. ", "Kind"],
    # shares exactly the 8 words "ferry captain counts seven crates of salted herring" with en/harbour.txt:2
    ["eight", "en", "Yesterday ferry captain counts seven crates of salted herring again.", "herring"],
    # shares the 11 words "the ferry captain ... before noon" with en/harbour.txt:2
    ["eleven", "en", "Today the ferry captain counts seven crates of salted herring before noon, again.", "ferry"],
    # shares exactly the 7 words "captain counts seven crates of salted herring"
    ["seven", "en", "Yesterday captain counts seven crates of salted herring again.", "herring"],
    # case and punctuation do not hide an overlap: its only 8 words match en/market.txt:1
    ["folded", "en", "FISH market, opens when the first boat is?", "market"],
    # shares the last 8 words of de/hafen.txt:1, its own last 8 words too
    ["tail", "de", "Nur jeden Morgen über dem alten Leuchtturm von Kellhaven!", "Leuchtturm"],
    ["clean", "en", "A parrot sings in the fog.", "parrot"],
]
CONTAMINATION = {row[0]: row for row in CONTAMINATION_ITEMS}


@pytest.fixture(scope="module")
def contamination_result(harbour_build: Path, tmp_path_factory: pytest.TempPathFactory):
    items = write_items(tmp_path_factory.mktemp("items") / "items.tsv", CONTAMINATION_ITEMS)
    return probe(harbour_build, items, ngram=8)


def hits_of(result, item: str) -> list[tuple[str, str, int]]:
    return [(h.kind, h.path, h.line) for c in result.contamination if c.item == item for h in c.hits]


def test_an_item_equal_to_a_training_sentence_is_found_with_its_file_and_line(contamination_result) -> None:
    assert hits_of(contamination_result, "verbatim") == [("sentence", "de/hafen.txt", 3)]


def test_an_item_sharing_an_8_gram_is_found_with_its_file_and_line(contamination_result) -> None:
    assert hits_of(contamination_result, "eight") == [("ngram", "en/harbour.txt", 2)]
    hit = next(c for c in contamination_result.contamination if c.item == "eight").hits[0]
    assert (hit.words, hit.text) == (8, "ferry captain counts seven crates of salted herring")


def test_an_n_gram_hit_reports_the_longest_shared_run_of_words(contamination_result) -> None:
    hit = next(c for c in contamination_result.contamination if c.item == "eleven").hits[0]
    assert (hit.line, hit.words) == (2, 11)
    assert hit.text == "the ferry captain counts seven crates of salted herring before noon"


def test_an_item_sharing_only_a_7_gram_is_not_flagged_at_8(contamination_result) -> None:
    assert hits_of(contamination_result, "seven") == []
    assert hits_of(contamination_result, "clean") == []


def test_the_7_gram_is_flagged_when_n_is_7(harbour_build: Path, tmp_path: Path) -> None:
    items = write_items(tmp_path / "items.tsv", [CONTAMINATION["seven"]])
    assert hits_of(probe(harbour_build, items, ngram=7), "seven") == [("ngram", "en/harbour.txt", 2)]


def test_case_and_punctuation_do_not_hide_an_n_gram_overlap(contamination_result) -> None:
    assert hits_of(contamination_result, "folded") == [("ngram", "en/market.txt", 1)]


def test_an_n_gram_ending_both_sentences_is_found(contamination_result) -> None:
    assert hits_of(contamination_result, "tail") == [("ngram", "de/hafen.txt", 1)]


def test_the_training_text_is_read_once_whatever_the_number_of_items(harbour_build: Path, tmp_path: Path,
                                                                    monkeypatch: pytest.MonkeyPatch) -> None:
    calls = []
    real = probe_module.iter_sentences

    def counting(*args, **kwargs):
        calls.append(kwargs.get("splits"))
        return real(*args, **kwargs)

    monkeypatch.setattr(probe_module, "iter_sentences", counting)
    rows = [[f"i{n}", "en", f"Item {n}: the ferry captain counts seven crates of salted herring.", "ferry"]
            for n in range(40)]
    result = probe(harbour_build, write_items(tmp_path / "items.tsv", rows))
    assert calls == [("train",)]
    assert len(result.contamination) == 40


def test_sentences_outside_the_training_split_are_not_contamination(tmp_path: Path) -> None:
    lines = [f"Boat number {n} leaves the harbour of Kellhaven before the evening tide turns." for n in range(60)]
    out = make_build(tmp_path, {"en/a.txt": lines, "de/a.txt": DE_HAFEN}, splits=(0.5, 0.5, 0.0))
    # Which sentences the build put in each split: its provenance records (input file, line).
    inputs = json.loads((out / "build.json").read_text(encoding="utf-8"))["inputs"]
    en_index = next(i for i, f in enumerate(inputs) if f["path"] == "en/a.txt")

    def lines_of(split: str) -> list[int]:
        prov = np.concatenate([np.load(p) for p in sorted((out / "provenance" / split).glob("*.npy"))])
        return sorted(int(r["line"]) for r in prov if r["input"] == en_index)

    train_line, valid_line = lines_of("train")[0], lines_of("valid")[0]
    items = write_items(tmp_path / "items.tsv", [["t", "en", lines[train_line - 1], "Boat"],
                                                 ["v", "en", lines[valid_line - 1], "Boat"]])
    result = probe(out, items, ngram=20)
    assert hits_of(result, "t") == [("sentence", "en/a.txt", train_line)]
    assert hits_of(result, "v") == []


# --- command line: strict, bad files -----------------------------------------------------------

def test_strict_exits_1_for_an_oov_critical_word(harbour_build: Path, tmp_path: Path) -> None:
    items = write_items(tmp_path / "items.tsv", [["w", "en", "A walrus sleeps.", "walrus"]])
    assert run_cli("probe", harbour_build, items).exit_code == 0
    result = run_cli("probe", harbour_build, items, "--strict")
    assert result.exit_code == 1
    assert "w" in result.stderr and "Traceback" not in result.output


def test_strict_exits_1_for_a_contaminated_item(harbour_build: Path, tmp_path: Path) -> None:
    items = write_items(tmp_path / "items.tsv", [CONTAMINATION["verbatim"]])
    assert run_cli("probe", harbour_build, items, "--strict").exit_code == 1


def test_strict_passes_clean_items_and_json_is_machine_readable(harbour_build: Path, tmp_path: Path) -> None:
    items = write_items(tmp_path / "items.tsv", [CONTAMINATION["clean"]])
    result = run_cli("probe", harbour_build, items, "--strict", "--json")
    assert result.exit_code == 0, result.output
    summary = json.loads(result.stdout)
    assert summary["failing_items"] == [] and summary["contamination"] == []
    assert summary["critical_words"][0]["word"] == "parrot"
    assert summary == json.loads((harbour_build / "probe" / "summary.json").read_text(encoding="utf-8"))


BAD_ITEM_FILES = {
    "missing column": ("id\tlang\tsentence\nb1\ten\tThe fish market opens.\n", "items.tsv:1", "missing column 'critical'"),
    "unknown language tag": ("id\tlang\tsentence\tcritical\nb1\ten\tThe boat.\tboat\nb2\tfr\tLe bateau.\tbateau\n",
                             "items.tsv:3", "unknown language tag 'fr'"),
    "critical word not in sentence": ("id\tlang\tsentence\tcritical\n\nb1\ten\tThe fish market opens.\tharbour\n",
                                      "items.tsv:3", "critical word 'harbour' not found"),
    "empty file": ("", "items.tsv:1", "empty"),
    "header only": ("id\tlang\tsentence\tcritical\n", "items.tsv:1", "no items"),
    "ambiguous critical word": ("id\tlang\tsentence\tcritical\nb1\tde\tDas Kind sieht ein Kind.\tKind\n",
                                "items.tsv:2", "occurs 2 times"),
    "duplicate id": ("id\tlang\tsentence\tcritical\nb1\ten\tA boat.\tboat\nb1\ten\tA boat.\tboat\n",
                     "items.tsv:3", "duplicate id"),
    "unbalanced quote": ('id\tlang\tsentence\tcritical\nb1\ten\t"Ahoy!" she shouts.\tAhoy\n', "items.tsv:2",
                         "must be quoted whole"),
    "short row": ("id\tlang\tsentence\tcritical\nb1\ten\tA boat.\n", "items.tsv:2", "the row has 3 fields, the header has 4"),
}


@pytest.mark.parametrize("case", sorted(BAD_ITEM_FILES))
def test_a_bad_items_file_gives_one_line_naming_the_row_and_exit_2(harbour_build: Path, tmp_path: Path, case: str) -> None:
    text, place, problem = BAD_ITEM_FILES[case]
    items = tmp_path / "items.tsv"
    items.write_text(text, encoding="utf-8")
    result = run_cli("probe", harbour_build, items)
    assert result.exit_code == 2
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in result.output
    assert f"{place}:" in lines[0] and problem in lines[0]


def test_undecodable_bytes_in_the_items_file_name_the_line(harbour_build: Path, tmp_path: Path) -> None:
    items = tmp_path / "items.tsv"
    items.write_bytes(b"id\tlang\tsentence\tcritical\nb1\tde\tDie F\xe4hre.\tF\xe4hre\n")
    result = run_cli("probe", harbour_build, items)
    assert result.exit_code == 2
    assert "items.tsv:2:" in result.stderr and "UTF-8" in result.stderr


def test_a_bad_items_file_writes_no_output(tmp_path: Path) -> None:
    out = make_build(tmp_path, HARBOUR_FILES)
    items = write_items(tmp_path / "items.tsv", [["b", "xx", "A boat.", "boat"]])
    assert run_cli("probe", out, items).exit_code == 2
    assert not (out / "probe").exists()


def test_an_input_changed_since_the_build_is_refused(tmp_path: Path) -> None:
    out = make_build(tmp_path, HARBOUR_FILES)
    with open(tmp_path / "en" / "market.txt", "a", encoding="utf-8") as handle:
        handle.write("A new line after the build.\n")
    items = write_items(tmp_path / "items.tsv", [["c", "en", "The fish market opens.", "market"]])
    result = run_cli("probe", out, items)
    assert result.exit_code == 2 and "market.txt: changed since the build" in result.stderr
    assert not (out / "probe" / "summary.json").exists()


def test_an_unwritable_probe_directory_gives_one_line_and_exit_2(tmp_path: Path) -> None:
    out = make_build(tmp_path, HARBOUR_FILES)
    (out / "probe").write_text("a file where the probe directory should be\n", encoding="utf-8")
    items = write_items(tmp_path / "items.tsv", [["c", "en", "The fish market opens.", "market"]])
    result = run_cli("probe", out, items)
    assert result.exit_code == 2 and "Traceback" not in result.output
    assert len(result.stderr.strip().splitlines()) == 1 and "cannot write the probe outputs" in result.stderr


def test_the_demo_items_show_their_designed_findings_on_the_sample_corpus(sample_build: Path, tmp_path: Path) -> None:
    build_copy = copy_tree(sample_build, tmp_path / "build")   # the session's build stays untouched
    result = probe(build_copy, ROOT / "sample_corpus" / "items.tsv")
    assert len(result.items) == 24
    assert result.failing_items == ("en-01", "en-11", "de-01")
    assert result.critical_oov_items == ("en-11",)
    found = {c.item: [(h.kind, Path(h.path).name, h.line) for h in c.hits] for c in result.contamination}
    assert found == {"en-01": [("sentence", "harbour.en.txt", 234)], "de-01": [("ngram", "harbour.de.txt", 1406)]}
    labels = {item.id: dict(item.columns)["homograph"] for item in result.items}
    assert {c.item: "yes" if c.homograph else "no" for c in result.critical} == labels
