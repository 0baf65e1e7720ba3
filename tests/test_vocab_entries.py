"""The columnar Vocabulary: its Entry records, pickles and written tables agree with the plain
one-entry-at-a-time definitions (the csv module writing rows, str formatting integers)."""

from __future__ import annotations

import json
import pickle

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from tokenizers import Tokenizer

from bivocab.recipe import POLICIES, CleanSpec, ConditionSpec, VocabSpec
from bivocab.segment import SPECIAL, token_class
from bivocab.arrow import string_array
from bivocab.vocab import (SHARED, build_vocabulary, decimal_column, index_types, language_types_tsv, quote_column,
                           tokenizer_doc, tokenizer_json, tsv_text, vocab_tsv)

TAGS = ("en", "de")
# Letters, digits, punctuation and the characters that make a TSV field quoted or a JSON string
# escaped, plus U+007F, which the column search joins with.
ALPHABET = ["a", "B", "é", "7", ".", "€", '"', "\t", "\n", "\r", "\\", "\x01", "\x7f", "@"]

surface_lists = st.lists(st.text(st.sampled_from(ALPHABET), min_size=1, max_size=3), unique=True, max_size=25)


@st.composite
def vocabularies(draw):
    surfaces = [draw(surface_lists), draw(surface_lists)]
    counts = [np.array(draw(st.lists(st.integers(0, 4), min_size=len(s), max_size=len(s))), dtype=np.int64)
              for s in surfaces]
    policy = draw(st.sampled_from(sorted(POLICIES)))
    spec = VocabSpec(max_size=draw(st.sampled_from([0, 12])), min_count=draw(st.sampled_from([1, 2])),
                     unknown=draw(st.sampled_from(["shared", "per-language"])),
                     eos=draw(st.sampled_from(["shared", "per-language", "none"])), pad=draw(st.booleans()))
    cond = ConditionSpec(name="c", policy=policy, classes=dict(POLICIES[policy]), vocab=spec)
    return build_vocabulary(cond, TAGS, surfaces, counts)


@settings(max_examples=150, deadline=None)
@given(vocabularies())
def test_entries_are_the_columns_read_one_row_at_a_time(vocab):
    entries = list(vocab.entries)
    assert len(entries) == len(vocab.entries) == len(vocab)
    for i, e in enumerate(entries):
        assert e == vocab.entries[i] == vocab.entries[i - len(vocab)]
        assert (e.id, e.token, e.surface, e.lang, e.cls) == (i, vocab.tokens[i], vocab.surfaces[i], vocab.langs[i],
                                                              vocab.classes[i])
        assert e.counts == tuple(int(c) for c in vocab.counts[i])
        # The exported-token rule of DESIGN.md section 2: a tagged entry's token names its language.
        plain = e.lang == SHARED or e.cls == SPECIAL
        assert e.token == (e.surface if plain else f"{e.surface}@{e.lang}")
    for pick in (slice(None), slice(2, None), slice(None, -1), slice(None, None, -2), slice(3, 1)):
        assert vocab.entries[pick] == tuple(entries[pick])
    with pytest.raises(IndexError):
        vocab.entries[len(vocab)]
    assert vocab.special_count == sum(1 for e in entries if e.cls == SPECIAL)
    assert all(e.cls == SPECIAL for e in entries[:vocab.special_count])
    for li, tag in enumerate(TAGS):
        assert vocab.visible(li) == [e for e in entries if e.lang in (SHARED, tag)]


@settings(max_examples=150, deadline=None)
@given(vocabularies())
def test_vocab_tsv_is_the_csv_module_writing_one_row_per_entry(vocab):
    # Reference: Python's csv module (tab delimiter, QUOTE_MINIMAL) via tsv_text, fed entry by entry.
    rows = [[str(e.id), e.token, e.surface, e.lang, e.cls, str(sum(e.counts)), *map(str, e.counts)]
            for e in vocab.entries]
    header = ["id", "token", "surface", "lang", "class", "count", "count_en", "count_de"]
    assert vocab_tsv(vocab) == tsv_text(header, rows).encode("utf-8")


@settings(max_examples=50, deadline=None)
@given(vocabularies())
def test_a_pickled_vocabulary_writes_the_same_table(vocab):
    copy = pickle.loads(pickle.dumps(vocab))
    assert vocab_tsv(copy) == vocab_tsv(vocab)
    assert [lut.tolist() for lut in copy.luts] == [lut.tolist() for lut in vocab.luts]


@settings(max_examples=100, deadline=None)
@given(surface_lists, st.data())
def test_types_table_is_the_csv_module_writing_types_in_tie_rule_order(surfaces, data):
    split_counts = np.array([data.draw(st.lists(st.integers(0, 3), min_size=len(surfaces), max_size=len(surfaces)))
                             for _ in range(3)], dtype=np.int64).reshape(3, len(surfaces))
    # Reference: the tie rule of DESIGN.md section 6 as a Python sort key (str order is code point order).
    order = sorted(range(len(surfaces)), key=lambda i: (-split_counts[0, i], surfaces[i]))
    rows = [[surfaces[i], token_class(surfaces[i]), *(str(c) for c in split_counts[:, i])] for i in order]
    expected = tsv_text(["surface", "class", "count_train", "count_valid", "count_test"], rows)
    assert language_types_tsv(surfaces, split_counts, index_types([surfaces]), 0) == expected.encode("utf-8")


@pytest.mark.parametrize("values", [["a", "b\x00c", 'd"', "\x00"], ["\x00\t", "x", "y\n"], ['"'] * 5,
                                    ["é\r", "𝔘", "\t\t", ""]])
def test_quote_column_matches_the_csv_module_on_joining_characters_and_repeats(values):
    # Reference: Python's csv module writing each value as the first of two fields.
    assert quote_column(string_array(values)).to_pylist() == [tsv_text([v, ""], [])[:-2] for v in values]


@given(st.lists(st.integers(-(1 << 63), (1 << 63) - 1)))
def test_decimal_column_formats_integers_as_str_does(values):
    assert decimal_column(np.array(values, dtype=np.int64)).to_pylist() == [str(v) for v in values]


def test_a_surface_spelled_like_a_special_token_keeps_the_dict_rule_in_the_tokenizer_file():
    # Under word-tagged the surface "<unk>" is the entry "<unk>@en", whose tokenizer key repeats the special's.
    cond = ConditionSpec(name="c", policy="word-tagged", classes=dict(POLICIES["word-tagged"]), vocab=VocabSpec())
    vocab = build_vocabulary(cond, TAGS, [["<unk>", "Kai"], ["Boot"]], [np.array([1, 3]), np.array([2])])
    # Reference: the per-entry rule, a dict display over the visible entries, then sorted by id.
    mapping = {e.surface if e.cls != SPECIAL else e.token: e.id for e in vocab.visible(0)}
    expected = sorted(mapping.items(), key=lambda kv: kv[1])
    doc = tokenizer_doc(vocab, 0, CleanSpec())
    assert list(doc["model"]["vocab"].items()) == expected and len(expected) < len(vocab.visible(0))
    # Reference: the tokenizers library (PyPI) writing the whole document.
    whole = Tokenizer.from_str(json.dumps(doc, ensure_ascii=False)).to_str(pretty=True) + "\n"
    assert tokenizer_json(vocab, 0, CleanSpec()).decode("utf-8") == whole


@settings(max_examples=200, deadline=None)
@given(st.lists(st.text(min_size=1, max_size=4), max_size=30))
def test_vectorised_classes_equal_token_class(types_):
    # The Latin-letter fast path (RE2 through pyarrow) must agree with token_class, whose
    # definition rests on the Unicode General Category (Python's unicodedata) and \p{L}.
    from bivocab.vocab import CLASS_NAMES, _classify

    assert [CLASS_NAMES[c] for c in _classify(types_)] == [token_class(t) for t in types_]
