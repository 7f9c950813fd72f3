"""The prepared chunk table: what a prepare job writes for its chunk and every later step reads.

Columns: doc_id, doc_hash (the unseeded 64-bit hash of the id), source, offset, split,
fingerprint (16-byte content hash), and either `tokens` (list of sentences, each a list of word
tokens; units = word) or `sentences` (list of cleaned sentence strings; units = subword).

Rows are stored in runs: the batches are held as Arrow arrays until they reach the run size,
then written ordered by split, then `doc_hash`, in row groups that never mix splits and hold
about GROUP_TOKENS tokens each, so a reader of one split skips the others' row groups. A chunk
of `corpus.chunk_mb` of text is one run; a larger one (a compressed file, a whole-file
document) several, so a prepare job's memory stays bounded whatever the file size.

Readers: `split_groups` (one split's rows, a bounded batch of row groups at a time, in stored
order) and `kept_batches` (one split's kept rows in corpus order, in bounded slices); both
leave out the documents deduplication removed (`removed_mask`).
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from .storage import ParquetSink

# Tokens (word units) or sentence bytes / 4 (subword units) per stored row group: small
# enough that a reader of one split wastes little of a group, large enough to read fast.
GROUP_TOKENS = 1 << 14


def chunk_schema(units: str) -> pa.Schema:
    body = ("tokens", pa.list_(pa.list_(pa.string()))) if units == "word" else ("sentences", pa.list_(pa.string()))
    return pa.schema(
        [
            ("doc_id", pa.string()),
            ("doc_hash", pa.uint64()),
            ("source", pa.string()),
            ("offset", pa.int64()),
            ("split", pa.string()),
            ("fingerprint", pa.binary(16)),
            body,
        ]
    )


class ChunkTableWriter:
    """Writes a chunk table in runs of at most `run_bytes` of held Arrow memory, each stored by
    (split, doc_hash) in row groups that never mix splits; a group closes at the first row that
    takes it past a multiple of GROUP_TOKENS tokens, so it holds less than GROUP_TOKENS plus
    its largest row."""

    def __init__(self, path: str, schema: pa.Schema, units: str, run_bytes: int) -> None:
        self._sink = ParquetSink(path, schema, compression="zstd", level=1)
        self._schema, self._units, self._run_bytes = schema, units, run_bytes
        self._held: list[pa.Table] = []
        self._size = 0
        self.runs = 0

    def add(self, table: pa.Table) -> None:
        self._held.append(table)
        self._size += table.nbytes
        if self._size >= self._run_bytes:
            self._write_run()

    def _write_run(self) -> None:
        if not self._held:
            return
        # One contiguous copy, the batches freed as soon as it exists: a take from a table of
        # many chunks would concatenate them on the side, holding the rows three times.
        table = pa.concat_tables([self._schema.empty_table(), *self._held]).combine_chunks()
        self._held, self._size = [], 0
        order = pc.sort_indices(table, [("split", "ascending"), ("doc_hash", "ascending"), ("source", "ascending"), ("offset", "ascending")])
        splits = table["split"].take(order).to_numpy(zero_copy_only=False)
        weights = np.cumsum(row_weights(table, self._units)[order.to_numpy()])
        cuts = np.flatnonzero(splits[1:] != splits[:-1]) + 1
        starts = sorted({0, *cuts.tolist()})
        bounds = []
        for start, stop in zip(starts, [*starts[1:], len(splits)]):
            base = weights[start - 1] if start else 0
            groups = (weights[start:stop] - base - 1) // GROUP_TOKENS
            bounds.extend((start + np.flatnonzero(np.diff(groups)) + 1).tolist())
        bounds = sorted({*starts, *bounds, len(splits)})
        # One take of the whole (contiguous) table: cheaper than a take per row group, which
        # concatenates a chunked table's pieces again on every call.
        ordered = table.take(order)
        del table
        for start, stop in zip(bounds[:-1], bounds[1:]):
            self._sink.write(ordered.slice(start, stop - start))
        self.runs += 1

    def __enter__(self) -> ChunkTableWriter:
        return self

    def __exit__(self, kind: object, *_: object) -> None:
        if kind is None:
            self._write_run()
            self._sink.close()
        else:
            self._sink.abort()


def row_weights(table: pa.Table, units: str) -> np.ndarray:
    """Tokens per row (word units) or UTF-8 bytes of its sentences / 4 (subword units), at least 1."""
    if units == "word":
        nested = table["tokens"].combine_chunks()
        sentence_ends = nested.offsets.to_numpy()
        token_ends = nested.values.offsets.to_numpy()
        weights = np.diff(token_ends[sentence_ends])
    else:
        sentences = table["sentences"].combine_chunks()
        sentence_bytes = pc.binary_length(sentences.values).to_numpy(zero_copy_only=False).astype(np.int64)
        ends = sentences.offsets.to_numpy()
        cumulative = np.concatenate([[0], np.cumsum(sentence_bytes)])
        weights = (cumulative[ends[1:]] - cumulative[ends[:-1]]) // 4
    return np.maximum(weights, 1)


def groups_of_split(parquet: pq.ParquetFile, split: str) -> list[int]:
    """The row groups of a chunk table that can hold rows of `split`, by their statistics (row
    groups never mix splits)."""
    column = parquet.schema_arrow.names.index("split")
    wanted = []
    for group in range(parquet.num_row_groups):
        stats = parquet.metadata.row_group(group).column(column).statistics
        if stats is not None and stats.has_min_max and not stats.min <= split <= stats.max:
            continue
        wanted.append(group)
    return wanted


def removed_mask(removed: pa.Table, sources: pa.ChunkedArray | pa.Array, offsets: pa.ChunkedArray | pa.Array) -> np.ndarray:
    """True where the row (source, offset) is a document deduplication removed (`removed` has
    columns source and offset). Offsets are compared file by file as integers: 8 bytes a row,
    no string a row."""
    sources = sources.combine_chunks() if isinstance(sources, pa.ChunkedArray) else sources
    mask = np.zeros(len(sources), dtype=bool)
    if not removed.num_rows or not len(sources):
        return mask
    encoded = pc.dictionary_encode(sources)
    names = encoded.dictionary
    mine = removed.filter(pc.is_in(removed["source"], value_set=names))
    if not mine.num_rows:
        return mask
    codes = encoded.indices.to_numpy(zero_copy_only=False)
    row_offsets = np.asarray(offsets.to_numpy() if isinstance(offsets, pa.Array) else offsets.combine_chunks().to_numpy())
    removed_codes = pc.index_in(mine["source"], value_set=names).to_numpy(zero_copy_only=False)
    removed_offsets = mine["offset"].to_numpy()
    for code in np.unique(removed_codes):
        rows = np.flatnonzero(codes == code)
        mask[rows] = np.isin(row_offsets[rows], removed_offsets[removed_codes == code])
    return mask


IDENTITY_SCHEMA = pa.schema([chunk_schema("word").field(name) for name in ("doc_id", "source", "offset", "split", "fingerprint")])


def kept_identities(path: str, removed: pa.Table) -> pa.Table:
    """Id, place, content hash and split of a chunk's kept documents, without their text: what
    a build keeps per document, compared between builds (steps.compare)."""
    table = pq.ParquetFile(path).read(columns=IDENTITY_SCHEMA.names, use_threads=False).select(IDENTITY_SCHEMA.names)
    return table.filter(pa.array(~removed_mask(removed, table["source"], table["offset"])))


def split_groups(path: str, split: str, removed: pa.Table, columns: list[str], budget_bytes: int) -> Iterator[pa.Table]:
    """The kept rows of one split of a chunk in stored order, a batch of row groups of about
    `budget_bytes` of stored data at a time."""
    parquet = pq.ParquetFile(path)
    read = sorted({*columns, "source", "offset"})
    batch: list[int] = []
    held = 0
    groups = groups_of_split(parquet, split)
    for group in groups:
        batch.append(group)
        held += parquet.metadata.row_group(group).total_byte_size
        if held >= budget_bytes or group == groups[-1]:
            table = parquet.read_row_groups(batch, columns=read, use_threads=False)
            table = table.filter(pa.array(~removed_mask(removed, table["source"], table["offset"])))
            if table.num_rows:
                yield table.select(columns)
            batch, held = [], 0


def kept_batches(path: str, split: str, removed: pa.Table, columns: list[str], budget_bytes: int) -> Iterator[pa.Table]:
    """The kept rows of one split of a chunk in corpus (file, offset) order, as tables of about
    `budget_bytes` of stored data at most, in bounded memory whatever the chunk's size. Rows are
    stored by doc_hash, so a slice of corpus order lies in many row groups; each slice reads the
    groups it needs one at a time and keeps only its rows (a chunk over the budget is decoded
    once per slice)."""
    parquet = pq.ParquetFile(path)
    groups = groups_of_split(parquet, split)
    if not groups:
        return
    places = parquet.read_row_groups(groups, columns=["source", "offset"], use_threads=False)
    sizes = np.array([parquet.metadata.row_group(g).num_rows for g in groups])
    group_of = np.repeat(np.arange(len(groups)), sizes)
    local = np.arange(len(group_of)) - np.repeat(np.cumsum(sizes) - sizes, sizes)
    kept = ~removed_mask(removed, places["source"], places["offset"])
    order = pc.sort_indices(places, [("source", "ascending"), ("offset", "ascending")]).to_numpy()
    order = order[kept[order]]
    if not len(order):
        return
    row_bytes = np.array([parquet.metadata.row_group(g).total_byte_size for g in groups]) / np.maximum(sizes, 1)
    cumulative = np.cumsum(row_bytes[group_of[order]])
    cuts = np.searchsorted(cumulative, np.arange(budget_bytes, cumulative[-1], budget_bytes), side="right")
    if not len(cuts):  # the whole split fits: one read
        yield parquet.read_row_groups(groups, columns=columns, use_threads=False).take(pa.array(order))
        return
    for window in np.split(order, cuts):
        if not len(window):
            continue
        pieces, positions = [], []
        for group in np.unique(group_of[window]):
            inside = np.flatnonzero(group_of[window] == group)
            table = parquet.read_row_group(int(groups[group]), columns=columns, use_threads=False)
            pieces.append(table.take(pa.array(local[window[inside]])))
            positions.append(inside)
        table = pa.concat_tables(pieces).combine_chunks()
        yield table.take(pa.array(np.argsort(np.concatenate(positions), kind="stable")))
