"""Contamination: how much of each dev or test document also occurs in train, by shared word
n-grams.

A document's grams are `steps.near_duplicates.run_hashes(words, n)`: the hashes of its runs of
n consecutive words (the same normalised words as for near-duplicates, so case, punctuation and
spacing do not hide a copy). A document shorter than n words has one gram, all its words, which
only a train document of exactly those words shares. A document's share is the number of its
grams (counted where they occur, a repeated gram each time) found among the train grams over the
number of its grams; a document without words has no share (NaN). n = 13 is common practice for decontaminating evaluation sets: a run
of 13 words rarely recurs by chance in natural text.

The train grams are kept exactly: a sorted array of distinct uint64 hashes, 8 bytes a distinct
train gram, built by sorting each batch and merging the sorted batches into the set once they
add up to the set's size (so each hash takes part in few merges; a merge holds twice the set). For bounded memory the hash
space splits into `parts` equal ranges (`part_of`); a job holds one part's set at a time and
adds the shared counts of all parts up. Two different grams share a hash with probability
2**-64, so a share counts a false match with a chance of about (distinct train grams) * 2**-64
a gram.
"""

from __future__ import annotations

import math

import numpy as np

NGRAM = 13
# A document at or above this share is listed as contaminated (and dropped when the option to
# drop them is on): most of its text then occurs in train.
THRESHOLD = 0.5
QUANTILES = (0.5, 0.9, 0.99)


def part_of(hashes: np.ndarray, parts: int) -> np.ndarray:
    """The part of each hash: parts split [0, 2**64) into equal ranges."""
    inner = np.array([-(-(p << 64) // parts) for p in range(1, parts)], dtype=np.uint64)
    return np.searchsorted(inner, hashes, side="right")


def distinct_sorted(grams: np.ndarray) -> np.ndarray:
    """The distinct values of a hash array, ascending: what a prepare job keeps of its train
    grams (a sort and a comparison; numpy's unique is many times slower on uint64)."""
    ordered = np.sort(grams)
    keep = np.ones(len(ordered), dtype=bool)
    keep[1:] = ordered[1:] != ordered[:-1]
    return ordered[keep]


def _merge(runs: list[np.ndarray]) -> np.ndarray:
    """The distinct values of sorted arrays, sorted (a stable sort merges sorted runs)."""
    merged = np.concatenate(runs)
    merged.sort(kind="stable")
    keep = np.ones(len(merged), dtype=bool)
    keep[1:] = merged[1:] != merged[:-1]
    return merged[keep]


# Values handled at once by SortedHashes: bounds its temporaries (about 40 bytes a value).
LOOKUP_BLOCK = 1 << 20


class SortedHashes:
    """A sorted array of distinct uint64 hashes to test many values against. A bit table over the
    hashes' top bits (at most 32 MiB) rules most absent values out with one lookup each; only
    the values it lets through are searched for in the array."""

    def __init__(self, distinct: np.ndarray) -> None:
        self.distinct = distinct
        self.bits = min(max(len(distinct).bit_length() + 6, 16), 28)
        table = np.zeros(1 << (self.bits - 3), dtype=np.uint8)
        for low in range(0, len(distinct), LOOKUP_BLOCK):
            slots = distinct[low : low + LOOKUP_BLOCK] >> np.uint64(64 - self.bits)
            np.bitwise_or.at(table, slots >> np.uint64(3), np.left_shift(np.uint8(1), (slots & np.uint64(7)).astype(np.uint8)))
        self.table = table

    def _passed(self, values: np.ndarray) -> np.ndarray:
        """Positions of the values the bit table does not rule out."""
        slots = values >> np.uint64(64 - self.bits)
        return np.flatnonzero((self.table[slots >> np.uint64(3)] >> (slots & np.uint64(7)).astype(np.uint8)) & 1)

    def _present(self, candidates: np.ndarray) -> np.ndarray:
        at = np.minimum(np.searchsorted(self.distinct, candidates), len(self.distinct) - 1)
        return self.distinct[at] == candidates

    def contains(self, values: np.ndarray) -> np.ndarray:
        """Whether each value is one of the hashes."""
        found = np.zeros(len(values), dtype=bool)
        if not len(self.distinct):
            return found
        for low in range(0, len(values), LOOKUP_BLOCK):
            block = values[low : low + LOOKUP_BLOCK]
            maybe = self._passed(block)
            found[low + maybe] = self._present(block[maybe])
        return found

    def common(self, values: np.ndarray) -> np.ndarray:
        """The distinct values that are among the hashes, ascending. Searched in ascending order,
        neighbouring searches share their path through the array: several times faster than
        `contains` when many values pass the table."""
        if not len(self.distinct) or not len(values):
            return np.zeros(0, dtype=np.uint64)
        found = [distinct_sorted(block[self._passed(block)]) for block in np.split(values, range(LOOKUP_BLOCK, len(values), LOOKUP_BLOCK))]
        candidates = found[0] if len(found) == 1 else distinct_sorted(np.concatenate(found))
        return candidates[self._present(candidates)]


# Hashes held in sorted batches before they are merged into the set: merging only once the
# batches add up to this many or to the set's size keeps each hash in few merges.
PENDING = 1 << 22


class TrainGrams:
    """The distinct train gram hashes of one part of the hash space, gathered batch by batch.
    Memory: the set (8 bytes a distinct gram) plus at most max(`pending`, set size) pending
    hashes, twice that while merging."""

    def __init__(self, part: int = 0, parts: int = 1, pending: int = PENDING) -> None:
        self.part, self.parts, self.budget = part, parts, pending
        self.merged = np.zeros(0, dtype=np.uint64)
        self.pending: list[np.ndarray] = []
        self.held = 0

    def add(self, grams: np.ndarray) -> None:
        """Take in a batch of train gram hashes (any order, repeats allowed)."""
        if self.parts > 1:
            grams = grams[part_of(grams, self.parts) == self.part]
        self.pending.append(distinct_sorted(grams))
        self.held += len(self.pending[-1])
        if self.held >= max(self.budget, len(self.merged)):
            self._merge()

    def _merge(self) -> None:
        self.merged = _merge([self.merged, *self.pending])
        self.pending, self.held = [], 0

    def finish(self) -> np.ndarray:
        """The sorted distinct hashes gathered."""
        if self.pending:
            self._merge()
        return self.merged


def shared_counts(grams: np.ndarray, starts: np.ndarray, train: np.ndarray) -> np.ndarray:
    """How many of each document's grams (`run_hashes`, document d holding
    grams[starts[d]:starts[d + 1]]) occur in `train`, sorted distinct train grams (of the whole
    hash space or of one part: grams of other parts are then never found)."""
    found = SortedHashes(train).contains(grams)
    totals = np.concatenate([[0], np.cumsum(found)])
    return totals[starts[1:]] - totals[starts[:-1]]


def shares(shared: np.ndarray, starts: np.ndarray) -> np.ndarray:
    """Each document's share of grams found in train; NaN without words."""
    totals = np.diff(starts)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(totals > 0, shared / np.maximum(totals, 1), math.nan)


def summary(values: np.ndarray, sources: list[str] | np.ndarray, threshold: float = THRESHOLD) -> dict:
    """The distribution of dev/test shares (quantiles, mean, a histogram of ten equal bins
    over [0, 1], documents with any shared gram and at or above `threshold`), overall and per
    source file. Documents without words are counted apart."""

    def describe(share: np.ndarray) -> dict:
        scored = share[~np.isnan(share)]
        return {
            "documents": len(share),
            "without_words": int(len(share) - len(scored)),
            "with_shared_gram": int(np.count_nonzero(scored > 0)),
            "at_or_above_threshold": int(np.count_nonzero(scored >= threshold)),
            "mean": round(float(scored.mean()), 6) if len(scored) else None,
            "quantiles": {str(q): round(float(np.quantile(scored, q)), 6) for q in QUANTILES} if len(scored) else {},
            "max": round(float(scored.max()), 6) if len(scored) else None,
        }

    values = np.asarray(values, dtype=np.float64)
    sources = np.asarray(sources, dtype=object)
    overall = describe(values)
    scored = values[~np.isnan(values)]
    overall["histogram"] = np.histogram(scored, bins=10, range=(0.0, 1.0))[0].tolist()
    if not len(sources):
        return {"threshold": threshold, **overall, "by_source": {}}
    names, codes = np.unique(sources, return_inverse=True)
    order = np.argsort(codes, kind="stable")
    groups = np.split(values[order], np.flatnonzero(np.diff(codes[order])) + 1)
    return {"threshold": threshold, **overall, "by_source": {str(name): describe(group) for name, group in zip(names, groups)}}
