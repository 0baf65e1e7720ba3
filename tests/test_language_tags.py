"""Language tags are BCP 47: checked against the examples of RFC 5646 (BCP 47), Appendix A
"Examples of Language Tags (Informative)"; the checking itself is done by the langcodes library."""

from __future__ import annotations

from pathlib import Path

import pytest

from bivocab.errors import RecipeError
from bivocab.recipe import is_valid_language_tag, load_recipe

from corpus_factory import write_corpus, write_recipe

# RFC 5646, Appendix A: every example listed there as a valid tag, in the order of the appendix
# (simple language; language-script; extended language subtags; language-script-region;
# language-variant; language-region-variant; language-script-region-variant; language-region;
# private use subtags; private use registry values; tags that use extensions).
RFC5646_VALID = [
    "de", "fr", "ja", "i-enochian",
    "zh-Hant", "zh-Hans", "sr-Cyrl", "sr-Latn",
    "zh-cmn-Hans-CN", "cmn-Hans-CN", "zh-yue-HK", "yue-HK",
    "zh-Hans-CN", "sr-Latn-RS",
    "sl-rozaj", "sl-rozaj-biske", "sl-nedis",
    "de-CH-1901", "sl-IT-nedis",
    "hy-Latn-IT-arevela",
    "de-DE", "en-US", "es-419",
    "de-CH-x-phonebk", "az-Arab-x-AZE-derbend",
    "x-whatever", "qaa-Qaaa-QM-x-southern", "de-Qaaa", "sr-Latn-QM", "sr-Qaaa-RS",
    "en-US-u-islamcal", "zh-CN-a-myext-x-private", "en-a-myext-b-another",
]
# RFC 5646, Appendix A, "Some Invalid Tags": two region subtags; a single-character subtag in
# primary position; two extensions with the same singleton.
RFC5646_INVALID = ["de-419-DE", "a-DE", "ar-a-aaa-b-bbb-a-ccc"]


@pytest.mark.parametrize("tag", RFC5646_VALID)
def test_rfc5646_valid_example_is_accepted(tag: str) -> None:
    assert is_valid_language_tag(tag)


@pytest.mark.parametrize("tag", RFC5646_INVALID)
def test_rfc5646_invalid_example_is_rejected(tag: str) -> None:
    assert not is_valid_language_tag(tag)


@pytest.mark.parametrize("tag", ["", "en--US", "en-", "-en", "toolongprimary", "en_US", "dé"])
def test_malformed_text_is_rejected_without_an_exception(tag: str) -> None:
    # Not from the RFC: syntax errors by the ABNF of RFC 5646 section 2.1 (empty subtags,
    # a primary subtag over 8 characters, "_" and non-ASCII letters are outside the grammar).
    assert not is_valid_language_tag(tag)


def test_recipe_accepts_rfc5646_tags_as_language_keys(tmp_path: Path) -> None:
    write_corpus(tmp_path, sentences=5)
    recipe = write_recipe(tmp_path)
    text = recipe.read_text().replace("[languages.en]", '[languages."sr-Latn-RS"]')
    recipe.write_text(text.replace("[languages.de]", '[languages."de-CH-1901"]'))
    assert load_recipe(recipe).tags == ("sr-Latn-RS", "de-CH-1901")


def test_recipe_rejects_an_rfc5646_invalid_tag_naming_it(tmp_path: Path) -> None:
    write_corpus(tmp_path, sentences=5)
    recipe = write_recipe(tmp_path)
    recipe.write_text(recipe.read_text().replace("[languages.en]", '[languages."ar-a-aaa-b-bbb-a-ccc"]'))
    with pytest.raises(RecipeError, match="'ar-a-aaa-b-bbb-a-ccc' is not a valid BCP 47 language tag"):
        load_recipe(recipe)
