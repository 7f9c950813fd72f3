"""Segment: sentence and word segmenters behind one interface; lossless tokenization."""

from __future__ import annotations

import pytest

from steps.segment import NUMBER_TOKEN, Segmenter, is_lossless


def pattern(**options) -> Segmenter:
    return Segmenter(sentences_mode="punctuation", words_mode="pattern", **options)


def test_pattern_words_keep_numbers_apostrophes_and_hyphens_whole():
    tokens = pattern().tokens("The keeper's ice-cold lamp cost 1,200.50 marks, (approx.) today!")
    assert tokens == ["The", "keeper's", "ice-cold", "lamp", "cost", "1,200.50", "marks", ",", "(", "approx", ".", ")", "today", "!"]


def test_apostrophes_and_hyphens_can_be_split():
    tokens = pattern(apostrophes="split", hyphens="split").tokens("keeper's ice-cold")
    assert tokens == ["keeper", "'s", "ice", "-", "cold"]


def test_numbers_can_be_masked_to_one_token():
    assert pattern(numbers="mask").tokens("Boat 12 left at 3.5 knots") == ["Boat", NUMBER_TOKEN, "left", "at", NUMBER_TOKEN, "knots"]


def test_emoji_sequences_and_combining_marks_stay_whole():
    mechanic = "\U0001f469\u200d\U0001f527"
    assert pattern().tokens(f"hi {mechanic}!") == ["hi", mechanic, "!"]
    assert pattern().tokens("cafe\u0301 \u0301x") == ["cafe\u0301", "\u0301", "x"]


def test_punctuation_sentences_respect_abbreviations_and_lines():
    segmenter = pattern(abbreviations=frozenset({"dr"}))
    text = "Dr. Ames came. She left! Then \"Who?\" He sat.\nNew line"
    assert segmenter.sentences(text) == ["Dr. Ames came.", "She left!", 'Then "Who?"', "He sat.", "New line"]


def test_line_sentences_are_one_per_nonblank_line():
    assert Segmenter(sentences_mode="line", words_mode="pattern").sentences("a b.\n\n c d \n") == ["a b.", "c d"]


@pytest.mark.parametrize("text", [
    "Plain English, with punctuation; and more.",
    "Mixed \u4e2d\u6587 and \u0440\u0443\u0441\u0441\u043a\u0438\u0439 text \U0001f3ee!",
    "  spaces\tand\nnewlines  ",
])
def test_pattern_tokenization_is_lossless_up_to_whitespace(text: str):
    segmenter = pattern()
    tokens = segmenter.tokens(text)
    assert is_lossless(text, tokens) and all(t.strip() == t and t for t in tokens)


def test_lossless_check_rejects_lost_or_reordered_text():
    assert not is_lossless("a b c", ["a", "c"])
    assert not is_lossless("a b", ["b", "a"])


def test_segment_drops_sentences_without_tokens():
    assert pattern().segment("One. Two.") == [["One", "."], ["Two", "."]]


def test_abbreviations_are_learned_from_the_start_of_each_file(tmp_path):
    from steps.segment import learned_abbreviations
    from steps.settings import resolve

    text = "".join(
        f"The crate weighs approx. {i} stone and the barge carries it. Lamps burn all night long.\n\n" for i in range(40)
    )
    (tmp_path / "a.txt").write_text(text)
    config = resolve({"corpus": {"root": str(tmp_path)}})
    found = learned_abbreviations(str(tmp_path), ["a.txt"], config, sample_bytes=1 << 20)
    assert "approx" in found
    assert not found & {"it", "long", "night"}  # sentence ends before a capital are not abbreviations
