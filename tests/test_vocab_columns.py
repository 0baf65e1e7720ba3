"""The array-based vocabulary and TSV writers give exactly what the plain per-entry rules give."""

from __future__ import annotations

import json
import random
import unicodedata

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from tokenizers import Tokenizer

from bivocab.arrow import joined_bytes, string_array, strings_holding
from bivocab.recipe import POLICIES, CleanSpec, ConditionSpec, VocabSpec
from bivocab.segment import token_class
from bivocab.vocab import (SHARED, build_vocabulary, quote_column, tokenizer_doc, tokenizer_json, tsv_columns,
                           tsv_text)

TRICKY = ["plain", "", " ", '"', 'say "hi"', "a\tb", "a\rb", "a\nb", "\r", "é", "𝔘", "x,y", "'", "\\"]


def test_column_writer_matches_the_csv_module_on_fields_that_need_quoting():
    # Reference: Python's csv module (QUOTE_MINIMAL, tab delimiter), as tsv_text uses it.
    rows = [[f, str(i), g] for i, (f, g) in enumerate(zip(TRICKY, reversed(TRICKY)))]
    expected = tsv_text(["a", "b", "c"], rows)
    columns = [quote_column(string_array([r[0] for r in rows])), string_array([r[1] for r in rows]),
               quote_column(string_array([r[2] for r in rows]))]
    assert tsv_columns(["a", "b", "c"], columns) == expected.encode("utf-8")


def test_column_writer_with_no_rows_writes_the_header_only():
    assert tsv_columns(["surface", "count"], [string_array([]), string_array([])]) == b"surface\tcount\n"


@given(st.lists(st.text(alphabet=st.sampled_from(["a", "\x00", "\t", '"', "é", "𝔘", "\n", "\x7f"])) | st.text()),
       st.integers(0, 3), st.sampled_from(["\n", ",\n  ", ""]))
def test_arrow_string_columns_hold_the_strings_their_bytes_and_joins(values, start, separator):
    # Reference: Python's own str operations (encode, join, `in`) on the same values.
    column = string_array(values)
    assert column.to_pylist() == values
    sliced = column.slice(min(start, len(values)))
    rest = values[min(start, len(values)):]
    assert strings_holding(sliced, b'\t"\n').tolist() == [i for i, v in enumerate(rest) if set(v) & set('\t"\n')]
    escaped = bytes(range(0x20)) + b'\\"'
    assert strings_holding(sliced, escaped).tolist() == [i for i, v in enumerate(rest) if set(v.encode()) & set(escaped)]
    assert joined_bytes(sliced, separator) == separator.join(rest).encode("utf-8")


def _reference_entries(cond: ConditionSpec, tags, surfaces, counts):
    """The selection rule of DESIGN.md section 6 written entry by entry with dicts."""
    def shared(s):
        if s in cond.share:
            return True
        if s in cond.separate:
            return False
        return cond.classes[token_class(s)] == "shared"
    totals: dict[tuple[str, str], list[int]] = {}
    for li, (types, c) in enumerate(zip(surfaces, counts)):
        for s, n in zip(types, c.tolist()):
            if n:
                totals.setdefault((SHARED if shared(s) else tags[li], s), [0] * len(tags))[li] += n
    rank = {SHARED: -1, **{t: i for i, t in enumerate(tags)}}
    chosen = sorted((k for k, v in totals.items() if sum(v) >= cond.vocab.min_count),
                    key=lambda k: (-sum(totals[k]), k[1], rank[k[0]]))
    return [(lang, s, tuple(totals[(lang, s)])) for lang, s in chosen]


@pytest.mark.parametrize("scale", [1, 1 << 58])
def test_entry_order_holds_for_counts_too_large_to_share_a_sort_key_with_the_surface(scale):
    # The order by (count, surface, language) is one int64 sort when both fit, else lexsort.
    surfaces = [["Boot", "Kai", "hand", "7", ".", "<x", "a@x"], ["Boot", "Kai", "Hand", "8", ".", "Kind"]]
    counts = [np.array([3, 3, 2, 5, 9, 1, 2], np.int64) * scale, np.array([1, 3, 2, 5, 4, 2], np.int64) * scale]
    for policy in sorted(POLICIES):
        cond = ConditionSpec(name="c", policy=policy, classes=dict(POLICIES[policy]), vocab=VocabSpec())
        vocab = build_vocabulary(cond, ("en", "de"), surfaces, counts)
        got = [(e.lang, e.surface, e.counts) for e in vocab.entries[vocab.special_count:]]
        assert got == _reference_entries(cond, ("en", "de"), surfaces, counts)


@pytest.mark.parametrize("policy", sorted(POLICIES))
@pytest.mark.parametrize("seed", [1, 2, 3])
def test_array_vocabulary_matches_the_entry_by_entry_rule(policy, seed):
    rng = random.Random(seed)
    alphabet = ["a", "b", "é", "Z", "1", "7", ".", "!", "€", "ß", "\u0301"]
    pool = sorted({"".join(rng.choice(alphabet) for _ in range(rng.randint(1, 3))) for _ in range(300)})
    pool = [unicodedata.normalize("NFC", s) for s in pool]
    surfaces = [sorted(set(rng.sample(pool, 150))), sorted(set(rng.sample(pool, 150)))]
    for types in surfaces:
        rng.shuffle(types)
    counts = [np.array([rng.choice([0, 1, 1, 2, 3, 5, 8]) for _ in t], dtype=np.int64) for t in surfaces]
    cap = rng.choice([0, 40])
    cond = ConditionSpec(name="c", policy=policy, classes=dict(POLICIES[policy]),
                         vocab=VocabSpec(max_size=cap, min_count=rng.choice([1, 2])),
                         share=tuple(rng.sample(pool, 5)), separate=tuple(rng.sample(pool, 5)))
    vocab = build_vocabulary(cond, ("en", "de"), surfaces, counts)
    expected = _reference_entries(cond, ("en", "de"), surfaces, counts)
    if cap:
        expected = expected[: cap - vocab.special_count]
    got = [(e.lang, e.surface, e.counts) for e in vocab.entries[vocab.special_count:]]
    assert got == expected
    assert [e.cls for e in vocab.entries[vocab.special_count:]] == [token_class(s) for _, s, _ in expected]
    ids = {(e.lang, e.surface): e.id for e in vocab.entries}
    for li, tag in enumerate(("en", "de")):
        want = [ids.get((SHARED, s), ids.get((tag, s), vocab.unk_ids[li])) for s in surfaces[li]]
        assert vocab.luts[li].tolist() == want


@pytest.mark.parametrize("eos", ["shared", "per-language", "none"])
def test_tokenizer_file_is_what_the_tokenizers_library_writes_for_the_whole_document(eos):
    # Reference: the tokenizers library (PyPI) parsing and pretty-printing the full document.
    tricky = ["Kai", '"', "\\", "a\u0001b", "\u2028", "é", "𝔘", "/", "\x7f", "<eos>x", "ü@de"]
    surfaces = [tricky, ["Kai", "Boot", "\u00ad"]]
    counts = [np.arange(1, len(tricky) + 1, dtype=np.int64), np.array([3, 2, 1], dtype=np.int64)]
    cond = ConditionSpec(name="c", policy="word-tagged", classes=dict(POLICIES["word-tagged"]),
                         vocab=VocabSpec(eos=eos, unknown="per-language"))
    vocab = build_vocabulary(cond, ("en", "de"), surfaces, counts)
    for li in range(2):
        for clean in (CleanSpec(), CleanSpec(lowercase=True, normal_form="none")):
            doc = json.dumps(tokenizer_doc(vocab, li, clean), ensure_ascii=False)
            assert tokenizer_json(vocab, li, clean).decode("utf-8") == Tokenizer.from_str(doc).to_str(pretty=True) + "\n"
