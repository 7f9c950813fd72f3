"""Vocabulary growth: distinct types after each prefix of the train stream, for the report's
Heaps plot and fit (stats/growth.json).

The stream is the train documents of the prepared chunks in corpus order, duplicates left out:
exactly what the vocabulary counts (word units: interim/vocabulary/counts.parquet). Word units count word tokens; subword units count
whitespace-separated words of the cleaned sentences, not pieces, because the model fixes the
number of pieces and nearly all of them occur early in the stream, while words describe the
corpus the model has to cover.

Two steps, so that a change reruns only what it touches. Each chunk's shard job records the
chunk's sightings (`record_sightings`, interim/growth/<chunk>.parquet): every distinct type of
the chunk's own train stream with the position where it first appears there, and the stream's
length. The growth job merges them in corpus order: a type's first position in the whole
stream is its first sighting in the earliest chunk holding it, offset by the lengths of the
chunks before. An append or an edit under a frozen vocabulary reruns one shard job, and the
merge reads only sighting files. Memory grows with the number of distinct types (per chunk,
and corpus-wide while merging), never with the number of tokens.

growth.json: `unit` ("words"), `read` (stream positions, log-spaced) and `distinct` (types seen
among the first `read` tokens), lists of equal length.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from . import job
from .chunks import kept_batches
from .laws import log_points
from .storage import write_json, write_table

RULE = "growth"
SECTIONS = ()
# Stored (uncompressed) bytes of a chunk's rows read at once: bounds the job's memory.
READ_BYTES = 16 << 20
# Sightings gathered before they are merged into the corpus-wide table (see merged_firsts).
MERGE_ROWS = 1 << 21
LENGTH_KEY = b"corpusmill.train_stream_tokens"
SIGHTINGS_SCHEMA = pa.schema([("type", pa.string()), ("first", pa.int64())])


def _train_rows(path: str, removed: pa.Table, column: str) -> Iterator[pa.Array]:
    """`column` of a chunk's kept train documents in corpus order, never holding more of the
    chunk than READ_BYTES of stored rows."""
    for rows in kept_batches(path, "train", removed, [column], READ_BYTES):
        yield rows[column].combine_chunks()


def whitespace_words(sentences: pa.Array) -> pa.Array:
    """The runs of non-space characters of each sentence, in order: the same RE2 `\\S+` runs the
    encode step counts as words, so their total equals coverage.json's `words`."""
    parts = pc.list_flatten(pc.split_pattern_regex(sentences, r"\s+"))
    return parts.filter(pc.greater(pc.binary_length(parts), 0))


def train_types(path: str, removed: pa.Table, units: str) -> Iterator[pa.Array]:
    """The types of a chunk's train stream in order: word tokens, or (subword units) the
    whitespace words of the sentences."""
    if units == "subword":
        for sentences in _train_rows(path, removed, "sentences"):
            yield whitespace_words(pc.list_flatten(sentences))
    else:
        for tokens in _train_rows(path, removed, "tokens"):
            yield pc.list_flatten(pc.list_flatten(tokens))


def sightings(batches: Iterable[pa.Array]) -> tuple[pa.Table, int]:
    """(each distinct type of a stream with the position of its first occurrence, the stream's
    length), from the stream in string batches; types in the order they first appear. Each
    batch is dictionary-encoded, so only its distinct types are compared with those seen."""
    seen = pa.array([], pa.string())
    found: list[pa.Table] = []
    length = 0
    for batch in batches:
        if not len(batch):
            continue
        encoded = pc.dictionary_encode(batch)
        types, first = encoded.dictionary, _first_places(encoded.indices.to_numpy(zero_copy_only=False), len(encoded.dictionary))
        new = np.flatnonzero(~pc.is_in(types, value_set=seen).to_numpy(zero_copy_only=False))
        if len(new):
            order = new[np.argsort(first[new], kind="stable")]
            found.append(pa.table({"type": types.take(pa.array(order)).cast(pa.string()), "first": pa.array(first[order] + length, pa.int64())}))
            seen = pa.concat_arrays([seen, found[-1]["type"].combine_chunks()])
        length += len(batch)
    table = pa.concat_tables(found) if found else SIGHTINGS_SCHEMA.empty_table()
    return table.cast(SIGHTINGS_SCHEMA), length


def _first_places(indices: np.ndarray, entries: int) -> np.ndarray:
    """Where each dictionary entry first occurs among `indices`. Arrow numbers the entries in
    the order they first occur, so the first places are where the index exceeds every earlier
    one (one pass, no sort); np.unique stands in if that order ever differs."""
    rising = np.ones(len(indices), dtype=bool)
    np.greater(indices[1:], np.maximum.accumulate(indices)[:-1], out=rising[1:])
    places = np.flatnonzero(rising)
    if len(places) == entries:
        return places
    return np.unique(indices, return_index=True)[1]


def record_sightings(target: str, path: str, removed: pa.Table, units: str) -> None:
    """Write a chunk's sightings (the prepared chunk at `path` less its removed documents),
    the stream's length in the file's metadata."""
    table, length = sightings(train_types(path, removed, units))
    write_table(target, table.replace_schema_metadata({LENGTH_KEY: str(length).encode()}))


def merged_firsts(paths: Iterable[str]) -> tuple[np.ndarray, int]:
    """(every type's first position in the whole stream, sorted; the stream's length) from the
    chunks' sighting files in corpus order. Sightings are merged into the corpus-wide table once
    they add up to its size (or MERGE_ROWS), so each takes part in few merges."""
    merged: pa.Table | None = None
    pending: list[pa.Table] = []
    held = length = 0
    for path in paths:
        parquet = pq.ParquetFile(path)
        metadata = parquet.schema_arrow.metadata or {}
        if LENGTH_KEY not in metadata:
            raise SystemExit(
                f"corpusmill: {path}: no train stream length in its metadata, so not a chunk's sightings as a shard job writes "
                "them; rerun the shard jobs (snakemake --forcerun shards)"
            )
        table = parquet.read(use_threads=False)
        table = table.set_column(1, "first", pc.add(table["first"], pa.scalar(length, pa.int64())))
        length += int(metadata[LENGTH_KEY])
        pending.append(table)
        held += table.num_rows
        if held >= max(MERGE_ROWS, 0 if merged is None else merged.num_rows):
            merged, pending, held = _earliest([merged, *pending]), [], 0
    merged = _earliest([merged, *pending])
    return np.sort(merged["first"].to_numpy()), length


def _earliest(tables: list[pa.Table | None]) -> pa.Table:
    """Each type once, with its least first position."""
    table = pa.concat_tables([t for t in tables if t is not None] or [SIGHTINGS_SCHEMA.empty_table()])
    return table.group_by("type").aggregate([("first", "min")]).rename_columns(["type", "first"])


def growth_points(firsts: np.ndarray, length: int, points: int = 400) -> tuple[np.ndarray, np.ndarray]:
    """(tokens read, distinct types seen) at log-spaced stream positions: a type counts once the
    position after its first occurrence has been read."""
    positions = log_points(length, points)
    return positions, np.searchsorted(firsts, positions, side="left")


def main(argv: list[str] | None = None) -> None:
    run = job.start(argv, RULE, "Measure vocabulary growth over the train stream of a build.")
    layout = run.layout
    firsts, length = merged_firsts(layout.sightings(chunk) for chunk in run.chunks())
    read, distinct = growth_points(firsts, length)
    write_json(layout.growth, {"unit": "words", "read": read.tolist(), "distinct": distinct.tolist()})


if __name__ == "__main__":
    main()
