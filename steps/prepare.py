"""Prepare one chunk: ingest → clean → segment → split, read in bounded batches.

Writes a chunk table (Parquet, one row per kept document), its word counts and a tally of
what happened to every document read. Chunk table columns: doc_id, doc_hash (the unseeded
64-bit hash that places a document in a shard part), source, offset, split, fingerprint
(16-byte content hash), and either `tokens` (list of sentences, each a list of word tokens;
units = word) or `sentences` (list of cleaned sentence strings; units = subword).

Rows are stored in runs: the batches are held as Arrow arrays (no Python objects) until they
reach RUN_FACTOR x the chunk size in Arrow memory, then written ordered by split, then
`doc_hash`, in row groups that never mix splits and hold about GROUP_TOKENS tokens each, so a
shard job reads only the row groups of its own part (`steps.split.read_part`). A chunk of
`corpus.chunk_mb` of English text is one run (a 32 MB chunk peaked at 366-374 MiB while put in
order); a larger one, which only a compressed file or a whole-file document can be, becomes
several runs, so memory stays bounded whatever the file size (one .txt.gz of 40, 83 and 166 MB
of text: 354, 374 and 414 MiB, `bench/prepare_memory.py`).
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Iterator
from itertools import chain
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from .clean import CleanOptions, clean_text, rejection
from .accounting import Tally
from .ingest import Chunk, CorpusError, Document, ReadOptions, read_documents
from .progress import Progress
from .segment import Segmenter
from .split import assign_split, doc_hash, fingerprint
from .storage import ParquetSink, write_json, write_table
from .vocab import COUNTS_SCHEMA, MERGE_FILES, count_tokens, sum_counts

BATCH_CHARS = 4 << 20
BATCH_DOCUMENTS = 4096
# Tokens (word units) or sentence bytes / 4 (subword units) per stored row group: small
# enough that a part's slice of a chunk wastes little of a group, large enough to read fast.
GROUP_TOKENS = 1 << 14
# Arrow bytes held before a run is written, per byte of corpus.chunk_mb.
RUN_FACTOR = 2


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


def _offsets(lengths: list[int]) -> pa.Array:
    return pa.array(np.concatenate([[0], np.cumsum(lengths, dtype=np.int64)]).astype(np.int32), pa.int32())


class _Batch:
    """Column lists of the kept documents of one batch."""

    def __init__(self) -> None:
        self.ids: list[str] = []
        self.hashes: list[int] = []
        self.sources: list[str] = []
        self.offsets: list[int] = []
        self.splits: list[str] = []
        self.prints: list[bytes] = []
        self.sentence_counts: list[int] = []
        self.token_counts: list[int] = []
        self.flat: list[str] = []


class ChunkPreparer:
    """Cleans, segments and splits documents, collecting them into Arrow batches."""

    def __init__(self, config: dict, learned_abbreviations: frozenset[str] = frozenset()) -> None:
        self.units = config["units"]
        self.clean = CleanOptions.from_config(config["clean"])
        self.segmenter = Segmenter.from_config(config["segment"], learned_abbreviations)
        self.split = config["split"]
        self.schema = chunk_schema(self.units)

    def batches(
        self, documents: Iterator[Document], tally: Tally, batch_chars: int = BATCH_CHARS, progress: Progress | None = None
    ) -> Iterator[pa.Table]:
        """Arrow tables of kept documents, each from at most BATCH_DOCUMENTS documents or
        about `batch_chars` characters of text."""
        batch, chars, seen = _Batch(), 0, 0
        for document in documents:
            self._add(document, batch, tally)
            seen += 1
            chars += len(document.text)
            if seen >= BATCH_DOCUMENTS or chars >= batch_chars:
                if progress is not None:
                    progress.add(seen, chars)
                yield self._table(batch)
                batch, chars, seen = _Batch(), 0, 0
        if batch.ids:
            yield self._table(batch)

    def _add(self, document: Document, batch: _Batch, tally: Tally) -> None:
        text = clean_text(document.text, self.clean)
        reason = rejection(text, self.clean)
        if reason is None:
            if self.units == "word":
                sentences: list = self.segmenter.segment(text)
                batch.token_counts.extend(map(len, sentences))
                batch.flat.extend(chain.from_iterable(sentences))
            else:
                sentences = self.segmenter.sentences(text)
                batch.flat.extend(sentences)
            if sentences:
                batch.sentence_counts.append(len(sentences))
            else:
                reason = "no_tokens"
        if reason is not None:
            tally.drop(reason, document.offset)
            return
        tally.file.kept += 1
        digest = fingerprint(text)
        key = digest if self.split["key"] == "content" else document.doc_id.encode("utf-8")
        batch.ids.append(document.doc_id)
        batch.hashes.append(doc_hash(document.doc_id))
        batch.sources.append(document.source)
        batch.offsets.append(document.offset)
        batch.splits.append(assign_split(key, self.split["salt"], self.split["fractions"]))
        batch.prints.append(digest)

    def _table(self, batch: _Batch) -> pa.Table:
        values = pa.array(batch.flat, pa.string())
        if self.units == "word":
            sentences = pa.ListArray.from_arrays(_offsets(batch.token_counts), values)
            body = pa.ListArray.from_arrays(_offsets(batch.sentence_counts), sentences)
        else:
            body = pa.ListArray.from_arrays(_offsets(batch.sentence_counts), values)
        return pa.Table.from_arrays(
            [
                pa.array(batch.ids, pa.string()),
                pa.array(batch.hashes, pa.uint64()),
                pa.array(batch.sources, pa.string()),
                pa.array(batch.offsets, pa.int64()),
                pa.array(batch.splits, pa.string()),
                pa.array(batch.prints, pa.binary(16)),
                body,
            ],
            schema=self.schema,
        )


def prepare_chunk(
    root: str,
    chunk: Chunk,
    chunk_bytes: int,
    config: dict,
    output: str,
    tally_path: str,
    abbreviations: frozenset[str],
    counts_path: str | None = None,
    drops_path: str | None = None,
) -> Tally:
    """Run the whole chunk and write its table, its word counts per split (all kept documents;
    the vocabulary step subtracts duplicates), its tally and beside it the log of its dropped
    documents; returns the tally. A file that cannot be read as configured is recorded in the
    tally (the deduplicate job stops the run) and the other files are still read."""
    tally = Tally()
    preparer = ChunkPreparer(config, abbreviations)
    options = ReadOptions.from_config(config["corpus"])
    documents = read_documents(root, chunk, chunk_bytes, options, tally, collect_problems=True)
    size = sum((Path(root) / source).stat().st_size for source in chunk.sources)
    progress = Progress(f"{chunk.key} (chunk {chunk.index + 1} of {chunk.count})", size if chunk.count == 1 else chunk_bytes)
    counts = COUNTS_SCHEMA.empty_table()
    pending: list[pa.Table] = []
    with ChunkTableWriter(output, preparer.schema, preparer.units, RUN_FACTOR * chunk_bytes) as writer:
        # Batches no larger than a chunk, so a run holds a few of them even for tiny chunk sizes.
        for batch in preparer.batches(documents, tally, min(BATCH_CHARS, chunk_bytes), progress):
            writer.add(batch)
            if preparer.units == "word":
                pending.append(count_tokens(batch))
                if len(pending) == MERGE_FILES:
                    counts, pending = sum_counts([counts, *pending]), []
    if counts_path:
        counts = sum_counts([counts, *pending]).sort_by([("split", "ascending"), ("token", "ascending")])
        write_table(counts_path, counts)
    if drops_path:
        write_table(drops_path, tally.drops.table())
    write_json(tally_path, {"sources": list(chunk.sources), "chunk": chunk.index, "chunks": chunk.count, **tally.as_dict()})
    for problem in tally.problems:
        print(f"corpusmill: {problem['message']}", file=sys.stderr)
    return tally


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
        order = pc.sort_indices(
            table, [("split", "ascending"), ("doc_hash", "ascending"), ("source", "ascending"), ("offset", "ascending")]
        )
        splits = table["split"].take(order).to_numpy(zero_copy_only=False)
        weights = np.cumsum(_row_weights(table, self._units)[order.to_numpy()])
        cuts = np.flatnonzero(splits[1:] != splits[:-1]) + 1
        starts = sorted({0, *cuts.tolist()})
        bounds = []
        for start, stop in zip(starts, [*starts[1:], len(splits)]):
            base = weights[start - 1] if start else 0
            groups = (weights[start:stop] - base - 1) // GROUP_TOKENS
            bounds.extend((start + np.flatnonzero(np.diff(groups)) + 1).tolist())
        bounds = sorted({*starts, *bounds, len(splits)})
        # One take of the whole (contiguous) table: cheaper than a take per row group, which
        # concatenates a chunked table's pieces again on every call (4 s of system time per 32 MB).
        ordered = table.take(order)
        del table
        for start, stop in zip(bounds[:-1], bounds[1:]):
            self._sink.write(ordered.slice(start, stop - start))
        self.runs += 1

    def __enter__(self) -> "ChunkTableWriter":
        return self

    def __exit__(self, kind: object, *_: object) -> None:
        if kind is None:
            self._write_run()
            self._sink.close()
        else:
            self._sink.abort()


def _row_weights(table: pa.Table, units: str) -> np.ndarray:
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


def read_abbreviations(path: str | None) -> frozenset[str]:
    if not path:
        return frozenset()
    return frozenset(line.strip() for line in Path(path).read_text(encoding="utf-8").splitlines() if line.strip())


def read_chunk_plan(path: str) -> Chunk:
    """The chunk a plan file (steps.plan.Plan.chunk_plan) describes."""
    record = json.loads(Path(path).read_text(encoding="utf-8"))
    return Chunk(record["key"], tuple(name for name, _, _ in record["files"]), record["index"], record["count"])


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Prepare one input chunk: read, clean, segment, split.")
    parser.add_argument("--plan", required=True, help="the chunk's plan file: its files, index and count")
    parser.add_argument("--options", required=True, help="JSON: the resolved configuration")
    parser.add_argument("--abbreviations", default=None, help="file of learned abbreviations, one a line")
    parser.add_argument("--output", required=True)
    parser.add_argument("--tally", required=True)
    parser.add_argument("--counts", required=True, help="word counts per split of the kept documents")
    parser.add_argument("--drops", required=True, help="the dropped documents: source, offset, reason")
    args = parser.parse_args(argv)
    config = json.loads(args.options)
    chunk = read_chunk_plan(args.plan)
    chunk_bytes = int(config["corpus"]["chunk_mb"] * (1 << 20))
    try:
        tally = prepare_chunk(
            config["corpus"]["root"], chunk, chunk_bytes, config, args.output, args.tally,
            read_abbreviations(args.abbreviations), args.counts, args.drops,
        )
    except CorpusError as error:
        raise SystemExit(f"corpusmill: {error}") from None
    print(json.dumps(tally.as_dict(), sort_keys=True))


if __name__ == "__main__":
    main()
