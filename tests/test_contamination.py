"""Contamination: shares of dev/test grams found in train, checked by exact recounts with Python
sets over Debian's fortunes; the train set's merging and partitions; the summary."""

from __future__ import annotations

import math
import random
from collections import Counter

import numpy as np
import pyarrow as pa
from hypothesis import given
from hypothesis import strategies as st

from corpusmill import contamination
from corpusmill.contamination import (
    NGRAM,
    THRESHOLD,
    SortedHashes,
    TrainGrams,
    distinct_sorted,
    part_of,
    shared_counts,
    shares,
    summary,
)
from corpusmill.near_duplicates import document_words, run_hashes
from corpusmill.segment import Segmenter
from corpusmill.settings import resolve
from tests.test_near_duplicates import cosmetic_copy, fortunes, reference_words

TOKENS = pa.list_(pa.list_(pa.string()))


def grams_of(words: list[str], n: int = NGRAM) -> list[tuple[str, ...]]:
    """A document's grams as tuples, where they occur: every n-word window, or all its words
    when shorter."""
    if len(words) < n:
        return [tuple(words)] if words else []
    return [tuple(words[i : i + n]) for i in range(len(words) - n + 1)]


def train_set(batches: list[pa.Array], parts: int = 1) -> list[np.ndarray]:
    """The sorted distinct train grams of each part, the batches added one at a time."""
    sets = [TrainGrams(part, parts) for part in range(parts)]
    for batch in batches:
        grams, _ = run_hashes(document_words(batch), NGRAM)
        for gathered in sets:
            gathered.add(grams)
    return [gathered.finish() for gathered in sets]


def scored(documents: pa.Array, trains: list[np.ndarray]) -> np.ndarray:
    grams, starts = run_hashes(document_words(documents), NGRAM)
    shared = sum(shared_counts(grams, starts, train) for train in trains)
    return shares(shared, starts)


def test_shares_equal_an_exact_recount_with_python_sets_on_fortunes() -> None:
    """Real text: Debian's English fortunes, tokenised by the default segmenter as the prepare
    step does; four in five are train. Dev documents are the other fortunes, cosmetic copies of
    train fortunes (case, punctuation, spacing), and splices of a train passage into a dev
    fortune. Each share equals an exact recount: the document's 13-word tuples found in a
    Python set of every train tuple, over its tuples."""
    records = fortunes()
    rng = random.Random(29)
    train_texts = [t for i, t in enumerate(records) if i % 5]
    dev_texts = [t for i, t in enumerate(records) if not i % 5][:600]
    for _ in range(200):
        source = rng.choice(train_texts).split()
        start = rng.randrange(len(source))
        passage = " ".join(source[start : start + rng.randint(5, 40)])
        host = rng.choice(dev_texts).split()
        at = rng.randrange(len(host) + 1)
        dev_texts.append(" ".join(host[:at] + [passage] + host[at:]))
    dev_texts += [cosmetic_copy(rng.choice(train_texts), rng) for _ in range(200)]
    segmenter = Segmenter.from_config(resolve({})["segment"])
    train_tokens = [segmenter.segment(t) for t in train_texts]
    dev_tokens = [segmenter.segment(t) for t in dev_texts]
    batches = [pa.array(train_tokens[i : i + 1000], TOKENS) for i in range(0, len(train_tokens), 1000)]
    found = scored(pa.array(dev_tokens, TOKENS), train_set(batches))

    def words(tokens: list[list[str]]) -> list[str]:
        return reference_words([token for sentence in tokens for token in sentence])

    train = {gram for tokens in train_tokens for gram in grams_of(words(tokens))}
    expected = []
    for tokens in dev_tokens:
        grams = grams_of(words(tokens))
        expected.append(sum(gram in train for gram in grams) / len(grams) if grams else math.nan)
    np.testing.assert_array_equal(found, np.array(expected))
    assert (found[-200:] == 1.0).mean() > 0.95 and 0 < np.count_nonzero(found[600:800] > 0) < 200
    assert np.count_nonzero(found[:600] > 0) < 60


def test_partitions_of_the_hash_space_add_up_to_the_whole_set() -> None:
    """Shared counts summed over three parts of the hash space, each part's set built alone,
    equal those from one set; each hash lies in exactly one part."""
    rng = random.Random(2)
    vocab = [f"w{i}" for i in range(40)]
    documents = [[rng.choice(vocab) for _ in range(rng.randint(0, 60))] for _ in range(200)]
    batches = [pa.array([[d] for d in documents[i : i + 50]], TOKENS) for i in range(0, 200, 50)]
    # Dev documents: pieces of train documents between fresh words.
    dev = [[rng.choice(vocab) for _ in range(5)] + rng.choice(documents)[rng.randint(0, 20) :][: rng.randint(0, 40)] for _ in range(100)]
    whole, parted = train_set(batches), train_set(batches, parts=3)
    expected = scored(pa.array([[d] for d in dev], TOKENS), whole)
    np.testing.assert_array_equal(expected, scored(pa.array([[d] for d in dev], TOKENS), parted))
    assert 30 < np.count_nonzero(expected > 0) < 100
    assert sum(len(p) for p in parted) == len(whole[0]) and np.isin(whole[0], np.concatenate(parted)).all()


@given(values=st.lists(st.integers(0, (1 << 64) - 1), max_size=50), parts=st.integers(1, 7))
def test_a_hash_lies_in_the_part_of_its_range(values: list[int], parts: int) -> None:
    """Part of h is floor(h * parts / 2**64), recomputed with Python integers, bounds included."""
    edges = [-(-(p << 64) // parts) for p in range(parts)]
    values = values + edges + [e - 1 for e in edges if e] + [(1 << 64) - 1]
    found = part_of(np.array(values, dtype=np.uint64), parts)
    assert found.tolist() == [v * parts >> 64 for v in values]


@given(values=st.lists(st.integers(0, (1 << 64) - 1) | st.integers(0, 5), max_size=60))
def test_a_prepare_job_keeps_its_train_grams_sorted_and_distinct(values: list[int]) -> None:
    """distinct_sorted equals numpy's unique (sorted distinct values)."""
    array = np.array(values, dtype=np.uint64)
    np.testing.assert_array_equal(distinct_sorted(array), np.unique(array))


@given(batches=st.lists(st.lists(st.integers(0, 200), max_size=40), max_size=12), pending=st.sampled_from([1, 16, 1 << 22]))
def test_train_grams_merge_to_the_sorted_distinct_hashes(batches: list[list[int]], pending: int) -> None:
    """However the batches come and whenever they are merged, the set is the sorted distinct
    values of all of them (numpy's unique over the concatenation)."""
    gathered = TrainGrams(pending=pending)
    for batch in batches:
        gathered.add(np.array(batch, dtype=np.uint64))
    every = np.concatenate([np.array(b, dtype=np.uint64) for b in batches]) if batches else np.zeros(0, np.uint64)
    np.testing.assert_array_equal(gathered.finish(), np.unique(every))


def test_short_documents_match_only_a_train_document_of_the_same_words() -> None:
    """A document shorter than n words has one gram, all its words: found when a train
    document has exactly those words (case and punctuation aside), not when a longer train
    document contains them. A document without words has no share."""
    train = train_set([pa.array([[["The", "cat", "sat", "."]], [["a", "dog", "ran", "far", "and", "then", "some"] * 2]], TOKENS)])
    documents = [[["the", "CAT", "sat!"]], [["a", "dog", "ran"]], [["—", "!"]], [["a", "dog", "ran", "far", "and", "then", "some"] * 2]]
    found = scored(pa.array(documents, TOKENS), train)
    assert found[0] == 1.0 and found[1] == 0.0 and math.isnan(found[2]) and found[3] == 1.0


def test_summary_matches_a_plain_recount() -> None:
    """Quantiles, mean, histogram and counts equal numpy's quantile and a Counter recount, per
    source file too; documents without words are counted apart."""
    rng = np.random.default_rng(4)
    values = np.where(rng.random(500) < 0.7, 0.0, rng.random(500))
    values[rng.random(500) < 0.05] = math.nan
    sources = rng.choice(["a.txt", "b.txt", "c/d.txt"], 500)
    result = summary(values, sources.tolist())
    real = values[~np.isnan(values)]
    assert result["documents"] == 500 and result["without_words"] == int(np.isnan(values).sum())
    assert result["quantiles"]["0.9"] == round(float(np.quantile(real, 0.9)), 6) and result["max"] == round(float(real.max()), 6)
    assert result["with_shared_gram"] == int((real > 0).sum()) and result["at_or_above_threshold"] == int((real >= THRESHOLD).sum())
    assert sum(result["histogram"]) == len(real) and result["histogram"][0] == int((real < 0.1).sum())
    above = Counter(s for s, v in zip(sources, values) if v >= THRESHOLD)
    assert {name: part["at_or_above_threshold"] for name, part in result["by_source"].items()} == {n: above[n] for n in ("a.txt", "b.txt", "c/d.txt")}
    assert {name: part["documents"] for name, part in result["by_source"].items()} == dict(Counter(sources.tolist()))
    assert summary(np.zeros(0), [])["documents"] == 0


@given(
    st.lists(st.integers(0, 2**64 - 1), max_size=300),
    st.lists(st.integers(0, 2**64 - 1), max_size=300),
    st.integers(0, 2**64 - 1),
)
def test_sorted_hashes_answer_membership_as_a_python_set_does(members: list[int], others: list[int], neighbour_of: int) -> None:
    """Outside reference: Python's set. Values that share the table's top bits with a member
    (the neighbours of members) are the ones the table lets through: they must still be told apart."""
    distinct = distinct_sorted(np.array(members, dtype=np.uint64))
    neighbours = [(m ^ 1) for m in members] + [neighbour_of, neighbour_of ^ 1]
    values = np.array(members + others + neighbours, dtype=np.uint64)
    expected = [int(v) in set(members) for v in values]
    assert SortedHashes(distinct).contains(values).tolist() == expected
    assert SortedHashes(distinct).common(values).tolist() == sorted(set(members) & {int(v) for v in values})


def test_common_values_span_lookup_blocks(monkeypatch) -> None:
    """Outside reference: Python's set intersection, with blocks of 7 values so that repeats and
    hits fall in different blocks."""
    monkeypatch.setattr(contamination, "LOOKUP_BLOCK", 7)
    rng = np.random.default_rng(11)
    members = rng.integers(0, 2**64 - 1, 40, dtype=np.uint64)
    values = np.concatenate([members[::3], rng.integers(0, 2**64 - 1, 30, dtype=np.uint64), members[::3]])
    rng.shuffle(values)
    hashes = SortedHashes(distinct_sorted(members))
    assert hashes.common(values).tolist() == sorted({int(v) for v in members} & {int(v) for v in values})
    assert hashes.contains(values).tolist() == [int(v) in {int(m) for m in members} for v in values]


def test_shared_counts_give_documents_without_grams_none() -> None:
    """Outside reference: a per-document recount with Python's set, documents 1 and 3 empty."""
    grams = np.array([5, 9, 5, 2, 7, 9], dtype=np.uint64)
    starts = np.array([0, 3, 3, 6, 6])
    train = {5, 7}
    expected = [sum(int(g) in train for g in grams[low:high]) for low, high in zip(starts[:-1], starts[1:])]
    assert shared_counts(grams, starts, distinct_sorted(np.array(sorted(train), dtype=np.uint64))).tolist() == expected == [2, 0, 1, 0]
