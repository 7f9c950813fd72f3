"""Word-frequency laws and model sizing (steps/laws.py), checked on real English text and by hand."""

from __future__ import annotations

import re
from collections import Counter
from pathlib import Path

import numpy as np
import pyarrow as pa
import pytest
import regex

from conftest import require_file
from corpusmill.growth import growth_points, sightings
from corpusmill.laws import ModelSize, fit_heaps, fit_power, fit_zipf, log_points

FORTUNES = Path("/usr/share/games/fortunes")
# English collections of Debian's `fortunes` package (the art, Chinese and bilingual files left out).
ENGLISH = (
    "computers cookie definitions drugs education ethnic food humorists kids law linux literature love magic "
    "medicine men-women miscellaneous news people pets platitudes politics riddles science songs-poems sports "
    "startrek wisdom work zippy"
).split()
WORD = regex.compile(r"\p{L}+(?:['’]\p{L}+)*")


@pytest.fixture(scope="module")
def fortune_words() -> list[str]:
    """Case-folded words of the English fortunes, records (between `%` lines) in file order."""
    words: list[str] = []
    for name in ENGLISH:
        text = require_file(FORTUNES / name, "fortunes").read_text(encoding="utf-8", errors="replace")
        for record in re.split(r"(?m)^%\n", text):
            words += WORD.findall(record.lower())
    return words


def test_zipf_exponent_of_english_text_is_near_one(fortune_words: list[str]) -> None:
    """Zipf's law: rank-frequency slope of English near 1; the band [0.8, 1.2] is common practice."""
    fit, ranks, counts = fit_zipf(np.array(list(Counter(fortune_words).values())))
    assert 0.8 <= fit.exponent <= 1.2, fit
    assert ranks[0] == 1 and counts[0] == Counter(fortune_words).most_common(1)[0][1]


def test_heaps_beta_of_english_text_lies_between_0_4_and_0_7(fortune_words: list[str]) -> None:
    """Heaps' law: Manning, Raghavan & Schütze (Introduction to Information Retrieval, 2008, ch. 5) report
    β ≈ 0.49 for a large news collection; [0.4, 0.7] for a smaller text is common practice."""
    table, length = sightings([pa.array(fortune_words)])
    tokens, types = growth_points(np.sort(table["first"].to_numpy()), length)
    fit = fit_heaps(tokens, types)
    assert 0.4 <= fit.exponent <= 0.7, fit
    assert fit.constant > 1


def test_power_fit_recovers_an_exact_power_law() -> None:
    """Arithmetic: y = 3·x^0.5 at any points gives exponent 0.5 and constant 3 (least squares on logs is exact)."""
    x = np.array([1.0, 2.0, 10.0, 55.0, 1000.0])
    fit = fit_power(x, 3.0 * np.sqrt(x))
    assert fit.exponent == pytest.approx(0.5, abs=1e-12)
    assert fit.constant == pytest.approx(3.0, rel=1e-12)
    assert fit(np.array([4.0]))[0] == pytest.approx(6.0)


def test_zipf_fit_of_counts_proportional_to_inverse_rank_is_one() -> None:
    """Zipf's law in its ideal form: counts C/r give s = 1 up to the rounding of counts to integers."""
    counts = np.round(1e9 / np.arange(1, 5001)).astype(np.int64)
    fit, _, _ = fit_zipf(counts[::-1])
    assert fit.exponent == pytest.approx(1.0, abs=1e-4)


def test_heaps_fit_uses_only_the_last_decade_of_the_stream() -> None:
    """Definition of the fit range: points before a tenth of the stream do not change the result."""
    tokens = np.array([1, 10, 100, 1000, 2000, 5000, 10000])
    types = 2.0 * tokens**0.5
    bent = types.copy()
    bent[:3] = tokens[:3]  # every early token new, as at the start of a real stream
    assert fit_heaps(tokens, bent).exponent == pytest.approx(0.5, abs=1e-12)
    assert fit_heaps(tokens, bent).fit_from == 1000


def test_log_points_cover_both_ends_without_repeats() -> None:
    """Definition: integers from 1 to total, strictly increasing."""
    points = log_points(72692, 400)
    assert points[0] == 1 and points[-1] == 72692
    assert np.all(np.diff(points) > 0)
    assert log_points(0, 10).size == 0


def test_model_sizing_matches_a_hand_computation() -> None:
    """Hand computation for |V| = 10,000, m = 300, n = 4 (3 context words), h = 100, float32 = 4 bytes:
    embedding 10,000·300 = 3,000,000; input 3·300 = 900 values; hidden 900·100 + 100 = 90,100;
    output 100·10,000 + 10,000 = 1,010,000; all 4,100,100; softmax 100·10,000 = 1,000,000 multiply-adds."""
    figures = ModelSize(vocabulary=10_000, width=300, context=3, hidden=100).table()
    assert figures == {
        "embedding_parameters": 3_000_000,
        "embedding_bytes": 12_000_000,
        "input_values": 900,
        "input_bytes": 3_600,
        "hidden_parameters": 90_100,
        "hidden_bytes": 360_400,
        "output_parameters": 1_010_000,
        "output_bytes": 4_040_000,
        "parameters": 4_100_100,
        "bytes": 16_400_400,
        "hidden_multiply_adds": 90_000,
        "softmax_multiply_adds": 1_000_000,
    }
