"""Clean: normalization, control and format characters, whitespace, filters."""

from __future__ import annotations

import unicodedata

from hypothesis import given, settings
from hypothesis import strategies as st

from steps import clean
from steps.clean import CleanOptions, clean_text, normalize, rejection

DEFAULT = CleanOptions()


def test_nfc_composes_and_nfkc_folds_compatibility_characters():
    decomposed = "Ore\u0301la"
    assert clean_text(decomposed, DEFAULT) == "Or\u00e9la"
    assert clean_text("\ufb01ne \uff21", CleanOptions(normalization="NFKC")) == "fine A"
    assert clean_text("\ufb01ne", DEFAULT) == "\ufb01ne"
    assert clean_text(decomposed, CleanOptions(normalization="none")) == decomposed


def test_normalize_matches_the_standard_library_reference():
    """unicodedata (UAX #15 implementation of CPython) as the reference."""
    for form in ("NFC", "NFD", "NFKC", "NFKD"):
        assert normalize("\u1e9b\u0323 \ufb01", form) == unicodedata.normalize(form, "\u1e9b\u0323 \ufb01")


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


def every_pass(text: str, options: CleanOptions) -> str:
    """The cleaning passes run unconditionally, in order: the specification the skipping follows."""
    text = clean._LINE_ENDS.sub("\n", text)
    if not text.isascii():
        text = clean._FORMATS.sub("", text)
        if options.normalization != "none":
            text = normalize(clean.stream_safe(text), options.normalization)
    text = clean._CONTROLS.sub(" ", text)
    text = clean._SPACES.sub(" ", text)
    text = clean._SPACED_NEWLINE.sub("\n", text)
    text = clean._NEWLINE_RUNS.sub("\n\n", text).strip()
    return text


# Whitespace, controls and line ends of every kind, ASCII and not, beside plain letters.
_MIXED = " \t\n\r\x0b\x0c\x1c\x1f\x00\x7fab.\x85\xa0\u2028\u3000\u200b\u00e9e\u0301"


@settings(max_examples=3000, deadline=None)
@given(st.text(alphabet=_MIXED, max_size=40))
def test_skipped_passes_change_nothing(text: str) -> None:
    options = CleanOptions()
    assert clean_text(text, options) == every_pass(text, options)
