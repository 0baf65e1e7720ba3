"""The audit on real language data from package registries: Debian's English and German word
lists with the trans-de-en dictionary, and word frequencies from the wordfreq package.

Well-known English-German false friends (common knowledge, from memory): gift (German Gift =
poison), kind (Kind = child), rat (Rat = advice), hell (hell = bright), also (also = so),
bald (bald = soon).
"""

from __future__ import annotations

import random
import re
import unicodedata
from pathlib import Path

import pytest
import regex

import bivocab
from bivocab.audit import audit_build

FALSE_FRIENDS = ("gift", "kind", "rat", "hell", "also", "bald")
EN_WORDS = Path("/usr/share/dict/american-english")    # Debian wamerican 2020.12.07-2
DE_WORDS = Path("/usr/share/dict/ngerman")              # Debian wngerman 20161207-11
TRANS_DE_EN = Path("/usr/share/trans/de-en")            # Debian trans-de-en 1.9-6

needs_word_lists = pytest.mark.skipif(
    not (EN_WORDS.exists() and DE_WORDS.exists()),
    reason="Debian word lists absent: apt-get install wamerican wngerman (CI must install them)")
needs_trans = pytest.mark.skipif(
    not TRANS_DE_EN.exists(), reason="Debian German-English dictionary absent: apt-get install trans-de-en (CI must install it)")

RECIPE = """\
[build]
name = "{name}"
seed = 1

[clean]
lowercase = {lowercase}

[languages.en]
inputs = ["en.txt"]

[languages.de]
inputs = ["de.txt"]

[splits]
train = 1.0
valid = 0.0
test = 0.0

[[condition]]
name = "shared"
policy = "shared"

[[condition]]
name = "fully-tagged"
policy = "fully-tagged"
"""


def _build(root: Path, name: str, en: list[str], de: list[str], lowercase: bool = False) -> Path:
    root.mkdir(parents=True, exist_ok=True)
    (root / "en.txt").write_text("\n".join(en) + "\n", encoding="utf-8")
    (root / "de.txt").write_text("\n".join(de) + "\n", encoding="utf-8")
    (root / "recipe.toml").write_text(RECIPE.format(name=name, lowercase=str(lowercase).lower()), encoding="utf-8")
    bivocab.build(root / "recipe.toml", root / "build")
    return root / "build"


_ANNOTATION = re.compile(r"\{[^}]*\}|\[[^\]]*\]|\([^)]*\)|<[^>]*>|/[^/]*/")


def trans_de_en_pairs(keep_en: set[str], keep_de: set[str]) -> list[tuple[str, str]]:
    """(English, German) single-word pairs from trans-de-en lines ``German :: English``, whose
    ``|``-separated parts correspond and whose ``;``-separated parts are synonyms; annotations
    in braces, brackets, parentheses and slashes are removed.  Only pairs with a side in
    ``keep_en`` / ``keep_de`` are kept, to keep the file small."""
    pairs = set()
    with open(TRANS_DE_EN, encoding="utf-8") as handle:
        for line in handle:
            if line.startswith("#") or " :: " not in line:
                continue
            german, english = line.rstrip("\n").split(" :: ", 1)
            for de_part, en_part in zip(german.split(" | "), english.split(" | ")):
                de_words = [w for w in (_ANNOTATION.sub("", x).strip() for x in de_part.split(";")) if w and " " not in w]
                en_words = [w for w in (_ANNOTATION.sub("", x).strip() for x in en_part.split(";")) if w and " " not in w]
                pairs.update((e, d) for e in en_words for d in de_words if e in keep_en or d in keep_de)
    return sorted(pairs)


def _label_of(result, word: str) -> tuple[str, str]:
    """(kind, translation label) of ``word`` as an exact homograph or a case variant."""
    for row in (*result.homographs, *result.variants):
        if row.surface_a.lower() == word and row.surface_b.lower() == word:
            return row.kind, row.translation
    raise AssertionError(f"{word!r} is neither a homograph nor a variant")


@pytest.fixture(scope="module")
def word_list_audit(tmp_path_factory):
    if not (EN_WORDS.exists() and DE_WORDS.exists() and TRANS_DE_EN.exists()):
        pytest.skip("Debian wamerican, wngerman and trans-de-en are needed (CI must install them)")
    short = regex.compile(r"\p{L}{3,5}")  # the 3-5 letter entries: a real subset small enough to build fast

    def read(path: Path) -> list[str]:
        words = (unicodedata.normalize("NFC", w.strip()) for w in path.read_text(encoding="utf-8").splitlines())
        return sorted({w for w in words if short.fullmatch(w)})

    en, de = read(EN_WORDS), read(DE_WORDS)
    root = tmp_path_factory.mktemp("wordlists")
    out = _build(root, "debian-word-lists", en, de)
    pairs = root / "pairs.tsv"
    pairs.write_text("".join(f"{e}\t{d}\n" for e, d in trans_de_en_pairs(set(en), set(de))), encoding="utf-8")
    return audit_build(out, lexicons={"en": EN_WORDS, "de": DE_WORDS}, translations=pairs)


@needs_word_lists
@needs_trans
@pytest.mark.parametrize("word", FALSE_FRIENDS)
def test_debian_word_lists_find_false_friends(word_list_audit, word):
    kind, label = _label_of(word_list_audit, word)
    # German nouns are capitalised in ngerman (Gift, Kind, Rat): those are case variants.
    assert kind == ("case" if word in ("gift", "kind", "rat") else "exact")
    assert label == "false-friend"


@needs_word_lists
@needs_trans
def test_debian_dictionary_labels_a_loanword_as_same_meaning(word_list_audit):
    # trans-de-en pairs German "Hotel" with English "hotel".
    assert _label_of(word_list_audit, "hotel") == ("case", "same-meaning")


@needs_word_lists
@needs_trans
def test_every_word_list_homograph_is_attested_in_both_lists(word_list_audit):
    assert word_list_audit.summary["homographs"]["attested"]["both"] == len(word_list_audit.homographs)


def _wordfreq_corpus(lang: str, n: int, scale: float, seed: int) -> list[str]:
    """Lines of 20 tokens in which each of the ``n`` most frequent words of wordfreq occurs
    max(1, round(frequency * scale)) times, shuffled with a fixed seed."""
    wordfreq = pytest.importorskip("wordfreq")
    tokens = []
    for word in wordfreq.top_n_list(lang, n):
        if regex.fullmatch(r"\p{L}+", word):
            tokens += [word] * max(1, round(wordfreq.word_frequency(word, lang) * scale))
    random.Random(seed).shuffle(tokens)
    return [" ".join(tokens[i:i + 20]) for i in range(0, len(tokens), 20)]


@pytest.fixture(scope="module")
def wordfreq_build(tmp_path_factory):
    # wordfreq 3.1.1 (pinned in the test extra); its lists are lower case, so the recipe
    # lowercases too and the typed translations below are normalised the same way.
    root = tmp_path_factory.mktemp("wordfreq")
    out = _build(root, "wordfreq", _wordfreq_corpus("en", 12_000, 1e5, 1), _wordfreq_corpus("de", 12_000, 1e5, 2),
                 lowercase=True)
    pairs = root / "pairs.tsv"
    pairs.write_text(  # typed pairs, from memory
        "gift\tGeschenk\npoison\tGift\nkind\tfreundlich\nkind\tArt\nchild\tKind\nrat\tRatte\nadvice\tRat\n"
        "hell\tHölle\nbright\thell\nalso\tauch\nso\talso\nbald\tkahl\nsoon\tbald\n"
        "hotel\tHotel\nradio\tRadio\ntaxi\tTaxi\n", encoding="utf-8")
    return out, pairs


@pytest.fixture(scope="module")
def wordfreq_audit(wordfreq_build):
    out, pairs = wordfreq_build
    return audit_build(out, translations=pairs)


@pytest.mark.parametrize("word", FALSE_FRIENDS)
def test_wordfreq_lists_find_false_friends(wordfreq_audit, word):
    assert _label_of(wordfreq_audit, word) == ("exact", "false-friend")


@pytest.mark.parametrize("word", ["hotel", "radio", "taxi"])
def test_wordfreq_loanwords_are_same_meaning(wordfreq_audit, word):
    assert _label_of(wordfreq_audit, word) == ("exact", "same-meaning")


@pytest.mark.parametrize("word", ["also", "kind", "hell"])
def test_wordfreq_zipf_values_come_out_close_to_wordfreq(wordfreq_audit, word):
    wordfreq = pytest.importorskip("wordfreq")
    row = next(r for r in wordfreq_audit.homographs if r.surface_a == word)
    # The corpus covers the 12,000 most frequent words only, so the denominator is smaller than
    # wordfreq's and our values run a little high: 0.15 on the Zipf scale is the tolerance.
    assert row.zipf_a == pytest.approx(wordfreq.zipf_frequency(word, "en"), abs=0.15)
    assert row.zipf_b == pytest.approx(wordfreq.zipf_frequency(word, "de"), abs=0.15)


@needs_word_lists
def test_wordfreq_false_friends_are_attested_words_of_both_languages(wordfreq_build):
    out, pairs = wordfreq_build
    result = audit_build(out, lexicons={"en": EN_WORDS, "de": DE_WORDS}, translations=pairs)
    rows = {r.surface_a: r for r in result.homographs}
    for word in FALSE_FRIENDS:
        assert rows[word].attested_a and rows[word].attested_b


@pytest.mark.parametrize("tag", ["en", "de"])
def test_wordfreq_text_has_a_zipf_exponent_near_one(wordfreq_audit, tag):
    # Natural-language word frequencies follow Zipf's law with s close to 1 (common practice).
    assert 0.8 < wordfreq_audit.summary["languages"][tag]["zipf"]["s"] < 1.2
