"""Rule-based sentence splitting for paragraph-per-line inputs (method in docs/inputs.md).

A sentence ends at a run of terminators (. ! ? ‽; not …, which UAX #29 does not count either),
optionally followed by closing quotes or brackets, then white space, when the next sentence starts with an upper- or titlecase letter
(after optional opening quotes or brackets): the shape of rule SB11 of Unicode UAX #29 with
its lower-case continuation rule (SB8) reduced to "the next letter must be a capital".  A lone
"." does not end a sentence after a listed abbreviation, a single letter (an initial), or, in
German, a one- or two-digit number (an ordinal: "am 3. Oktober").
"""

from __future__ import annotations

import regex

from .sources import Block

_BOUNDARY = regex.compile(
    r"(?<=\S)([.!?\u203d]+)([\"'\u201d\u2019\u201c\u2018\u00bb\u00ab)\]}]*)(\s+)"
    r"(?=[\"'\u201e\u201c\u201a\u2018\u00ab\u00bb(\[]*[\p{Lu}\p{Lt}])")
_OPENING = "\"'\u201e\u201c\u201a\u2018\u00ab\u00bb(["

# From memory (common abbreviations that are usually followed by a capitalised word); a
# listed form matches the text before the final "." exactly.
ABBREVIATIONS: dict[str, frozenset[str]] = {
    "en": frozenset("Mr Mrs Ms Dr Prof Sr Jr St Mt Rev Hon Gen Col Capt Lt Sgt vs cf e.g i.e Inc Ltd Co "
                    "Corp No Vol pp Jan Feb Mar Apr Jun Jul Aug Sep Sept Oct Nov Dec".split()),
    "de": frozenset("Dr Prof Hr Hrn Fr Nr Str St bzw ca usw vgl z.B d.h u.a o.ä ggf evtl inkl Mio Mrd "
                    "Jh Abb Bd Tel geb gest Jan Feb Aug Sept Okt Nov Dez".split()),
}


def split_sentences(text: str, language: str) -> list[str]:
    """Split one line of running text into sentences (the rules in the module docstring).

    >>> split_sentences("Dr. Berg met the ferry. It was late! Why?", "en")
    ['Dr. Berg met the ferry.', 'It was late!', 'Why?']
    >>> split_sentences("Am 3. Oktober fuhr sie ab. Er blieb.", "de")
    ['Am 3. Oktober fuhr sie ab.', 'Er blieb.']
    """
    primary = language.split("-")[0].lower()
    abbreviations = ABBREVIATIONS.get(primary, frozenset())
    pieces: list[str] = []
    start = 0
    for match in _BOUNDARY.finditer(text):
        if match.group(1) == ".":
            word_start = max(text.rfind(" ", 0, match.start()), text.rfind("\t", 0, match.start())) + 1
            word = text[word_start:match.start()].lstrip(_OPENING)
            if (word in abbreviations or (len(word) == 1 and word.isalpha())
                    or (primary == "de" and word.isdigit() and len(word) <= 2)):
                continue
        pieces.append(text[start:match.end(2)])
        start = match.end()
    pieces.append(text[start:])
    return [p for p in pieces if p]


def split_block_sentences(block: Block, language: str) -> Block:
    """The block with each line split into sentences; every sentence keeps its source line
    (so several sentences may share one line number)."""
    if not block.line_count:
        return block
    # surrogateescape keeps undecodable bytes intact for the cleaning step to report.
    lines = block.data.decode("utf-8", errors="surrogateescape").split("\n")
    out: list[str] = []
    numbers: list[int] = []
    split_lines = 0
    for offset, line in enumerate(lines):
        sentences = split_sentences(line, language) or [line]
        split_lines += len(sentences) > 1
        out += sentences
        numbers += [block.line_number(offset)] * len(sentences)
    counters = dict(block.counters)
    if split_lines:
        counters["lines_split_into_sentences"] = counters.get("lines_split_into_sentences", 0) + split_lines
        counters["sentences_added_by_splitting"] = (counters.get("sentences_added_by_splitting", 0)
                                                    + len(out) - len(lines))
    return Block(block.file_index, numbers[0], "\n".join(out).encode("utf-8", errors="surrogateescape"),
                 len(out), block.bom_removed, block.cr_line_ends, tuple(numbers),
                 block.line_count if block.source_lines is None else block.source_lines,
                 tuple(sorted(counters.items())))
