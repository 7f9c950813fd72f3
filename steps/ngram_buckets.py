"""N-gram buckets: a Kneser–Ney model counted, estimated and scored a few buckets at a time, so
memory follows the size of a group (and the counted records of one bucket) rather than the
corpus.

A k-gram (k >= 2) belongs to bucket (its next-to-last id) mod BUCKETS. Every table the model
needs above the unigrams then lies within one bucket:
- a context (the first k-1 ids) ends with that id, so a context and all its k-grams share it;
- the continuation and raw counts of a (k-1)-gram come from its left extensions, k-grams with
  the same next-to-last id; so does the (k-1)-gram suffix of a k-gram, for k > 2;
- a window scored at every order looks up k-grams and contexts that all end with the window's
  last context id.
Only the unigrams cross buckets: each bigram lies in exactly one bucket, so their raw and
continuation counts are sums over buckets, and so are the count-of-counts the discounts come
from. The model is built in two passes over the buckets: the first merges each bucket's counts,
derives its lower orders (steps.kneser_ney.counts_of_totals) and sums the unigram counts and
count-of-counts; the second estimates the weights of the buckets' tables with the corpus-wide
discounts and scores train (from the counts) and the held-out windows of those buckets.

Consecutive buckets are taken together in groups of at most GROUP_NGRAMS n-grams of the highest
order. A bucket that holds more than SPLIT_NGRAMS (the bucket of a frequent context word) is
split once more, by the id before the next-to-last, into parts of about GROUP_NGRAMS
(`split_bucket`): only its level 2 spans the parts. Groups and parts depend only on the counts,
so a build's figures do not depend on how or when its train split was counted; floating sums
run group by group and part by part.
Counted n-grams and held-out windows wait in a BucketStore, in memory up to a bound and then
in files of a work folder, which the caller removes.
"""

from __future__ import annotations

import dataclasses
import threading
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from . import kneser_ney
from .kneser_ney import AddOneUnigram, Counts, Discounts, KeyFormat, Keys, KneserNey, Level, Smoothing, SplitScore

BUCKETS = 64
# N-grams of the highest order taken together: a group's tables and weights take about 150
# bytes for each. Groups four times larger were no faster in a trial and nearly doubled the
# peak of a 1x build (bench/README.md).
GROUP_NGRAMS = 1 << 18
# A bucket of more n-grams of the highest order than this is split into parts of about
# GROUP_NGRAMS (split_bucket); a smaller one is taken whole, as splitting costs a merge of its
# level 2 and an estimate of that level in every part (several seconds at 10x when every bucket
# above GROUP_NGRAMS was split; bench/README.md).
SPLIT_NGRAMS = 1 << 20
# Bytes of records a store holds in memory before it writes them out.
HELD_BYTES = 64 << 20
# Tokens whose windows are made at once (and, in train, packed, sorted and counted).
COUNT_TOKENS = 1 << 20
RECORD = np.dtype([("low", "<u8"), ("high", "<u8"), ("count", "<i8")])


class WorkFolderError(OSError):
    """A file of the work folder could not be written (a full disk, most often)."""


def _written(path: Path, mode: str, write: Callable[[Any], None]) -> None:
    """Write to `path`, opened in `mode`, with `write(file)`; WorkFolderError naming the file
    when that fails."""
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        with open(path, mode) as out:
            write(out)
    except OSError as error:
        raise WorkFolderError(f"{path}: cannot be written ({error.strerror or error})") from None


def window_record(order: int) -> np.dtype:
    """A held-out window: its order ids, target last."""
    return np.dtype([("ids", "<u4", (order,))])


class BucketStore:
    """Records of one dtype, added bucket by bucket and taken back a bucket at a time in the
    order they came. Up to `held_bytes` wait in memory; beyond that every bucket's records are
    written out (appended to the bucket's file in `folder`, through `compact` if given). Safe to
    add to from several threads."""

    def __init__(
        self, dtype: np.dtype, folder: Path, name: str, held_bytes: int | None = None, compact: Callable[[np.ndarray], np.ndarray] | None = None
    ) -> None:
        self.dtype, self.folder, self.name, self.compact = dtype, folder, name, compact
        self.held_bytes = HELD_BYTES if held_bytes is None else held_bytes
        self._held: list[list[np.ndarray]] = [[] for _ in range(BUCKETS)]
        self._bytes = 0
        self._lock = threading.Lock()

    def _path(self, bucket: int) -> Path:
        return self.folder / f"{self.name}-{bucket:02d}.bin"

    def add(self, buckets: np.ndarray, records: np.ndarray) -> None:
        order = np.argsort(buckets, kind="stable")
        bounds = np.searchsorted(buckets[order], np.arange(BUCKETS + 1))
        records = records[order]
        with self._lock:
            for bucket in np.flatnonzero(np.diff(bounds)).tolist():
                self._held[bucket].append(records[bounds[bucket] : bounds[bucket + 1]])
            self._bytes += records.nbytes
            if self._bytes > self.held_bytes:
                self._write_out()

    def _write_out(self) -> None:
        for bucket, parts in enumerate(self._held):
            if parts:
                records = np.concatenate(parts)
                if self.compact is not None:
                    records = self.compact(records)
                _written(self._path(bucket), "ab", records.tofile)  # appended: a bucket's runs in the order written
                parts.clear()
        self._bytes = 0

    def take(self, bucket: int) -> np.ndarray:
        """The bucket's records, in the order they were added; the store keeps none of them."""
        parts = []
        path = self._path(bucket)
        if path.exists():
            parts.append(np.fromfile(path, self.dtype))
            path.unlink()
        with self._lock:
            parts += self._held[bucket]
            self._bytes -= sum(part.nbytes for part in self._held[bucket])
            self._held[bucket] = []
        return np.concatenate(parts) if parts else np.empty(0, self.dtype)


def next_to_last(keys: Keys, keys_format: KeyFormat, k: int) -> np.ndarray:
    """The id before the last of each k-gram key (k >= 2)."""
    return keys_format.last(keys_format.prefix(keys, k))


def bucket_of(ids: np.ndarray) -> np.ndarray:
    return (ids % np.uint64(BUCKETS)).astype(np.uint8)


def records_of(low: np.ndarray, high: np.ndarray, count: np.ndarray) -> np.ndarray:
    records = np.empty(len(low), RECORD)
    records["low"], records["high"], records["count"] = low, high, count
    return records


def as_records(keys: Keys, counts: np.ndarray) -> np.ndarray:
    return records_of(keys.low, keys.upper(), counts)


def as_totals(records: np.ndarray, keys_format: KeyFormat, order: int) -> tuple[Keys, np.ndarray]:
    high = records["high"] if order * keys_format.bits > 64 else None
    return Keys(np.ascontiguousarray(records["low"]), None if high is None else np.ascontiguousarray(high)), np.ascontiguousarray(records["count"])


def merge_records(records: np.ndarray) -> np.ndarray:
    """Records sorted by key, each key once with its counts summed. Column by column, so that
    no more than one sorted copy of a column is held beside the records."""
    order = Keys(records["low"], records["high"]).order(kind="stable")
    low = records["low"][order]
    starts = Keys(low, high := records["high"][order]).starts()
    merged = np.empty(len(starts), RECORD)
    merged["low"], merged["high"] = low[starts], high[starts]
    del low, high
    merged["count"] = np.add.reduceat(records["count"][order], starts) if len(starts) else 0
    return merged


def add_records(table: np.ndarray, extra: np.ndarray) -> np.ndarray:
    """merge_records of both, for a `table` that is already sorted and distinct (kept totals)
    and a few `extra` records (the new files'): the extra keys are merged in by insertion, a
    copy of the table rather than a sort."""
    extra = merge_records(extra)
    places, equal = kneser_ney.insertion_points(Keys(table["low"], table["high"]), Keys(extra["low"], extra["high"]))
    added = places[~equal]
    merged = np.insert(table, added, extra[~equal])
    # A key already in the table moves up by the number of keys inserted before it.
    merged["count"][places[equal] + np.searchsorted(added, places[equal], side="right")] += extra["count"][equal]
    return merged


@dataclass
class Counting:
    """Counts train sentences into a BucketStore of n-gram records of the highest order."""

    order: int
    vocabulary_size: int
    store: BucketStore

    def __post_init__(self) -> None:
        self.format = KeyFormat(self.vocabulary_size)

    def add(self, ids: np.ndarray, sentence_lengths: np.ndarray) -> None:
        lengths = np.asarray(sentence_lengths, np.int64)
        kneser_ney.check_ids(ids, lengths, self.vocabulary_size)
        for first, last, start, end in kneser_ney.sentence_groups(lengths, COUNT_TOKENS):
            columns = kneser_ney.windows(ids[start:end], lengths[first:last], self.order)
            keys, counts = kneser_ney.count_run(self.format.pack(columns))
            self.store.add(bucket_of(next_to_last(keys, self.format, self.order)), as_records(keys, counts))


def hold_windows(store: BucketStore, order: int, vocabulary_size: int, ids: np.ndarray, sentence_lengths: np.ndarray) -> None:
    """Put the windows of held-out sentences into `store`, by the bucket of their last context id."""
    lengths = np.asarray(sentence_lengths, np.int64)
    kneser_ney.check_ids(ids, lengths, vocabulary_size)
    for first, last, start, end in kneser_ney.sentence_groups(lengths, COUNT_TOKENS):
        columns = kneser_ney.windows(ids[start:end], lengths[first:last], order)
        records = np.empty(len(columns[0]), window_record(order))
        records["ids"] = np.stack(columns, axis=1)
        store.add(bucket_of(columns[-2].astype(np.uint64)), records)


@dataclass(frozen=True)
class LevelFigures:
    """What the report shows of one order of the model of the highest order."""

    discounts: Discounts
    count_of_counts: tuple[int, int, int, int]


def _plus(first: tuple[int, int, int, int], second: tuple[int, int, int, int]) -> tuple[int, int, int, int]:
    a, b, c, d = (x + y for x, y in zip(first, second))
    return a, b, c, d


@dataclass
class SplitTotals:
    """What the first pass sums over the groups: the unigram counts and the count-of-counts."""

    order: int
    vocabulary_size: int

    def __post_init__(self) -> None:
        self.unigram_raw = np.zeros(self.vocabulary_size, np.int64)
        self.unigram_continuation = np.zeros(self.vocabulary_size, np.int64)
        self.n: dict[tuple[int, bool], tuple[int, int, int, int]] = {}  # (k >= 2, raw counts or not) -> n1..n4

    def add(self, counts: Counts) -> None:
        unigrams = counts.levels[0]
        self.add_unigrams(unigrams.local, unigrams.raw, unigrams.continuation)
        self.add_levels(counts.levels[1:])

    def add_unigrams(self, ids: np.ndarray, raw: np.ndarray, continuation: np.ndarray | None) -> None:
        """Raw and continuation counts of the unigrams of some buckets (each bigram in one)."""
        at = ids.astype(np.int64)
        self.unigram_raw[at] += raw
        if continuation is not None:
            self.unigram_continuation[at] += continuation

    def add_levels(self, levels: Sequence[Level]) -> None:
        """The count-of-counts of levels of order 2 and above, each k-gram in one of them."""
        for level in levels:
            for top in (True, False) if level.continuation is not None else (True,):
                self.n[level.k, top] = _plus(self.n.get((level.k, top), (0, 0, 0, 0)), kneser_ney.count_of_counts(level.counts(top)))

    def unigram_level(self) -> Level:
        ids = np.flatnonzero(self.unigram_raw)
        keys = Keys(ids.astype(np.uint64))
        return Level.of(1, keys, self.unigram_raw[ids], self.unigram_continuation[ids], np.empty(0, np.uint8), KeyFormat(self.vocabulary_size))

    def count_of_counts(self, k: int, top: bool) -> tuple[int, int, int, int]:
        if k == 1:  # ids never seen have continuation count 0, which no n_r counts
            return kneser_ney.count_of_counts(self.unigram_continuation)
        return self.n[k, top]

    def discounts(self, smoothing: Smoothing) -> dict[tuple[int, bool], Discounts]:
        """(k, raw counts or not) -> the discounts every model of orders 2..n uses."""
        return {key: kneser_ney.estimate_discounts(self.count_of_counts(*key), smoothing) for key in [(1, False), *self.n]}

    def figures(self, smoothing: Smoothing) -> tuple[LevelFigures, ...]:
        """Per k = 1..order, the discounts and count-of-counts of the model of the highest order."""
        discounts = self.discounts(smoothing)
        keys = [(k, k == self.order) for k in range(1, self.order + 1)]
        return tuple(LevelFigures(discounts[key], self.count_of_counts(*key)) for key in keys)


@dataclass(frozen=True)
class Part:
    """Levels 3..order of the n-grams of a split bucket whose id before the next-to-last is
    `first` or above (up to the next part's). Level 3's suffixes are bigram keys, not indexes:
    the bucket's level 2 is known only once every part is derived."""

    first: int
    levels: Path

    def load(self, bigram_keys: np.ndarray) -> tuple[Level, ...]:
        """The levels, level 3's suffixes made indexes into the bucket's level 2 (`bigram_keys`:
        its full keys, sorted)."""
        third, *rest = _load(self.levels)
        return (dataclasses.replace(third, suffixes=np.searchsorted(bigram_keys, third.suffixes)), *rest)


@dataclass(frozen=True)
class Group:
    """Levels 2..order of some consecutive buckets. Level 2's suffixes are unigram ids, not
    indexes: the unigram level of the whole split is known only after the first pass. A bucket
    of more than SPLIT_NGRAMS n-grams of order 3 or more is split: `levels` holds its level 2
    alone, and `parts` the levels above, by the id before the next-to-last."""

    buckets: tuple[int, ...]
    levels: tuple[Level, ...] | Path  # in memory, or saved in this file
    parts: tuple[Part, ...] = ()

    def load(self, unigrams: Level) -> tuple[Level, ...]:
        """The levels, level 2's suffixes made indexes into `unigrams`."""
        levels = self.levels if not isinstance(self.levels, Path) else _load(self.levels)
        if not levels:
            return levels
        second = levels[0]
        suffixes = np.searchsorted(unigrams.local, second.suffixes)
        return (dataclasses.replace(second, suffixes=suffixes), *levels[1:])


def _save(levels: tuple[Level, ...], path: Path) -> Path:
    """The levels' arrays as .npy records one after another, their names first: read back once,
    they need no archive (an .npz's zip and checksums took several times as long)."""
    arrays: dict[str, Any] = {}
    for level in levels:
        fields = {
            "raw": level.raw, "suffixes": level.suffixes, "context_low": level.context_keys.low, "context_starts": level.context_starts,
            "local": level.local, "continuation": level.continuation, "context_high": level.context_keys.high,
        }  # fmt: skip
        arrays |= {f"{level.k}.{name}": value for name, value in fields.items() if value is not None}

    def write(out: Any) -> None:
        np.save(out, np.array(list(arrays)))
        for value in arrays.values():
            np.save(out, value)

    _written(path, "wb", write)
    return path


def _load(path: Path) -> tuple[Level, ...]:
    with open(path, "rb") as saved:
        arrays = {str(name): np.load(saved) for name in np.load(saved)}
    levels = []
    for k in sorted({int(name.split(".")[0]) for name in arrays}):

        def get(name: str, k: int = k) -> np.ndarray | None:
            return arrays.get(f"{k}.{name}")

        raw, suffixes, low, starts, local = (arrays[f"{k}.{name}"] for name in ("raw", "suffixes", "context_low", "context_starts", "local"))
        levels.append(Level(k, raw, get("continuation"), suffixes, Keys(low, get("context_high")), starts, local))
    return tuple(levels)


def part_key(keys: Keys, keys_format: KeyFormat, k: int) -> np.ndarray:
    """The id before the next-to-last of each k-gram key (k >= 3)."""
    return keys_format.last(keys_format.prefix(keys_format.prefix(keys, k), k - 1))


def split_bucket(pending: list[np.ndarray], buckets: tuple[int, ...], order: int, keys_format: KeyFormat, split: SplitTotals, work: Path) -> Group:
    """A bucket of more than SPLIT_NGRAMS n-grams (its records, in `pending`, which is emptied,
    with those of empty buckets beside it), derived in parts. Every table of order 3 or more
    lies within the n-grams that share the id before the next-to-last, as a bucket's tables lie
    within those that share the next-to-last: parts take consecutive values of that id, a part
    starting at the value whose n-grams start at or past the next multiple of GROUP_NGRAMS.
    Level 2 alone spans the parts: its raw and continuation counts are sums over them (each
    trigram lies in one), as the unigrams' are over buckets."""
    keys, counts = as_totals(np.concatenate(pending), keys_format, order)
    pending.clear()
    values = part_key(keys, keys_format, order)
    by_value = np.argsort(values)  # any order of equal values: each part's rows are sorted below
    values = values[by_value]
    value_starts = np.flatnonzero(np.concatenate([[True], values[1:] != values[:-1]]))
    part_of_value = value_starts // GROUP_NGRAMS
    part_starts = value_starts[np.concatenate([[True], part_of_value[1:] != part_of_value[:-1]])]
    parts, bigrams = [], []
    for number, (start, taken) in enumerate(zip(part_starts.tolist(), np.split(by_value, part_starts[1:]))):
        rows = np.sort(taken)  # the part's keys, sorted
        upper, (bigram_keys, bigram_raw, bigram_continuation) = kneser_ney.lower_orders([(keys[rows], counts[rows], None)], order, 3, keys_format)
        split.add_levels(upper)
        upper[-1] = dataclasses.replace(upper[-1], suffixes=bigram_keys.low[upper[-1].suffixes])
        parts.append(Part(int(values[start]), _save(tuple(reversed(upper)), work / f"group-{buckets[0]:02d}-part-{number:06d}.levels")))
        bigrams.append((bigram_keys.low, bigram_raw, bigram_continuation))
        del upper, rows
    del keys, counts, values, by_value
    low = np.concatenate([found[0] for found in bigrams])
    by_key = np.argsort(low)  # equal keys (a bigram of several parts) are summed
    low = low[by_key]
    starts = Keys(low).starts()
    raw = np.add.reduceat(np.concatenate([found[1] for found in bigrams])[by_key], starts)
    continuation = np.add.reduceat(np.concatenate([found[2] for found in bigrams])[by_key], starts)
    second, (unigram_keys, unigram_raw, unigram_continuation) = kneser_ney.lower_orders([(Keys(low[starts]), raw, continuation)], 2, 2, keys_format)
    split.add_unigrams(unigram_keys.low, unigram_raw, unigram_continuation)
    split.add_levels(second)
    level = dataclasses.replace(second[0], suffixes=unigram_keys.low[second[0].suffixes])
    return Group(buckets, _save((level,), work / f"group-{buckets[0]:02d}.levels"), tuple(parts))


def gather(
    store: BucketStore, order: int, vocabulary_size: int, work: Path, whole: bool = False,
    carried: Callable[[int], np.ndarray] | None = None, keep: Callable[[np.ndarray], None] | None = None,
) -> tuple[SplitTotals, list[Group]]:  # fmt: skip
    """The first pass: each bucket's records (with the `carried` ones of an earlier run) merged
    and given to `keep` in bucket order, then derived group by group (one group when `whole`). Every group but
    the last is saved in `work`."""
    keys_format = KeyFormat(vocabulary_size)
    split = SplitTotals(order, vocabulary_size)
    groups: list[Group] = []

    def derive(pending: list[np.ndarray], buckets: tuple[int, ...]) -> None:
        if sum(map(len, pending)) > SPLIT_NGRAMS and order > 2 and not whole:  # one bucket and empty ones (see below)
            groups.append(split_bucket(pending, buckets, order, keys_format, split, work))
            return
        keys, counts = as_totals(np.concatenate(pending), keys_format, order)
        pending.clear()
        by_key = keys.order(kind="stable")  # a run per bucket, merged
        counted = kneser_ney.counts_of_totals([(keys[by_key], counts[by_key])], order, vocabulary_size)
        del keys, counts, by_key
        split.add(counted)
        levels = counted.levels[1:]
        if levels:
            levels = (dataclasses.replace(levels[0], suffixes=counted.levels[0].local[levels[0].suffixes]), *levels[1:])
        del counted
        last = buckets[-1] == BUCKETS - 1
        groups.append(Group(buckets, levels if last else _save(levels, work / f"group-{buckets[0]:02d}.levels")))

    pending: list[np.ndarray] = []
    first = 0
    for bucket in range(BUCKETS):
        records = merge_records(store.take(bucket)) if carried is None else add_records(carried(bucket), store.take(bucket))
        if keep is not None:
            keep(records)
        held = sum(map(len, pending))
        if held and not whole and held + len(records) > GROUP_NGRAMS:
            derive(pending, tuple(range(first, bucket)))
            first = bucket
        pending.append(records)
        del records
    derive(pending, tuple(range(first, BUCKETS)))
    return split, groups


class NoTokens(ValueError):
    """Train holds no sentence: there is nothing to estimate a model from."""


@dataclass
class Scored:
    """Both passes done: the figures of every split, and the model when it was built whole."""

    scores: dict[str, SplitScore | None]
    figures: tuple[LevelFigures, ...]
    model: KneserNey | None


def score(
    store: BucketStore, held_out: dict[str, BucketStore | None], order: int, vocabulary_size: int, smoothing: Smoothing, work: Path,
    whole: bool = False, carried: Callable[[int], np.ndarray] | None = None, keep: Callable[[np.ndarray], None] | None = None,
    batch_windows: int = 1 << 17, threads: int = 2,
) -> Scored:  # fmt: skip
    """Both passes over the counted train records in `store`; the held-out splits' windows
    (hold_windows) scored by the models of orders 2..order. The last group, held in memory, is
    scored first, then the saved ones in order."""
    split, groups = gather(store, order, vocabulary_size, work, whole, carried, keep)
    unigrams = split.unigram_level()
    if not int(unigrams.raw.sum()):
        raise NoTokens()
    discounts = split.discounts(smoothing)
    train = SplitScore(tokens=int(unigrams.raw.sum()), seen=dict.fromkeys(range(1, order + 1), int(unigrams.raw.sum())))
    held_scores = {name: SplitScore() for name, windows in held_out.items() if windows is not None}
    model = None
    unigram = AddOneUnigram.of(Counts(vocabulary_size, (unigrams,)))
    with ThreadPoolExecutor(threads) as pool:
        for group in [groups[-1], *groups[:-1]]:
            levels = group.load(unigrams)
            windows = {name: np.concatenate([store.take(bucket) for bucket in group.buckets])["ids"] for name, store in held_out.items() if store is not None}
            if group.parts:  # a split bucket: each part's windows by the id before their next-to-last
                bigram_keys = levels[0].keys(KeyFormat(vocabulary_size)).low
                firsts = np.array([part.first for part in group.parts], np.int64)
                # A window whose id there is below the first part's has no n-gram above level 2 in
                # any part; the first part scores it.
                part_of = {name: np.maximum(np.searchsorted(firsts, found[:, order - 3], side="right") - 1, 0) for name, found in windows.items()}
            for number, part in enumerate(group.parts or (None,)):
                counts = Counts(vocabulary_size, (unigrams, *levels, *(part.load(bigram_keys) if part else ())))
                models = kneser_ney.estimate_models(counts, smoothing, range(2, order + 1), discounts)
                trained = kneser_ney.training_score(models, unigram)
                for k, log_sum in trained.log_sums.items():
                    if k > 2 or not number:  # a split bucket's level 2 is in every part: its score counts once
                        train.log_sums[k] = train.log_sums.get(k, 0.0) + log_sum
                train.unigram_log_sum = trained.unigram_log_sum

                def held(records: np.ndarray, into: SplitScore, counts: Counts = counts, models: dict[int, KneserNey] = models) -> None:
                    for start in range(0, len(records), batch_windows):
                        columns = [np.ascontiguousarray(column) for column in records[start : start + batch_windows].T]
                        into.add(models, unigram, kneser_ney.locate_windows(counts, columns), columns[-1])

                mine = {name: found[part_of[name] == number] if part else found for name, found in windows.items()}
                for done in [pool.submit(held, found, held_scores[name]) for name, found in mine.items()]:
                    done.result()
                if whole:
                    model = models[order]
    scores: dict[str, SplitScore | None] = {"train": train}
    scores |= {name: held_scores.get(name) for name in held_out}
    for found in scores.values():
        if found is not None:
            found.log_sums = dict(sorted(found.log_sums.items()))
    return Scored(scores, split.figures(smoothing), model)
