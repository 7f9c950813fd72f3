"""Kneser–Ney baseline (steps/kneser_ney.py): keys, counts, smoothing, scoring and ARPA output.

References: Chen and Goodman (1998), "An Empirical Study of Smoothing Techniques for Language
Modeling" (TR-10-98), whose formulas are written out below with collections.Counter; NLTK's
`nltk.lm.KneserNeyInterpolated` (PyPI nltk); Debian's English fortunes (package fortunes).
"""

from __future__ import annotations

import io
import math
import re
from collections import Counter, defaultdict
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from conftest import require_file
from corpusmill import kneser_ney as kn
from corpusmill.kneser_ney import BOS_ID, EOS_ID, Discounts, KeyFormat
from corpusmill.segment import Segmenter
from corpusmill.windows import ngram_windows

FORTUNES = Path("/usr/share/games/fortunes")
ENGLISH = ["fortunes", "computers", "literature", "science", "wisdom", "work", "people", "politics"]
# Vocabulary sizes whose keys are one word at low orders and two words above (e.g. 2**21 + 3:
# 22 bits per id, so three ids already need 66 bits).
SIZES = [6, 9, 300, 70_000, 2**21 + 3]

Sentences = list[list[int]]


def flat(sentences: Sentences) -> tuple[np.ndarray, np.ndarray]:
    ids = np.array([i for s in sentences for i in s], np.int64)
    return ids, np.array([len(s) for s in sentences], np.int64)


def windows(sentences: Sentences, n: int) -> list[tuple[int, ...]]:
    """Every predicted token with its n-1 preceding ids: n-1 <s> before each sentence, </s> after it."""
    found = []
    for sentence in sentences:
        padded = [BOS_ID] * (n - 1) + list(sentence) + [EOS_ID]
        found += [tuple(padded[i - n + 1 : i + 1]) for i in range(n - 1, len(padded))]
    return found


def located(counts: kn.Counts, ids: np.ndarray, lengths: np.ndarray) -> kn.Located:
    """The windows of sentences looked up in `counts` (of their order)."""
    context, target = ngram_windows(ids, lengths, counts.order, BOS_ID, EOS_ID)
    return kn.locate_windows(counts, [*context.T, target])


class Reference:
    """Chen and Goodman's interpolated Kneser–Ney written out with Counters, one probability at a time."""

    def __init__(self, sentences: Sentences, n: int, size: int) -> None:
        self.n, self.size = n, size
        self.raw = [Counter() for _ in range(n + 1)]
        for window in windows(sentences, n):
            for k in range(1, n + 1):
                self.raw[k][window[n - k :]] += 1
        self.continuation = [Counter() for _ in range(n + 1)]
        for k in range(2, n + 1):
            for gram in self.raw[k]:
                self.continuation[k - 1][gram[1:]] += 1
        self.followers: dict[tuple[int, bool], dict[tuple, dict[int, int]]] = {}
        for k in range(1, n + 1):
            for top in (True, False):
                table: dict[tuple, dict[int, int]] = defaultdict(dict)
                for gram, count in (self.raw[k] if top else self.continuation[k]).items():
                    table[gram[:-1]][gram[-1]] = count
                self.followers[k, top] = table

    def probability(self, word: int, history: tuple[int, ...], order: int, discounts: list[Discounts]) -> float:
        p = 1.0 / (self.size - 2)
        for k in range(1, order + 1):
            context = history[len(history) - (k - 1) :] if k > 1 else ()
            counts = self.followers[k, k == order].get(context)
            if not counts:
                continue
            d = discounts[k - 1]
            by_count = (0.0, d.d1, d.d2, d.d3)

            def take(count: int, by_count: tuple[float, ...] = by_count) -> float:
                return by_count[min(count, 3)]

            total = sum(counts.values())
            gamma = sum(take(c) for c in counts.values()) / total
            count = counts.get(word, 0)
            p = (count - take(count)) / total + gamma * p
        return p


def sentences_strategy(size: int, most: int = 12) -> st.SearchStrategy:
    """Sentences of a few distinct word ids (so n-grams repeat), <unk> among them."""
    words = st.sampled_from([w for w in (1, 4, 5, 6, size - 1, size // 2 + 2) if w == 1 or 3 < w < size])
    return st.lists(st.lists(words, max_size=7), min_size=1, max_size=most).filter(lambda s: any(s))


# --- keys --------------------------------------------------------------------------------------


@settings(suppress_health_check=[HealthCheck.too_slow])
@given(size=st.sampled_from(SIZES + [2**31]), k=st.integers(1, 8), data=st.data())
def test_keys_order_like_the_ids_lexicographically_and_unpack_to_them(size: int, k: int, data: st.DataObject) -> None:
    """Packing is exact (unpack gives the ids back) and order-preserving: sorting keys sorts the
    id rows lexicographically (numpy's lexsort as reference); suffix and prefix keys equal the
    keys of the sliced rows; `find` agrees with a dict of the rows."""
    keys_format = KeyFormat(size)
    k = min(k, keys_format.largest_order())
    small = st.sampled_from([0, 1, 2, size - 1, size // 3])
    row = st.lists(st.one_of(small, st.integers(0, size - 1)), min_size=k, max_size=k)
    rows = np.array(data.draw(st.lists(row, min_size=1, max_size=40)), np.uint64)
    columns = [rows[:, j] for j in range(k)]
    keys = keys_format.pack(columns)
    assert (keys.high is None) == (k * keys_format.bits <= 64)
    for got, expected in zip(keys_format.unpack(keys, k), columns):
        np.testing.assert_array_equal(got, expected)
    ordered = rows[keys.order()]
    np.testing.assert_array_equal(ordered, rows[np.lexsort(columns[::-1])])
    if k > 1:
        for made, expected in ((keys_format.suffix(keys, k), columns[1:]), (keys_format.prefix(keys, k), columns[:-1])):
            packed = keys_format.pack(expected)
            np.testing.assert_array_equal(made.low, packed.low)
            assert (made.high is None) == (packed.high is None)
            if packed.high is not None:
                np.testing.assert_array_equal(made.high, packed.high)
    table = keys[keys.order()]
    table = table[table.starts()]
    place = {tuple(row): i for i, row in enumerate(np.unique(rows, axis=0).tolist())}
    queries = np.concatenate([rows, (rows + 1) % size])
    found = kn.find(table, keys_format.pack([queries[:, j] for j in range(k)]))
    assert found.tolist() == [place.get(tuple(row), -1) for row in queries.tolist()]


def test_an_order_whose_keys_would_exceed_128_bits_is_refused_naming_the_largest() -> None:
    """125,006 ids take 17 bits; 7 of them fit in 128 bits, 8 do not."""
    assert kn.NgramCounter(7, 125_006).order == 7
    with pytest.raises(ValueError, match=r"order 8: the order runs from 1 to 7 for 125006 ids"):
        kn.NgramCounter(8, 125_006)


# --- counts ------------------------------------------------------------------------------------


@settings(suppress_health_check=[HealthCheck.too_slow])
@given(size=st.sampled_from(SIZES), n=st.integers(1, 5), batch=st.sampled_from([1, 3, 1 << 20]), data=st.data())
def test_counts_equal_a_counter_recount_of_the_padded_sentences(size: int, n: int, batch: int, data: st.DataObject) -> None:
    """Raw counts of every order, continuation counts (distinct ids before a k-gram) and each
    k-gram's suffix, against Counters over the windows; tiny batches force many merges, and the
    sentences come in two calls."""
    sentences = data.draw(sentences_strategy(size))
    reference = Reference(sentences, n, size)
    counter = kn.NgramCounter(n, size, batch_tokens=batch)
    half = len(sentences) // 2
    counter.add(*flat(sentences[:half]))
    counter.add(*flat(sentences[half:]))
    counts = counter.finish()
    assert counts.tokens == sum(len(s) + 1 for s in sentences)
    grams_below: list[tuple[int, ...]] = []
    for k, level in enumerate(counts.levels, start=1):
        keys = level.keys(counts.format)
        grams = [tuple(row) for row in np.stack(counts.format.unpack(keys, k), axis=1).tolist()]
        assert grams == sorted(reference.raw[k])
        assert dict(zip(grams, level.raw.tolist())) == reference.raw[k]
        if k < n:
            assert dict(zip(grams, level.continuation.tolist())) == reference.continuation[k]
        else:
            assert level.continuation is None
        if k > 1:
            assert [grams_below[i] for i in level.suffixes] == [gram[1:] for gram in grams]
        grams_below = grams


def test_ids_the_model_cannot_take_are_refused_with_their_position() -> None:
    counter = kn.NgramCounter(3, 10)
    with pytest.raises(ValueError, match=r"id 10 at position 2 cannot be predicted: ids run from 0 to 9"):
        counter.add(np.array([4, 5, 10]), np.array([3]))
    with pytest.raises(ValueError, match=r"id 2 at position 0 .*<s> \(2\) never occur inside a sentence"):
        counter.add(np.array([2, 5]), np.array([2]))
    with pytest.raises(ValueError, match="sentence lengths add up to 3, but there are 2 ids"):
        counter.add(np.array([4, 5]), np.array([3]))


# --- smoothing ---------------------------------------------------------------------------------


@settings(suppress_health_check=[HealthCheck.too_slow])
@given(size=st.sampled_from(SIZES), n=st.integers(2, 5), smoothing=st.sampled_from(kn.SMOOTHINGS), data=st.data())
def test_probabilities_follow_chen_and_goodmans_formulas_written_out_with_counters(size: int, n: int, smoothing: str, data: st.DataObject) -> None:
    """Every model of orders 2..n from one count, on seen and unseen windows, against `Reference`
    (Chen and Goodman 1998, interpolated Kneser–Ney with the discounts the model chose)."""
    sentences = data.draw(sentences_strategy(size))
    counts = kn.count(*flat(sentences), n, size)
    models = kn.estimate_models(counts, smoothing, range(2, n + 1))
    reference = Reference(sentences, n, size)
    ids = sorted({i for s in sentences for i in s} | {1, 3, 4, size - 1}) + [BOS_ID]
    drawn = st.tuples(*[st.sampled_from(ids)] * (n - 1), st.sampled_from(ids[:-1]))
    queried = windows(sentences, n) + data.draw(st.lists(drawn, max_size=30))
    rows = np.array(queried, np.int64)
    located = kn.locate_windows(counts, [rows[:, j] for j in range(n)])
    together = kn.probabilities_by_order(models, located)
    for order, model in models.items():
        discounts = [w.discounts for w in model.weights]
        expected = [reference.probability(w[-1], w[:-1], order, discounts) for w in queried]
        np.testing.assert_allclose(model.probabilities(located), expected, rtol=1e-12, atol=0)
        np.testing.assert_allclose(together[order], expected, rtol=1e-12, atol=0)


def test_modified_kneser_ney_hand_worked_example() -> None:
    """Chen and Goodman (1998) §3.4 by hand, order 2, on six sentences over a, b, c.

    Ids: <pad> 0, <unk> 1, <s> 2, </s> 3, a 4, b 5, c 6; V = 7, |P| = 5 (<unk> </s> a b c).
    Sentences: "c", "a c c", "c", "b c b", "a", "a c" (11 ids, 17 predicted tokens with </s>).

    Bigram counts (raw, the model's own order): c </s> 4, <s> a 3, <s> c 2, a c 2, and 1 each
    for c c, <s> b, b c, c b, b </s>, a </s>. Count-of-counts n1..n4 = 6, 2, 1, 1, so
    Y = 6/(6+2·2) = 3/5, D1 = 1 - 2Y·2/6 = 3/5, D2 = 2 - 3Y·1/2 = 11/10, D3+ = 3 - 4Y·1/1 = 3/5.

    Unigram continuation counts N1+(•w): c 4 (<s> a b c), </s> 3 (a b c), b 2 (<s> c), a 1
    (<s>), <unk> 0; total 10 (the bigram types). n1..n4 = 1, 1, 1, 1: Y = 1/3, D1 = 1/3,
    D2 = 2 - 3Y = 1, D3+ = 3 - 4Y = 5/3. gamma = (D1·1 + D2·1 + D3+·2)/10 = 7/15, and the
    uniform part gamma/|P| = 7/75:
        p1(c) = (4 - 5/3)/10 + 7/75 = 49/150    p1(</s>) = (3 - 5/3)/10 + 7/75 = 34/150
        p1(b) = (2 - 1)/10 + 7/75 = 29/150       p1(a) = (1 - 1/3)/10 + 7/75 = 24/150
        p1(<unk>) = 7/75 = 14/150                (they sum to 150/150)
    After a: c 2, </s> 1; total 3, gamma(a) = (D2 + D1)/3 = 17/30:
        p(c | a) = (2 - 11/10)/3 + 17/30 · 49/150 = 2183/4500
        p(</s> | a) = (1 - 3/5)/3 + 17/30 · 34/150 = 1178/4500
        p(b | a) = 17/30 · 29/150 = 493/4500 (never seen after a)
    After <s>: a 3, c 2, b 1; total 6, gamma(<s>) = (D3+ + D2 + D1)/6 = 23/60:
        p(a | <s>) = (3 - 3/5)/6 + 23/60 · 24/150 = 173/375
    After <unk> (never a context): p(c | <unk>) = p1(c) = 49/150.
    """
    F = Fraction
    a, b, c, unk, end = 4, 5, 6, 1, EOS_ID
    sentences = [[c], [a, c, c], [c], [b, c, b], [a], [a, c]]
    counts = kn.count(*flat(sentences), 2, 7)
    model = kn.estimate_models(counts, "modified", [2])[2]
    bigrams, unigrams = model.weights[1], model.weights[0]
    assert bigrams.count_of_counts == (6, 2, 1, 1) and unigrams.count_of_counts == (1, 1, 1, 1)
    assert counts.levels[0].continuation.tolist() == [3, 1, 2, 4]  # </s> a b c, in id order
    for weights, expected in ((bigrams, (F(3, 5), F(11, 10), F(3, 5))), (unigrams, (F(1, 3), F(1), F(5, 3)))):
        d = weights.discounts
        assert not d.fallback
        assert (d.d1, d.d2, d.d3) == pytest.approx([float(x) for x in expected], rel=1e-15)
    cases = {
        (unk, c): F(49, 150),
        (a, end): F(1178, 4500),
        (a, c): F(2183, 4500),
        (a, b): F(493, 4500),
        (BOS_ID, a): F(173, 375),
        (a, unk): F(17, 30) * F(14, 150),
    }
    rows = np.array(list(cases), np.int64)
    p = model.probabilities(kn.locate_windows(counts, [rows[:, 0], rows[:, 1]]))
    assert p.tolist() == pytest.approx([float(x) for x in cases.values()], rel=1e-13)
    assert model.entry_probabilities()[0].tolist() == pytest.approx([34 / 150, 24 / 150, 29 / 150, 49 / 150], rel=1e-13)


def test_discounts_fall_back_when_the_count_of_counts_cannot_give_them() -> None:
    """Formulas from Chen and Goodman (1998); the fallbacks are our own rule (module docstring)."""

    def chosen(n: tuple[int, int, int, int], smoothing: str) -> tuple:
        d = kn.estimate_discounts(n, smoothing)
        return pytest.approx((d.d1, d.d2, d.d3), rel=1e-15), d.fallback

    assert chosen((6, 2, 1, 1), "modified") == ((0.6, 2 - 0.9, 3 - 2.4), False)
    assert chosen((6, 2, 1, 1), "interpolated") == ((0.6, 0.6, 0.6), False)
    assert chosen((6, 2, 0, 1), "modified") == ((0.6, 0.6, 0.6), True)  # n3 = 0
    assert chosen((1, 1, 9, 1), "modified") == ((1 / 3, 1 / 3, 1 / 3), True)  # D2 = 2 - 9 < 0
    assert chosen((0, 5, 5, 5), "modified") == ((0.5, 0.5, 0.5), True)  # no singletons
    assert chosen((4, 0, 0, 0), "interpolated") == ((1.0, 1.0, 1.0), False)


@settings(suppress_health_check=[HealthCheck.too_slow])
@given(size=st.sampled_from([6, 9, 40, 2049]), n=st.integers(2, 6), smoothing=st.sampled_from(kn.SMOOTHINGS), data=st.data())
def test_probabilities_over_the_predictable_vocabulary_sum_to_one(size: int, n: int, smoothing: str, data: st.DataObject) -> None:
    """For contexts seen in the corpus and drawn at random (<s> anywhere, ids never seen), every
    model of orders 2..n sums to 1 over every id but <pad> and <s> (2049 ids: 12 bits, so 6
    ids take two words)."""
    sentences = data.draw(sentences_strategy(size))
    counts = kn.count(*flat(sentences), n, size)
    models = kn.estimate_models(counts, smoothing, range(2, n + 1))
    seen = [w[:-1] for w in windows(sentences, n)]
    drawn = data.draw(st.lists(st.tuples(*[st.sampled_from([1, 2, 3, 4, 5, size - 1])] * (n - 1)), max_size=3))
    contexts = data.draw(st.lists(st.sampled_from(seen), min_size=1, max_size=3)) + drawn
    everyone = np.array([i for i in range(size) if i not in (kn.PAD_ID, BOS_ID)])
    for context in contexts:
        columns = [np.full(len(everyone), i) for i in context] + [everyone]
        for order, p in kn.probabilities_by_order(models, kn.locate_windows(counts, columns)).items():
            assert abs(math.fsum(p.tolist()) - 1.0) < 1e-9, (context, order)
            assert (p > 0).all()


def test_models_of_lower_order_from_one_count_equal_models_counted_at_that_order() -> None:
    """Counting order 4 once serves orders 2 and 3: the same probabilities as counting them alone."""
    rng = np.random.default_rng(7)
    lengths = rng.integers(0, 9, 200)
    ids = rng.choice([1, 4, 5, 6, 7, 8, 9], lengths.sum())
    dev_lengths = rng.integers(0, 9, 50)
    dev = rng.choice([1, 4, 5, 6, 7, 8, 9, 10], dev_lengths.sum())
    high = kn.count(ids, lengths, 4, 11)
    models = kn.estimate_models(high, "modified", [2, 3, 4])
    for order in (2, 3):
        alone = kn.count(ids, lengths, order, 11)
        own = kn.estimate_models(alone, "modified", [order])[order]
        np.testing.assert_allclose(
            models[order].probabilities(located(high, dev, dev_lengths)), own.probabilities(located(alone, dev, dev_lengths)), rtol=1e-13
        )


def test_the_training_score_from_counts_equals_scoring_the_training_sentences_token_by_token() -> None:
    rng = np.random.default_rng(8)
    lengths = rng.integers(0, 12, 300)
    ids = rng.choice(np.arange(1, 30), lengths.sum(), p=np.r_[[0.1, 0], np.full(27, 0.9 / 27)])
    counts = kn.count(ids, lengths, 4, 30)
    models = kn.estimate_models(counts, "modified", [2, 3, 4])
    unigram = kn.AddOneUnigram.of(counts)
    from_counts = kn.training_score(models, unigram)
    by_token = kn.SplitScore()
    kn.score_split(by_token, models, unigram, ids, lengths)
    assert from_counts.tokens == by_token.tokens == lengths.sum() + len(lengths)
    for order in (2, 3, 4):
        assert from_counts.log_sums[order] == pytest.approx(by_token.log_sums[order], rel=1e-12)
    assert from_counts.unigram_log_sum == pytest.approx(by_token.unigram_log_sum, rel=1e-12)
    assert by_token.seen == from_counts.seen == dict.fromkeys((1, 2, 3, 4), by_token.tokens)


def test_add_one_unigram_gives_every_predictable_id_count_plus_one_over_n_plus_p() -> None:
    """Laplace's rule over the predictable vocabulary: (c + 1) / (N + |P|), N = 5 predicted tokens."""
    counts = kn.count(np.array([4, 4, 5]), np.array([2, 1]), 2, 7)
    p = np.exp(kn.AddOneUnigram.of(counts).log_probability)
    assert p.tolist() == pytest.approx([0, 1 / 10, 0, 3 / 10, 3 / 10, 2 / 10, 1 / 10])


# --- outside references ------------------------------------------------------------------------


def fortune_sentences(names: list[str]) -> list[list[list[str]]]:
    """Records (between `%` lines) of Debian's English fortunes, segmented by the project's segmenter."""
    segmenter = Segmenter()
    records = []
    for name in names:
        text = require_file(FORTUNES / name, "fortunes").read_text(encoding="utf-8", errors="replace")
        records += [segmenter.segment(record) for record in re.split(r"(?m)^%\n", text) if record.strip()]
    return records


def vocabulary_ids(train: list[list[list[str]]], min_count: int) -> dict[str, int]:
    """Words seen at least `min_count` times in train, most frequent first, after the 4 reserved ids."""
    counted = Counter(t for record in train for sentence in record for t in sentence)
    words = sorted((w for w, c in counted.items() if c >= min_count), key=lambda w: (-counted[w], w))
    return {w: i for i, w in enumerate(words, start=4)}


def to_ids(records: list[list[list[str]]], ids: dict[str, int]) -> Sentences:
    return [[ids.get(t, kn.UNK_ID) for t in sentence] for record in records for sentence in record]


def test_plain_kneser_ney_perplexity_equals_nltk_kneser_ney_interpolated() -> None:
    """NLTK's `nltk.lm.KneserNeyInterpolated` (PyPI nltk 3.x, nltk/lm/models.py and smoothing.py)
    on a small corpus of Debian fortunes, orders 2-4, perplexities equal within 1e-9.

    What NLTK does (read in its source): one fixed discount d (default 0.1) at every order above
    the unigram, alpha = max(c - d, 0)/total and gamma = d·|{w: c(h w) > 0}|/total; raw counts
    at the model's own order and continuation counts below it; a context never seen backs off
    whole (alpha 0, gamma 1); the unigram level is the continuation distribution N1+(•w)/N1+(••)
    with no discount and no uniform part, so a word never seen has probability 0. Its
    `padded_everygram_pipeline` pads each sentence with n-1 <s> and n-1 </s> and counts every
    n-gram of orders 1..n, those ending at <s> or at the extra </s> among them.

    How it is matched: NLTK's `fit` is given the n-grams of orders 1..n that end at predicted
    tokens of our padding (n-1 <s>, one </s>), our model gets NLTK's discounts through
    `estimate` (0 for unigrams, d above), and both score the same windows, whose words all
    occur in train (NLTK would give the others probability 0): the in-vocabulary sentences of
    the records not counted, train sentences read backwards (seen words in unseen n-grams) and
    train sentences as they are.
    """
    from nltk.lm import KneserNeyInterpolated

    records = fortune_sentences(["fortunes"])
    vocabulary = vocabulary_ids(records[:200], 1)
    train = to_ids(records[:200], vocabulary)
    held_out = [s for s in to_ids(records[200:], vocabulary) if s and kn.UNK_ID not in s]
    held_out += [s[::-1] for s in train[:20]] + train[20:30]
    size = 4 + len(vocabulary)
    token = {i: w for w, i in vocabulary.items()} | {BOS_ID: "<s>", EOS_ID: "</s>"}

    def as_text(grams: list[tuple[int, ...]]) -> list[tuple[str, ...]]:
        return [tuple(token[i] for i in gram) for gram in grams]

    for n, d in ((2, 0.1), (3, 0.1), (4, 0.75)):
        lm = KneserNeyInterpolated(n, discount=d)
        lm.fit(
            [as_text([w[n - k :] for w in windows([s], n) for k in range(1, n + 1)]) for s in train],
            vocabulary_text=["<s>", "</s>"] + list(vocabulary),
        )
        expected = lm.perplexity(as_text(windows(held_out, n)))
        counts = kn.count(*flat(train), n, size)
        model = kn.estimate(counts, [Discounts(0.0, 0.0, 0.0)] + [Discounts(d, d, d)] * (n - 1))
        score = kn.SplitScore()
        kn.score_split(score, {n: model}, kn.AddOneUnigram.of(counts), *flat(held_out))
        assert score.tokens == len(windows(held_out, n)) > 200
        assert abs(score.perplexity(n) - expected) < 1e-9, (n, score.perplexity(n), expected)


def test_kneser_ney_on_english_fortunes_scores_held_out_text_between_train_and_the_unigram() -> None:
    """Debian's English fortunes, one record in ten held out: for orders 2-4 the held-out
    perplexity lies above train's (the model has seen train) and below the add-one unigram's
    (context helps on real English); train's falls with each order (higher orders memorise it),
    and fewer held-out n-grams occur in train the longer they are. Our own sanity bounds, no
    published figure."""
    records = fortune_sentences(ENGLISH)
    train = [r for i, r in enumerate(records) if i % 10]
    held_out = [r for i, r in enumerate(records) if not i % 10]
    vocabulary = vocabulary_ids(train, 2)
    size = 4 + len(vocabulary)
    counts = kn.count(*flat(to_ids(train, vocabulary)), 4, size)
    assert counts.tokens > 150_000
    models = kn.estimate_models(counts, "modified", [2, 3, 4])
    unigram = kn.AddOneUnigram.of(counts)
    trained = kn.training_score(models, unigram)
    score = kn.SplitScore()
    kn.score_split(score, models, unigram, *flat(to_ids(held_out, vocabulary)))
    for order in (2, 3, 4):
        assert trained.perplexity(order) < score.perplexity(order) < score.unigram_perplexity, order
    assert trained.perplexity(4) < trained.perplexity(3) < trained.perplexity(2)
    assert score.perplexity(3) < score.perplexity(2)
    assert score.seen_share(1) > score.seen_share(2) > score.seen_share(3) > score.seen_share(4) > 0


# --- ARPA --------------------------------------------------------------------------------------


def read_arpa(text: str) -> tuple[dict[int, int], dict[tuple[str, ...], tuple[float, float]]]:
    """A small ARPA parser: the \\data\\ counts and every n-gram's (log10 p, log10 back-off, 0 if absent)."""
    header, grams, order = {}, {}, 0
    for line in text.splitlines():
        if match := re.fullmatch(r"ngram (\d+)=(\d+)", line):
            header[int(match[1])] = int(match[2])
        elif match := re.fullmatch(r"\\(\d+)-grams:", line):
            order = int(match[1])
        elif line and order and not line.startswith("\\"):
            fields = line.split("\t")
            assert len(fields) in (2, 3) and len(fields[1].split(" ")) == order, line
            grams[tuple(fields[1].split(" "))] = (float(fields[0]), float(fields[2]) if len(fields) == 3 else 0.0)
    assert text.startswith("\n\\data\\\n") and text.endswith("\n\\end\\\n")
    return header, grams


def back_off_log10(grams: dict[tuple[str, ...], tuple[float, float]], history: tuple[str, ...], word: str) -> float:
    """The back-off reading of an ARPA model: p(hw) if listed, else bow(h) · p(w | h without its first word)."""
    if history + (word,) in grams:
        return grams[history + (word,)][0]
    return grams.get(history, (0.0, 0.0))[1] + back_off_log10(grams, history[1:], word)


@pytest.mark.parametrize(("size", "n"), [(40, 3), (2049, 6)])
def test_arpa_back_off_scoring_reproduces_the_interpolated_probabilities(size: int, n: int) -> None:
    """ARPA back-off format (\\data\\ counts, \\k-grams: sections of log10 p, n-gram, log10
    back-off): re-read with a small parser, back-off scoring gives the model's interpolated
    probability of seen and unseen n-grams, on held-out windows and on the whole predictable
    vocabulary after a few contexts (2049 ids: 6 ids of 12 bits take two words)."""
    rng = np.random.default_rng(9)
    words = rng.choice(np.arange(4, size), 12, replace=False)
    lengths = rng.integers(0, 8, 80)
    ids = rng.choice(np.append(words[:9], kn.UNK_ID), lengths.sum())
    counts = kn.count(ids, lengths, n, size)
    model = kn.estimate_models(counts, "modified", [n])[n]
    tokens = [f"w{i}" for i in range(size)]
    tokens[:4] = ["<pad>", "<unk>", "<s>", "</s>"]
    out = io.StringIO()
    written = kn.write_arpa(model, tokens, out)
    header, grams = read_arpa(out.getvalue())
    assert header == written and {k: sum(len(g) == k for g in grams) for k in header} == header
    assert header[1] == size - 1  # every predictable id, and <s> as a context
    assert all(grams[("<s>",) * k][0] == -99 for k in range(1, n))
    assert all(g[:-1] in grams and g[1:] in grams for g in grams if len(g) > 1)
    held_lengths = rng.integers(0, 8, 30)
    held = rng.choice(np.append(words, [kn.UNK_ID, size - 1]), held_lengths.sum())
    context, target = ngram_windows(held, held_lengths, n, BOS_ID, EOS_ID)
    queries = [tuple(row) for row in np.column_stack([context, target]).tolist()]
    histories = [(BOS_ID,) * (n - 1), tuple(int(w) for w in words[: n - 1]), (kn.UNK_ID,) * (n - 2) + (int(words[11]),)]
    queries += [h + (w,) for h in histories for w in [1, 3, *words.tolist()]]
    rows = np.array(queries)
    expected = model.probabilities(kn.locate_windows(counts, [rows[:, j] for j in range(n)]))
    assert 0 < (kn.locate_windows(counts, [rows[:, j] for j in range(n)]).entries[-1] >= 0).sum() < len(rows)
    got = [back_off_log10(grams, tuple(tokens[i] for i in q[:-1]), tokens[q[-1]]) for q in queries]
    np.testing.assert_allclose(got, np.log10(expected), rtol=0, atol=1e-8)


def test_arpa_tokens_are_one_whitespace_free_field() -> None:
    assert kn.arpa_token("plain") == "plain"
    assert kn.arpa_token("a b\tc\u00a0d\\e") == "a\\u0020b\\u0009c\\u00a0d\\\\e"
    assert len(kn.arpa_token("x\ny").split()) == 1
