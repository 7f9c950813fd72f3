"""Clean: normalization, control and format characters, whitespace, filters."""

from __future__ import annotations

import unicodedata

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
