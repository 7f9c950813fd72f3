"""Prepare one chunk: ingest → clean → segment → split, read in bounded batches.

Writes the chunk's table (steps.chunks: one row per kept document, stored in runs of at most
RUN_FACTOR x corpus.chunk_mb of Arrow memory, so memory stays bounded whatever the file size;
bench/prepare_memory.py measures it), its word counts per
split (word units), the tally of what happened to every document read and the log of every
dropped one (steps.accounting), and from the same batches the documents' near-duplicate
signatures and n-gram hashes (steps.signatures).
"""

from __future__ import annotations

import json
import sys
from collections.abc import Iterator
from contextlib import ExitStack
from itertools import chain
from pathlib import Path

import numpy as np
import pyarrow as pa

from . import job
from .accounting import Tally
from .chunks import ChunkTableWriter, chunk_schema
from .clean import CleanOptions, clean_text, rejection
from .formats import file_sha256
from .ingest import Chunk, CorpusError, Document, ReadOptions, read_documents
from .progress import Progress
from .segment import Segmenter
from .signatures import SignatureOptions, SignatureWriter
from .split import assign_split, doc_hash, fingerprint
from .storage import write_json, write_table
from .vocabulary import COUNTS_SCHEMA, MERGE_FILES, count_tokens, sum_counts

RULE = "prepare"
# Of corpus, what reading a chunk takes (not include, exclude, outside_links or pack_mb, which
# only shape the plan); of split, what assigns one.
SECTIONS = (
    "clean", "corpus.root", "corpus.chunk_mb", "corpus.text_unit", "corpus.jsonl_text_field", "corpus.jsonl_id_field", "corpus.repeated_ids",
    "corpus.bad_records", "corpus.invalid_utf8", "corpus.max_document_bytes", "corpus.oversize", "corpus.max_decompressed_mb",
    "segment", "split.key", "split.salt", "split.fractions", "units", "near_duplicates.shingle_words",
    "near_duplicates.permutations", "near_duplicates.bands", "near_duplicates.seed", "contamination.ngram_words",
)  # fmt: skip
BATCH_CHARS = 4 << 20
BATCH_DOCUMENTS = 4096
# Arrow bytes held before a run is written, per byte of corpus.chunk_mb.
RUN_FACTOR = 2


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

    def batches(self, documents: Iterator[Document], tally: Tally, batch_chars: int = BATCH_CHARS, progress: Progress | None = None) -> Iterator[pa.Table]:
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
    signature_paths: tuple[str, str] | None = None,
) -> Tally:
    """Run the whole chunk and write its table, its word counts per split (all kept documents;
    the vocabulary step subtracts duplicates), its tally and beside it the log of its dropped
    documents, and when `signature_paths` are given the signatures file and verification slots
    (steps.signatures); returns the tally. A file that cannot be read as configured is recorded in the
    tally (the deduplicate job stops the run) and the other files are still read."""
    tally = Tally()
    preparer = ChunkPreparer(config, abbreviations)
    options = ReadOptions.from_config(config["corpus"])
    documents = read_documents(root, chunk, chunk_bytes, options, tally, collect_problems=True)
    size = sum((Path(root) / source).stat().st_size for source in chunk.sources)
    progress = Progress(f"{chunk.key} (chunk {chunk.index + 1} of {chunk.count})", size if chunk.count == 1 else chunk_bytes)
    counts = COUNTS_SCHEMA.empty_table()
    pending: list[pa.Table] = []
    body = preparer.schema.names[-1]
    with ExitStack() as stack:
        writer = stack.enter_context(ChunkTableWriter(output, preparer.schema, preparer.units, RUN_FACTOR * chunk_bytes))
        signed = stack.enter_context(SignatureWriter(*signature_paths, SignatureOptions.from_config(config))) if signature_paths else None
        # Batches no larger than a chunk, so a run holds a few of them even for tiny chunk sizes.
        for batch in preparer.batches(documents, tally, min(BATCH_CHARS, chunk_bytes), progress):
            writer.add(batch)
            if signed is not None:
                signed.add(batch, body)
            if preparer.units == "word":
                pending.append(count_tokens(batch))
                if len(pending) == MERGE_FILES:
                    counts, pending = sum_counts([counts, *pending]), []
    if counts_path:
        counts = sum_counts([counts, *pending]).sort_by([("split", "ascending"), ("token", "ascending")])
        write_table(counts_path, counts)
    if drops_path:
        write_table(drops_path, tally.drops.table())
    # The first chunk of a file records its size and SHA-256 for the manifest (its pages are
    # in the cache now; the manifest job would otherwise read the whole corpus again).
    inputs = {source: {"bytes": (Path(root) / source).stat().st_size, "sha256": file_sha256(Path(root) / source)} for source in chunk.sources}
    record = {"sources": list(chunk.sources), "chunk": chunk.index, "chunks": chunk.count, "inputs": inputs if chunk.index == 0 else {}}
    record["table_sha256"] = file_sha256(output)  # what the deduplicate job's kept counts of this chunk follow
    write_json(tally_path, {**record, **tally.as_dict()})
    for problem in tally.problems:
        print(f"corpusmill: {problem['message']}", file=sys.stderr)
    return tally


def read_abbreviations(path: str | None) -> frozenset[str]:
    if not path:
        return frozenset()
    return frozenset(line.strip() for line in Path(path).read_text(encoding="utf-8").splitlines() if line.strip())


def read_chunk_plan(path: str) -> Chunk:
    """The chunk a plan file (steps.plan.chunk_record) describes."""
    record = json.loads(Path(path).read_text(encoding="utf-8"))
    return Chunk(record["key"], tuple(name for name, _, _ in record["files"]), record["index"], record["count"])


def main(argv: list[str] | None = None) -> None:
    run = job.start(argv, RULE, "Prepare one input chunk: read, clean, segment, split.", per_chunk=True)
    layout, options = run.layout, run.options
    chunk = read_chunk_plan(layout.chunk_plan(run.chunk))
    chunk_bytes = int(options["corpus"]["chunk_mb"] * (1 << 20))
    learned = read_abbreviations(layout.abbreviations if options["segment"]["learn_abbreviations"] else None)
    try:
        tally = prepare_chunk(
            options["corpus"]["root"], chunk, chunk_bytes, options, layout.prepared(chunk.key), layout.tally(chunk.key),
            learned, layout.counts(chunk.key), layout.drop_log(chunk.key),
            (layout.signatures(chunk.key), layout.verification(chunk.key)),
        )  # fmt: skip
    except CorpusError as error:
        raise SystemExit(f"corpusmill: {error}") from None
    print(json.dumps({key: value for key, value in tally.as_dict().items() if key != "files"}, sort_keys=True))


if __name__ == "__main__":
    main()
