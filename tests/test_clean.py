"""Clean: normalization, control and format characters, whitespace, filters."""

from __future__ import annotations

import pytest
import regex
from hypothesis import given, settings
from hypothesis import strategies as st

from corpusmill import clean
from corpusmill.clean import CleanOptions, clean_text, normalize, rejection, stream_safe

DEFAULT = CleanOptions()


def test_nfc_composes_and_nfkc_folds_compatibility_characters():
    decomposed = "Ore\u0301la"
    assert clean_text(decomposed, DEFAULT) == "Or\u00e9la"
    assert clean_text("\ufb01ne \uff21", CleanOptions(normalization="NFKC")) == "fine A"
    assert clean_text("\ufb01ne", DEFAULT) == "\ufb01ne"
    assert clean_text(decomposed, CleanOptions(normalization="none")) == decomposed


@pytest.mark.parametrize(
    ("form", "expected"),
    [
        ("NFC", "\u1e9b\u0323 \u00c5\u03a9\ufb01\uac00"),
        ("NFD", "\u017f\u0323\u0307 A\u030a\u03a9\ufb01\u1100\u1161"),
        ("NFKC", "\u1e69 \u00c5\u03a9fi\uac00"),
        ("NFKD", "s\u0323\u0307 A\u030a\u03a9fi\u1100\u1161"),
    ],
)
def test_normalize_gives_the_forms_of_the_uax15_examples(form: str, expected: str):
    """UAX #15 (Unicode Normalization Forms), the worked examples written out: long s with dot
    above and dot below (U+1E9B U+0323) in each of the four forms, the singletons ANGSTROM SIGN
    and OHM SIGN (canonically U+00C5 and U+03A9), the ligature fi (compatibility only) and the
    Hangul syllable GA (U+1100 U+1161 decomposed)."""
    assert normalize("\u1e9b\u0323 \u212b\u2126\ufb01\uac00", form) == expected


def test_an_unknown_normalization_form_is_refused_naming_the_allowed_ones():
    with pytest.raises(ValueError, match="unknown normalization form 'NFX'; allowed: NFC, NFD, NFKC, NFKD"):
        normalize("text", "NFX")


def test_stream_safe_text_has_a_joiner_after_every_30_non_starters():
    """UAX #15 §13, Stream-Safe Text Format: no run of more than 30 non-starters; U+034F
    COMBINING GRAPHEME JOINER (a starter) goes after each 30. Hand-written expectations for runs
    of 30, 31 and 75 marks of mixed combining classes, and a line break between two runs."""
    marks = "\u0301\u0316\u0323"  # combining classes 230, 220, 220
    run = (marks * 25)[:75]
    assert stream_safe("e" + run[:30] + " x") == "e" + run[:30] + " x"
    assert stream_safe("e" + run[:31]) == "e" + run[:30] + "\u034f" + run[30]
    assert stream_safe("a" + run + "b") == "a" + run[:30] + "\u034f" + run[30:60] + "\u034f" + run[60:] + "b"
    assert stream_safe("a" + run[:40] + "\n" + run[:31]) == "a" + run[:30] + "\u034f" + run[30:40] + "\n" + run[:30] + "\u034f" + run[30]
    cleaned = clean_text("e" + "\u0301" * 31, DEFAULT)
    assert cleaned == "\u00e9" + "\u0301" * 29 + "\u034f\u0301"  # then NFC composes the first mark


def test_controls_become_spaces_and_invisible_format_characters_go():
    assert clean_text("bell\x07here and\x00nul", DEFAULT) == "bell here and nul"
    assert clean_text("zero\u200bwidth \u202eevil\u202c soft\u00adhyphen \ufeffbom", DEFAULT) == "zerowidth evil softhyphen bom"


def test_joiners_that_carry_meaning_are_kept():
    mechanic = "\U0001f469\u200d\U0001f527"
    assert clean_text(f"the {mechanic} fixed it", DEFAULT) == f"the {mechanic} fixed it"
    assert "\u200c" in clean_text("\u0645\u06cc\u200c\u062e\u0648\u0627\u0647\u0645", DEFAULT)


def test_whitespace_is_normalized_and_paragraph_breaks_kept():
    messy = "  one\t two\u00a0 three  \r\n  four \r\r\r\n\n five  "
    assert clean_text(messy, DEFAULT) == "one two three\nfour\n\nfive"


def test_lowercase_and_digit_folding_are_options():
    assert clean_text("Ferry No. 42", CleanOptions(lowercase=True, digits="zero")) == "ferry no. 00"
    assert clean_text("\u0664\u0662", CleanOptions(digits="zero")) == "00"


def test_filters_name_their_reason():
    assert rejection("", DEFAULT) == "empty"
    assert rejection("a", DEFAULT) == "too_short"
    assert rejection("12 | 14 | 9 | 31 | -- ok", DEFAULT) == "few_letters"
    assert rejection("Fog.", DEFAULT) is None


def test_the_letter_share_counts_non_space_characters_and_half_is_enough():
    """clean.min_letter_share (config.yaml): letters as a share of the characters that are not
    spaces or line breaks, a minimum; hand counts at exactly one half."""
    assert rejection("ab12", DEFAULT) is None  # 2 letters of 4
    assert rejection("ab123", DEFAULT) == "few_letters"  # 2 of 5
    assert rejection("ab cd ef 1 2 3 4 5 6", DEFAULT) is None  # 6 of 12; the 8 spaces do not count
    assert rejection("abc\n\nde\n\n12345", DEFAULT) is None  # 5 of 10; the 4 line breaks do not count
    assert rejection("abc\n\nde\n\n123456", DEFAULT) == "few_letters"  # 5 of 11
    assert rejection("\u0915\u093f\u0924\u093e\u092c 12345", DEFAULT) is None  # Devanagari: vowel signs count with letters, 5 of 10
    assert rejection("\u0915\u093f\u0924\u093e\u092c 123456", DEFAULT) == "few_letters"  # 5 of 11


def every_pass(text: str, options: CleanOptions) -> str:
    """The cleaning passes run unconditionally, in order: the specification the skipping follows."""
    text = clean._LINE_ENDS.sub("\n", text)
    if not text.isascii():
        text = clean._FORMATS.sub("", text)
        if options.normalization != "none":
            text = normalize(clean.stream_safe(text), options.normalization)
    text = clean._CONTROLS.sub(" ", text)
    text = regex.sub(r"[^\S\n]+", " ", text)  # every run of blanks other than line feeds, one space
    text = clean._SPACED_NEWLINE.sub("\n", text)
    text = clean._NEWLINE_RUNS.sub("\n\n", text).strip()
    return text


# Whitespace, controls and line ends of every kind, ASCII and not, beside plain letters.
_MIXED = " \t\n\r\x0b\x0c\x1c\x1f\x00\x7fab.\x85\xa0\u2028\u3000\u200b\u00e9e\u0301"


@settings(max_examples=max(3000, 5 * settings.default.max_examples))
@given(st.text(alphabet=_MIXED, max_size=40))
def test_skipped_passes_change_nothing(text: str) -> None:
    options = CleanOptions()
    assert clean_text(text, options) == every_pass(text, options)
