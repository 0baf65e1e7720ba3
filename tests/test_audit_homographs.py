"""Homograph labels: variants, near-homographs, word-list attestation and translation labels,
and the files they are read from."""

from __future__ import annotations

from pathlib import Path

import pytest

from bivocab.errors import InputError
from bivocab.homographs import (FALSE_FRIEND, SAME_MEANING, UNKNOWN, fold_spelling, near_homographs,
                                read_lexicon, read_translations, spelling_variants)


def same(text: str) -> str:
    return text


def test_variants_pair_spellings_that_meet_only_after_folding():
    pairs = spelling_variants({"kind", "cafe", "strasse", "boat"}, {"Kind", "Café", "Straße", "Boot"})
    assert pairs == [("cafe", "Café", "case+marks"), ("kind", "Kind", "case"), ("strasse", "Straße", "case")]


def test_fold_uses_unicode_case_folding_after_removing_marks():
    # Unicode CaseFolding.txt maps U+00DF LATIN SMALL LETTER SHARP S to "ss" (full folding).
    assert fold_spelling("Straße") == "strasse"
    # U+00E9 decomposes canonically into e + U+0301 COMBINING ACUTE ACCENT (UnicodeData.txt).
    assert fold_spelling("café") == "cafe"


def test_near_homographs_cover_insertion_deletion_and_substitution():
    pairs = near_homographs({"fish", "house", "lamp", "ship"}, {"fisch", "hous", "lamb", "Ship", "shop"})
    assert pairs == [("fish", "fisch"), ("house", "hous"), ("lamp", "lamb"), ("ship", "shop")]


def test_near_homographs_skip_short_spellings_and_transpositions():
    assert near_homographs({"an", "form"}, {"in", "from"}) == []


def test_lexicon_attests_listed_words_and_sentence_initial_capitals(tmp_path: Path):
    path = tmp_path / "words"
    path.write_text("also\nGift\n\nbald\n", encoding="utf-8")
    lexicon = read_lexicon("de", path, same)
    assert lexicon.attests("also") and lexicon.attests("Also") and lexicon.attests("Gift")
    assert not lexicon.attests("gift") and not lexicon.attests("Kellhaven")


def test_translation_labels(tmp_path: Path):
    path = tmp_path / "pairs.tsv"
    # Typed pairs, from memory (common English-German knowledge).
    path.write_text("# en\tde\ngift\tGeschenk\npoison\tGift\nhotel\tHotel\nalso\tauch\nso\talso\n", encoding="utf-8")
    t = read_translations(path, same)
    assert t.label("gift", "Gift") == FALSE_FRIEND
    assert t.label("hotel", "Hotel") == SAME_MEANING
    assert t.label("Hotel", "Hotel") == SAME_MEANING   # English sentence-initial capital
    assert t.label("also", "also") == FALSE_FRIEND
    assert t.label("Kellhaven", "Kellhaven") == UNKNOWN


def test_translations_file_with_a_malformed_line_names_file_and_line(tmp_path: Path):
    path = tmp_path / "pairs.tsv"
    path.write_text("gift\tGeschenk\npoison Gift\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"pairs\.tsv:2: expected two non-empty tab-separated fields"):
        read_translations(path, same)


def test_word_list_that_is_not_utf8_names_file_and_line(tmp_path: Path):
    path = tmp_path / "words"
    path.write_bytes(b"also\nStra\xdfe\n")
    with pytest.raises(InputError, match=r"words:2: lexicon file is not valid UTF-8"):
        read_lexicon("de", path, same)


def test_missing_word_list_is_a_clear_error(tmp_path: Path):
    with pytest.raises(InputError, match="lexicon file not found"):
        read_lexicon("de", tmp_path / "absent", same)
