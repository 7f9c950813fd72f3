"""Kneser–Ney n-gram language models on id arrays: counting, estimation, scoring, ARPA output.

Conventions (those of the n-gram shard rows, steps.windows.ngram_windows):
- A split is a sequence of sentences of ids, given as one flat id array and the sentence lengths.
- Every id of a sentence, and </s> after its last id, is predicted from the n-1 ids before it;
  each sentence is preceded by n-1 <s>. <s> is never predicted, <pad> never occurs.
- The predictable vocabulary P is every id but <pad> and <s> (|P| = V - 2). <unk> and the
  unknown classes are ordinary members of P: an out-of-vocabulary word is scored as its class.
- The k-grams of a split are those ending at a predicted token, so each has a left neighbour
  (an id or a padding <s>) and the continuation count of a (k-1)-gram is the number of distinct
  ids seen before it.

Keys: the ids of a k-gram are packed into one number, ceil(log2 V) bits per id, first id in
the highest bits, so numeric order is the lexicographic order of the ids. When k ids take more
than 64 bits the number is two unsigned 64-bit words, high and low (exact, no hashing; at most
128 bits, so n <= 128 // bits, e.g. 7 for 125,000 ids), sorted by the low word and then stably
by the high word, a radix sort when it holds at most 16 bits. Tables keep each k-gram as its
context's index and its last id, one word whatever the order, so lookups are binary searches
of uint64 (the queries sorted first, so the searches walk the table in order).

Counting sorts the keys of a bounded batch of tokens, counts equal neighbours, and merges the
batch tables into the running table once they outgrow it, so memory follows the number of
distinct n-grams rather than the corpus (steps.ngram_buckets counts a split a few buckets of
n-grams at a time, with these same tables, so that it follows a group of buckets). Orders below
n are derived from the table of order n: the (k-1)-grams are the distinct suffixes of the
k-grams, their continuation counts the number of k-grams sharing the suffix, their raw counts
the sum of those k-grams' counts.

Smoothing: interpolated Kneser–Ney (Chen and Goodman 1998, "An Empirical Study of Smoothing
Techniques for Language Modeling", TR-10-98):
    p_k(w | h) = (c(hw) - D(c(hw))) / c(h•) + gamma(h) p_{k-1}(w | h'),
    gamma(h) = (D1 N1(h•) + D2 N2(h•) + D3 N3+(h•)) / c(h•),
with c the raw count at the model's own order and the continuation count below it, h' = h
without its first id, N_r(h•) the number of ids following h with count r (3+: at least 3), and
p_k = p_{k-1} for a context never seen. The unigram level is interpolated the same way with
the uniform distribution over P, so ids never seen keep some probability. Discounts per order,
from the count-of-counts n_r of that order's counts (raw at the top, continuation below):
    modified:      Y = n1/(n1+2 n2), D1 = 1-2Y n2/n1, D2 = 2-3Y n3/n2, D3+ = 3-4Y n4/n3
    interpolated:  D = n1/(n1+2 n2) for every count
When n1..n4 are not all positive or D2 or D3+ is not above 0 (tiny corpora), modified falls
back to the interpolated discount for that order; with no singletons at all (n1 = 0, which
would leave no probability for unseen ids) D = 0.5 (both fallbacks our own rule).
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Literal, TextIO

import numpy as np

from .windows import ngram_windows

# Ids fixed by vocabulary.tsv (steps.vocab.RESERVED, and the control pieces of subword models).
PAD_ID, UNK_ID, BOS_ID, EOS_ID = 0, 1, 2, 3
Smoothing = Literal["modified", "interpolated"]
SMOOTHINGS: tuple[Smoothing, ...] = ("modified", "interpolated")
# Discount when the count-of-counts cannot give one (no singletons); our own choice.
FALLBACK_DISCOUNT = 0.5
# ARPA's log10 probability of the start symbol, which is never predicted (common practice).
ARPA_NEVER = -99.0


def predictable(vocabulary_size: int) -> int:
    """|P|: every id but <pad> and <s>."""
    return vocabulary_size - 2


@dataclass(frozen=True)
class Keys:
    """k-grams packed as the number sum(id_j << bits*(k-1-j)): its low 64 bits, and the bits
    above them when k*bits > 64. Ordered by (high, low), keys are in lexicographic id order."""

    low: np.ndarray
    high: np.ndarray | None = None

    def __len__(self) -> int:
        return len(self.low)

    def upper(self) -> np.ndarray:
        """The high words; zeros when the keys fit 64 bits."""
        return self.high if self.high is not None else np.zeros_like(self.low)

    def __getitem__(self, index: np.ndarray | slice) -> Keys:
        return Keys(self.low[index], None if self.high is None else self.high[index])

    @staticmethod
    def concatenate(parts: Sequence[Keys]) -> Keys:
        high = None if parts[0].high is None else np.concatenate([part.high for part in parts])
        return Keys(np.concatenate([part.low for part in parts]), high)

    def order(self, kind: Literal["quicksort", "stable"] = "quicksort") -> np.ndarray:
        """The permutation that sorts the keys: by the high word, then by the low word. With a
        high word, one stable lexsort over the high word narrowed to its smallest type: it held
        a third less beside the keys than a sort by each word in turn, and took less time
        (bench/README.md); `kind` is then stable whatever is asked."""
        if self.high is None or not len(self.high):
            return np.argsort(self.low, kind=kind)
        return np.lexsort((self.low, self.high.astype(np.min_scalar_type(int(self.high.max())))))

    def starts(self) -> np.ndarray:
        """For sorted keys: the index of the first of each run of equal keys."""
        if not len(self):
            return np.empty(0, np.int64)
        change = np.empty(len(self), bool)
        change[0] = True
        change[1:] = self.low[1:] != self.low[:-1]
        if self.high is not None:
            change[1:] |= self.high[1:] != self.high[:-1]
        return np.flatnonzero(change)


@dataclass(frozen=True)
class KeyFormat:
    """How k ids become Keys: ceil(log2 V) bits per id, at most 128 bits per key."""

    vocabulary_size: int

    @property
    def bits(self) -> int:
        return max(1, (self.vocabulary_size - 1).bit_length())

    def largest_order(self) -> int:
        return 128 // self.bits

    def pack(self, columns: Sequence[np.ndarray]) -> Keys:
        """Keys of rows whose ids are given column by column (first id first)."""
        k, bits, rows = len(columns), self.bits, len(columns[0])
        if k * bits > 128:
            raise ValueError(f"{k} ids of {bits} bits do not fit in 128 bits: use an order of at most {self.largest_order()}")
        low, high = np.zeros(rows, np.uint64), np.zeros(rows, np.uint64)
        for j, column in enumerate(columns):
            shift = bits * (k - 1 - j)
            value = column.astype(np.uint64, copy=False)
            if shift >= 64:
                high |= value << np.uint64(shift - 64)
                continue
            low |= value << np.uint64(shift)
            if shift + bits > 64:
                high |= value >> np.uint64(64 - shift)
        return Keys(low, high if k * bits > 64 else None)

    def unpack(self, keys: Keys, k: int) -> list[np.ndarray]:
        """The ids of k-gram keys, column by column (uint64)."""
        bits, mask = self.bits, np.uint64((1 << self.bits) - 1)
        high = keys.upper()
        columns = []
        for j in range(k):
            shift = bits * (k - 1 - j)
            if shift >= 64:
                columns.append((high >> np.uint64(shift - 64)) & mask)
                continue
            column = keys.low >> np.uint64(shift)
            if shift + bits > 64:
                column |= high << np.uint64(64 - shift)
            columns.append(column & mask)
        return columns

    def suffix(self, keys: Keys, k: int) -> Keys:
        """Keys of the last k-1 ids of k-gram keys."""
        kept = self.bits * (k - 1)
        if kept <= 64:
            return Keys(keys.low & np.uint64((1 << kept) - 1))
        return Keys(keys.low, keys.upper() & np.uint64((1 << (kept - 64)) - 1))

    def prefix(self, keys: Keys, k: int) -> Keys:
        """Keys of the first k-1 ids of k-gram keys (sorted when the keys are)."""
        bits = np.uint64(self.bits)
        if keys.high is None:
            return Keys(keys.low >> bits)
        low = (keys.low >> bits) | (keys.high << np.uint64(64 - self.bits))
        return Keys(low, keys.high >> bits if self.bits * (k - 1) > 64 else None)

    def last(self, keys: Keys) -> np.ndarray:
        """The last id of each key."""
        return keys.low & np.uint64((1 << self.bits) - 1)


def _lengths(starts: np.ndarray, total: int) -> np.ndarray:
    return np.diff(np.append(starts, total))


def _search(table: np.ndarray, queries: np.ndarray, low: np.ndarray, high: np.ndarray) -> np.ndarray:
    """searchsorted of each query within table[low:high] (sorted there), all queries at once."""
    active = np.flatnonzero(low < high)
    while len(active):
        middle = (low[active] + high[active]) // 2
        below = table[middle] < queries[active]
        low[active[below]] = middle[below] + 1
        high[active[~below]] = middle[~below]
        active = active[low[active] < high[active]]
    return low


def _places(table: Keys, ordered: Keys) -> tuple[np.ndarray, np.ndarray]:
    """For sorted queries: where each would be inserted into the sorted distinct `table` (before
    an equal key), and the end of the table's run of keys with the query's high word."""
    if table.high is None:
        return np.searchsorted(table.low, ordered.low), np.full(len(ordered), len(table))
    # Keys with the same high word form one run of the table, sorted by their low word.
    place = np.searchsorted(table.high, ordered.upper(), side="left")
    end = np.searchsorted(table.high, ordered.upper(), side="right")
    return _search(table.low, ordered.low, place, end.copy()), end


def find(table: Keys, queries: Keys) -> np.ndarray:
    """Index of each query in the sorted distinct `table`, -1 where absent. The queries are
    searched in sorted order: binary searches that walk the table in order stay in cache."""
    found = np.full(len(queries), -1, np.int64)
    if not len(table) or not len(queries):
        return found
    order = queries.order()
    ordered = queries[order]
    place, end = _places(table, ordered)
    inside = np.minimum(place, len(table) - 1)
    hit = (place < end) & (table.low[inside] == ordered.low)
    found[order] = np.where(hit, place, -1)
    return found


def insertion_points(table: Keys, sorted_queries: Keys) -> tuple[np.ndarray, np.ndarray]:
    """For sorted distinct queries: where each would be inserted into the sorted distinct
    `table` to keep it sorted, and whether the key there equals it."""
    if not len(table):
        return np.zeros(len(sorted_queries), np.int64), np.zeros(len(sorted_queries), bool)
    place, end = _places(table, sorted_queries)
    inside = np.minimum(place, len(table) - 1)
    return place, (place < end) & (table.low[inside] == sorted_queries.low)


def find_ids(table: np.ndarray, queries: np.ndarray) -> np.ndarray:
    """`find` for one-word keys."""
    return find(Keys(table), Keys(queries))


def count_run(keys: Keys) -> tuple[Keys, np.ndarray]:
    """Distinct keys, sorted, with how often each occurs."""
    keys = Keys(np.sort(keys.low)) if keys.high is None else keys[keys.order()]
    starts = keys.starts()
    return keys[starts], _lengths(starts, len(keys))


def _merge(tables: list[tuple[Keys, np.ndarray]]) -> tuple[Keys, np.ndarray]:
    """One sorted table of distinct keys with summed counts from several. Empties the list, so
    the tables are freed once copied when the caller holds no other reference to them."""
    if len(tables) == 1:
        return tables.pop()
    keys = Keys.concatenate([k for k, _ in tables])
    counts = np.concatenate([c for _, c in tables])
    tables.clear()
    # A stable sort is a merge sort that finds the sorted runs the tables already are.
    order = keys.order(kind="stable")
    keys, counts = keys[order], counts[order]
    starts = keys.starts()
    return keys[starts], np.add.reduceat(counts, starts)


def check_ids(ids: np.ndarray, sentence_lengths: np.ndarray, vocabulary_size: int) -> None:
    """ValueError naming the first position of an id the model cannot take."""
    if (sentence_lengths.size and sentence_lengths.min() < 0) or int(sentence_lengths.sum()) != len(ids):
        raise ValueError(f"sentence lengths add up to {int(sentence_lengths.sum())}, but there are {len(ids)} ids")
    if not len(ids):
        return
    wrong = (ids >= vocabulary_size) | (ids == PAD_ID) | (ids == BOS_ID)
    if ids.dtype.kind == "i":
        wrong |= ids < 0
    if wrong.any():
        at = int(np.argmax(wrong))
        raise ValueError(
            f"id {int(ids[at])} at position {at} cannot be predicted: ids run from 0 to {vocabulary_size - 1} and "
            f"<pad> ({PAD_ID}) and <s> ({BOS_ID}) never occur inside a sentence"
        )


def check_order(order: int, vocabulary_size: int) -> None:
    """ValueError when n-grams of this order over this vocabulary cannot be counted."""
    if vocabulary_size <= EOS_ID:
        raise ValueError(f"a vocabulary holds at least the 4 reserved ids, got {vocabulary_size}")
    keys_format = KeyFormat(vocabulary_size)
    if not 1 <= order <= keys_format.largest_order():
        raise ValueError(
            f"order {order}: the order runs from 1 to {keys_format.largest_order()} for {vocabulary_size} ids "
            f"(n ids of {keys_format.bits} bits make a key of at most 128 bits)"
        )


def windows(ids: np.ndarray, sentence_lengths: np.ndarray, n: int) -> list[np.ndarray]:
    """Columns of the n ids ending at each predicted token (n-1 context ids, then the token)."""
    context, target = ngram_windows(ids, sentence_lengths, n, BOS_ID, EOS_ID)
    return [context[:, j] for j in range(n - 1)] + [target]


def sentence_groups(sentence_lengths: np.ndarray, tokens: int) -> Iterator[tuple[int, int, int, int]]:
    """(first sentence, end sentence, first id, end id) of consecutive groups of about `tokens` ids."""
    ends = np.cumsum(sentence_lengths)
    first, start = 0, 0
    while first < len(sentence_lengths):
        last = max(int(np.searchsorted(ends, start + tokens, side="right")), first + 1)
        end = int(ends[last - 1])
        yield first, last, start, end
        first, start = last, end


@dataclass
class NgramCounter:
    """Counts the k-grams (k = 1..order) of sentences fed batch by batch."""

    order: int
    vocabulary_size: int
    batch_tokens: int = 1 << 20
    _table: tuple[Keys, np.ndarray] | None = None
    _pending: list[tuple[Keys, np.ndarray]] = field(default_factory=list)

    def __post_init__(self) -> None:
        check_order(self.order, self.vocabulary_size)
        self.format = KeyFormat(self.vocabulary_size)

    def add(self, ids: np.ndarray, sentence_lengths: np.ndarray) -> None:
        """Count the n-grams of these sentences (ids laid end to end)."""
        lengths = np.asarray(sentence_lengths, np.int64)
        check_ids(ids, lengths, self.vocabulary_size)
        for first, last, start, end in sentence_groups(lengths, self.batch_tokens):
            keys = self.format.pack(windows(ids[start:end], lengths[first:last], self.order))
            self._pending.append(count_run(keys))
            held = sum(len(k) for k, _ in self._pending)
            if held >= max(self.batch_tokens, 0 if self._table is None else len(self._table[0])):
                self._table = _merge(self._take())

    def _take(self) -> list[tuple[Keys, np.ndarray]]:
        """The table and the pending batch tables, the counter left empty."""
        parts = ([self._table] if self._table else []) + self._pending
        self._table, self._pending = None, []
        return parts

    def totals(self) -> tuple[Keys, np.ndarray]:
        """The distinct n-grams of order n, sorted, with their counts, of what this counter was
        given. Empties the counter."""
        parts = self._take()
        if parts:
            return _merge(parts)
        return self.format.pack([np.empty(0, np.uint64)] * self.order), np.empty(0, np.int64)

    def finish(self) -> Counts:
        """The counts of every order, from 1 to `order`, of what this counter was given."""
        return counts_of_totals([self.totals()], self.order, self.vocabulary_size)


def counts_of_totals(totals: list[tuple[Keys, np.ndarray]], order: int, vocabulary_size: int) -> Counts:
    """The counts of every order, from 1 to `order`, from the totals of order n
    (NgramCounter.totals) in a one-element list, which is emptied: the table of order n is then
    freed once the level built from it holds what it needs. Orders below n: see the module
    docstring."""
    keys, raw = totals.pop()
    keys_format = KeyFormat(vocabulary_size)
    pending: list[tuple[Keys, np.ndarray, np.ndarray | None]] = [(keys, raw, None)]
    del keys, raw
    levels, (keys, raw, continuation) = lower_orders(pending, order, 2, keys_format)
    levels.append(Level.of(1, keys, raw, continuation if levels else None, np.empty(0, np.uint8), keys_format))
    return Counts(vocabulary_size, tuple(reversed(levels)))


def lower_orders(
    pending: list[tuple[Keys, np.ndarray, np.ndarray | None]], top: int, lowest: int, keys_format: KeyFormat
) -> tuple[list[Level], tuple[Keys, np.ndarray, np.ndarray]]:
    """The levels top, top-1, …, lowest from the sorted distinct keys of order `top`, their raw
    counts and their continuation counts (None at the counted order), given in a one-element
    list, which is emptied (each table is freed once the level built from it holds what it
    needs); and the keys, raw and continuation counts of order lowest-1 that they imply. Each
    level's suffixes index those keys of the order below. With top < lowest no level is built:
    the keys and raw counts come back as given, the continuation counts empty."""
    keys, raw, continuation = pending.pop()
    levels = []
    runs = np.zeros(0, np.int64)  # the continuation counts of the order below the last level built
    for k in range(top, lowest - 1, -1):
        suffix = keys_format.suffix(keys, k)
        by_suffix = suffix.order()
        suffix = suffix[by_suffix]
        starts = suffix.starts()
        runs = _lengths(starts, len(suffix))
        # Where each k-gram's last k-1 ids are in the table of order k-1.
        suffixes = np.empty(len(by_suffix), np.min_scalar_type(max(len(starts) - 1, 0)))
        suffixes[by_suffix] = np.repeat(np.arange(len(starts), dtype=suffixes.dtype), runs)
        levels.append(Level.of(k, keys, raw, continuation, suffixes, keys_format))
        keys, continuation = suffix[starts], runs
        raw = np.add.reduceat(raw[by_suffix], starts) if len(starts) else raw[:0]
        del suffix, by_suffix, suffixes
    return levels, (keys, raw, runs)


def _narrow(counts: np.ndarray) -> np.ndarray:
    """Counts in the smallest unsigned type that holds them (sums over them ask for int64)."""
    return counts.astype(np.min_scalar_type(int(counts.max()) if len(counts) else 0))


@dataclass(frozen=True)
class Level:
    """The k-grams of a split, by context then last id, with their counts.

    A k-gram is kept as its context's index and its last id, `local`; the contexts (first k-1
    ids) as full keys, sorted. Lookups search `local`, one word whatever the order."""

    k: int
    raw: np.ndarray  # occurrences
    continuation: np.ndarray | None  # distinct ids seen before it; None at the counted order
    suffixes: np.ndarray  # index in the level below of each k-gram's last k-1 ids (empty for unigrams)
    context_keys: Keys  # distinct first k-1 ids, sorted (none for unigrams: one empty context)
    context_starts: np.ndarray  # index of the first k-gram of each context
    local: np.ndarray  # (context index << bits) | last id, sorted

    @classmethod
    def of(cls, k: int, keys: Keys, raw: np.ndarray, continuation: np.ndarray | None, suffixes: np.ndarray, keys_format: KeyFormat) -> Level:
        """From the sorted distinct keys of the k-grams."""
        counted = (_narrow(raw), None if continuation is None else _narrow(continuation))
        if k == 1:
            return cls(k, *counted, suffixes, keys[:0], np.zeros(min(1, len(keys)), np.int64), keys.low)
        prefix = keys_format.prefix(keys, k)
        starts = prefix.starts()
        if len(starts) >> (64 - keys_format.bits):
            raise ValueError(f"{len(starts):,} contexts of order {k} are too many to index with {keys_format.bits}-bit ids")
        local = np.repeat(np.arange(len(starts), dtype=np.uint64), _lengths(starts, len(keys)))
        local <<= np.uint64(keys_format.bits)
        local |= keys_format.last(keys)
        return cls(k, *counted, suffixes, prefix[starts], starts, local)

    def __len__(self) -> int:
        return len(self.local)

    def counts(self, top: bool) -> np.ndarray:
        """Raw counts for the model's own order, continuation counts below it."""
        if top or self.continuation is None:
            return self.raw
        return self.continuation

    def context_of_entries(self) -> np.ndarray:
        """For each k-gram, the index of its context."""
        return np.repeat(np.arange(len(self.context_starts)), _lengths(self.context_starts, len(self)))

    def keys(self, keys_format: KeyFormat) -> Keys:
        """The k-grams' full keys, sorted."""
        last = keys_format.last(Keys(self.local))
        if self.k == 1:
            return Keys(last)
        context = keys_format.unpack(self.context_keys[self.context_of_entries()], self.k - 1)
        return keys_format.pack(context + [last])


@dataclass(frozen=True)
class Counts:
    """The k-gram tables of one split, k = 1..order (levels[k-1])."""

    vocabulary_size: int
    levels: tuple[Level, ...]

    @property
    def order(self) -> int:
        return len(self.levels)

    @property
    def format(self) -> KeyFormat:
        return KeyFormat(self.vocabulary_size)

    @property
    def tokens(self) -> int:
        """Predicted tokens counted (every sentence's ids and its </s>)."""
        return int(self.levels[0].raw.sum(dtype=np.int64))


def count(ids: np.ndarray, sentence_lengths: np.ndarray, order: int, vocabulary_size: int) -> Counts:
    """The counts of one split held in memory."""
    counter = NgramCounter(order, vocabulary_size)
    counter.add(ids, sentence_lengths)
    return counter.finish()


def count_of_counts(counts: np.ndarray) -> tuple[int, int, int, int]:
    """(n1, n2, n3, n4): how many k-grams have count 1, 2, 3 and 4."""
    n1, n2, n3, n4 = (int(np.count_nonzero(counts == r)) for r in (1, 2, 3, 4))
    return n1, n2, n3, n4


@dataclass(frozen=True)
class Discounts:
    """What is taken from a k-gram's count: D1, D2 and D3+ for counts 1, 2 and >= 3."""

    d1: float
    d2: float
    d3: float
    fallback: bool = False  # the formula could not be used (see the module docstring)

    def of(self, counts: np.ndarray) -> np.ndarray:
        return np.array([0.0, self.d1, self.d2, self.d3])[np.minimum(counts, 3)]


def estimate_discounts(n: tuple[int, int, int, int], smoothing: Smoothing) -> Discounts:
    """Chen and Goodman's discounts from the count-of-counts (n1, n2, n3, n4) of one order."""
    n1, n2, n3, n4 = n
    if n1 == 0:
        return Discounts(FALLBACK_DISCOUNT, FALLBACK_DISCOUNT, FALLBACK_DISCOUNT, fallback=True)
    y = n1 / (n1 + 2 * n2)
    if smoothing == "interpolated":
        return Discounts(y, y, y)
    if min(n2, n3, n4) > 0:
        d1, d2, d3 = 1 - 2 * y * n2 / n1, 2 - 3 * y * n3 / n2, 3 - 4 * y * n4 / n3
        if d2 > 0 and d3 > 0:
            return Discounts(d1, d2, d3)
    return Discounts(y, y, y, fallback=True)


@dataclass(frozen=True)
class Weights:
    """One level of an interpolated model: alpha per k-gram, gamma per context."""

    alpha: np.ndarray
    gamma: np.ndarray  # one value for unigrams
    discounts: Discounts
    count_of_counts: tuple[int, int, int, int]

    @classmethod
    def of(cls, level: Level, top: bool, discounts: Discounts) -> Weights:
        counts = level.counts(top)
        alpha = counts.astype(np.float64)
        taken = discounts.of(counts)
        if level.k == 1:
            total = np.array([alpha.sum()])
            gamma = np.array([taken.sum()]) / total
        else:
            total = np.add.reduceat(alpha, level.context_starts)
            gamma = np.add.reduceat(taken, level.context_starts) / total
        alpha -= taken
        del taken
        alpha /= total if level.k == 1 else np.repeat(total, _lengths(level.context_starts, len(counts)))
        return cls(alpha, gamma, discounts, count_of_counts(counts))


@dataclass(frozen=True)
class Located:
    """Where the k-grams ending at some tokens, and their contexts, are in the count tables."""

    entries: tuple[np.ndarray, ...]  # per k = 1..n: index of the k-gram in levels[k-1], -1 if never seen
    contexts: tuple[np.ndarray, ...]  # per k = 1..n: index in levels[k-1].context_keys, -1 if never seen (0 for k = 1)

    def __len__(self) -> int:
        return len(self.entries[0])


def locate_windows(counts: Counts, columns: Sequence[np.ndarray]) -> Located:
    """Look up the k-grams (k = 1..order) of windows given as n columns of ids, target last.

    A context never seen at order k is never seen at a higher order either (its last k-1 ids
    would have been), so each order looks up only the tokens whose shorter context was seen."""
    n = len(columns)
    if n != counts.order:
        raise ValueError(f"windows of {n} ids for counts of order {counts.order}")
    keys_format = counts.format
    target = columns[-1].astype(np.uint64)
    rows = len(target)
    entries, contexts = [], []
    active = np.arange(rows)
    for k, level in enumerate(counts.levels, start=1):
        context = np.full(rows, -1, np.int64)
        if k == 1:
            context[:] = 0
        else:
            context[active] = find(level.context_keys, keys_format.pack([column[active] for column in columns[n - k : n - 1]]))
            active = active[context[active] >= 0]
        entry = np.full(rows, -1, np.int64)
        local = (context[active].astype(np.uint64) << np.uint64(keys_format.bits)) | target[active]
        entry[active] = find_ids(level.local, local)
        entries.append(entry)
        contexts.append(context)
    return Located(tuple(entries), tuple(contexts))


def _interpolate(weights: Weights, k: int, located: Located, lower: np.ndarray) -> np.ndarray:
    """p at order k from p at order k-1, for located tokens."""
    entry, context = located.entries[k - 1], located.contexts[k - 1]
    seen, known = entry >= 0, context >= 0
    alpha = np.where(seen, weights.alpha[np.where(seen, entry, 0)], 0.0) if len(weights.alpha) else 0.0
    gamma = weights.gamma[np.where(known, context, 0)] if len(weights.gamma) else 0.0
    return np.where(known, alpha + gamma * lower, lower)


@dataclass(frozen=True)
class KneserNey:
    """An interpolated Kneser–Ney model of order len(weights) over the counts of `counts`."""

    counts: Counts
    weights: tuple[Weights, ...]  # per k = 1..order; the last from raw counts, the others from continuation counts

    @property
    def order(self) -> int:
        return len(self.weights)

    def probabilities(self, located: Located) -> np.ndarray:
        """p(token | its order-1 preceding ids) for located tokens (located at this order or above)."""
        p = np.full(len(located), 1.0 / predictable(self.counts.vocabulary_size))
        for k, weights in enumerate(self.weights, start=1):
            p = _interpolate(weights, k, located, p)
        return p

    def entry_probabilities(self, lower: Sequence[np.ndarray] = ()) -> list[np.ndarray]:
        """p of every k-gram of the count tables (k = 1..order), as the model gives it after
        the k-gram's context. `lower` may hold the first levels already computed by a model
        sharing them (one of higher order from the same `estimate_models` call)."""
        levels = self.counts.levels
        found = list(lower[: self.order - 1])
        for k in range(len(found) + 1, self.order + 1):
            weights = self.weights[k - 1]
            if k == 1:
                found.append(weights.alpha + weights.gamma[0] / predictable(self.counts.vocabulary_size))
                continue
            level = levels[k - 1]
            found.append(weights.alpha + weights.gamma[level.context_of_entries()] * found[k - 2][level.suffixes])
        return found


def estimate(counts: Counts, discounts: Sequence[Discounts]) -> KneserNey:
    """The model of order len(discounts) with the given discount of each order."""
    order = len(discounts)
    if not 1 <= order <= counts.order:
        raise ValueError(f"a model of order {order} needs counts of that order; these go up to {counts.order}")
    if not counts.tokens:
        raise ValueError("no tokens to estimate a model from")
    levels = counts.levels
    return KneserNey(counts, tuple(Weights.of(levels[k - 1], k == order, discounts[k - 1]) for k in range(1, order + 1)))


def estimate_models(
    counts: Counts, smoothing: Smoothing, orders: Sequence[int], discounts: Mapping[tuple[int, bool], Discounts] | None = None
) -> dict[int, KneserNey]:
    """Models of several orders from one set of counts; the levels they share (continuation
    counts below each model's order) are estimated once, and are the same objects. `discounts`
    ((k, raw counts or not) -> discounts) replaces those of the counts' own count-of-counts, for
    counts that hold part of the split (steps.ngram_buckets)."""
    if not counts.tokens:
        raise ValueError("no tokens to estimate a model from")
    levels = counts.levels

    def discount(level: Level, top: bool) -> Discounts:
        if discounts is not None:
            return discounts[level.k, top]
        return estimate_discounts(count_of_counts(level.counts(top)), smoothing)

    shared: dict[int, Weights] = {}
    models = {}
    for order in sorted(orders):
        weights = []
        for k in range(1, order + 1):
            level = levels[k - 1]
            if k == order:
                weights.append(Weights.of(level, True, discount(level, True)))
                continue
            if k not in shared:
                shared[k] = Weights.of(level, False, discount(level, False))
            weights.append(shared[k])
        models[order] = KneserNey(counts, tuple(weights))
    return models


def probabilities_by_order(models: dict[int, KneserNey], located: Located) -> dict[int, np.ndarray]:
    """Each model's p for located tokens, the shared lower levels computed once (models as
    `estimate_models` returns them)."""
    highest = models[max(models)]
    for order, model in models.items():
        if any(mine is not theirs for mine, theirs in zip(model.weights[:-1], highest.weights)):
            raise ValueError(f"the model of order {order} does not share its lower orders with the model of order {highest.order}")
    chain = [np.full(len(located), 1.0 / predictable(highest.counts.vocabulary_size))]
    for k in range(1, highest.order):
        chain.append(_interpolate(highest.weights[k - 1], k, located, chain[-1]))
    return {order: _interpolate(model.weights[-1], order, located, chain[order - 1]) for order, model in models.items()}


@dataclass(frozen=True)
class AddOneUnigram:
    """The unigram baseline: (c(w) + 1) / (N + |P|) over the predictable vocabulary, c the train
    counts of predicted tokens. Add-one needs no choice of floor for ids never seen in train."""

    log_probability: np.ndarray  # natural log per id; -inf for <pad> and <s>

    @classmethod
    def of(cls, counts: Counts) -> AddOneUnigram:
        size = counts.vocabulary_size
        unigrams = counts.levels[0]
        tally = np.zeros(size, np.float64)
        tally[unigrams.local.astype(np.int64)] = unigrams.raw
        log_probability = np.log(tally + 1.0) - math.log(tally.sum() + predictable(size))
        log_probability[[PAD_ID, BOS_ID]] = -np.inf
        return cls(log_probability)


@dataclass
class SplitScore:
    """Sums over the predicted tokens of one split, for perplexity per order and seen shares."""

    tokens: int = 0
    log_sums: dict[int, float] = field(default_factory=dict)  # model order -> sum of ln p
    unigram_log_sum: float = 0.0
    seen: dict[int, int] = field(default_factory=dict)  # k -> tokens whose k-gram occurs in the counts

    def perplexity(self, order: int) -> float:
        return math.exp(-self.log_sums[order] / self.tokens) if self.tokens else math.nan

    @property
    def unigram_perplexity(self) -> float:
        return math.exp(-self.unigram_log_sum / self.tokens) if self.tokens else math.nan

    def seen_share(self, k: int) -> float:
        return self.seen[k] / self.tokens if self.tokens else math.nan

    def add(self, models: dict[int, KneserNey], unigram: AddOneUnigram, located: Located, targets: np.ndarray) -> None:
        """Add the tokens of one batch."""
        self.tokens += len(located)
        for order, p in probabilities_by_order(models, located).items():
            self.log_sums[order] = self.log_sums.get(order, 0.0) + float(np.log(p).sum())
        self.unigram_log_sum += float(unigram.log_probability[targets].sum())
        for k, entry in enumerate(located.entries, start=1):
            self.seen[k] = self.seen.get(k, 0) + int((entry >= 0).sum())


def score_split(score: SplitScore, models: dict[int, KneserNey], unigram: AddOneUnigram, ids: np.ndarray, sentence_lengths: np.ndarray) -> None:
    """Add the predicted tokens of these sentences to `score`, a bounded number of tokens at a time."""
    counts = next(iter(models.values())).counts
    lengths = np.asarray(sentence_lengths, np.int64)
    check_ids(ids, lengths, counts.vocabulary_size)
    for first, last, start, end in sentence_groups(lengths, 1 << 20):
        columns = windows(ids[start:end], lengths[first:last], counts.order)
        score.add(models, unigram, locate_windows(counts, columns), columns[-1])


def training_score(models: dict[int, KneserNey], unigram: AddOneUnigram) -> SplitScore:
    """The score of the models on the split they were counted from, from the counts alone: every
    token's window is a k-gram of the tables, so the sum over tokens is a sum over k-grams."""
    orders = sorted(models, reverse=True)
    counts = models[orders[0]].counts
    score = SplitScore(tokens=counts.tokens)
    lower: list[np.ndarray] = []
    for order in orders:
        probabilities = models[order].entry_probabilities(lower)
        lower = probabilities[:-1]
        level = counts.levels[order - 1]
        score.log_sums[order] = float((level.raw * np.log(probabilities[-1])).sum())
    unigrams = counts.levels[0]
    score.unigram_log_sum = float((unigrams.raw * unigram.log_probability[unigrams.local.astype(np.int64)]).sum())
    score.seen = dict.fromkeys(range(1, counts.order + 1), counts.tokens)
    score.log_sums = dict(sorted(score.log_sums.items()))
    return score


def arpa_token(token: str) -> str:
    """A token as one whitespace-free ARPA field: backslash doubled, whitespace as \\uXXXX."""
    return "".join(f"\\u{ord(c):04x}" if c.isspace() else "\\\\" if c == "\\" else c for c in token)


def write_arpa(model: KneserNey, tokens: Sequence[str], out: TextIO, batch: int = 1 << 16) -> dict[int, int]:
    """Write the model in the ARPA back-off format; returns the number of k-grams per order.

    A back-off reader computes p(w | h) as p(hw) when hw is listed, else bow(h) p(w | h') (bow 1
    when h is not listed). Written here: every k-gram of the counts with the interpolated
    probability p_k(w | h); every predictable id as a unigram (those never seen with
    gamma/|P|); and, as contexts only, <s> repeated 1..order-1 times with probability 0
    (log10 -99). The back-off weight of a context h is the share that keeps its distribution
    summing to 1, (1 - sum over listed w of p(w|h)) / (1 - sum over listed w of p(w|h')); for an
    interpolated model, where p(w|h) = alpha(hw) + gamma(h) p(w|h') and the alphas of h sum to
    1 - gamma(h), that share is exactly gamma(h), so an unlisted w gets gamma(h) p(w|h'), the
    interpolated probability. Contexts are those of the model: a sentence's first word follows
    order-1 <s>. Tokens pass through `arpa_token`.
    """
    counts, order = model.counts, model.order
    keys_format = counts.format
    names = np.array([arpa_token(token) for token in tokens], dtype=object)
    probabilities = model.entry_probabilities()
    sections = []
    for k, level in enumerate(counts.levels[:order], start=1):
        log_p, keys = np.log10(probabilities[k - 1]), level.keys(keys_format)
        if k == 1:
            # Every predictable id, those never seen with the uniform share of gamma.
            everyone = np.setdiff1d(np.arange(counts.vocabulary_size, dtype=np.uint64), np.array([PAD_ID, BOS_ID], np.uint64))
            place = find_ids(level.local, everyone)
            unseen = math.log10(model.weights[0].gamma[0] / predictable(counts.vocabulary_size))
            log_p = np.where(place >= 0, log_p[np.maximum(place, 0)], unseen)
            keys = Keys(everyone)
        if k < order:
            starts = keys_format.pack([np.full(1, BOS_ID, np.uint64)] * k)
            keys = Keys.concatenate([keys, starts])
            log_p = np.append(log_p, ARPA_NEVER)
            as_context = find(counts.levels[k].context_keys, keys)
            gamma = model.weights[k].gamma[np.maximum(as_context, 0)]
            backoff = np.where(as_context >= 0, np.log10(gamma), np.nan)
        else:
            backoff = np.full(len(keys), np.nan)
        sections.append((keys, log_p, backoff))
    out.write("\n\\data\\\n")
    for k, (keys, _, _) in enumerate(sections, start=1):
        out.write(f"ngram {k}={len(keys)}\n")
    for k, (keys, log_p, backoff) in enumerate(sections, start=1):
        out.write(f"\n\\{k}-grams:\n")
        for first in range(0, len(keys), batch):
            columns = keys_format.unpack(keys[first : first + batch], k)
            text = names[columns[0].astype(np.int64)]
            for column in columns[1:]:
                text = text + " " + names[column.astype(np.int64)]
            lines = [
                f"{p:.10g}\t{name}" if b != b else f"{p:.10g}\t{name}\t{b:.10g}"
                for p, name, b in zip(log_p[first : first + batch].tolist(), text.tolist(), backoff[first : first + batch].tolist())
            ]
            out.write("\n".join(lines) + "\n")
    out.write("\n\\end\\\n")
    return {k: len(keys) for k, (keys, _, _) in enumerate(sections, start=1)}
