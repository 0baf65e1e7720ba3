"""Segmentation of normalised text into tokens with classes (word, number, punct, symbol).

One regular expression defines the tokens; it is written in the common subset of the Python
``regex`` module and Oniguruma (the engine of the ``tokenizers`` library), so the exported
``tokenizer.<tag>.json`` splits text exactly as we do.  The rules, in order of preference at
each position (whitespace never belongs to a token):

1. a *word*: one or more grapheme clusters that each start with a letter of an alphabetic script
   (UAX #29 ALetter / Hebrew_Letter), joined across an apostrophe (' or U+2019) that stands
   between two such runs ("don't", "geht's");
2. a Katakana run (UAX #29 keeps Katakana together);
3. a *number*: grapheme clusters starting with a decimal digit, joined across "." or "," that
   stands between digits ("3.50", "1,000");
4. any other single grapheme cluster (an ideograph, a Thai letter, a punctuation mark, a symbol,
   an emoji sequence, a flag).

Tokens never cross a UAX #29 word boundary and never split a grapheme cluster; where we split
more finely than UAX #29, it is one of the documented deviations in docs/segmentation.md.

>>> segment("Don't pay 3,50 € (or 4.20)!")
["Don't", 'pay', '3,50', '€', '(', 'or', '4.20', ')', '!']
>>> [token_class(t) for t in segment("Kind, 7 €")]
['word', 'punct', 'number', 'symbol']
"""

from __future__ import annotations

import unicodedata
from functools import lru_cache

import regex

WORD, NUMBER, PUNCT, SYMBOL, SPECIAL = "word", "number", "punct", "symbol", "special"
TOKEN_CLASSES: tuple[str, ...] = (WORD, NUMBER, PUNCT, SYMBOL)

# Characters whose UAX #29 Word_Break value is Katakana although some are Script=Common.
_KATAKANA = r"\p{Katakana}\u3031-\u3035\u309B\u309C\u30A0\u30FC\uFF70"
# Letters that UAX #29 joins into words: all letters except ideographs, Hiragana, Katakana and
# the scripts written without spaces (Line_Break=SA), which UAX #29 breaks between characters.
_ALPHA = (r"[\p{L}&&[^\p{Han}\p{Hiragana}\p{Thai}\p{Lao}\p{Khmer}\p{Myanmar}\p{Tai_Tham}"
          r"\p{Tai_Le}\p{New_Tai_Lue}\p{Tai_Viet}" + _KATAKANA + "]]")
_ALPHA_RUN = r"(?:(?=" + _ALPHA + r")\X)+"
_DIGIT_RUN = r"(?:(?=\p{Nd})\X)+"

TOKEN_PATTERN: str = (
    _ALPHA_RUN + r"(?:['\u2019]" + _ALPHA_RUN + r")*"
    + r"|(?:(?=[" + _KATAKANA + r"])\X)+"
    + r"|" + _DIGIT_RUN + r"(?:[.,]" + _DIGIT_RUN + r")*"
    + r"|(?!\s)\X"
)

# Letters of the Latin-1 and Latin Extended-A blocks, as a character-class body that RE2
# (pyarrow), Oniguruma and ``regex`` read alike: every one is a letter (category L*) in every
# Unicode version, an ALetter of its own grapheme cluster; vectorised fast paths use it.
LATIN_LETTERS = "A-Za-z\u00c0-\u00d6\u00d8-\u00f6\u00f8-\u017f"

_TOKEN_RE = regex.compile(TOKEN_PATTERN, regex.V1)
_LETTER_RE = regex.compile(r"\p{L}")


def segment(text: str) -> list[str]:
    """Split one normalised sentence into tokens (see the module docstring for the rules)."""
    return _TOKEN_RE.findall(text)


@lru_cache(maxsize=1 << 18)
def token_class(token: str) -> str:
    """Class of a token: ``word`` if it holds a letter, else ``number`` if it starts with a
    digit (Unicode N*), ``punct`` if it starts with punctuation (P*), otherwise ``symbol``
    (S*, and the rare leftovers: a lone combining mark, a format or private-use character)."""
    if _LETTER_RE.search(token):
        return WORD
    category = unicodedata.category(token[0])
    if category[0] == "N":
        return NUMBER
    if category[0] == "P":
        return PUNCT
    return SYMBOL


def pre_tokenizer_json() -> dict:
    """The ``tokenizers`` pre-tokenizer that reproduces :func:`segment`: every match of
    TOKEN_PATTERN is a piece, everything between matches (whitespace) is removed."""
    return {
        "type": "Split",
        "pattern": {"Regex": TOKEN_PATTERN},
        "behavior": "Removed",
        "invert": True,
    }
