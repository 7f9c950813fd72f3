"""Specification of steps.unicode_breaks: UAX #29 words, sentences and grapheme clusters.

The Unicode conformance files come from Debian's unicode-data package (/usr/share/unicode).
They are Unicode 15.0 while `regex` carries newer tables; a test line is skipped only when one
of its code points has a different relevant property value in the file's property data than
in `regex`, and the number of such lines is bounded.
"""

from __future__ import annotations

import bz2
import functools
import gzip
import os
import random
from collections.abc import Callable
from pathlib import Path
from typing import IO

import pytest
import regex

from corpusmill import unicode_breaks
from corpusmill.unicode_breaks import (
    last_cluster_start,
    sentence_segments,
    split_graphemes,
    truncate_graphemes,
    word_tokens,
)

UNICODE_DIR = Path("/usr/share/unicode")
WORD_FLAGS = regex.WORD | regex.V1
#: At most this many lines of one test file may be skipped for property differences.
MAX_SKIPPED_LINES = 5
MODES = [(a, h) for a in ("keep", "split") for h in ("keep", "split")]


# ---------------------------------------------------------------------------------------------
# Unicode Character Database files
# ---------------------------------------------------------------------------------------------


def open_ucd(name: str) -> IO[str]:
    """Open a UCD file, plain or compressed; skip (fail under CI=true) when it is absent."""
    for folder in (UNICODE_DIR, UNICODE_DIR / "auxiliary", UNICODE_DIR / "emoji"):
        for suffix, opener in (("", open), (".bz2", bz2.open), (".gz", gzip.open)):
            path = folder / (name + suffix)
            if path.exists():
                return opener(path, "rt", encoding="utf-8")
    message = f"{name} not found under {UNICODE_DIR} (install Debian's unicode-data package)"
    if os.environ.get("CI") == "true":
        pytest.fail(message)
    pytest.skip(message)


@functools.cache
def property_values(name: str) -> dict[int, str]:
    """Code point → value from a UCD property file ("0041..005A ; ALetter # …")."""
    values = {}
    with open_ucd(name) as lines:
        for line in lines:
            data = line.split("#", 1)[0].strip()
            if not data:
                continue
            points, value = (field.strip() for field in data.split(";")[:2])
            first, _, last = points.partition("..")
            for cp in range(int(first, 16), int(last or first, 16) + 1):
                values[cp] = value
    return values


@functools.cache
def extended_pictographic() -> frozenset[int]:
    """Extended_Pictographic code points according to emoji-data.txt (UTS #51)."""
    return frozenset(cp for cp, value in property_values("emoji-data.txt").items() if value == "Extended_Pictographic")


@functools.cache
def has_property(prop: str, value: str, cp: int) -> bool:
    """Whether `regex` gives code point `cp` the property value."""
    return regex.match(rf"\p{{{prop}={value}}}", chr(cp)) is not None


@functools.cache
def has_pictographic(cp: int) -> bool:
    return regex.match(r"\p{Extended_Pictographic}", chr(cp)) is not None


def differs(cp: int, prop: str, file: str, pictographic: bool) -> bool:
    """Whether `regex` disagrees with the file's value of `prop` (or Extended_Pictographic)."""
    if not has_property(prop, property_values(file).get(cp, "Other"), cp):
        return True
    return pictographic and has_pictographic(cp) != (cp in extended_pictographic())


def break_test_lines(name: str) -> list[tuple[str, list[int], str]]:
    """(text, boundary offsets, line) for each line of a UAX #29 *BreakTest.txt file.

    The file's format: hex code points separated by ÷ (boundary) or × (no boundary).
    """
    cases = []
    with open_ucd(name) as lines:
        for line in lines:
            data = line.split("#", 1)[0].split()
            if not data:
                continue
            chars: list[str] = []
            boundaries = []
            for item in data:
                if item == "÷":
                    boundaries.append(len(chars))
                elif item != "×":
                    chars.append(chr(int(item, 16)))
            cases.append(("".join(chars), boundaries, line.strip()))
    return cases


def offsets(pieces: list[str]) -> list[int]:
    """Boundary offsets of consecutive pieces, from 0 to the total length."""
    result = [0]
    for piece in pieces:
        result.append(result[-1] + len(piece))
    return result


def word_boundaries(text: str) -> list[int]:
    return [m.start() for m in regex.finditer(r"\b", text, flags=WORD_FLAGS)]


def clusters(text: str) -> list[str]:
    return regex.findall(r"\X", text, flags=regex.V1)


def blank_free_pieces(text: str, boundaries: list[int]) -> list[str]:
    """The segments between boundaries, split at whitespace, blanks dropped."""
    return [piece for start, end in zip(boundaries, boundaries[1:]) for piece in regex.split(r"\s+", text[start:end]) if piece]


# ---------------------------------------------------------------------------------------------
# Conformance (UAX #29 test files)
# ---------------------------------------------------------------------------------------------


def check_words(text: str, expected: list[int]) -> str | None:
    if word_boundaries(text) != expected:
        return f"regex \\b gives {word_boundaries(text)}"
    tokens = word_tokens(text, apostrophes="keep", hyphens="split")
    if tokens != blank_free_pieces(text, expected):
        return f"word_tokens gives {tokens!r}"
    return None


def check_sentences(text: str, expected: list[int]) -> str | None:
    found = offsets(sentence_segments(text))
    return None if found == expected else f"sentence_segments gives {found}"


def check_graphemes(text: str, expected: list[int]) -> str | None:
    if offsets(clusters(text)) != expected:
        return f"\\X gives {offsets(clusters(text))}"
    pieces = split_graphemes(text, 1)
    return None if offsets(pieces) == expected else f"split_graphemes(text, 1) gives {pieces!r}"


@pytest.mark.parametrize(
    ("test_file", "property_file", "prop", "pictographic", "check"),
    [
        pytest.param("WordBreakTest.txt", "WordBreakProperty.txt", "WB", True, check_words, id="words"),
        pytest.param("SentenceBreakTest.txt", "SentenceBreakProperty.txt", "SB", False, check_sentences, id="sentences"),
        pytest.param("GraphemeBreakTest.txt", "GraphemeBreakProperty.txt", "GCB", True, check_graphemes, id="graphemes"),
    ],
)
def test_uax29_conformance(
    test_file: str,
    property_file: str,
    prop: str,
    pictographic: bool,
    check: Callable[[str, list[int]], str | None],
) -> None:
    """Every line of the UAX #29 conformance file (Unicode 15.0 auxiliary/*BreakTest.txt) holds.

    Source: UAX #29 "Unicode Text Segmentation", sections 3.1 (grapheme), 4.1 (word) and 5.1
    (sentence) rules; the test files' ÷ / × marks. Lines are skipped only when a code point's
    Word_Break / Sentence_Break / Grapheme_Cluster_Break (or Extended_Pictographic, from
    emoji-data.txt) differs between the 15.0 property files and `regex`'s newer tables.
    """
    cases = break_test_lines(test_file)
    assert len(cases) > 400
    skipped = [line for text, _, line in cases if any(differs(ord(c), prop, property_file, pictographic) for c in text)]
    assert len(skipped) <= MAX_SKIPPED_LINES, skipped
    failures = []
    for text, expected, line in cases:
        if line in skipped:
            continue
        problem = check(text, expected)
        if problem:
            failures.append(f"{line}\n    {problem}")
    summary = f"regex {regex.__version__}: {len(failures)} of {len(cases)} lines fail:\n"
    assert not failures, summary + "\n".join(failures[:20])


# ---------------------------------------------------------------------------------------------
# Differential: random strings over every property class
# ---------------------------------------------------------------------------------------------

SB_CLASSES = ("CR", "LF", "Sep", "Extend", "Format", "Sp", "Lower", "Upper", "OLetter", "Numeric",
              "ATerm", "STerm", "Close", "SContinue")  # fmt: skip
PARA_SEP = {"Sep", "CR", "LF"}
TERMINATORS = {"ATerm", "STerm"}


def sb_class(ch: str) -> str:
    for value in SB_CLASSES:
        if has_property("SB", value, ord(ch)):
            return value
    return "Other"


def reference_sentence_boundaries(text: str) -> list[int]:
    """Sentence boundaries by applying the rules of UAX #29 section 5.1 one by one.

    A deliberately plain reading of the standard (quadratic, fine for short strings): SB5
    folds Extend/Format into the preceding character, then each position is decided by the
    first of SB3–SB11, SB998 that applies.
    """
    props = [sb_class(c) for c in text]
    elements: list[str] = []  # SB5: the classes of the characters that are not folded away
    owner: list[int] = []  # for each character, the element it belongs to
    for prop in props:
        if prop in ("Extend", "Format") and elements and elements[-1] not in PARA_SEP:
            owner.append(len(elements) - 1)
        else:
            elements.append(prop)
            owner.append(len(elements) - 1)
    boundaries = [0] if text else []
    for i in range(1, len(text)):
        if props[i - 1] == "CR" and props[i] == "LF":  # SB3
            continue
        if props[i - 1] in PARA_SEP:  # SB4
            boundaries.append(i)
            continue
        if owner[i] == owner[i - 1]:  # SB5
            continue
        if sentence_break_between_elements(elements, owner[i]):
            boundaries.append(i)
    if text:
        boundaries.append(len(text))
    return boundaries


def sentence_break_between_elements(e: list[str], j: int) -> bool:
    """SB6–SB11 and SB998 between elements j-1 and j."""
    if e[j - 1] == "ATerm" and e[j] == "Numeric":  # SB6
        return False
    if j >= 2 and e[j - 2] in ("Upper", "Lower") and e[j - 1] == "ATerm" and e[j] == "Upper":  # SB7
        return False
    k = j - 1
    while k >= 0 and e[k] == "Close":
        k -= 1
    closes_only = e[k] if k >= 0 else None  # the element before "Close*"
    k = j - 1
    while k >= 0 and e[k] == "Sp":
        k -= 1
    while k >= 0 and e[k] == "Close":
        k -= 1
    terminator = e[k] if k >= 0 else None  # the element before "Close* Sp*"
    if terminator == "ATerm":  # SB8
        m = j
        while m < len(e) and e[m] not in ("OLetter", "Upper", "Lower", *PARA_SEP, *TERMINATORS):
            m += 1
        if m < len(e) and e[m] == "Lower":
            return False
    if terminator in TERMINATORS and e[j] in ("SContinue", *TERMINATORS):  # SB8a
        return False
    if closes_only in TERMINATORS and e[j] in ("Close", "Sp", *PARA_SEP):  # SB9
        return False
    if terminator in TERMINATORS and e[j] in ("Sp", *PARA_SEP):  # SB10
        return False
    if terminator in TERMINATORS:  # SB11
        return True
    return False  # SB998


@functools.cache
def class_samples(prop: str, file: str, per_class: int = 40) -> dict[str, list[str]]:
    """Up to `per_class` characters of each class of `prop` on which the file and `regex` agree."""
    by_class: dict[str, list[int]] = {}
    for cp, value in property_values(file).items():
        if has_property(prop, value, cp):
            by_class.setdefault(value, []).append(cp)
    by_class["Other"] = [cp for cp in range(0x20, 0x3000) if cp not in property_values(file)
                         and has_property(prop, "Other", cp)]  # fmt: skip
    rng = random.Random(29)
    return {value: [chr(cp) for cp in rng.sample(points, min(per_class, len(points)))] for value, points in sorted(by_class.items())}


def random_strings(samples: dict[str, list[str]], count: int, extra: tuple[str, ...] = ()) -> list[str]:
    """Seeded strings of 1–12 characters, each of a uniformly chosen class."""
    rng = random.Random(1729)
    pools = list(samples.values()) + [[c] for c in extra]
    return ["".join(rng.choice(rng.choice(pools)) for _ in range(rng.randint(1, 12))) for _ in range(count)]


def test_sentences_match_reference_rules_on_random_strings() -> None:
    """2,000 random strings over all 15 Sentence_Break classes split as the rules say.

    Source: UAX #29 section 5.1 (rules SB1–SB11), applied by the plain reference above; the
    classes are sampled from SentenceBreakProperty.txt.
    """
    samples = class_samples("SB", "SentenceBreakProperty.txt")
    assert set(samples) == {*SB_CLASSES, "Other"}
    failures = [
        (s, offsets(sentence_segments(s)), reference_sentence_boundaries(s))
        for s in random_strings(samples, 2000)
        if offsets(sentence_segments(s)) != reference_sentence_boundaries(s)
    ]
    assert not failures, failures[:10]


def reference_tokens(text: str, apostrophes: str, hyphens: str) -> list[str]:
    """The token rules stated plainly on top of `regex`'s UAX #29 word boundaries."""
    letter = regex.compile(r"[\p{WB=ALetter}\p{WB=Hebrew_Letter}]", regex.V1)
    attached = regex.compile(r"[\p{WB=Extend}\p{WB=Format}\p{WB=ZWJ}]*\Z", regex.V1)
    bounds = word_boundaries(text)
    spans = [(start + m.start(), start + m.end()) for start, end in zip(bounds, bounds[1:]) for m in regex.finditer(r"\S+", text[start:end])]
    if apostrophes == "split":
        cut = []
        for start, end in spans:
            for i in range(start + 1, end - 1):
                if text[i] in "'\u2018\u2019\uff07" and letter.match(text[i + 1]):
                    cut.append((start, i))
                    start = i
            cut.append((start, end))
        spans = cut
    if hyphens == "keep":
        joined: list[tuple[int, int]] = []
        for span in spans:
            if len(joined) >= 2:
                (a, b), (h, k) = joined[-2], joined[-1]
                head = text[a:b][: len(text[a:b]) - len(attached.search(text[a:b]).group())]
                if (k - h == 1 and text[h] in "-\u2010\u2011" and b == h and k == span[0]
                        and head and letter.match(head[-1]) and letter.match(text[span[0]])):  # fmt: skip
                    joined[-2:] = [(a, span[1])]
                    continue
            joined.append(span)
        spans = joined
    return [text[a:b] for a, b in spans]


def test_word_tokens_match_reference_rules_on_random_strings() -> None:
    """Random strings over all Word_Break classes, hyphens and spaces, in all four modes.

    Source: UAX #29 section 4.1 (default word boundaries, via `regex`'s \\b) and the token
    rules of word_tokens' docstring, applied one by one by reference_tokens.
    """
    samples = class_samples("WB", "WordBreakProperty.txt")
    # ª and µ are stand-in letters word_tokens swaps joining hyphens for: text holding one
    # takes the slower lookaround pattern, which must give the same tokens.
    strings = random_strings(samples, 2000, extra=("-", "\u2010", "\u2011", "'", "\u2019", " ", "a", "b", "\u00aa", "\u00b5"))
    # And dense mixes of the three hyphens, their stand-ins, letters and marks, where they meet.
    joins = {"joins": ["-", "\u2010", "\u2011", "\u00aa", "\u00ba", "\u00b5", "a", "b", "\u0301", " ", "'", "1"]}
    strings += random_strings(joins, 3000)
    failures = [
        (s, mode, word_tokens(s, apostrophes=mode[0], hyphens=mode[1]), reference_tokens(s, *mode))
        for s in strings
        for mode in MODES
        if word_tokens(s, apostrophes=mode[0], hyphens=mode[1]) != reference_tokens(s, *mode)
    ]
    assert not failures, failures[:10]


def test_split_graphemes_cuts_only_between_clusters_on_random_strings() -> None:
    """Random strings over all Grapheme_Cluster_Break classes are cut only at \\X boundaries.

    Source: UAX #29 section 3.1 (extended grapheme clusters, rules GB1–GB999); each piece is
    as long as the limit allows, and longer only when it is one cluster.
    """
    samples = class_samples("GCB", "GraphemeBreakProperty.txt")
    pictographs = [chr(cp) for cp in sorted(extended_pictographic()) if has_pictographic(cp)][::50]
    failures = []
    for s in random_strings({**samples, "Extended_Pictographic": pictographs}, 2000):
        whole = clusters(s)
        for limit in (1, 2, 3, 5):
            pieces = split_graphemes(s, limit)
            ends = offsets(pieces)
            if "".join(pieces) != s or not set(ends) <= set(offsets(whole)):
                failures.append((s, limit, pieces))
            elif any(len(p) > limit and len(clusters(p)) > 1 for p in pieces):
                failures.append((s, limit, pieces))
            elif any(len(p) + len(clusters(s[ends[i + 1] :])[0]) <= limit for i, p in enumerate(pieces[:-1])):
                failures.append((s, limit, pieces))
            elif truncate_graphemes(s, limit) != pieces[0]:
                failures.append((s, limit, truncate_graphemes(s, limit)))
    assert not failures, failures[:10]


# ---------------------------------------------------------------------------------------------
# Token rules
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "apostrophes", "hyphens", "tokens"),
    [
        ("Hello, world!", "keep", "keep", ["Hello", ",", "world", "!"]),
        ("keeper's don't", "keep", "keep", ["keeper's", "don't"]),
        ("keeper's don't", "split", "keep", ["keeper", "'s", "don", "'t"]),
        ("rock\u2019n\u2019roll", "split", "keep", ["rock", "\u2019n", "\u2019roll"]),
        ("'tis 1'000", "split", "keep", ["'", "tis", "1'000"]),
        ("ice-cold state-of-the-art", "keep", "keep", ["ice-cold", "state-of-the-art"]),
        ("ice-cold", "keep", "split", ["ice", "-", "cold"]),
        ("pages 3-4, ice - cold, x--y", "keep", "keep",
         ["pages", "3", "-", "4", ",", "ice", "-", "cold", ",", "x", "-", "-", "y"]),
        ("3.5 1,200 $4.99", "keep", "keep", ["3.5", "1,200", "$", "4.99"]),
        ("e.g. U.S.A.", "keep", "keep", ["e.g", ".", "U.S.A", "."]),
        ("\U0001F468\u200d\U0001F469\u200d\U0001F467 \U0001F44D\U0001F3FD!", "keep", "keep",
         ["\U0001F468\u200d\U0001F469\u200d\U0001F467", "\U0001F44D\U0001F3FD", "!"]),
        ("\U0001F1EB\U0001F1F7\U0001F1E9\U0001F1EA\U0001F1EE", "keep", "keep",
         ["\U0001F1EB\U0001F1F7", "\U0001F1E9\U0001F1EA", "\U0001F1EE"]),
        ("東京は晴れ。", "keep", "keep", ["東", "京", "は", "晴", "れ", "。"]),
        ("caf\u00e9 cafe\u0301 na\u00efve", "keep", "keep", ["caf\u00e9", "cafe\u0301", "na\u00efve"]),
        ("1\u202f000 km", "keep", "keep", ["1", "000", "km"]),
        # The letters word_tokens uses as stand-ins for joining hyphens (ª º µ) in the text itself:
        ("ice-cold \u2011 \u00b5", "keep", "keep", ["ice-cold", "\u2011", "\u00b5"]),
        ("x\u2010ray \u00aa", "keep", "keep", ["x\u2010ray", "\u00aa"]),
        ("\u00b5-meter ice\u2011cold", "keep", "keep", ["\u00b5-meter", "ice\u2011cold"]),
    ],
)  # fmt: skip
def test_word_token_rules(text: str, apostrophes: str, hyphens: str, tokens: list[str]) -> None:
    """Word tokens are UAX #29 word segments without whitespace, plus the two options.

    Source: UAX #29 section 4.1 — WB6/WB7 (letters across MidLetter/MidNumLetQ, "don't",
    "e.g"), WB11/WB12 (numbers across MidNum, "1,200"), WB3c/WB4 (emoji ZWJ sequences and
    modifiers), WB15/WB16 (flag pairs), WB999 (ideographs and kana one by one, punctuation
    alone); U+202F is ExtendNumLet (WB13a/b) yet White_Space, so tokens end at it.
    """
    assert word_tokens(text, apostrophes=apostrophes, hyphens=hyphens) == tokens


def test_word_tokens_are_lossless_up_to_whitespace() -> None:
    """Tokens hold no whitespace and, concatenated, equal the text with whitespace removed.

    Source: the word_tokens contract ("lossless up to whitespace"); whitespace is the
    Unicode White_Space property (UCD PropList.txt) as `regex`'s \\s.
    """
    samples = class_samples("WB", "WordBreakProperty.txt")
    strings = random_strings(samples, 500, extra=(" ", "\u00a0", "\u202f", "\n"))
    for s in strings:
        for apostrophes, hyphens in MODES:
            tokens = word_tokens(s, apostrophes=apostrophes, hyphens=hyphens)
            assert "".join(tokens) == regex.sub(r"\s+", "", s)
            assert all(t and not regex.search(r"\s", t) for t in tokens)


def test_word_tokens_reject_unknown_modes() -> None:
    """Only "keep" and "split" are modes (word_tokens contract)."""
    with pytest.raises(ValueError):
        word_tokens("a", apostrophes="merge")


# ---------------------------------------------------------------------------------------------
# Sentences and abbreviations
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "sentences"),
    [
        ("Dr. Ames came. He left.", ["Dr. ", "Ames came. ", "He left."]),
        ("It cost approx. 5 dollars. Fine.", ["It cost approx. 5 dollars. ", "Fine."]),
        ("U.S.A. is big. Mr.Smith left.", ["U.S.A. is big. ", "Mr.Smith left."]),
        ('He said "Stop." Then wait... then go!? Yes.', ['He said "Stop." ', "Then wait... then go!? ", "Yes."]),
        ("Line one\nLine two\r\nEnd", ["Line one\n", "Line two\r\n", "End"]),
        ("Pi is 3.14. (Really.) Next", ["Pi is 3.14. ", "(Really.) ", "Next"]),
        ("これは文です。次の文！", ["これは文です。", "次の文！"]),
    ],
)
def test_sentence_rules(text: str, sentences: list[str]) -> None:
    """Sentences follow UAX #29 with no abbreviations.

    Source: UAX #29 section 5.1 — SB7 ("Mr.Smith"), SB8 (period before a lowercase word,
    "U.S.A. is"), SB8a ("!?", "..."), SB9/SB10 (closing marks and spaces stay with the
    sentence), SB11 (break after "Dr." before a capital), SB4 (line ends always break),
    STerm "。" and "！".
    """
    assert sentence_segments(text) == sentences


def test_abbreviations_prevent_breaks() -> None:
    """A listed abbreviation's period does not end a sentence; line ends still do.

    Source: sentence_segments contract (case-insensitive word before the final period) on
    top of UAX #29 section 5.1, whose SB11 breaks after "Dr." before a capital.
    """
    assert sentence_segments("Dr. Ames came.") == ["Dr. ", "Ames came."]
    assert sentence_segments("Dr. Ames came.", frozenset({"dr"})) == ["Dr. Ames came."]
    assert sentence_segments("DR. Ames. NO. 5 fits.", frozenset({"dr", "No."})) == ["DR. Ames. ", "NO. 5 fits."]
    assert sentence_segments("See e.g. Smith. X", frozenset({"e.g"})) == ["See e.g. Smith. ", "X"]
    assert sentence_segments("Dr.\nAmes", frozenset({"dr"})) == ["Dr.\n", "Ames"]
    assert sentence_segments("Odr. Ames.", frozenset({"dr"})) == ["Odr. ", "Ames."]


def test_sentence_segments_are_lossless() -> None:
    """The sentences, concatenated, are the text (sentence_segments contract)."""
    samples = class_samples("SB", "SentenceBreakProperty.txt")
    for s in random_strings(samples, 500, extra=("Dr", ". ", " A")):
        assert "".join(sentence_segments(s, frozenset({"dr"}))) == s
        assert all(sentence_segments(s))


# ---------------------------------------------------------------------------------------------
# Grapheme clusters
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "limit", "pieces"),
    [
        ("abcdef", 4, ["abcd", "ef"]),
        ("abe\u0301\u0302f", 3, ["ab", "e\u0301\u0302", "f"]),
        ("a\U0001f468\u200d\U0001f469\u200d\U0001f467b", 4, ["a", "\U0001f468\u200d\U0001f469\u200d\U0001f467", "b"]),
        ("\u1100\u1161\u11a8\u1100\u1161", 2, ["\u1100\u1161\u11a8", "\u1100\u1161"]),
        ("\U0001f1eb\U0001f1f7\U0001f1e9\U0001f1ea", 3, ["\U0001f1eb\U0001f1f7", "\U0001f1e9\U0001f1ea"]),
        ("a\r\nb", 2, ["a", "\r\n", "b"]),
        ("", 3, []),
    ],
)
def test_split_graphemes_never_cuts_a_cluster(text: str, limit: int, pieces: list[str]) -> None:
    """Cuts fall between extended grapheme clusters only.

    Source: UAX #29 section 3.1 — GB9 (combining marks), GB11 (emoji ZWJ sequences), GB6–GB8
    (Hangul jamo L V T), GB12/GB13 (flag pairs), GB3 (CR LF).
    """
    assert split_graphemes(text, limit) == pieces
    assert truncate_graphemes(text, limit) == (pieces[0] if pieces else "")


def test_last_cluster_start_is_where_regex_X_starts_the_last_cluster(monkeypatch: pytest.MonkeyPatch) -> None:
    """Random strings over all Grapheme_Cluster_Break classes and pictographs, alone and after
    heads that leave no boundary valid whatever precedes it within the reach (flags, marks,
    Prepend), so that the clusters are matched from the start; the reach is shortened to 8
    characters so that the reference stays quick.

    Source: UAX #29 section 3.1, as `regex`'s \\X implements it over the whole string.
    """
    monkeypatch.setattr(unicode_breaks, "_SURE_BOUNDARY_REACH", 8)
    samples = class_samples("GCB", "GraphemeBreakProperty.txt")
    pictographs = [chr(cp) for cp in sorted(extended_pictographic()) if has_pictographic(cp)][::50]
    heads = ["", "\U0001f1e6" * 10, "\U0001f1e6" * 11, "a" + "\u0301" * 10, "\u0600" * 10, "a" * 10]
    # Joins that look back past the character before: GB9c (a conjunct, also across a sign
    # `regex` counts as InCB=Extend), GB11 (emoji ZWJ sequences), GB9b (Prepend).
    joins = ["\u0915\u094d\u0915", "\u0915\u094d\u1cf5\u0915", "\U0001f468\u200d\U0001f469", "b\u0600a"]
    failures = []
    for s in random_strings({**samples, "Extended_Pictographic": pictographs}, 2000) + joins:
        for text in (head + s for head in heads):
            expected = offsets(clusters(text))[-2] if text else 0
            if last_cluster_start(text) != expected:
                failures.append((text, last_cluster_start(text), expected))
    assert not failures, failures[:10]


class RecordedMatches:
    """Stands in for a compiled pattern and records the length of each text it is matched on."""

    def __init__(self, pattern: regex.Pattern[str]) -> None:
        self.pattern, self.lengths = pattern, []

    def match(self, text: str) -> regex.Match[str] | None:
        self.lengths.append(len(text))
        return self.pattern.match(text)


def test_last_cluster_start_matches_clusters_only_at_the_end_of_ordinary_text(monkeypatch: pytest.MonkeyPatch) -> None:
    """Work, not time: on 1,000,000 characters of accented prose the cluster pattern reads only
    the last few characters; on as many flags (no boundary is valid whatever precedes it) one
    pass over the whole text, and so linear time either way."""
    recorded = RecordedMatches(unicode_breaks._UP_TO_LAST_CLUSTER)
    monkeypatch.setattr(unicode_breaks, "_UP_TO_LAST_CLUSTER", recorded)
    prose = ("Le caf\u00e9 na\u00efve de l\u2019\u00e9t\u00e9. " * 40_000)[:1_000_000]
    assert last_cluster_start(prose) == len(prose) - 1
    assert max(recorded.lengths) <= 2
    recorded.lengths.clear()
    flags = "\U0001f1e6" * 1_000_000
    assert last_cluster_start(flags) == len(flags) - 2
    assert recorded.lengths == [len(flags)]


def test_grapheme_limits_must_be_positive() -> None:
    """A limit below one character cannot be met (truncate/split_graphemes contract)."""
    with pytest.raises(ValueError):
        split_graphemes("abc", 0)
    with pytest.raises(ValueError):
        truncate_graphemes("abc", -1)
