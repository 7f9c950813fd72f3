"""Clean: line ends, control and invisible format characters, Unicode normalization, whitespace,
optional lowercasing and digit folding, and the document filters.

Format characters that carry meaning are kept: the zero-width joiner and non-joiner (emoji
sequences, Indic and Persian orthography) and the tag characters of emoji tag sequences.
"""

from __future__ import annotations

import unicodedata
from dataclasses import dataclass
from typing import Literal

import regex

_LINE_ENDS = regex.compile(r"\r\n?")
_CONTROLS = regex.compile(r"[\p{Cc}--[\t\n]]+", regex.V1)
_FORMATS = regex.compile(r"[\p{Cf}--[\u200c\u200d\U000E0020-\U000E007F]]+", regex.V1)
# Runs of whitespace but line feeds become one space. Only runs of two or more and single
# characters other than a space are replaced: a lone space, most of them, is left where it is.
_SPACES = regex.compile(r"[^\S\n]{2,}|[^\S\n ]")
# The same for ASCII text after the control pass, which leaves tab as its only other blank:
# a plain character class is several times faster than the Unicode one.
_ASCII_SPACES = regex.compile(r"[ \t]{2,}|\t")
_SPACED_NEWLINE = regex.compile(r" ?\n ?")
_NEWLINE_RUNS = regex.compile(r"\n{3,}")
_DIGITS = regex.compile(r"\p{Nd}")
_NON_LETTERS = regex.compile(r"[^\p{L}\p{M}]+", regex.V1)  # marks count with their letters (Indic vowel signs)
_NON_STARTER_RUNS = regex.compile(r"\P{ccc=0}{31,}", regex.V1)
_CGJ = "\u034f"
# In ASCII text the letters are exactly A-Z and a-z: bytes.translate counts them 8x faster.
_ASCII_NON_LETTERS = bytes(b for b in range(256) if not (0x41 <= b <= 0x5A or 0x61 <= b <= 0x7A))
# ASCII text without any of the other bytes holds no control character (\p{Cc} but tab, LF).
_ASCII_PLAIN = b"\t\n" + bytes(range(0x20, 0x7F))

NormalForm = Literal["NFC", "NFD", "NFKC", "NFKD"]
FORMS: tuple[NormalForm, ...] = ("NFC", "NFD", "NFKC", "NFKD")


@dataclass(frozen=True)
class CleanOptions:
    normalization: str = "NFC"
    lowercase: bool = False
    digits: str = "keep"
    min_letters: int = 2
    min_letter_share: float = 0.5

    @classmethod
    def from_config(cls, clean: dict) -> CleanOptions:
        return cls(**clean)


def normalize(text: str, form: str) -> str:
    """Unicode normalization (UAX #15) in one of NFC, NFD, NFKC, NFKD."""
    for known in FORMS:
        if form == known:
            return unicodedata.normalize(known, text)
    raise ValueError(f"unknown normalization form {form!r}; allowed: {', '.join(FORMS)}")


def stream_safe(text: str) -> str:
    """Insert U+034F COMBINING GRAPHEME JOINER after every 30 non-starters in a row (UAX #15 §13,
    Stream-Safe Text Format). Why: normalization reorders a run of combining marks in time
    quadratic in its length, so 100,000 marks of "Zalgo" text would take minutes; real text
    never has more than a handful in a row, so it is unchanged."""
    return _NON_STARTER_RUNS.sub(lambda run: _CGJ.join(regex.findall(r".{1,30}", run[0], regex.S)), text)


def clean_text(text: str, options: CleanOptions) -> str:
    """Return the cleaned text: LF line ends, single spaces, at most one blank line in a row.

    A pass is skipped when the text cannot hold what it replaces (a substring test, or for ASCII
    text a byte-table test): most documents need few of the passes, and a regex pass over a whole
    document costs far more than the test (profiled on a prepare job)."""
    if "\r" in text:
        text = _LINE_ENDS.sub("\n", text)
    ascii_text = text.isascii()
    if not ascii_text:
        text = _FORMATS.sub("", text)
        if options.normalization != "none":
            text = normalize(stream_safe(text), options.normalization)
    if not ascii_text or text.encode("ascii").translate(None, _ASCII_PLAIN):
        text = _CONTROLS.sub(" ", text)
    if not ascii_text:
        text = _SPACES.sub(" ", text)
    elif "\t" in text or "  " in text:
        text = _ASCII_SPACES.sub(" ", text)
    if " \n" in text or "\n " in text:
        text = _SPACED_NEWLINE.sub("\n", text)
    if "\n\n\n" in text:
        text = _NEWLINE_RUNS.sub("\n\n", text)
    text = text.strip()
    if options.lowercase:
        text = text.lower()
    if options.digits == "zero":
        text = _DIGITS.sub("0", text)
    return text


def rejection(text: str, options: CleanOptions) -> str | None:
    """The reason a cleaned document is dropped ("empty", "too_short", "few_letters"), or None."""
    if not text:
        return "empty"
    if text.isascii():
        letters = len(text.encode("ascii").translate(None, _ASCII_NON_LETTERS))
    else:
        letters = len(_NON_LETTERS.sub("", text))
    if letters < options.min_letters:
        return "too_short"
    visible = len(text) - text.count(" ") - text.count("\n")
    if letters < options.min_letter_share * visible:
        return "few_letters"
    return None
