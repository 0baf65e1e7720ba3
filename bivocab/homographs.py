"""Homographs of two languages' training vocabularies and the labels that sort them:
case and diacritic variants, near-homographs (edit distance 1), attestation in word lists and
translation labels (same meaning / false friend / unknown).  Definitions: docs/audit.md.
"""

from __future__ import annotations

import unicodedata
from collections import defaultdict
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterator

from rapidfuzz.distance import Levenshtein

from .errors import InputError

SAME_MEANING, FALSE_FRIEND, UNKNOWN = "same-meaning", "false-friend", "unknown"
TRANSLATION_LABELS: tuple[str, ...] = (SAME_MEANING, FALSE_FRIEND, UNKNOWN)
CASE, MARKS, CASE_AND_MARKS = "case", "marks", "case+marks"
# Pairs of short spellings at edit distance 1 are mostly accidental ("an"/"in"), so both
# spellings of a near-homograph must have at least this many characters.
NEAR_MIN_LENGTH = 3


def strip_marks(surface: str) -> str:
    """The spelling without combining marks (canonical decomposition, marks removed, NFC).

    >>> strip_marks("Café über")
    'Cafe uber'
    """
    decomposed = unicodedata.normalize("NFD", surface)
    return unicodedata.normalize("NFC", "".join(c for c in decomposed if not unicodedata.combining(c)))


def fold_spelling(surface: str) -> str:
    """Marks stripped, then Unicode case folding (so "ß" folds to "ss").

    >>> fold_spelling("Straße"), fold_spelling("Ärger")
    ('strasse', 'arger')
    """
    return strip_marks(surface).casefold()


def variant_kind(a: str, b: str) -> str:
    """How two different spellings with the same folded form differ.

    >>> variant_kind("Kind", "kind"), variant_kind("Café", "Cafe"), variant_kind("Über", "uber")
    ('case', 'marks', 'case+marks')
    """
    if a.casefold() == b.casefold():
        return CASE
    if strip_marks(a) == strip_marks(b):
        return MARKS
    return CASE_AND_MARKS


def spelling_variants(only_a: set[str], only_b: set[str]) -> list[tuple[str, str, str]]:
    """Pairs ``(a, b, kind)`` of spellings found in one language only that become one spelling
    after :func:`fold_spelling`; sorted by ``a`` then ``b``."""
    by_fold: dict[str, list[str]] = defaultdict(list)
    for b in only_b:
        by_fold[fold_spelling(b)].append(b)
    pairs = []
    for a in only_a:
        for b in by_fold.get(fold_spelling(a), ()):
            pairs.append((a, b, variant_kind(a, b)))
    return sorted(pairs)


def _deletion_keys(word: str) -> Iterator[str]:
    yield word
    for i in range(len(word)):
        yield word[:i] + word[i + 1:]


def near_homographs(only_a: set[str], only_b: set[str],
                    min_length: int = NEAR_MIN_LENGTH) -> list[tuple[str, str]]:
    """Pairs ``(a, b)`` at Levenshtein distance 1 (one insertion, deletion or substitution of a
    character), both at least ``min_length`` characters long, that are not spelling variants.

    Candidates share a key among each spelling and its single-character deletions (every pair
    at distance 1 does); rapidfuzz then confirms the distance.

    >>> near_homographs({"haus", "hand"}, {"Haus", "hund", "band"})
    [('hand', 'band'), ('hand', 'hund')]
    """
    a_words = [w for w in only_a if len(w) >= min_length]
    b_words = [w for w in only_b if len(w) >= min_length]
    # Index the smaller side, look the larger one up: the index is the costly part.
    flipped = len(a_words) > len(b_words)
    small, large = (b_words, a_words) if flipped else (a_words, b_words)
    index: dict[str, list[str]] = {}
    for word in small:
        for key in set(_deletion_keys(word)):
            index.setdefault(key, []).append(word)
    pairs = set()
    for word in large:
        folded = None
        for key in set(_deletion_keys(word)):
            for other in index.get(key, ()):
                if Levenshtein.distance(word, other) == 1:
                    folded = fold_spelling(word) if folded is None else folded
                    if fold_spelling(other) != folded:
                        pairs.add((other, word) if not flipped else (word, other))
    return sorted(pairs)


def _read_lines(path: Path, what: str) -> Iterator[tuple[int, str]]:
    """Lines of a UTF-8 text file with their 1-based numbers; a one-line error on any problem."""
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise InputError(f"{path}: {what} file not found") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read {what} file: {exc.strerror or exc}") from None
    if data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    for number, raw in enumerate(data.splitlines(), start=1):
        try:
            yield number, raw.decode("utf-8").rstrip("\r")
        except UnicodeDecodeError as exc:
            raise InputError(f"{path}:{number}: {what} file is not valid UTF-8 (byte {exc.start} of the line)") from None


@dataclass(frozen=True)
class Lexicon:
    """A word list of one language (one word per line), normalised like the build's text."""

    tag: str
    path: str
    words: frozenset[str]

    def attests(self, surface: str) -> bool:
        """Listed as written, or in lower case (a sentence-initial capital)."""
        return surface in self.words or surface.lower() in self.words


def read_lexicon(tag: str, path: Path, normalise: Callable[[str], str]) -> Lexicon:
    words = set()
    for _, line in _read_lines(path, "lexicon"):
        word = normalise(line)
        if word:
            words.add(word)
    if not words:
        raise InputError(f"{path}: lexicon file for '{tag}' holds no words")
    return Lexicon(tag, str(path), frozenset(words))


@dataclass(frozen=True)
class Translations:
    """Word pairs (language A word, language B word) from a TSV file."""

    path: str
    pairs: frozenset[tuple[str, str]]
    words_a: frozenset[str]
    words_b: frozenset[str]

    def label(self, a: str, b: str) -> str:
        """Label of language A's spelling ``a`` against language B's spelling ``b`` (the same
        string for an exact homograph).  Each spelling is looked up as written, or in lower
        case when only that is listed; then the pair is SAME_MEANING if the file pairs them,
        FALSE_FRIEND if either spelling has translations but not this one, else UNKNOWN.

        >>> t = Translations("t.tsv", frozenset({("gift", "Geschenk"), ("poison", "Gift"), ("hotel", "Hotel")}),
        ...                  frozenset({"gift", "poison", "hotel"}), frozenset({"Geschenk", "Gift", "Hotel"}))
        >>> t.label("gift", "Gift"), t.label("Hotel", "Hotel"), t.label("net", "Netz")
        ('false-friend', 'same-meaning', 'unknown')
        """
        key_a = a if a in self.words_a or a.lower() not in self.words_a else a.lower()
        key_b = b if b in self.words_b or b.lower() not in self.words_b else b.lower()
        if (key_a, key_b) in self.pairs:
            return SAME_MEANING
        if key_a in self.words_a or key_b in self.words_b:
            return FALSE_FRIEND
        return UNKNOWN


def read_translations(path: Path, normalise: Callable[[str], str]) -> Translations:
    """Read ``A<TAB>B`` lines; blank lines and lines starting with ``#`` are skipped."""
    pairs = set()
    for number, line in _read_lines(path, "translations"):
        if not line.strip() or line.startswith("#"):
            continue
        fields = line.split("\t")
        if len(fields) != 2 or not all(f.strip() for f in fields):
            raise InputError(f"{path}:{number}: expected two non-empty tab-separated fields "
                             f"(language A word, language B word), found {len(fields)} field(s)")
        pairs.add((normalise(fields[0]), normalise(fields[1])))
    if not pairs:
        raise InputError(f"{path}: translations file holds no word pairs")
    return Translations(str(path), frozenset(pairs), frozenset(a for a, _ in pairs), frozenset(b for _, b in pairs))
