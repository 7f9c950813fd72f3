"""Segment: cleaned document text → sentences → word tokens.

Two families of segmenters share one interface (`Segmenter.sentences`, `Segmenter.tokens`):
Unicode UAX #29 boundaries (steps.unicode_breaks) and compact rules ("punctuation" sentences,
"pattern" words, "line" sentences). Tokenization is lossless up to whitespace: the tokens of a
sentence, in order and joined with the whitespace between them, rebuild it.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import regex

from . import unicode_breaks

NUMBER_TOKEN = "<number>"

_WORD_CHARS = r"[\p{L}\p{M}\p{N}\p{Pc}]"
_APOSTROPHES = "'\u2019"
_PATTERN_PIECES = {
    "number": r"\p{Nd}+(?:[.,:]\p{Nd}+)*",
    "word_joined": rf"[\p{{L}}\p{{N}}]{_WORD_CHARS}*(?:[{_APOSTROPHES}\-]{_WORD_CHARS}+)*",
    "word_apostrophe": rf"[\p{{L}}\p{{N}}]{_WORD_CHARS}*(?:[{_APOSTROPHES}]{_WORD_CHARS}+)*",
    "word_hyphen": rf"[\p{{L}}\p{{N}}]{_WORD_CHARS}*(?:-{_WORD_CHARS}+)*",
    "word_plain": rf"[\p{{L}}\p{{N}}]{_WORD_CHARS}*",
    "clitic": rf"[{_APOSTROPHES}]{_WORD_CHARS}+",
    # One grapheme cluster; pairs flags without counting back through a run of them as \X does.
    "other": rf"(?:(?!\s){unicode_breaks.CLUSTER_PATTERN})",
}
_NUMBER = regex.compile(r"[+\-]?\p{Nd}+(?:[.,:]\p{Nd}+)*%?", regex.V1)
_PUNCTUATION_SENTENCE_END = regex.compile(r"(?<=[.!?][\"'\u2019\u201d)\]]*)\s+(?=[\"'\u2018\u201c(\[]*[\p{Lu}\p{Nd}])", regex.V1)
_CLOSERS = "\"'\u2019\u201d)]"
_LAST_WORD = regex.compile(r"\S+", regex.REVERSE)  # searched from the end: the last whitespace-free run
# A line break with no line break beside it: inside a paragraph of hard-wrapped text.
_SINGLE_LINE_BREAK = regex.compile(r"(?<!\n)\n(?!\n)")


def _pattern_tokenizer(apostrophes: str, hyphens: str) -> Callable[[str], list[str]]:
    """Letter runs (optionally joined across apostrophes/hyphens), numbers, single graphemes."""
    word = {
        ("keep", "keep"): "word_joined",
        ("keep", "split"): "word_apostrophe",
        ("split", "keep"): "word_hyphen",
        ("split", "split"): "word_plain",
    }[(apostrophes, hyphens)]
    pieces = [_PATTERN_PIECES["number"], _PATTERN_PIECES[word]]
    if apostrophes == "split":
        pieces.append(_PATTERN_PIECES["clitic"])
    pieces.append(_PATTERN_PIECES["other"])
    compiled = regex.compile("|".join(f"(?:{p})" for p in pieces), regex.V1)
    return compiled.findall


def _line_sentences(text: str) -> list[str]:
    return [stripped for line in text.split("\n") if (stripped := line.strip())]


def _abbreviation_before(line: str, start: int, end: int) -> str | None:
    """The lowercased word before the period that ends line[start:end] (closing quotes and
    brackets may follow the period), or None; line[start:end] ends in a non-blank character.

    Only the last whitespace-free run is read, so each run of a line is read once however many
    breaks an abbreviation cancels (slicing and searching from `start` each time was quadratic
    in the length of "Dr. A Dr. A …", and worse for "a.a.a…a! A").
    """
    stripped = _LAST_WORD.search(line, start, end).group().rstrip(_CLOSERS)
    return stripped[:-1].lower() if len(stripped) > 1 and stripped.endswith(".") else None


def _punctuation_sentences(abbreviations: frozenset[str]) -> Callable[[str], list[str]]:
    """Break after . ! ? (and closing quotes) before a capital or digit, unless an abbreviation."""

    def split(text: str) -> list[str]:
        sentences: list[str] = []
        for line in text.split("\n"):
            start = 0
            for match in _PUNCTUATION_SENTENCE_END.finditer(line):
                if _abbreviation_before(line, start, match.start()) in abbreviations:
                    continue
                sentences.append(line[start : match.start()])
                start = match.end()
            sentences.append(line[start:])
        return [stripped for s in sentences if (stripped := s.strip())]

    return split


def _joining_wrapped_lines(split: Callable[[str], list[str]]) -> Callable[[str], list[str]]:
    """`split` applied with every single line break read as a space (line_ends = "soft"): most
    plain-text corpora wrap paragraphs at a fixed width, and every sentence rule (UAX #29's
    SB4 included) would end a sentence at each line end. A blank line still ends one."""

    def joined(text: str) -> list[str]:
        return split(_SINGLE_LINE_BREAK.sub(" ", text) if "\n" in text else text)

    return joined


@dataclass
class Segmenter:
    """Turns cleaned text into sentences of tokens, as configured under `segment`."""

    sentences_mode: str = "uax29"
    line_ends: str = "soft"
    words_mode: str = "uax29"
    apostrophes: str = "keep"
    hyphens: str = "keep"
    numbers: str = "keep"
    abbreviations: frozenset[str] = field(default_factory=frozenset)

    def __post_init__(self) -> None:
        self.abbreviations = frozenset(a.lower() for a in self.abbreviations)
        self._sentences: Callable[[str], list[str]]
        if self.sentences_mode == "line":
            self._sentences = _line_sentences
        elif self.sentences_mode == "punctuation":
            self._sentences = _punctuation_sentences(self.abbreviations)
        else:
            abbreviations = self.abbreviations

            def uax29(text: str) -> list[str]:
                return [stripped for s in unicode_breaks.sentence_segments(text, abbreviations) if (stripped := s.strip())]

            self._sentences = uax29
        if self.line_ends == "soft" and self.sentences_mode != "line":
            self._sentences = _joining_wrapped_lines(self._sentences)
        if self.words_mode == "pattern":
            self._tokens = _pattern_tokenizer(self.apostrophes, self.hyphens)
        else:
            self._tokens = unicode_breaks.word_tokenizer(self.apostrophes, self.hyphens)

    @classmethod
    def from_config(cls, segment: dict, learned: frozenset[str] = frozenset()) -> Segmenter:
        return cls(
            sentences_mode=segment["sentences"],
            line_ends=segment["line_ends"],
            words_mode=segment["words"],
            apostrophes=segment["apostrophes"],
            hyphens=segment["hyphens"],
            numbers=segment["numbers"],
            abbreviations=frozenset(segment["abbreviations"]) | learned,
        )

    def sentences(self, text: str) -> list[str]:
        """Sentences of a cleaned document, whitespace at their edges removed, none empty."""
        return self._sentences(text)

    def tokens(self, sentence: str) -> list[str]:
        """Word tokens of one sentence; numbers become NUMBER_TOKEN when masking is on."""
        tokens = self._tokens(sentence)
        if self.numbers == "mask":
            tokens = [NUMBER_TOKEN if _NUMBER.fullmatch(t) else t for t in tokens]
        return tokens

    def segment(self, text: str) -> list[list[str]]:
        """Sentences of tokens of a cleaned document; sentences without tokens are left out."""
        tokenize = self.tokens if self.numbers == "mask" else self._tokens
        return [tokens for sentence in self._sentences(text) if (tokens := tokenize(sentence))]


def is_lossless(text: str, tokens: list[str]) -> bool:
    """Whether tokens, in order and separated only by whitespace, rebuild `text`."""
    position = 0
    for token in tokens:
        found = text.find(token, position)
        if found < 0 or text[position:found].strip():
            return False
        position = found + len(token)
    return not text[position:].strip()
