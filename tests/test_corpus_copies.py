"""The benchmark's renamed copies (bench/corpus_copies.py) read as new text of the same kind.

Checked on real English text (Debian's `fortunes` files): the renamed share of word types, that
a copy changes nothing but the picked words, the word n-gram overlap of a document with its
copy (Jaccard similarity of word 5-gram sets, computed here from the definition with Python
sets, and estimated with datasketch's MinHash as a second reader), and the growth of the word
types over ten copies.
"""

from __future__ import annotations

import importlib.util
import re
from pathlib import Path

import pytest
from datasketch import MinHash

REPO = Path(__file__).resolve().parent.parent
_spec = importlib.util.spec_from_file_location("corpus_copies", REPO / "bench" / "corpus_copies.py")
copies = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(copies)

FORTUNES = Path("/usr/share/games/fortunes")
WORD = re.compile(r"[^\W\d_]+")


@pytest.fixture(scope="module")
def text() -> str:
    files = [FORTUNES / name for name in ("fortunes", "literature", "wisdom", "people")]
    if not all(path.exists() for path in files):
        pytest.skip("Debian's fortunes package is not installed (apt-get install fortunes)")
    return "\n".join(path.read_text(encoding="utf-8", errors="replace") for path in files)


def types(text: str) -> set[str]:
    return {word.casefold() for word in WORD.findall(text)}


def shingles(text: str, n: int = 5) -> set[tuple[str, ...]]:
    words = [word.casefold() for word in re.findall(r"\w+", text)]
    return {tuple(words[i : i + n]) for i in range(len(words) - n + 1)}


def test_a_copy_renames_about_the_set_share_of_word_types_and_every_occurrence_alike(text: str) -> None:
    """Word by word, the copy's letter run is the original or the original plus the copy's
    ending (upper case after an upper-case word); a word's cases are all picked or none; the
    picked types are 30% of them within four standard deviations of a binomial draw."""
    for copy in (1, 7, 10):
        made = copies.renamed(text, copy)
        original, changed = WORD.findall(text), WORD.findall(made)
        assert len(original) == len(changed)
        assert WORD.split(text) == WORD.split(made)  # everything between words as it was
        end = copies.ending(copy)
        fate: dict[str, bool] = {}
        for before, after in zip(original, changed):
            assert after in (before, before + (end.upper() if before.isupper() else end))
            assert fate.setdefault(before.casefold(), after != before) == (after != before)
        share = sum(fate.values()) / len(fate)
        spread = 4 * (copies.RENAMED_SHARE * (1 - copies.RENAMED_SHARE) / len(fate)) ** 0.5
        assert abs(share - copies.RENAMED_SHARE) < spread, (copy, share, len(fate))


def test_a_document_shares_few_word_five_grams_with_its_copy(text: str) -> None:
    """For paragraphs of at least 30 words: the Jaccard similarity of word 5-gram sets between a
    paragraph and its copy, and between two copies, stays far below any near-duplicate
    threshold (the mean near 0.7**5 / (2 - 0.7**5), about 0.09, by the share renamed), and
    datasketch's MinHash estimate agrees with the exact figure."""
    paragraphs = [p for p in re.split(r"\n%\n", text) if len(re.findall(r"\w+", p)) >= 30][:300]
    assert len(paragraphs) >= 100
    with_copy, between_copies = [], []
    for paragraph in paragraphs:
        first, second = copies.renamed(paragraph, 1), copies.renamed(paragraph, 2)
        a, b, c = shingles(paragraph), shingles(first), shingles(second)
        with_copy.append(len(a & b) / len(a | b))
        between_copies.append(len(b & c) / len(b | c))
    mean = sum(with_copy) / len(with_copy)
    assert 0.02 < mean < 0.25, mean
    assert sum(between_copies) / len(between_copies) < mean
    assert max(with_copy) < 0.8
    whole, copied = shingles(text), shingles(copies.renamed(text, 3))
    exact = len(whole & copied) / len(whole | copied)
    estimates = []
    for shingle_set in (whole, copied):
        sketch = MinHash(num_perm=256, seed=5)
        for shingle in shingle_set:
            sketch.update(" ".join(shingle).encode("utf-8"))
        estimates.append(sketch)
    assert abs(estimates[0].jaccard(estimates[1]) - exact) < 0.05, exact


def test_ten_copies_hold_about_three_point_seven_times_the_word_types(text: str) -> None:
    """Each of copies 1..9 adds its picked types as new ones: 1 + 9 x 0.3 = 3.7 times the types
    of the text (copy 0 is the text itself)."""
    base = types(text)
    grown = set(base)
    for copy in range(1, 10):
        grown |= types(copies.renamed(text, copy))
    assert abs(len(grown) / len(base) - (1 + 9 * copies.RENAMED_SHARE)) < 0.1, len(grown) / len(base)


def test_copies_run_from_one_to_twenty_five() -> None:
    assert copies.ending(1) == "zqb" and copies.ending(25) == "zqz"
    for copy in (0, 26, -1):
        with pytest.raises(ValueError, match="from 1 to 25"):
            copies.ending(copy)
