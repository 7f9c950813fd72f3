"""The baseline counted, estimated and scored bucket by bucket (steps/ngram_buckets.py): the
figures of Chen and Goodman's formulas written out with Counters, whatever the groups and
whatever was written out to disk on the way, and an append that counts only what is new."""

from __future__ import annotations

import errno
import math
import os
import tempfile
import threading
from collections import Counter
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from unittest import mock

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_kneser_ney import SIZES, Reference, flat, sentences_strategy, windows

from corpusmill import baseline, kneser_ney, ngram_buckets
from corpusmill.formats import NgramTotals, read_ngram_totals, writing_ngram_totals
from corpusmill.kneser_ney import Discounts
from corpusmill.ngram_buckets import BUCKETS, RECORD, BucketStore

Sentences = list[list[int]]


@contextmanager
def small_groups_and_stores(group_ngrams: int, held_bytes: int) -> Iterator[list[int]]:
    """Groups (and parts of a bucket that holds more) of at most `group_ngrams` n-grams, train
    counted 64 tokens at a time, and stores that write out beyond `held_bytes`; yields a list
    that gets one item per write-out."""
    written: list[int] = []
    write_out = BucketStore._write_out

    def counted(self: BucketStore) -> None:
        written.append(self._bytes)
        write_out(self)

    with (
        mock.patch.object(ngram_buckets, "GROUP_NGRAMS", group_ngrams),
        mock.patch.object(ngram_buckets, "SPLIT_NGRAMS", group_ngrams),
        mock.patch.object(ngram_buckets, "HELD_BYTES", held_bytes),
        mock.patch.object(ngram_buckets, "COUNT_TOKENS", 64),
        mock.patch.object(baseline, "WINDOWS_HELD", held_bytes),
        mock.patch.object(BucketStore, "_write_out", counted),
    ):
        yield written


def score(train: list[Sentences], held_out: dict[str, Sentences], n: int, size: int, smoothing: str = "modified", **options: object) -> baseline.Baseline:
    """baseline.score over sentences given as lists, train in parts."""

    def reader(sentences: Sentences) -> baseline.Sentences:
        return lambda: iter([flat(sentences)])

    splits: dict[str, baseline.Sentences | list[baseline.Sentences] | None] = {"train": [reader(part) for part in train] if train else None}
    splits |= {split: reader(sentences) if sentences else None for split, sentences in held_out.items()}
    with tempfile.TemporaryDirectory() as work:  # a work folder whose parents do not exist yet, as in a first build
        return baseline.score("t", splits, size, n, smoothing, Path(work) / "interim" / "work", **options)  # type: ignore[arg-type]


def count_of_counts(counter: Counter) -> tuple[int, int, int, int]:
    by_count = Counter(counter.values())
    return by_count[1], by_count[2], by_count[3], by_count[4]


def expected_figures(
    train: Sentences, held_out: Sentences | None, n: int, size: int, smoothing: str = "modified"
) -> tuple[list[Discounts], list[tuple[int, ...]], dict | None]:
    """From Counters: the discounts and count-of-counts of the order-n model (continuation counts
    below n, raw at n) and, for held-out sentences, tokens, ln p per order, the add-one unigram's
    ln p and the seen k-grams (module docstring of steps.kneser_ney)."""
    reference = Reference(train, n, size)
    counted = [count_of_counts(reference.continuation[k]) for k in range(1, n)] + [count_of_counts(reference.raw[n])]
    continuation = [kneser_ney.estimate_discounts(c, smoothing) for c in counted[:-1]]  # type: ignore[arg-type]
    raw = {k: kneser_ney.estimate_discounts(count_of_counts(reference.raw[k]), smoothing) for k in range(2, n + 1)}  # type: ignore[arg-type]
    if held_out is None:
        return [*continuation, raw[n]], counted, None
    grams = windows(held_out, n)
    tokens = sum(reference.raw[1].values())
    figures = {
        "tokens": len(grams),
        "log_sums": {
            order: sum(math.log(reference.probability(w[-1], w[n - order : -1], order, [*continuation[: order - 1], raw[order]])) for w in grams)
            for order in range(2, n + 1)
        },
        "unigram": sum(math.log((reference.raw[1][w[-1:]] + 1) / (tokens + size - 2)) for w in grams),
        "seen": {k: sum(w[n - k :] in reference.raw[k] for w in grams) for k in range(1, n + 1)},
    }
    return [*continuation, raw[n]], counted, figures


@settings(suppress_health_check=[HealthCheck.too_slow], deadline=None)
@given(
    size=st.sampled_from([*SIZES, 5000]), n=st.integers(2, 5), smoothing=st.sampled_from(kneser_ney.SMOOTHINGS), group=st.integers(1, 8),
    held=st.sampled_from([1, 200, 1 << 20]), data=st.data(),
)  # fmt: skip
def test_scores_follow_chen_and_goodmans_formulas_written_out_with_counters(
    size: int, n: int, smoothing: str, group: int, held: int, data: st.DataObject
) -> None:
    """Train counted in two parts, dev and test scored, with groups of a few n-grams and stores
    that write out after every few records: every figure equals Chen and Goodman's (1998)
    interpolated Kneser-Ney, modified or not, computed with Counters one window at a time
    (tests/test_kneser_ney.py's `Reference`), with the discounts from Counter count-of-counts.
    Sizes give keys of one word, of two, and of exactly 65 bits (5,000 ids: 13 bits, n = 5)."""
    first, second = data.draw(sentences_strategy(size)), data.draw(sentences_strategy(size))
    dev, test = data.draw(sentences_strategy(size)), data.draw(st.lists(st.lists(st.sampled_from([1, 4, 5, size - 1]), max_size=6), max_size=4))
    with small_groups_and_stores(group, held):
        result = score([first, second], {"dev": dev, "test": test}, n, size, smoothing)
    discounts, counted, _ = expected_figures(first + second, None, n, size, smoothing)
    assert [f.discounts for f in result.figures] == pytest.approx(discounts, rel=1e-12)
    assert [f.count_of_counts for f in result.figures] == counted
    for split, sentences in (("dev", dev), ("test", test), ("train", first + second)):
        scored = result.scores[split]
        if not sentences:
            assert scored is None
            continue
        _, _, expected = expected_figures(first + second, sentences, n, size, smoothing)
        assert scored is not None and expected is not None
        assert scored.tokens == expected["tokens"]
        assert scored.seen == expected["seen"]
        assert scored.log_sums == pytest.approx(expected["log_sums"], rel=1e-9)
        assert scored.unigram_log_sum == pytest.approx(expected["unigram"], rel=1e-9)


def random_sentences(seed: int, count: int, size: int) -> Sentences:
    rng = np.random.default_rng(seed)
    weights = 1.0 / np.arange(1, size - 3)  # Zipf-like: some ids far more frequent than others
    return [rng.choice(np.arange(4, size), rng.integers(0, 15), p=weights / weights.sum()).tolist() for _ in range(count)]


def test_groups_and_write_outs_change_no_figure_but_by_float_rounding() -> None:
    """Asked for the whole model (for --arpa), the job makes one group whatever its bound, and
    the model holds every n-gram; in groups of 500 n-grams the figures are the same."""
    train, dev = random_sentences(1, 3000, 300), random_sentences(2, 300, 300)
    with small_groups_and_stores(500, 4096) as written:
        whole = score([train], {"dev": dev, "test": []}, 4, 300, whole=True)
        grouped = score([train[:1000], train[1000:]], {"dev": dev, "test": []}, 4, 300)
    assert len(written) > 10  # the stores did write out
    assert whole.model is not None and grouped.model is None
    assert len(whole.model.counts.levels[-1]) == len(set(windows(train, 4))) > 500
    assert [f.count_of_counts for f in grouped.figures] == [f.count_of_counts for f in whole.figures]
    assert grouped.figures == whole.figures
    for split in ("train", "dev"):
        one, other = whole.scores[split], grouped.scores[split]
        assert one is not None and other is not None
        assert (one.tokens, one.seen) == (other.tokens, other.seen)
        assert one.log_sums == pytest.approx(other.log_sums, rel=1e-12)
        assert one.unigram_log_sum == pytest.approx(other.unigram_log_sum, rel=1e-12)
    assert grouped.scores["test"] is None


def test_an_append_counts_only_the_new_sentences_and_gives_the_figures_of_a_clean_count(tmp_path: Path) -> None:
    """The first run keeps its totals; the second is given only the new sentences and carries
    the kept totals: every figure equals, to the last bit, a count of all sentences at once."""
    old, new, dev = random_sentences(3, 2000, 120), random_sentences(4, 200, 120), random_sentences(5, 200, 120)
    path = tmp_path / "totals.arrow"
    about = NgramTotals(3, 120, "code", (), BUCKETS)
    with small_groups_and_stores(400, 1 << 14):
        with writing_ngram_totals(path, about) as write:
            score([old], {"dev": dev, "test": []}, 3, 120, keep=lambda records: write(records["low"], records["high"], records["count"]))
        kept = read_ngram_totals(path)
        assert kept is not None and kept.about == about

        def carried(bucket: int) -> np.ndarray:
            return ngram_buckets.records_of(*kept.bucket(bucket))

        appended = score([new], {"dev": dev, "test": []}, 3, 120, carried=carried)
        clean = score([old, new], {"dev": dev, "test": []}, 3, 120)
    assert appended.to_json() == clean.to_json()
    assert appended.scores["dev"] == clean.scores["dev"] and appended.scores["train"] == clean.scores["train"]
    only_new = score([new], {"dev": dev, "test": []}, 3, 120)
    assert only_new.to_json() != clean.to_json()


def test_a_store_gives_each_buckets_records_in_the_order_they_came_across_write_outs(tmp_path: Path) -> None:
    store = BucketStore(RECORD, tmp_path, "t", held_bytes=1000, compact=None)
    added: dict[int, list[int]] = {0: [], 5: [], BUCKETS - 1: []}
    for step in range(21):  # the last record stays in memory, after those written out
        buckets = np.array([5, 0, BUCKETS - 1, 5] * 10 if step % 2 else [0], np.uint8)
        low = np.arange(len(buckets), dtype=np.uint64) + np.uint64(10 * step)
        records = ngram_buckets.records_of(low, np.zeros(len(buckets), np.uint64), np.ones(len(buckets), np.int64))
        for bucket, low in zip(buckets.tolist(), records["low"].tolist()):
            added[bucket].append(low)
        store.add(buckets, records)
    assert (tmp_path / "t-05.bin").exists()  # written out
    for bucket, lows in added.items():
        assert store.take(bucket)["low"].tolist() == lows
        assert not (tmp_path / f"t-{bucket:02d}.bin").exists()
    assert len(store.take(1)) == 0 and store._bytes == 0


def test_a_store_written_out_through_merge_records_sums_what_several_threads_added(tmp_path: Path) -> None:
    store = BucketStore(RECORD, tmp_path, "t", held_bytes=2000, compact=ngram_buckets.merge_records)
    expected: Counter = Counter()
    lock = threading.Lock()

    def add(seed: int) -> None:
        rng = np.random.default_rng(seed)
        for _ in range(50):
            low = rng.integers(0, 40, 30).astype(np.uint64)
            high = rng.integers(0, 2, 30).astype(np.uint64)
            with lock:
                expected.update(zip(low.tolist(), high.tolist()))
            store.add((low % np.uint64(BUCKETS)).astype(np.uint8), ngram_buckets.records_of(low, high, np.ones(30, np.int64)))

    threads = [threading.Thread(target=add, args=(seed,)) for seed in range(3)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    found: Counter = Counter()
    for bucket in range(BUCKETS):
        merged = ngram_buckets.merge_records(store.take(bucket))
        keys = list(zip(merged["low"].tolist(), merged["high"].tolist()))
        assert keys == sorted(keys, key=lambda key: (key[1], key[0])) and len(set(keys)) == len(keys)
        found.update(dict(zip(keys, merged["count"].tolist())))
    assert found == expected


@given(
    kept=st.lists(st.tuples(st.integers(0, 30), st.integers(0, 2), st.integers(1, 5)), max_size=40),
    extra=st.lists(st.tuples(st.integers(0, 30), st.integers(0, 2), st.integers(1, 5)), max_size=40),
)
def test_records_added_to_kept_totals_equal_a_merge_of_both(kept: list[tuple[int, int, int]], extra: list[tuple[int, int, int]]) -> None:
    """add_records (insertion into the sorted kept totals) against a Counter of both."""

    def records(rows: list[tuple[int, int, int]]) -> np.ndarray:
        low, high, count = (np.array(column, dtype) for column, dtype in zip(zip(*rows) if rows else ([], [], []), (np.uint64, np.uint64, np.int64)))
        return ngram_buckets.records_of(low, high, count)

    merged = ngram_buckets.add_records(ngram_buckets.merge_records(records(kept)), records(extra))
    expected: Counter = Counter()
    for low, high, count in kept + extra:
        expected[high, low] += count
    assert [(high, low) for low, high in zip(merged["low"].tolist(), merged["high"].tolist())] == sorted(expected)
    assert merged["count"].tolist() == [expected[key] for key in sorted(expected)]


@pytest.mark.parametrize(
    ("size", "n", "first", "other"),
    [
        (2**21 + 3, 4, 4, 4 + 2**20),  # 22-bit ids: the context of a 4-gram takes 66 bits
        (5000, 5, 903, 903 + 4096),  # 13-bit ids: a 5-gram takes exactly 65 bits
    ],
)
def test_keys_that_differ_only_above_64_bits_stay_apart_when_groups_are_saved(size: int, n: int, first: int, other: int) -> None:
    """N-grams whose first ids differ only in the bits above the low 64 of their keys: counted in
    groups that are saved to disk and loaded back, they keep apart, and every figure equals the
    Counters' (`Reference`)."""
    middle = list(range(7, 7 + n - 2))
    train = [[first, *middle, 5], [other, *middle, 6], [other, *middle, 6], [9, *middle, 5]] * 3 + [[10 + i, i + 20, 30] for i in range(40)]
    dev = [[first, *middle, 6], [other, *middle, 5], [9, *middle, 6]]
    with small_groups_and_stores(3, 1 << 20):
        result = score([train], {"dev": dev, "test": []}, n, size)
    _, counted, expected = expected_figures(train, dev, n, size)
    scored = result.scores["dev"]
    assert scored is not None and expected is not None
    assert [f.count_of_counts for f in result.figures] == counted
    assert scored.seen == expected["seen"]
    assert scored.log_sums == pytest.approx(expected["log_sums"], rel=1e-9)


def counted_store(tmp_path: Path, sizes: dict[int, int]) -> BucketStore:
    """A store of 3-gram records, `sizes[b]` distinct ones in bucket b (their middle id is b)."""
    store = BucketStore(RECORD, tmp_path, "t")
    keys_format = kneser_ney.KeyFormat(1000)
    for bucket, size in sizes.items():
        columns = [np.arange(size, dtype=np.uint64) + np.uint64(4), np.full(size, bucket + 64, np.uint64), np.full(size, 5, np.uint64)]
        keys = keys_format.pack(columns)
        store.add(ngram_buckets.bucket_of(ngram_buckets.next_to_last(keys, keys_format, 3)), ngram_buckets.as_records(keys, np.ones(size, np.int64)))
    return store


def test_groups_are_runs_of_buckets_of_at_most_the_bound_unless_one_bucket_holds_more(tmp_path: Path) -> None:
    sizes = {0: 2, 1: 2, 2: 1, 3: 7, 5: 1, 9: 3, 63: 1}
    with mock.patch.object(ngram_buckets, "GROUP_NGRAMS", 4), mock.patch.object(ngram_buckets, "SPLIT_NGRAMS", 6):
        _, groups = ngram_buckets.gather(counted_store(tmp_path, sizes), 3, 1000, tmp_path)
        _, whole = ngram_buckets.gather(counted_store(tmp_path, sizes), 3, 1000, tmp_path, whole=True)
    with mock.patch.object(ngram_buckets, "GROUP_NGRAMS", 4), mock.patch.object(ngram_buckets, "SPLIT_NGRAMS", 7):
        _, unsplit = ngram_buckets.gather(counted_store(tmp_path, sizes), 3, 1000, tmp_path)
    # A group ends before the bucket that would take it past 4 n-grams: 2 + 2; 1 (+ 7 would pass);
    # 7 alone, which passes it (+ bucket 4's none); then 1 + 3 over buckets 4 to 62; bucket 63.
    assert [(group.buckets[0], group.buckets[-1]) for group in groups] == [(0, 1), (2, 2), (3, 3), (4, 62), (63, 63)]
    assert [isinstance(group.levels, Path) for group in groups] == [True, True, True, True, False]  # the last stays in memory
    assert [(group.buckets[0], group.buckets[-1]) for group in whole] == [(0, 63)]
    # The bucket of 7 is split when above the split bound (6), whole at it (7).
    assert [len(group.parts) for group in groups] == [0, 0, 2, 0, 0] and not whole[0].parts
    assert [len(group.parts) for group in unsplit] == [0, 0, 0, 0, 0]


def test_a_bucket_above_the_bound_is_split_by_the_id_before_its_next_to_last(tmp_path: Path) -> None:
    """Bucket 3's 3-grams (x, 67, y): x = 4 three times, 5 twice, 6 once, 9 four times; 10
    n-grams, above the split bound (9); group bound 4. A part starts at the first id x whose
    n-grams start at or past a multiple of the group bound (x = 6 starts at 5, x = 9 at 6 < 8), so the parts hold 5 and 5: never more
    than the bound and one id's n-grams."""
    keys_format = kneser_ney.KeyFormat(1000)
    store = BucketStore(RECORD, tmp_path, "t")
    first = np.array([4, 4, 4, 5, 5, 6, 9, 9, 9, 9], np.uint64)
    last = np.array([5, 6, 7, 5, 6, 5, 5, 6, 7, 8], np.uint64)
    keys = keys_format.pack([first, np.full(10, 67, np.uint64), last])
    store.add(ngram_buckets.bucket_of(ngram_buckets.next_to_last(keys, keys_format, 3)), ngram_buckets.as_records(keys, np.ones(10, np.int64)))
    with mock.patch.object(ngram_buckets, "GROUP_NGRAMS", 4), mock.patch.object(ngram_buckets, "SPLIT_NGRAMS", 9):
        _, groups = ngram_buckets.gather(store, 3, 1000, tmp_path)
    # The empty buckets before it join its group.
    assert [(group.buckets[0], group.buckets[-1], len(group.parts)) for group in groups] == [(0, 3, 2), (4, 63, 0)]
    assert [part.first for part in groups[0].parts] == [4, 6]
    assert [len(ngram_buckets._load(part.levels)[-1]) for part in groups[0].parts] == [5, 5]


def test_a_work_folder_that_cannot_be_written_stops_the_count_naming_the_file_and_the_way_out(tmp_path: Path) -> None:
    blocked = tmp_path / "blocked"
    blocked.write_text("a file where the work folder should be")
    train = random_sentences(6, 300, 50)
    splits: dict[str, baseline.Sentences | list[baseline.Sentences] | None] = {"train": lambda: iter([flat(train)]), "dev": None, "test": None}
    with small_groups_and_stores(50, 100), pytest.raises(SystemExit) as stopped:
        baseline.score("t", splits, 50, 3, "modified", blocked / "work")
    message = str(stopped.value)
    # The system's own wording of the error (os.strerror): a file stands where a folder must be.
    assert message.startswith(f"corpusmill: {blocked / 'work'}/train-") and f"cannot be written ({os.strerror(errno.ENOTDIR)})" in message
    assert "free disk space" in message and "baseline.enabled: false" in message
