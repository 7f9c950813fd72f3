"""Unicode text segmentation (UAX #29) for training data: words, sentences, grapheme clusters.

Word boundaries come from `regex`'s word-boundary mode (``\\b`` with ``regex.WORD``), which
implements the default UAX #29 rules. `regex` has no sentence mode, so the sentence rules
SB1–SB11 are written here as one pattern over ``\\p{SB=…}`` classes; possessive quantifiers and
atomic groups keep it linear in the length of the text. Grapheme clusters are ``\\X``.
Every function here is pure and runs in time linear in its input.
"""

from __future__ import annotations

from collections.abc import Callable
from functools import cache, lru_cache

import regex

_FLAGS = regex.V1
_WORD_FLAGS = regex.WORD | regex.V1

# ---------------------------------------------------------------------------------------------
# Words
# ---------------------------------------------------------------------------------------------

#: Letters in the sense of the word rules (Word_Break ALetter or Hebrew_Letter).
_LETTER = r"[\p{WB=ALetter}\p{WB=Hebrew_Letter}]"
#: Characters the word rules attach to the character before them (rule WB4).
_ATTACHED = r"[\p{WB=Extend}\p{WB=Format}\p{WB=ZWJ}]"
#: Hyphens that "keep" re-joins between letters: HYPHEN-MINUS, HYPHEN, NON-BREAKING HYPHEN.
_HYPHEN = r"[\-\u2010\u2011]"
#: Apostrophes UAX #29 lets stand inside a word (Single_Quote and the MidNumLet quotes).
_APOSTROPHE_CHARS = "'\u2018\u2019\uff07"
_APOSTROPHE = f"[{_APOSTROPHE_CHARS}]"

# A word boundary is a token end unless it is the boundary on either side of a hyphen that
# has a letter directly before it (marks allowed) and a letter directly after it.
_JOINING_END = (
    rf"\b(?!{_HYPHEN}(?<={_LETTER}{_ATTACHED}*+{_HYPHEN}){_LETTER})"
    rf"(?!(?<={_LETTER}{_ATTACHED}*+{_HYPHEN}){_LETTER})"
)
# A pair of regional indicators (a flag) followed by another: rules WB15/WB16 end the token
# there. Said explicitly because `regex` decides each boundary inside a run of regional
# indicators by counting back to the run's start, which is quadratic in the run's length.
_FLAG_PAIR = rf"(?:[\U0001F1E6-\U0001F1FF]{_ATTACHED}*+){{2}}(?=[\U0001F1E6-\U0001F1FF])"
# Before an apostrophe inside a word that is followed by a letter ("don|'t").
_APOSTROPHE_STOP = rf"(?={_APOSTROPHE}{_LETTER})"


def _word_pattern(apostrophes: str, hyphens: str) -> str:
    """Shortest non-blank run from a token start to the next token end.

    The last alternative ends a token at whitespace that UAX #29 keeps inside a segment
    (e.g. U+202F NARROW NO-BREAK SPACE joins "1 000"), so tokens never hold whitespace.
    """
    end = _JOINING_END if hyphens == "keep" else r"\b"
    if apostrophes == "keep":
        return rf"{_FLAG_PAIR}|\S+?{end}|\S+?(?!\S)"
    # The first two alternatives avoid testing for an apostrophe at every character: a run
    # free of apostrophes up to a token end, or up to an apostrophe that starts a new token.
    no_apostrophe = rf"[^\s{_APOSTROPHE_CHARS}]"
    return (
        rf"{_FLAG_PAIR}"
        rf"|\S{no_apostrophe}*?{end}"
        rf"|\S{no_apostrophe}*+{_APOSTROPHE_STOP}"
        rf"|\S+?(?:{end}|{_APOSTROPHE_STOP})"
        rf"|\S+?(?!\S)"
    )


_WORD_PATTERNS = {
    (apostrophes, hyphens): regex.compile(_word_pattern(apostrophes, hyphens), _WORD_FLAGS)
    for apostrophes in ("keep", "split")
    for hyphens in ("keep", "split")
}

# hyphens="keep", the fast way: each joining hyphen (a letter, marks allowed, before it and a
# letter after it) is swapped for a stand-in letter (Word_Break ALetter), so UAX #29 itself
# keeps the compound in one segment; the plain boundary pattern then runs and the hyphens are
# put back. The rules only ever see the stand-in between two letters, where WB5 joins, so the
# tokens equal those of the lookaround pattern (_JOINING_END), which is 1.1-1.3x slower on
# English text and serves any text that already holds a stand-in. The stand-ins are Latin-1
# letters (ª º µ), so an ASCII text stays a one-byte-per-character string.
_STAND_INS = {"-": "\u00aa", "\u2010": "\u00ba", "\u2011": "\u00b5"}
_JOINING_HYPHENS = {
    hyphen: regex.compile(rf"{regex.escape(hyphen)}(?<={_LETTER}{_ATTACHED}*+{regex.escape(hyphen)})(?={_LETTER})", _FLAGS) for hyphen in _STAND_INS
}


def _joined_hyphen_tokenizer(apostrophes: str) -> Callable[[str], list[str]]:
    """Tokens with hyphens="keep" by the stand-in swap described above."""
    fallback, plain = _WORD_PATTERNS[apostrophes, "keep"].findall, _WORD_PATTERNS[apostrophes, "split"].findall
    stand_ins = [(hyphen, stand_in, _JOINING_HYPHENS[hyphen].subn) for hyphen, stand_in in _STAND_INS.items()]

    hyphen_minus, unicode_hyphen, non_breaking_hyphen = _STAND_INS

    def tokens(text: str) -> list[str]:
        if hyphen_minus not in text and unicode_hyphen not in text and non_breaking_hyphen not in text:
            return plain(text)  # most sentences: nothing to join, and no list built per call
        present = [entry for entry in stand_ins if entry[0] in text]
        if any(stand_in in text for _, stand_in, _ in present):
            return fallback(text)  # decided on the original text, before any swap
        swapped = []
        for hyphen, stand_in, swap in present:
            text, count = swap(stand_in, text)
            if count:
                swapped.append((stand_in, hyphen))
        found = plain(text)
        for stand_in, hyphen in swapped:
            found = [token.replace(stand_in, hyphen) if stand_in in token else token for token in found]
        return found

    return tokens


@cache
def word_tokenizer(apostrophes: str = "keep", hyphens: str = "keep") -> Callable[[str], list[str]]:
    """The function `word_tokens` applies for these modes, for callers that tokenize many texts."""
    if (apostrophes, hyphens) not in _WORD_PATTERNS:
        raise ValueError(f"apostrophes and hyphens must each be 'keep' or 'split', got {apostrophes!r}, {hyphens!r}")
    if hyphens == "keep":
        return _joined_hyphen_tokenizer(apostrophes)
    return _WORD_PATTERNS[apostrophes, hyphens].findall


def word_tokens(text: str, *, apostrophes: str = "keep", hyphens: str = "keep") -> list[str]:
    """Word tokens by UAX #29 default word boundaries, without whitespace, in text order.

    Each non-blank word segment is a token: punctuation marks stand alone, numbers such as
    "3.5" and "1,200" stay whole, emoji ZWJ sequences are one token, ideographs one each.
    ``apostrophes="split"`` starts a new token at every apostrophe (', ‘, ’, ＇) that UAX #29
    keeps inside a word and that a letter follows: "keeper's" → "keeper", "'s"; "don't" →
    "don", "'t"; "rock'n'roll" → "rock", "'n", "'roll"; digits keep theirs ("1'000").
    ``hyphens="keep"`` joins letter-hyphen-letter runs without spaces into one token
    ("ice-cold", "state-of-the-art"); ``"split"`` leaves UAX #29's "ice", "-", "cold".
    Whitespace only separates: ``"".join(tokens) == regex.sub(r"\\s+", "", text)``.
    """
    return word_tokenizer(apostrophes, hyphens)(text)


# ---------------------------------------------------------------------------------------------
# Sentences
# ---------------------------------------------------------------------------------------------


def _sb(*values: str) -> str:
    return "".join(rf"\p{{SB={value}}}" for value in values)


_IGNORED = _sb("Extend", "Format")  # SB5: absorbed by the character before them
_PARA_SEP = _sb("Sep", "CR", "LF")
_TERMINATORS = _sb("ATerm", "STerm")
# SB9/SB10: a terminator keeps its closing punctuation, then its spaces (each with SB5 marks).
_TAIL = rf"[{_sb('Close')}{_IGNORED}]*+[{_sb('Sp')}{_IGNORED}]*+"
_NOT_SB8_STOP = rf"[^{_sb('OLetter', 'Upper', 'Lower')}{_PARA_SEP}{_TERMINATORS}]"

# One sentence per match. The loop consumes text that cannot end a sentence: runs without
# terminators or separators, and terminator sequences after which a rule forbids a break.
# What follows the loop is the sentence end: SB11 (terminator, tail, one separator), SB4
# (a separator; CR LF counts as one, SB3), or the end of the text (SB2).
_SENTENCE_BODY = rf"""
(?=[\s\S])
(?:
    (?: [[\x00-\x7f]--[.!?\r\n]] | [^\x00-\x7f{_TERMINATORS}{_PARA_SEP}] )++
  | (?: [.!?] (?=[.!?]) )++
  | (?: (?>[{_TERMINATORS}] {_TAIL}) (?=[{_sb("SContinue")}{_TERMINATORS}]) )++
  | (?>\p{{SB=ATerm}} {_TAIL}) (?={_NOT_SB8_STOP}*+ \p{{SB=Lower}})
  | (?<=[{_sb("Upper", "Lower")}][{_IGNORED}]*+) \p{{SB=ATerm}} [{_IGNORED}]*+ (?=\p{{SB=Upper}})
  | \p{{SB=ATerm}} [{_IGNORED}]*+ (?=\p{{SB=Numeric}})
  {{abbreviation}}
)*+
(?: [{_TERMINATORS}] {_TAIL} (?:\r\n|[{_PARA_SEP}])? | \r\n | [{_PARA_SEP}] )?
"""
# In order, the alternatives are: ASCII tested by a plain class (its terminators and
# separators are . ! ? CR LF) as property lookups cost more, then the rest; SB8a, first for
# ASCII runs such as "...", then in general (".)."); SB8; SB7; SB6. The optional last one
# joins across a period after a listed abbreviation.
_ABBREVIATION = r"| (?<=(?<![\w.])(?i:\L<abbreviations>)) \. " + _TAIL


@lru_cache(maxsize=64)
def _sentence_pattern(abbreviations: frozenset[str]) -> regex.Pattern[str]:
    """Compiled once per abbreviation set, as callers pass the same set for every document."""
    listed = sorted({a.lower().removesuffix(".") for a in abbreviations} - {""})
    if not listed:
        return regex.compile(_SENTENCE_BODY.replace("{abbreviation}", ""), _FLAGS | regex.VERBOSE)
    return regex.compile(_SENTENCE_BODY.replace("{abbreviation}", _ABBREVIATION), _FLAGS | regex.VERBOSE, abbreviations=listed)


def sentence_segments(text: str, abbreviations: frozenset[str] = frozenset()) -> list[str]:
    """Sentences by the UAX #29 sentence rules, each keeping its trailing spaces and separator.

    Lossless: ``"".join(result) == text``. Beyond the standard, there is no break after a
    period that ends a word listed in ``abbreviations`` (compared case-insensitively; entries
    may carry their final period, and inner periods as in "e.g" count as part of the word),
    so "Dr. Ames came." stays one sentence with {"dr"} where the standard breaks after "Dr.".
    Paragraph separators (CR, LF, U+2029, …) still always end a sentence.
    """
    return _sentence_pattern(abbreviations).findall(text)


# ---------------------------------------------------------------------------------------------
# Grapheme clusters
# ---------------------------------------------------------------------------------------------

# One extended grapheme cluster. A flag (two regional indicators and their marks, rules GB12,
# GB13, GB9, GB9a) is spelled out because `regex` decides each boundary inside a run of
# regional indicators by counting back to the run's start, which is quadratic in its length.
# Public for patterns elsewhere that match one cluster at a time; every match must start at a
# cluster boundary.
CLUSTER_PATTERN = r"(?>[\U0001F1E6-\U0001F1FF]{2}[\p{GCB=Extend}\p{GCB=ZWJ}\p{GCB=SpacingMark}]*+|\X)"
_CLUSTER = regex.compile(CLUSTER_PATTERN, _FLAGS)
# Matched on a text that starts at a cluster boundary: stops at the start of its last cluster.
# A cluster boundary depends only on the text up to the character after it, so a window one
# character longer than a limit has every boundary up to the limit where the whole text has it.
_UP_TO_LAST_CLUSTER = regex.compile(rf"{CLUSTER_PATTERN}*(?={CLUSTER_PATTERN}\Z)", _FLAGS)
# Before a character of this class there is a cluster boundary whatever comes earlier, unless
# a Prepend character stands right before it (GB9b): no pair rule joins it to the character
# before it, and the rules that look further back (GB9c, GB11, GB12/GB13) join only before
# Indic consonants, pictographs and regional indicators. Most letters, digits and punctuation
# are in it. Searched backwards from the end of a text.
_SURE_BOUNDARY = regex.compile(r"(?<!\p{GCB=Prepend})[\p{GCB=Other}&&\p{InCB=None}--\p{Extended_Pictographic}]", _FLAGS | regex.REVERSE)
#: How far back from the end to look for such a boundary before matching from the start.
_SURE_BOUNDARY_REACH = 4096


def last_cluster_start(text: str) -> int:
    """Where the last grapheme cluster of ``text`` starts; 0 when it holds one cluster or none.

    Why: a cut at the end of a long text should cost as much as its last few clusters. The
    clusters are matched from the last boundary that is one whatever precedes it (see
    _SURE_BOUNDARY), found within the last few thousand characters; without one (a long run of
    flags or combining marks) from the start of the text, which is still linear in its length.
    """
    if text.isascii():  # in ASCII only CR LF is one cluster of two (rule GB3)
        return max(len(text) - (2 if text.endswith("\r\n") else 1), 0)
    sure = _SURE_BOUNDARY.search(text, max(len(text) - _SURE_BOUNDARY_REACH, 0))
    if sure is None:
        return _UP_TO_LAST_CLUSTER.match(text).end()
    # Sliced, so that `regex` never looks back past the boundary.
    return sure.start() + _UP_TO_LAST_CLUSTER.match(text[sure.start() :]).end()


def _cut(text: str, start: int, max_chars: int) -> int:
    """End of the longest run of whole clusters from `start` within `max_chars` characters.

    When the first cluster alone is longer, its end: clusters are never cut. The text is
    sliced from `start` (a cluster boundary) so that `regex` never counts regional
    indicators back past it.
    """
    end = last_cluster_start(text[start : start + max_chars + 1])
    if end:
        return start + end
    size = 2 * max_chars + 2
    while True:  # the first cluster is longer than the limit: widen until it ends inside
        window = text[start : start + size]
        end = _CLUSTER.match(window).end()
        if end < len(window) or start + size >= len(text):
            return start + end
        size *= 2


def _check_limit(max_chars: int) -> None:
    if max_chars < 1:
        raise ValueError(f"max_chars must be at least 1, got {max_chars}")


def truncate_graphemes(text: str, max_chars: int) -> str:
    """The longest prefix of whole grapheme clusters with at most ``max_chars`` characters.

    Why: a length limit must not leave a lone combining mark or half an emoji sequence. If the
    first cluster alone is longer than the limit, that cluster is returned whole.
    Equals ``split_graphemes(text, max_chars)[0]`` for non-empty text.
    """
    _check_limit(max_chars)
    if len(text) <= max_chars:
        return text
    return text[: _cut(text, 0, max_chars)]


def split_graphemes(text: str, max_chars: int) -> list[str]:
    """Consecutive pieces of at most ``max_chars`` characters, cut only between clusters.

    Each piece is as long as allowed; a piece is longer only when it is a single cluster that
    is longer by itself. ``"".join(pieces) == text``; the empty text gives no pieces.
    """
    _check_limit(max_chars)
    pieces = []
    start = 0
    while len(text) - start > max_chars:
        end = _cut(text, start, max_chars)
        pieces.append(text[start:end])
        start = end
    if start < len(text):
        pieces.append(text[start:])
    return pieces
