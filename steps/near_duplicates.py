"""Near-duplicates: MinHash signatures of word shingles, locality-sensitive banding, clusters
formed corpus-wide in bounded memory, and the policies that choose which members stay.

Words. A document's words come from its text (or its sentences, or its word tokens, each
string read as if followed by a space) lowercased (Arrow's utf8_lower): a word is a maximal run
of letters, marks and numbers (regex's \\p{L}, \\p{M}, \\p{N}) between whitespace (\\s, \\p{Z});
every other character is deleted, joining its neighbours. Copies that differ only in case,
punctuation or spacing then have the same words: "Don't STOP," and "dont  stop" both read
`dont stop`. Deleting rather than splitting at inner punctuation keeps "e-mail"/"email" and
"U.S."/"US" equal; "well-known"/"well known" differ by one word, an edit the Jaccard threshold
absorbs.

Hashes. One polynomial hashes a run of symbols s_0..s_{L-1}:
mix64((sum_j s_j * C**j mod 2**64) XOR L), C = 0x9E3779B97F4A7C15, mix64 splitmix64's
finalizer. A word's hash runs over its UTF-8 bytes; a run of L consecutive words (a shingle, or
an n-gram in steps.contamination) over their word hashes. Being a polynomial, every run of a
batch comes from one prefix sum (vectorised). A document shorter than the run length has one
run: all its words. A document without words has none: no signature (all slots EMPTY) and no
band keys.

MinHash (Broder 1997). Slot i of a signature is the least (a_i * x + b_i) mod p over the
document's shingles, x the top 32 bits of a shingle hash, p = 2**61 - 1, drawn by numpy's PCG64
seeded with `seed`: b_i from [0, p), a_i = a1 * 2**32 + a0 with a1 from [0, 2**29) and a0 from
[1, 2**31) (half of [1, p): then a1 * x and a0 * x fit 64 bits and the sum is exact in uint64).
The last reduction is the Mersenne fold (v & p) + (v >> 61), congruent to v mod p and equal to
it unless the residue is below 6 (a chance under 2**-58 a value). Two signatures agree in a
slot with probability J, the Jaccard similarity of the shingle sets, so the share of agreeing
slots estimates J with standard error sqrt(J(1-J)/k).

Banding (Leskovec, Rajaraman & Ullman, Mining of Massive Datasets, ch. 3). The k slots form
`bands` bands of `rows` slots; each band is hashed to a 64-bit key (odd; 0 marks a document
without words). Documents sharing a band key are candidates, with probability 1 - (1 - s**r)**b
at similarity s; a candidate pair is confirmed when its signatures agree in at least
`threshold` of their slots; clusters are the connected components of confirmed pairs.

Defaults: 5-word shingles and a 0.8 Jaccard threshold (common practice for near-duplicate
documents); 128 permutations (common practice; standard error 0.035 at J = 0.8, 0.044 at most);
16 bands of 8 rows, whose S-curve threshold (1/16)**(1/8) = 0.71 lies below 0.8 so that the
banding passes 95% of pairs at s = 0.8 and nearly all above, and the confirmation decides.
"""

from __future__ import annotations

import functools
import hashlib
import math
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import regex

from .concurrency import one_ahead

MERSENNE = (1 << 61) - 1
# The multiplier of the run polynomial (odd: invertible mod 2**64) and its inverse.
RUN_BASE = 0x9E3779B97F4A7C15
_RUN_BASE_INVERSE = pow(RUN_BASE, -1, 1 << 64)
EMPTY = np.uint64((1 << 64) - 1)
# Code point classes: letters, marks and numbers make words; whitespace separates them;
# everything else is deleted.
WORD, SPACE = 1, 2
# Shingles handled at once while computing signatures: keeps the per-slot arrays in cache.
BLOCK_SHINGLES = 1 << 15


@dataclass(frozen=True)
class MinHashOptions:
    """Shingle size, permutations, bands and Jaccard threshold (see the module docstring)."""

    shingle: int = 5
    num_perm: int = 128
    bands: int = 16
    threshold: float = 0.8
    seed: int = 1

    def __post_init__(self) -> None:
        if self.shingle < 1 or self.num_perm < 1 or self.bands < 1 or self.num_perm % self.bands:
            raise ValueError(
                f"near-duplicate options: shingle ({self.shingle}) and num_perm ({self.num_perm}) must be at least 1 "
                f"and bands ({self.bands}) must divide num_perm"
            )
        if not 0.0 < self.threshold <= 1.0:
            raise ValueError(f"near-duplicate options: threshold must lie in (0, 1], got {self.threshold}")

    @property
    def rows(self) -> int:
        return self.num_perm // self.bands

    def permutations(self) -> tuple[np.ndarray, np.ndarray]:
        """(a, b): num_perm multipliers a = a1 * 2**32 + a0 with a1 in [0, 2**29) and a0 in
        [1, 2**31), and offsets b in [0, p)."""
        rng = np.random.Generator(np.random.PCG64(self.seed))
        high = rng.integers(0, 1 << 29, self.num_perm, dtype=np.uint64)
        low = rng.integers(1, 1 << 31, self.num_perm, dtype=np.uint64)
        b = rng.integers(0, MERSENNE, self.num_perm, dtype=np.uint64)
        return (high << np.uint64(32)) | low, b


@dataclass(frozen=True)
class Words:
    """The normalised words of a batch of documents: one 64-bit hash a word, documents in
    order; document d holds hashes[starts[d]:starts[d + 1]]."""

    hashes: np.ndarray
    starts: np.ndarray

    @property
    def counts(self) -> np.ndarray:
        return np.diff(self.starts)


def mix64(values: np.ndarray) -> np.ndarray:
    """splitmix64's finalizer over a uint64 array: a bijection that moves every bit."""
    with np.errstate(over="ignore"):
        values = (values ^ (values >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        values = (values ^ (values >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return values ^ (values >> np.uint64(31))


def warm() -> None:
    """Build the code-point class table now: a process that forks jobs (steps.worker) builds it
    once for all of them, where each job would build its own on first use."""
    _classes()


@functools.cache
def _classes() -> np.ndarray:
    """The class of every code point: WORD (regex's \\p{L}, \\p{M}, \\p{N}), SPACE (\\s, \\p{Z})
    or 0 (deleted; surrogates too, which UTF-8 never holds)."""
    points = np.arange(0x110000, dtype=np.uint32)
    valid = np.flatnonzero((points < 0xD800) | (points > 0xDFFF))
    text = points[valid].tobytes().decode("utf-32-le")
    classes = np.zeros(0x110000, dtype=np.uint8)
    for pattern, value in ((r"[\p{L}\p{M}\p{N}]+", WORD), (r"[\s\p{Z}]+", SPACE)):
        for match in regex.finditer(pattern, text):
            classes[valid[match.start() : match.end()]] = value
    return classes


def _strings(documents: pa.Array | pa.ChunkedArray) -> tuple[pa.Array, np.ndarray]:
    """(strings, owners): the strings of the documents (texts, sentences or tokens, however
    deeply listed) and the document each belongs to."""
    if isinstance(documents, pa.ChunkedArray):
        documents = documents.combine_chunks()
    strings, owners = documents, np.arange(len(documents))
    while pa.types.is_list(strings.type) or pa.types.is_large_list(strings.type):
        owners = owners[pc.list_parent_indices(strings).to_numpy()]
        strings = pc.list_flatten(strings)
    return strings, owners


def _string_buffers(strings: pa.Array) -> tuple[np.ndarray, np.ndarray]:
    """(offsets, data) of a string array, offsets relative to data, without copying data."""
    width = np.int64 if pa.types.is_large_string(strings.type) else np.int32
    offsets = np.frombuffer(strings.buffers()[1], dtype=width)[strings.offset : strings.offset + len(strings) + 1].astype(np.int64)
    data = strings.buffers()[2]
    return offsets, np.frombuffer(data, dtype=np.uint8) if data is not None else np.zeros(0, np.uint8)


def _byte_classes(data: np.ndarray) -> np.ndarray:
    """The class of each byte of UTF-8 text: that of the code point it belongs to."""
    classes = _classes()
    found = classes[np.minimum(data, 0x7F)]
    if data.max(initial=0) < 0x80:
        return found
    lead = np.flatnonzero(data >= 0xC0)
    first = data[lead].astype(np.uint32)
    after = [data[np.minimum(lead + k, len(data) - 1)].astype(np.uint32) & 0x3F for k in (1, 2, 3)]
    point = np.where(
        first >= 0xF0,
        ((first & 0x07) << 18) | (after[0] << 12) | (after[1] << 6) | after[2],
        np.where(first >= 0xE0, ((first & 0x0F) << 12) | (after[0] << 6) | after[1], ((first & 0x1F) << 6) | after[0]),
    )
    lead_classes = classes[np.minimum(point, 0x10FFFF)]
    found[lead] = lead_classes
    inner = np.flatnonzero((data & 0xC0) == 0x80)
    found[inner] = lead_classes[np.searchsorted(lead, inner, side="right") - 1] if len(lead) else 0
    return found


def _run_hash(symbols: np.ndarray, first: np.ndarray, size: np.ndarray) -> np.ndarray:
    """mix64((sum_j symbols[first + j] * C**j mod 2**64) XOR size) for each run (first, size)
    of a uint64 symbol array, from one prefix sum."""
    total = len(symbols)
    prefix = np.zeros(total + 1, dtype=np.uint64)
    size = size.astype(np.uint64)
    with np.errstate(over="ignore"):
        np.cumsum(symbols * _powers(RUN_BASE, total), out=prefix[1:])
        window = (prefix[first + size.astype(np.int64)] - prefix[first]) * _powers(_RUN_BASE_INVERSE, total + 1)[first]
    return mix64(window ^ size)


def _powers(base: int, count: int) -> np.ndarray:
    """base**0 .. base**(count-1) mod 2**64: a view of a table kept for later calls, up to
    2**22 of them (32 MB); more, for one very long string, are computed each time."""
    size = max(1 << 16, 1 << (count - 1).bit_length())
    return (_power_table(base, size) if size <= 1 << 22 else _power_table.__wrapped__(base, size))[:count]


@functools.cache
def _power_table(base: int, size: int) -> np.ndarray:
    values = np.full(size, base, dtype=np.uint64)
    values[0] = 1
    with np.errstate(over="ignore"):
        return np.cumprod(values, dtype=np.uint64)


def _slice_words(strings: pa.Array) -> tuple[np.ndarray, np.ndarray]:
    """(hashes, string): the hash of each word of lowercased strings, in order, and the string
    it lies in. A word is a maximal run of WORD bytes not broken by a SPACE byte or a string's
    end; deleted bytes join their neighbours."""
    offsets, data = _string_buffers(strings)
    data = data[offsets[0] : offsets[-1]]
    offsets = offsets - offsets[0]
    classes = _byte_classes(data)
    kept = np.flatnonzero(classes)
    opens = np.zeros(len(data), dtype=bool)
    opens[offsets[:-1][offsets[:-1] < len(data)]] = True
    string_number = np.cumsum(opens)[kept]
    word = classes[kept] == WORD
    begins = word.copy()
    begins[1:] &= ~(word[:-1] & (string_number[1:] == string_number[:-1]))
    word_bytes = kept[word]
    starts = np.flatnonzero(begins[word])
    sizes = np.diff(np.append(starts, len(word_bytes)))
    hashes = _run_hash(data[word_bytes].astype(np.uint64), starts, sizes)
    # The k-th string start met is that of the k-th string holding bytes.
    filled = np.flatnonzero(np.diff(offsets) > 0)
    return hashes, filled[string_number[word][starts] - 1]


# Bytes of text handled at once while finding words (cut at string ends): bounds the memory of
# the per-byte arrays, about 40 bytes a byte, but for a single longer string (a token or
# sentence longer than this), handled whole.
SLICE_BYTES = 1 << 20


def document_words(documents: pa.Array | pa.ChunkedArray) -> Words:
    """The word hashes of a batch of documents: texts (string), sentences (list<string>) or
    sentences of tokens (list<list<string>>); tokens and sentences are separated as by spaces."""
    strings, owners = _strings(documents)
    strings = pc.utf8_lower(strings)
    offsets, _ = _string_buffers(strings)
    hashes, word_owner = [], []
    low = 0
    while low < len(strings):
        high = max(low + 1, int(np.searchsorted(offsets, offsets[low] + SLICE_BYTES, side="right")) - 1)
        high = min(high, len(strings))
        found, string = _slice_words(strings.slice(low, high - low))
        hashes.append(found)
        word_owner.append(owners[low + string])
        low = high
    owner = np.concatenate(word_owner) if word_owner else np.zeros(0, dtype=np.int64)
    starts = np.zeros(len(documents) + 1, dtype=np.int64)
    np.cumsum(np.bincount(owner, minlength=len(documents)), out=starts[1:])
    return Words(np.concatenate(hashes) if hashes else np.zeros(0, dtype=np.uint64), starts)


def run_hashes(words: Words, length: int) -> tuple[np.ndarray, np.ndarray]:
    """(hashes, starts): the hashes of every run of `length` consecutive words inside each
    document (one run of all its words when it has fewer), documents in order; document d
    holds hashes[starts[d]:starts[d + 1]]."""
    counts = words.counts
    runs = np.where(counts >= length, counts - length + 1, np.minimum(counts, 1))
    starts = np.zeros(len(counts) + 1, dtype=np.int64)
    np.cumsum(runs, out=starts[1:])
    first = np.repeat(words.starts[:-1], runs) + (np.arange(starts[-1]) - np.repeat(starts[:-1], runs))
    size = np.repeat(np.minimum(counts, length), runs)
    return _run_hash(words.hashes, first, size), starts


def signatures(words: Words, options: MinHashOptions = MinHashOptions()) -> np.ndarray:
    """(documents, num_perm) uint64 MinHash signatures; rows of documents without words are
    EMPTY throughout."""
    shingles, starts = run_hashes(words, options.shingle)
    a, b = options.permutations()
    documents = len(starts) - 1
    result = np.full((documents, options.num_perm), EMPTY, dtype=np.uint64)
    present = np.flatnonzero(np.diff(starts) > 0)
    if not len(present):
        return result
    x = shingles >> np.uint64(32)
    a_high, a_low = a >> np.uint64(32), a & np.uint64(0xFFFFFFFF)
    low, mask, shift = 0, np.uint64(MERSENNE), np.uint64(61)
    while low < len(present):
        # The documents of this block: whole documents, about BLOCK_SHINGLES shingles.
        high = max(low + 1, int(np.searchsorted(starts[present], starts[present[low]] + BLOCK_SHINGLES, side="right")) - 1)
        high = min(high, len(present))
        block = present[low:high]
        first, last = starts[block[0]], starts[block[-1] + 1]
        values, local = x[first:last], starts[block] - first
        upper, total, folded = np.empty_like(values), np.empty_like(values), np.empty_like(values)
        out = np.empty((options.num_perm, len(block)), dtype=np.uint64)
        with np.errstate(over="ignore"):
            for slot in range(options.num_perm):
                # a * x = (a1 * x) * 2**32 + a0 * x; (a1 * x) * 2**32 mod p rotates the 61 bits
                # of a1 * x left by 32 (2**61 = 1 mod p); the sum stays below 2**64.
                np.multiply(values, a_high[slot], out=upper)
                np.left_shift(upper, np.uint64(32), out=total)
                total &= mask
                upper >>= np.uint64(29)
                total |= upper
                np.multiply(values, a_low[slot], out=upper)
                total += upper
                total += b[slot]
                np.bitwise_and(total, mask, out=folded)
                total >>= shift
                folded += total
                out[slot] = np.minimum.reduceat(folded, local)
        result[block] = out.T
        low = high
    return result


def band_keys(signatures: np.ndarray, bands: int) -> np.ndarray:
    """(documents, bands) uint64 keys: band j of a signature hashed with j (odd), 0 for a
    document without words."""
    documents, slots = signatures.shape
    rows = slots // bands
    grouped = signatures.reshape(documents, bands, rows)
    keys = np.broadcast_to(mix64(np.arange(bands, dtype=np.uint64)), (documents, bands)).copy()
    for row in range(rows):
        keys = mix64(keys ^ grouped[:, :, row])
    keys |= np.uint64(1)
    keys[signatures[:, 0] == EMPTY] = 0
    return keys


def signature_digests(keys: np.ndarray) -> np.ndarray:
    """One uint64 a document from its band keys: equal digests mean equal signatures (up to a
    2**-64 chance), i.e. an estimated Jaccard of 1; 0 for a document without words."""
    digest = np.zeros(len(keys), dtype=np.uint64)
    for band in range(keys.shape[1]):
        digest = mix64(digest ^ keys[:, band])
    digest |= np.uint64(1)
    digest[keys[:, 0] == 0] = 0
    return digest


def verification(signatures: np.ndarray) -> np.ndarray:
    """The low 16 bits of each slot, kept to confirm candidates (num_perm * 2 bytes a
    document). Unequal slots agree by chance with probability 2**-16, raising an estimate by
    at most (1 - J) * 2**-16."""
    return signatures.astype(np.uint16)


def estimated_jaccard(first: np.ndarray, second: np.ndarray) -> np.ndarray:
    """The share of agreeing slots of paired signature rows."""
    return np.mean(first == second, axis=-1)


def detection_probability(similarity: float, options: MinHashOptions = MinHashOptions()) -> float:
    """The chance that a pair at Jaccard `similarity` is detected (shares a band and agrees in
    at least `threshold` of its slots), slots agreeing independently with probability s."""
    s, r = similarity, options.rows
    need = math.ceil(options.threshold * options.num_perm - 1e-9)
    band = [math.comb(r, m) * s**m * (1 - s) ** (r - m) for m in range(r + 1)]
    # states[c][f]: probability of c agreeing slots so far, f = whether some band agreed fully.
    states = np.zeros((options.num_perm + 1, 2))
    states[0, 0] = 1.0
    for _ in range(options.bands):
        nxt = np.zeros_like(states)
        for m, p in enumerate(band):
            if m == r:
                nxt[m:, 1] += p * (states[: len(states) - m, 0] + states[: len(states) - m, 1])
            else:
                nxt[m:, :] += p * states[: len(states) - m, :]
        states = nxt
    return float(states[need:, 1].sum())


class UnionFind:
    """Disjoint sets over rows 0..n-1, vectorised: a root is always the least row of its set,
    so the final labels do not depend on the order pairs arrive in. 8 bytes a row."""

    def __init__(self, size: int) -> None:
        self.parent = np.arange(size, dtype=np.int64)

    def roots(self, rows: np.ndarray) -> np.ndarray:
        found = self.parent[rows]
        while True:
            above = self.parent[found]
            if np.array_equal(above, found):
                return found
            found = above

    def union(self, first: np.ndarray, second: np.ndarray) -> None:
        """Join the sets of each pair (first[i], second[i])."""
        while len(first):
            a, b = self.roots(first), self.roots(second)
            apart = a != b
            first, second, a, b = first[apart], second[apart], a[apart], b[apart]
            if not len(first):
                return
            np.minimum.at(self.parent, np.maximum(a, b), np.minimum(a, b))
            touched = np.concatenate([first, second])
            self.parent[touched] = self.roots(touched)

    def labels(self) -> np.ndarray:
        """Every row's set, named by its least row."""
        return self.roots(np.arange(len(self.parent)))


@dataclass
class ClusterStats:
    """What the clustering did: candidate pairs compared, pairs confirmed, and band runs with
    more distinct signatures than the limit (compared only with their first and previous
    member, so the growth guarantee may not hold for them)."""

    compared: int = 0
    confirmed: int = 0
    long_runs: int = 0


# Distinct signatures sharing one band key that are all compared with each other.
RUN_LIMIT = 64
# Candidate pairs confirmed at once: bounds the signatures fetched to twice as many rows.
PAIR_BLOCK = 1 << 16


def _runs(keys: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(members, run_starts): the rows whose nonzero key some other row shares, grouped by key
    (run r = members[run_starts[r]:run_starts[r + 1]]). Keys are compared by their top 64 - w
    bits, w the bits of a row number, so that one sort of key bits and row together groups
    them (a plain sort is several times faster than an argsort); keys that agree there by
    chance, about n**2 / 2**(65 - w) pairs, only cost a comparison of signatures."""
    width = np.uint64(max(1, (len(keys) - 1).bit_length()))
    rows = np.flatnonzero(keys)
    packed = keys[rows]
    packed >>= width
    packed <<= width
    packed |= rows.view(np.uint64)  # in place: this runs for every band, beside the next band's
    del rows
    packed.sort()
    prefix = packed >> width
    same = prefix[1:] == prefix[:-1]
    inside = np.zeros(len(packed), dtype=bool)
    inside[1:] |= same
    inside[:-1] |= same
    positions = np.flatnonzero(inside)
    opens = np.ones(len(positions), dtype=bool)
    opens[1:] = ~same[positions[1:] - 1]
    members = (packed[positions] & ((np.uint64(1) << width) - np.uint64(1))).astype(np.int64)
    return members, np.append(np.flatnonzero(opens), len(positions))


def _open_runs(found: UnionFind, members: np.ndarray, run_starts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The runs whose members are not all joined yet: the others need no pair."""
    if not len(members):
        return members, run_starts
    roots = found.roots(members)
    open_run = np.minimum.reduceat(roots, run_starts[:-1]) != np.maximum.reduceat(roots, run_starts[:-1])
    run_of = np.repeat(np.arange(len(open_run)), np.diff(run_starts))
    members, run_of = members[open_run[run_of]], run_of[open_run[run_of]]
    opens = np.ones(len(members), dtype=bool)
    opens[1:] = run_of[1:] != run_of[:-1]
    return members, np.append(np.flatnonzero(opens), len(members))


def _run_pairs(members: np.ndarray, run_starts: np.ndarray, limit: int, stats: ClusterStats) -> Iterator[np.ndarray]:
    """Candidate pairs among runs of `members` (rows ascending in each), a batch at a time: in
    runs of at most `limit` members every pair, by the gap between the two members (gap 1
    first, so most later pairs are already joined and never fetched); in longer runs each
    member with the run's first and with its predecessor."""
    sizes = np.diff(run_starts)
    run_of = np.repeat(np.arange(len(sizes)), sizes)
    position = np.arange(len(members))
    end = run_starts[1:][run_of]
    small = sizes[run_of] <= limit
    for gap in range(1, int(min(sizes.max(initial=1), limit))):
        take = np.flatnonzero(small & (position + gap < end))
        if not len(take):
            break
        yield np.stack([members[take], members[take + gap]], axis=1)
    big = np.flatnonzero(~small & (position > run_starts[:-1][run_of]))
    if len(big):
        stats.long_runs += int(np.count_nonzero(sizes > limit))
        yield np.stack([members[run_starts[:-1][run_of[big]]], members[big]], axis=1)
        yield np.stack([members[big - 1], members[big]], axis=1)


def _pair_codes(pairs: np.ndarray) -> np.ndarray:
    """One uint64 a pair of rows (below 2**32), whichever comes first."""
    low, high = np.minimum(pairs[:, 0], pairs[:, 1]), np.maximum(pairs[:, 0], pairs[:, 1])
    return (low.astype(np.uint64) << np.uint64(32)) | high.astype(np.uint64)


def _confirm(
    found: UnionFind, pairs: np.ndarray, rejected: np.ndarray, signatures_of: Callable[[np.ndarray], np.ndarray], threshold: float, stats: ClusterStats
) -> np.ndarray:
    """Join the pairs, neither joined yet nor rejected before (`rejected`: sorted pair codes),
    whose signatures agree in >= threshold of their slots, PAIR_BLOCK pairs at a time; returns
    the codes of the pairs rejected now."""
    failed = []
    for low in range(0, len(pairs), PAIR_BLOCK):
        block = pairs[low : low + PAIR_BLOCK]
        block = block[found.roots(block[:, 0]) != found.roots(block[:, 1])]
        codes = _pair_codes(block)
        if len(rejected):
            seen = rejected[np.minimum(np.searchsorted(rejected, codes), len(rejected) - 1)] == codes
            block, codes = block[~seen], codes[~seen]
        if not len(block):
            continue
        agree = estimated_jaccard(signatures_of(block[:, 0]), signatures_of(block[:, 1])) >= threshold
        stats.compared += len(block)
        stats.confirmed += int(agree.sum())
        found.union(block[agree, 0], block[agree, 1])
        failed.append(codes[~agree])
    return np.concatenate(failed) if failed else np.zeros(0, dtype=np.uint64)


def cluster(
    band_columns: Iterable[np.ndarray],
    digests: np.ndarray,
    signatures_of: Callable[[np.ndarray], np.ndarray],
    threshold: float,
    limit: int = RUN_LIMIT,
) -> tuple[UnionFind, ClusterStats]:
    """Clusters over all documents (rows 0..n-1) from their band keys, one band column at a
    time, and their signature digests (rows below 2**32). Rows with equal digests are joined
    directly and one of them stands for all. In each band, the standing rows sharing a key form
    a run; runs already joined are skipped, the others paired, and a pair neither joined nor
    rejected in an earlier band is confirmed by fetching both signatures (`signatures_of(rows)`
    returns their rows, any dtype) and comparing slots. Memory: about 60 bytes a document (the
    digests, the union-find, one band column and its sorted copy, the next band column as it is
    read, the runs and a batch of candidate pairs, at most one a document), 8 bytes a rejected
    pair, and the signatures of PAIR_BLOCK pairs (32 MB of 16-bit slots)."""
    found = UnionFind(len(digests))
    stats = ClusterStats()
    rows, run_starts = _runs(digests)
    same = np.flatnonzero(np.diff(np.repeat(np.arange(len(run_starts) - 1), np.diff(run_starts))) == 0)
    found.union(rows[same], rows[same + 1])
    # One row stands for each digest: the others have its signature, hence its pairs.
    standing = np.ones(len(digests), dtype=bool)
    standing[rows[same + 1]] = False
    rejected = np.zeros(0, dtype=np.uint64)

    def standing_runs(keys: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return _runs(np.where(standing, keys, np.uint64(0)))

    # The next band is sorted in a second thread while this thread confirms this band's pairs
    # and then reads the band after it (Parquet decodes without the interpreter lock).
    for runs in one_ahead(band_columns, standing_runs):
        members, run_starts = _open_runs(found, *runs)
        failed = [_confirm(found, pairs, rejected, signatures_of, threshold, stats) for pairs in _run_pairs(members, run_starts, limit, stats)]
        rejected = np.sort(np.concatenate([rejected, *failed]), kind="stable")
    return found, stats


# Policies. Only the members of clusters (two or more documents) take part.
#
# Rule. A cluster's anchor is its member with the least rank (`anchor_ranks`: a salted hash of
# the content fingerprint; ties, which only exact copies share, go to the earliest corpus
# position). "drop" keeps the anchor alone; "same_split" keeps the members whose own split (the
# salted content split of steps.split) is the anchor's. Either way a kept document stays in its
# own split.
#
# Guarantee, while clusters only merge as documents are added (the confirmed pairs depend on
# the two documents alone; so whenever no band run exceeds RUN_LIMIT distinct signatures):
# 1. adding documents never moves a kept document to another split;
# 2. a document kept before is dropped after only when its cluster's anchor changed to a member
#    of smaller rank: a new document, or the anchor of an old cluster merged into its own by new
#    documents (one new document near two old ones joins them); under same_split only when that
#    anchor's split is not its own;
# 3. under drop a dropped document is never kept again (its cluster's least rank only falls);
#    under same_split it returns when a new anchor lies in its split.
# Why same_split drops rather than moves: a rule computed from the current corpus alone keeps a
# document that has no near-duplicate in its own split; once a near-duplicate in another split
# joins it, keeping both in one split would move one of them, so no such rule can both keep every
# member and never move a kept one.


def anchor_ranks(fingerprints: np.ndarray, salt: str) -> np.ndarray:
    """The rank of each document in its cluster from its 16-byte content fingerprint ((n, 16)
    uint8, or (n, 2) uint64 as steps.split.CorpusRows holds them): the two little-endian words
    w0, w1 keyed by k0, k1 = BLAKE2b-16 of the salt (personalised "anchor"), as
    mix64(mix64(w0 ^ k0) ^ w1 ^ k1). A function of the content and the salt alone, and not the
    split draw's, so anchors land in each split as often as single documents do."""
    key = hashlib.blake2b(salt.encode("utf-8"), digest_size=16, person=b"anchor").digest()
    k0, k1 = np.frombuffer(key, dtype="<u8").astype(np.uint64)
    words = np.ascontiguousarray(fingerprints).view("<u8").reshape(-1, 2).astype(np.uint64)
    return mix64(mix64(words[:, 0] ^ k0) ^ words[:, 1] ^ k1)


def cluster_anchors(labels: np.ndarray, ranks: np.ndarray, positions: np.ndarray) -> np.ndarray:
    """For each member, the index (into these arrays) of its cluster's anchor: the least
    (rank, position) among the members sharing its label."""
    order = np.lexsort((positions, ranks, labels))
    ordered = labels[order]
    opens = np.concatenate([[True], ordered[1:] != ordered[:-1]]) if len(order) else np.zeros(0, dtype=bool)
    group = np.cumsum(opens) - 1
    anchors = np.empty(len(order), dtype=np.int64)
    anchors[order] = order[np.flatnonzero(opens)][group]
    return anchors


def drop_policy(labels: np.ndarray, ranks: np.ndarray, positions: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(keep, anchor) for cluster members under "drop": only each cluster's anchor is kept;
    the others are dropped as near-duplicates of it."""
    anchors = cluster_anchors(labels, ranks, positions)
    return anchors == np.arange(len(anchors)), anchors


def same_split_policy(labels: np.ndarray, ranks: np.ndarray, positions: np.ndarray, splits: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(keep, anchor) for cluster members under "same_split": members in their anchor's split
    are kept (in it); the others are dropped as near-duplicates across splits."""
    anchors = cluster_anchors(labels, ranks, positions)
    splits = np.asarray(splits)
    return splits == splits[anchors], anchors
