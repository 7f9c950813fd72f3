"""Split: train/dev/test by a salted hash of a document key, shard parts by a hash of the
document id, and removal of exact duplicates.

A document's split depends only on its key (by default its cleaned text) and the salt, so
adding documents never moves existing ones, and exact duplicates always land together.
Its shard part depends only on its id: parts are equal ranges of the unseeded 64-bit
`doc_hash`, so prepared chunks stored in `doc_hash` order give each part a contiguous slice.
Duplicates are then removed across the whole corpus: the first by (path, offset) is kept.
"""

from __future__ import annotations

import argparse
import hashlib
from collections.abc import Sequence

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from steps.layout import SPLITS
from steps.storage import write_table
from steps.vocab import COUNTS_SCHEMA, count_tokens, sum_counts

_TWO_64 = float(1 << 64)

DUPLICATES_SCHEMA = pa.schema(
    [("source", pa.string()), ("offset", pa.int64()), ("doc_id", pa.string()), ("duplicate_of", pa.string())]
)


def fingerprint(text: str) -> bytes:
    """16-byte content hash of a cleaned document (exact-duplicate detection)."""
    return hashlib.blake2b(text.encode("utf-8"), digest_size=16).digest()


def split_position(key: bytes, salt: str) -> float:
    """A uniform number in [0, 1] drawn from the key and the salt (1.0 only for the largest
    hashes, where the float division rounds up). The salt is BLAKE2b's key, which holds at
    most 64 bytes: a longer salt is hashed to 64 bytes first, so every byte of it counts."""
    secret = salt.encode("utf-8")
    if len(secret) > 64:
        secret = hashlib.blake2b(secret, digest_size=64).digest()
    digest = hashlib.blake2b(key, digest_size=8, key=secret).digest()
    return int.from_bytes(digest, "big") / _TWO_64


def assign_split(key: bytes, salt: str, fractions: dict[str, float]) -> str:
    """'train', 'dev' or 'test' for a document key, by cumulative fractions in that order."""
    position = split_position(key, salt)
    bound = 0.0
    for name in SPLITS:
        bound += fractions[name]
        if position < bound:
            return name
    return next(name for name in reversed(SPLITS) if fractions[name] > 0)


def doc_hash(doc_id: str) -> int:
    """The unseeded 64-bit hash of a document id that places it in a shard part."""
    return int.from_bytes(hashlib.blake2b(doc_id.encode("utf-8"), digest_size=8).digest(), "big")


def part_bounds(parts: int) -> list[int]:
    """The `doc_hash` ranges of `parts` equal parts: part p holds [bounds[p], bounds[p + 1]),
    i.e. the hashes h with floor(h * parts / 2**64) = p."""
    return [-(-(p << 64) // parts) for p in range(parts)] + [1 << 64]


def part_of(hashes: np.ndarray, parts: int) -> np.ndarray:
    """The part of each `doc_hash` (uint64 array)."""
    inner = np.array(part_bounds(parts)[1:-1], dtype=np.uint64)
    return np.searchsorted(inner, hashes, side="right")


def read_part(path: str, split: str, part: int, parts: int, columns: list[str]) -> pa.Table:
    """The rows of one split and part of a chunk table, reading only the row groups that can
    hold them (by their `split` and `doc_hash` statistics)."""
    low, high = part_bounds(parts)[part : part + 2]
    parquet = pq.ParquetFile(path)
    names = parquet.schema_arrow.names
    split_column, hash_column = names.index("split"), names.index("doc_hash")
    wanted = []
    for group in range(parquet.num_row_groups):
        meta = parquet.metadata.row_group(group)
        split_stats, hash_stats = meta.column(split_column).statistics, meta.column(hash_column).statistics
        if split_stats is not None and split_stats.has_min_max and not split_stats.min <= split <= split_stats.max:
            continue
        if hash_stats is not None and hash_stats.has_min_max and (hash_stats.max < low or hash_stats.min >= high):
            continue
        wanted.append(group)
    read = sorted({*columns, "doc_hash"})
    table = parquet.read_row_groups(wanted, columns=read) if wanted else parquet.schema_arrow.empty_table().select(read)
    hashes = table["doc_hash"].to_numpy()
    inside = (hashes >= np.uint64(low)) & (hashes <= np.uint64(high - 1))
    return table.filter(pa.array(inside)).select(columns)


def kept_part(path: str, split: str, part: int, parts: int, duplicates: pa.Table, columns: list[str]) -> pa.Table:
    """`read_part` without the removed duplicates, in corpus (offset) order: what every step
    after deduplication reads of a chunk."""
    rows = read_part(path, split, part, parts, sorted({*columns, "source", "offset"}))
    if rows.num_rows:
        rows = rows.filter(pc.invert(duplicate_mask(duplicates, rows["source"], rows["offset"])))
        rows = rows.sort_by([("source", "ascending"), ("offset", "ascending")])
    return rows.select(columns)


def order_keys(doc_hashes: np.ndarray, seed: int) -> np.ndarray:
    """The order of train documents inside their part: a seeded 64-bit mix of each document's
    `doc_hash` (uint64 array), vectorized. The mix is splitmix64's finalizer, a bijection in
    which every input bit moves every output bit, so the order inside a part, whose hashes
    share a range, looks random and changes completely with the seed."""
    keys = doc_hashes.astype(np.uint64) ^ _mix(np.array([seed & ((1 << 64) - 1)], np.uint64))[0]
    return _mix(keys)


def _mix(values: np.ndarray) -> np.ndarray:
    """splitmix64's finalizer over a uint64 array (arithmetic mod 2**64)."""
    with np.errstate(over="ignore"):
        values = (values ^ (values >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        values = (values ^ (values >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return values ^ (values >> np.uint64(31))


def _fingerprint_words(path: str) -> np.ndarray:
    """The 16-byte fingerprints of a prepared chunk as an (n, 2) uint64 array, in corpus
    (file, offset) order; prepared rows are stored in split and `doc_hash` order."""
    table = pq.read_table(path, columns=["source", "offset", "fingerprint"])
    column = table["fingerprint"].combine_chunks()
    if not len(column):
        return np.empty((0, 2), np.uint64)
    words = np.frombuffer(column.buffers()[1], dtype=np.uint64, count=2 * len(column), offset=column.offset * 16).reshape(-1, 2)
    return words[_corpus_order(table)]


def _corpus_order(table: pa.Table) -> np.ndarray:
    """Row positions of a prepared chunk table by file, then offset: corpus order."""
    return pc.sort_indices(table, [("source", "ascending"), ("offset", "ascending")]).to_numpy()


def first_occurrences(words: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(rows, owners): every row of `words` ((n, 2) uint64 fingerprints) equal to an earlier
    row, ascending, and the first row it equals.

    A stable sort by both words puts equal fingerprints next to each other in row order, so
    each group's first row is its earliest. Memory: the fingerprints plus about 24 bytes per
    row (the sort order and one key column at a time), not np.unique's copies of everything."""
    order = np.lexsort((words[:, 1], words[:, 0]))
    same = np.ones(max(len(order) - 1, 0), dtype=bool)
    for word in (0, 1):
        key = words[order, word]
        same &= key[1:] == key[:-1]
        del key
    later = np.flatnonzero(same) + 1  # sorted positions holding a repeat
    group_starts = np.flatnonzero(np.concatenate([[True], ~same]))
    owners = order[group_starts[np.searchsorted(group_starts, later, side="right") - 1]]
    rows = order[later]
    ascending = np.argsort(rows, kind="stable")
    return rows[ascending], owners[ascending]


def find_duplicates(prepared_paths: Sequence[str]) -> pa.Table:
    """Rows (source, offset, doc_id, duplicate_of) for every document whose fingerprint was seen
    earlier; `prepared_paths` must be in corpus order (path, then chunk index). Only the
    16-byte fingerprints of all documents are held; ids are read for the rows involved."""
    sizes = [pq.ParquetFile(p).metadata.num_rows for p in prepared_paths]
    words = np.empty((sum(sizes), 2), np.uint64)
    position = 0
    for path, size in zip(prepared_paths, sizes):
        words[position : position + size] = _fingerprint_words(path)
        position += size
    rows, owners = first_occurrences(words)
    del words
    if not len(rows):
        return DUPLICATES_SCHEMA.empty_table()
    starts = np.cumsum([0] + sizes)
    wanted = np.unique(np.concatenate([rows, owners]))
    chunk_of = np.searchsorted(starts, wanted, side="right") - 1
    source, offset, doc_id = {}, {}, {}
    for chunk in np.unique(chunk_of):
        local = wanted[chunk_of == chunk]
        table = pq.read_table(prepared_paths[chunk], columns=["source", "offset", "doc_id"])
        table = table.take(_corpus_order(table)[local - starts[chunk]])
        for row, values in zip(local.tolist(), zip(*(table[c].to_pylist() for c in ("source", "offset", "doc_id")))):
            source[row], offset[row], doc_id[row] = values
    return pa.table(
        {
            "source": [source[r] for r in rows.tolist()],
            "offset": [offset[r] for r in rows.tolist()],
            "doc_id": [doc_id[r] for r in rows.tolist()],
            "duplicate_of": [doc_id[r] for r in owners.tolist()],
        },
        schema=DUPLICATES_SCHEMA,
    )


def removed_counts(prepared_paths: Sequence[str], duplicates: pa.Table) -> pa.Table:
    """Word counts per split of the removed duplicates, which the vocabulary step subtracts from
    the chunks' counts (so a chunk's counts never depend on other chunks)."""
    parts = []
    for path in prepared_paths if duplicates.num_rows else []:
        parquet = pq.ParquetFile(path)
        if "tokens" not in parquet.schema_arrow.names or not parquet.metadata.num_rows:
            continue
        located = parquet.read(columns=["source", "offset"])
        rows = np.flatnonzero(duplicate_mask(duplicates, located["source"], located["offset"]).to_numpy(zero_copy_only=False))
        if len(rows):
            # Only the row groups holding removed rows: their tokens, not the whole chunk's.
            sizes = np.array([parquet.metadata.row_group(g).num_rows for g in range(parquet.num_row_groups)])
            starts = np.cumsum(sizes) - sizes
            groups, chosen = np.unique(np.searchsorted(starts, rows, side="right") - 1, return_inverse=True)
            # Each row's position once only the chosen groups are read, one after another.
            read_starts = np.cumsum(sizes[groups]) - sizes[groups]
            positions = read_starts[chosen] + rows - starts[groups[chosen]]
            table = parquet.read_row_groups(groups.tolist(), columns=["split", "tokens"])
            parts.append(count_tokens(table.take(pa.array(positions))))
    counts = sum_counts(parts) if parts else COUNTS_SCHEMA.empty_table()
    return counts.sort_by([("split", "ascending"), ("token", "ascending")])


def duplicate_mask(duplicates: pa.Table, sources: pa.ChunkedArray | pa.Array, offsets: pa.ChunkedArray | pa.Array) -> pa.Array:
    """Boolean mask over rows given by (source, offset): True where the row is a removed duplicate."""
    mine = duplicates.filter(pc.is_in(duplicates["source"], value_set=pc.unique(sources)))
    if not mine.num_rows:
        return pa.array(np.zeros(len(offsets), dtype=bool))
    return pc.is_in(_located(sources, offsets), value_set=_located(mine["source"], mine["offset"]))


def _located(sources: pa.ChunkedArray | pa.Array, offsets: pa.ChunkedArray | pa.Array) -> pa.ChunkedArray:
    """One string per row naming its file and byte offset (a file name holds no NUL)."""
    return pc.binary_join_element_wise(sources, pc.cast(offsets, pa.string()), "\x00")


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Find exact duplicate documents across prepared chunks.")
    parser.add_argument("--output", required=True)
    parser.add_argument("--removed-counts", required=True, help="word counts of the removed documents")
    parser.add_argument("--enabled", choices=["true", "false"], default="true")
    parser.add_argument("prepared", nargs="*", help="prepared chunk files in corpus order")
    args = parser.parse_args(argv)
    table = find_duplicates(args.prepared) if args.enabled == "true" else DUPLICATES_SCHEMA.empty_table()
    write_table(args.output, table)
    write_table(args.removed_counts, removed_counts(args.prepared, table))


if __name__ == "__main__":
    main()
