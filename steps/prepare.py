"""Prepare one chunk: ingest → clean → segment → split, streamed in bounded batches.

Writes a chunk table (Parquet, one row per kept document, row groups written as they fill)
and a tally of what happened to every document read. Chunk table columns:
doc_id, source, offset, split, fingerprint (16-byte content hash), and either
`tokens` (list of sentences, each a list of word tokens; units = word) or
`sentences` (list of cleaned sentence strings; units = subword).
"""

from __future__ import annotations

import argparse
import json
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pyarrow as pa

from steps.clean import CleanOptions, clean_text, rejection
from steps.ingest import Chunk, CorpusError, Document, ReadOptions, Tally, chunk_key, read_documents
from steps.segment import Segmenter
from steps.split import assign_split, fingerprint
from steps.storage import ParquetSink, write_json, write_table
from steps.vocab import COUNTS_SCHEMA, MERGE_FILES, count_tokens, sum_counts

BATCH_CHARS = 4 << 20
BATCH_DOCUMENTS = 4096


def chunk_schema(units: str) -> pa.Schema:
    body = ("tokens", pa.list_(pa.list_(pa.string()))) if units == "word" else ("sentences", pa.list_(pa.string()))
    return pa.schema(
        [
            ("doc_id", pa.string()),
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

    def batches(self, documents: Iterator[Document], tally: Tally) -> Iterator[pa.Table]:
        """Arrow tables of kept documents, each from at most BATCH_DOCUMENTS documents or
        about BATCH_CHARS characters of text."""
        batch, chars, seen = _Batch(), 0, 0
        for document in documents:
            self._add(document, batch, tally)
            seen += 1
            chars += len(document.text)
            if seen >= BATCH_DOCUMENTS or chars >= BATCH_CHARS:
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
                tokens_before = len(batch.flat)
                for tokens in sentences:
                    batch.token_counts.append(len(tokens))
                    batch.flat.extend(tokens)
                assert len(batch.flat) - tokens_before == sum(map(len, sentences))
            else:
                sentences = self.segmenter.sentences(text)
                batch.flat.extend(sentences)
            if sentences:
                batch.sentence_counts.append(len(sentences))
            else:
                reason = "no_tokens"
        if reason is not None:
            tally.drop(reason)
            return
        tally.kept += 1
        digest = fingerprint(text)
        key = digest if self.split["key"] == "content" else document.doc_id.encode("utf-8")
        batch.ids.append(document.doc_id)
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
) -> Tally:
    """Run the whole chunk and write its table, its word counts per split (all kept documents;
    the vocabulary step subtracts duplicates) and its tally; returns the tally."""
    tally = Tally()
    preparer = ChunkPreparer(config, abbreviations)
    documents = read_documents(root, chunk, chunk_bytes, ReadOptions.from_config(config["corpus"]), tally)
    counts = COUNTS_SCHEMA.empty_table()
    pending: list[pa.Table] = []
    with ParquetSink(output, preparer.schema, compression="zstd", level=1) as sink:
        for batch in preparer.batches(documents, tally):
            sink.write(batch)
            if preparer.units == "word":
                pending.append(count_tokens(batch))
                if len(pending) == MERGE_FILES:
                    counts, pending = sum_counts([counts, *pending]), []
    if counts_path:
        counts = sum_counts([counts, *pending]).sort_by([("split", "ascending"), ("token", "ascending")])
        write_table(counts_path, counts)
    write_json(tally_path, {"source": chunk.source, "chunk": chunk.index, "chunks": chunk.count, **tally.as_dict()})
    return tally


def read_abbreviations(path: str | None) -> frozenset[str]:
    if not path:
        return frozenset()
    return frozenset(line.strip() for line in Path(path).read_text(encoding="utf-8").splitlines() if line.strip())


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Prepare one input chunk: read, clean, segment, split.")
    parser.add_argument("--root", required=True)
    parser.add_argument("--source", required=True, help="path relative to the corpus root")
    parser.add_argument("--chunk", type=int, required=True)
    parser.add_argument("--chunks", type=int, required=True)
    parser.add_argument("--options", required=True, help="JSON: the resolved configuration")
    parser.add_argument("--abbreviations", default=None, help="file of learned abbreviations, one a line")
    parser.add_argument("--output", required=True)
    parser.add_argument("--tally", required=True)
    parser.add_argument("--counts", required=True, help="word counts per split of the kept documents")
    args = parser.parse_args(argv)
    config = json.loads(args.options)
    chunk = Chunk(chunk_key(args.source, args.chunk), args.source, args.chunk, args.chunks)
    chunk_bytes = int(config["corpus"]["chunk_mb"] * (1 << 20))
    try:
        tally = prepare_chunk(
            args.root, chunk, chunk_bytes, config, args.output, args.tally, read_abbreviations(args.abbreviations), args.counts
        )
    except CorpusError as error:
        raise SystemExit(f"corpusmill: {error}") from None
    print(json.dumps(tally.as_dict(), sort_keys=True))


if __name__ == "__main__":
    main()
