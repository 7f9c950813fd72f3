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
from collections.abc import Iterator, Sequence

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from .accounting import problems_message
from .layout import SPLITS
from .settings import read_json
from .storage import write_table
from .vocab import COUNTS_SCHEMA, MERGE_FILES, count_tokens, sum_counts

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


def _groups_holding(parquet: pq.ParquetFile, split: str, low: int, high: int) -> list[int]:
    """The row groups of a chunk table that can hold rows of `split` with a `doc_hash` in
    [low, high), by their statistics (row groups never mix splits)."""
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
    return wanted


def read_part(path: str, split: str, part: int, parts: int, columns: list[str]) -> pa.Table:
    """The rows of one split and part of a chunk table, reading only the row groups that can
    hold them (by their `split` and `doc_hash` statistics)."""
    low, high = part_bounds(parts)[part : part + 2]
    parquet = pq.ParquetFile(path)
    wanted = _groups_holding(parquet, split, low, high)
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


def kept_batches(path: str, split: str, duplicates: pa.Table, columns: list[str], budget_bytes: int) -> Iterator[pa.Table]:
    """The kept rows of one split of a chunk in corpus (file, offset) order, as tables of about
    `budget_bytes` of stored data at most: what `kept_part` gives, in bounded memory whatever the
    chunk's size. Rows are stored by doc_hash, so a slice of corpus order lies in many row
    groups; each slice reads the groups it needs one at a time and keeps only its rows (a chunk
    over the budget is decoded once per slice)."""
    parquet = pq.ParquetFile(path)
    groups = _groups_holding(parquet, split, 0, 1 << 64)
    if not groups:
        return
    places = parquet.read_row_groups(groups, columns=["source", "offset"])
    sizes = np.array([parquet.metadata.row_group(g).num_rows for g in groups])
    group_of = np.repeat(np.arange(len(groups)), sizes)
    local = np.arange(len(group_of)) - np.repeat(np.cumsum(sizes) - sizes, sizes)
    kept = ~duplicate_mask(duplicates, places["source"], places["offset"]).to_numpy(zero_copy_only=False)
    order = pc.sort_indices(places, [("source", "ascending"), ("offset", "ascending")]).to_numpy()
    order = order[kept[order]]
    row_bytes = np.array([parquet.metadata.row_group(g).total_byte_size for g in groups]) / np.maximum(sizes, 1)
    cumulative = np.cumsum(row_bytes[group_of[order]])
    cuts = np.searchsorted(cumulative, np.arange(budget_bytes, cumulative[-1] if len(cumulative) else 0, budget_bytes), side="right")
    if not len(cuts):  # the whole split fits: one read
        yield parquet.read_row_groups(groups, columns=columns).take(pa.array(order))
        return
    for window in np.split(order, cuts):
        if not len(window):
            continue
        pieces, positions = [], []
        for group in np.unique(group_of[window]):
            inside = np.flatnonzero(group_of[window] == group)
            table = parquet.read_row_group(int(groups[group]), columns=columns)
            pieces.append(table.take(pa.array(local[window[inside]])))
            positions.append(inside)
        table = pa.concat_tables(pieces).combine_chunks()
        yield table.take(pa.array(np.argsort(np.concatenate(positions), kind="stable")))


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


def _corpus_order(table: pa.Table) -> np.ndarray:
    """Row positions of a prepared chunk table by file, then offset: corpus order."""
    codes, _ = _file_codes(table["source"])
    return np.lexsort((table["offset"].to_numpy(), codes))


def _file_codes(sources: pa.Array | pa.ChunkedArray) -> tuple[np.ndarray, list[str]]:
    """Each row's file as its rank among the distinct files (code point order), and the files."""
    encoded = pc.dictionary_encode(sources.combine_chunks() if isinstance(sources, pa.ChunkedArray) else sources)
    names = encoded.dictionary.to_pylist()
    rank = np.empty(len(names), dtype=np.int64)
    rank[np.argsort(np.array(names, dtype=object), kind="stable")] = np.arange(len(names))
    return rank[encoded.indices.to_numpy(zero_copy_only=False)], sorted(names)


class CorpusRows:
    """The documents of all prepared chunks numbered 0..n-1 in corpus order (chunks in corpus
    order, rows by file and offset), holding only their 16-byte fingerprints (`words`, an
    (n, 2) uint64 array) and `doc_hash`es: 24 bytes a document. Names and places of chosen
    rows are read back from the chunk files (`locate`)."""

    def __init__(self, paths: Sequence[str]) -> None:
        self.paths = list(paths)
        sizes = [pq.ParquetFile(p).metadata.num_rows for p in self.paths]
        self.starts = np.cumsum([0, *sizes])
        self.words = np.empty((self.starts[-1], 2), np.uint64)
        self.hashes = np.empty(self.starts[-1], np.uint64)
        for number, path in enumerate(self.paths):
            table = pq.ParquetFile(path, read_dictionary=["source"]).read(columns=["source", "offset", "doc_hash", "fingerprint"], use_threads=False)
            if not table.num_rows:
                continue
            order = _corpus_order(table)
            column = table["fingerprint"].combine_chunks()
            words = np.frombuffer(column.buffers()[1], dtype=np.uint64, count=2 * len(column), offset=column.offset * 16)
            span = slice(self.starts[number], self.starts[number + 1])
            self.words[span] = words.reshape(-1, 2)[order]
            self.hashes[span] = table["doc_hash"].to_numpy()[order]

    def locate(self, rows: np.ndarray) -> pa.Table:
        """(source, offset, doc_id) of the given rows, in the order given (Arrow columns, no
        Python objects per row)."""
        rows = np.asarray(rows, dtype=np.int64)
        order = np.argsort(rows, kind="stable")
        ordered = rows[order]
        chunk_of = np.searchsorted(self.starts, ordered, side="right") - 1
        parts = [DUPLICATES_SCHEMA.empty_table().select(["source", "offset", "doc_id"])]
        for chunk in np.unique(chunk_of):
            table = pq.ParquetFile(self.paths[chunk]).read(columns=["source", "offset", "doc_id"], use_threads=False)
            local = ordered[chunk_of == chunk] - self.starts[chunk]
            parts.append(table.take(pa.array(_corpus_order(table)[local])))
        found = pa.concat_tables(parts).combine_chunks()
        return found.take(pa.array(np.argsort(order, kind="stable")))


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


def find_duplicates(corpus: CorpusRows) -> pa.Table:
    """Rows (source, offset, doc_id, duplicate_of) for every document whose fingerprint was seen
    earlier in corpus order."""
    rows, owners = first_occurrences(corpus.words)
    if not len(rows):
        return DUPLICATES_SCHEMA.empty_table()
    located = corpus.locate(np.concatenate([rows, owners]))
    removed, kept = located.slice(0, len(rows)), located.slice(len(rows))
    return pa.Table.from_arrays([removed["source"], removed["offset"], removed["doc_id"], kept["doc_id"]], schema=DUPLICATES_SCHEMA)


def repeated_ids(corpus: CorpusRows) -> list[tuple[str, list[tuple[str, int]]]]:
    """Every document id that names more than one document, with the places (source, offset)
    of its documents in corpus order. Candidates are rows sharing a `doc_hash`; their ids are
    then compared as strings, so a hash collision of two ids is not reported."""
    order = np.argsort(corpus.hashes, kind="stable")
    same = np.flatnonzero(corpus.hashes[order][1:] == corpus.hashes[order][:-1])
    if not len(same):
        return []
    candidates = np.unique(np.concatenate([order[same], order[same + 1]]))
    located = corpus.locate(candidates)
    places: dict[str, list[tuple[str, int]]] = {}
    for doc_id, source, offset in zip(*(located[c].to_pylist() for c in ("doc_id", "source", "offset"))):
        places.setdefault(doc_id, []).append((source, offset))
    return sorted((doc_id, found) for doc_id, found in places.items() if len(found) > 1)


# Uncompressed bytes of row groups read at once while counting removed documents: bounds the
# job's memory whatever the chunk (a chunk of many duplicates would otherwise be read whole).
REMOVED_READ_BYTES = 64 << 20


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
        if not len(rows):
            continue
        sizes = np.array([parquet.metadata.row_group(g).num_rows for g in range(parquet.num_row_groups)])
        starts = np.cumsum(sizes) - sizes
        group_of = np.searchsorted(starts, rows, side="right") - 1
        batch: list[int] = []
        held = 0
        # Only the row groups holding removed rows, a bounded batch of them at a time.
        for group in np.unique(group_of).tolist():
            batch.append(group)
            held += parquet.metadata.row_group(group).total_byte_size
            if held >= REMOVED_READ_BYTES or group == group_of[-1]:
                table = parquet.read_row_groups(batch, columns=["split", "tokens"])
                read_starts = np.cumsum(sizes[batch]) - sizes[batch]
                chosen = np.isin(group_of, batch)
                positions = read_starts[np.searchsorted(batch, group_of[chosen])] + rows[chosen] - starts[group_of[chosen]]
                parts.append(count_tokens(table.take(pa.array(positions))))
                if len(parts) >= MERGE_FILES:
                    parts = [sum_counts(parts)]
                batch, held = [], 0
    counts = sum_counts(parts) if parts else COUNTS_SCHEMA.empty_table()
    return counts.sort_by([("split", "ascending"), ("token", "ascending")])


def duplicate_mask(duplicates: pa.Table, sources: pa.ChunkedArray | pa.Array, offsets: pa.ChunkedArray | pa.Array) -> pa.Array:
    """Boolean mask over rows given by (source, offset): True where the row is a removed
    duplicate. Offsets are compared file by file as integers: 8 bytes a row, no string a row."""
    codes, names = _file_codes(sources)
    mine = duplicates.filter(pc.is_in(duplicates["source"], value_set=pa.array(names, pa.string())))
    mask = np.zeros(len(codes), dtype=bool)
    if not mine.num_rows:
        return pa.array(mask)
    row_offsets = np.asarray(offsets.to_numpy() if isinstance(offsets, pa.Array) else offsets.combine_chunks().to_numpy())
    removed_codes = np.searchsorted(names, np.array(mine["source"].to_pylist(), dtype=object))
    removed_offsets = mine["offset"].to_numpy()
    for code in np.unique(removed_codes):
        rows = np.flatnonzero(codes == code)
        mask[rows] = np.isin(row_offsets[rows], removed_offsets[removed_codes == code])
    return pa.array(mask)


def drop_suffix(prepared_path: str) -> str:
    """A prepared chunk's path without `.parquet`: its tally lies beside it (steps.layout)."""
    return prepared_path.removesuffix(".parquet")


def repeated_ids_message(repeats: list[tuple[str, list[tuple[str, int]]]], by_file: bool) -> str:
    """What the user reads when ids repeat: the first few ids with both places, and the fixes."""
    shown = "; ".join(
        f"{doc_id!r} at {places[0][0]} byte {places[0][1]} and {places[1][0]} byte {places[1][1]}"
        + (f" (+{len(places) - 2} more)" if len(places) > 2 else "")
        for doc_id, places in repeats[:5]
    )
    more = f"; and {len(repeats) - 5} more ids" if len(repeats) > 5 else ""
    fix = (
        "ids repeat inside one file: fix the records, or set corpus.jsonl_id_field: null to use path:offset ids"
        if by_file
        else "fix the records, set corpus.repeated_ids: by_file to qualify JSONL ids by their file, "
        "or corpus.jsonl_id_field: null to use path:offset ids"
    )
    return f"corpusmill: {len(repeats)} document id(s) name more than one document: {shown}{more}; every id must name one document: {fix}"


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Find exact duplicate documents across prepared chunks; refuse repeated ids.")
    parser.add_argument("--output", required=True)
    parser.add_argument("--removed-counts", required=True, help="word counts of the removed documents")
    parser.add_argument("--enabled", choices=["true", "false"], default="true")
    parser.add_argument("--repeated-ids", choices=["stop", "by_file"], default="stop", help="corpus.repeated_ids")
    parser.add_argument("prepared", nargs="*", help="prepared chunk files in corpus order")
    args = parser.parse_args(argv)
    message = problems_message([read_json(drop_suffix(path) + ".tally.json") for path in args.prepared])
    if message:
        raise SystemExit(message)
    corpus = CorpusRows(args.prepared)
    repeats = repeated_ids(corpus)
    if repeats:
        raise SystemExit(repeated_ids_message(repeats, args.repeated_ids == "by_file"))
    table = find_duplicates(corpus) if args.enabled == "true" else DUPLICATES_SCHEMA.empty_table()
    del corpus
    write_table(args.output, table)
    write_table(args.removed_counts, removed_counts(args.prepared, table))


if __name__ == "__main__":
    main()
