"""Shards: one chunk's training rows, written as Parquet files per split and kind.

The job reads its chunk's kept rows (steps.chunks: removed duplicates left out), encodes them
(steps.encoder: words or pieces → ids), cuts n-gram windows, blocks and streams
(steps.windows) and writes, for each split and enabled kind, `shards/<split>/<kind>-<chunk>.parquet`
(columns and metadata: steps.formats). It needs nothing of other chunks but the ids and its own
list of removed documents, so a change elsewhere in the corpus reruns it only when one of
those changes.

Train: documents in a seeded order of their `doc_hash` (steps.split.order_keys), a bounded
batch of the chunk at a time; n-gram windows and blocks shuffled with a generator seeded by
`shards.seed` and the chunk; streams in that document order. Readers mix rows across chunks by
permuting row groups and a shuffle buffer (steps.reader). Dev and test keep corpus order, so
reading a split's files in manifest (chunk) order gives the corpus order.

Blocks with `span: corpus` join the documents of one chunk in that order (a chunk's last
partial block is dropped or padded): the only rows whose content depends on where chunks end.

Beside each shard file, its provenance: a row table of each row's stream position, and per
split a table of the documents cut (steps.formats, provenance; steps.provenance), so any row
leads back to its document, sentence and token without a column added to the shards.

Beside the files: interim/shards/<chunk>.json (steps.formats.ShardStats: each file's rows,
bytes and SHA-256; rows per kind; ids held by blocks; figures per input file) and
interim/shards/<chunk>.ids.parquet (occurrences of each id per split, <s> once per document
and </s> once per sentence, for vocabulary.tsv's counts), and the chunk's sightings for the
growth curve (interim/growth/<chunk>.parquet, steps.growth).
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from . import growth, job
from .chunks import kept_batches, split_groups
from .encoder import Encoder, encoder_for
from .formats import (
    BOS,
    EOS,
    PAD,
    ShardFile,
    ShardStats,
    Vocabulary,
    enabled_kinds,
    file_sha256,
    id_type_name,
    provenance_metadata,
    provenance_step,
    read_ids_table,
    shard_metadata,
    shard_schema,
)  # fmt: skip
from .layout import SPLITS, Layout
from .provenance import DocumentWriter, RunWriter
from .split import order_keys
from .storage import ParquetSink, write_json, write_table
from .windows import (
    CorpusBlocks,
    document_block_coverage,
    document_block_starts,
    document_blocks,
    document_streams,
    ngram_rows,
    ngram_target_positions,
    ngram_windows,
)  # fmt: skip

RULE = "shards"
SECTIONS = ("shards", "units", "vocabulary.unknown", "windows")
# Stored bytes of a chunk's rows encoded and cut at once: bounds the job's memory for a chunk of
# any size (a compressed file is one chunk); train rows are shuffled within such a batch.
BATCH_BYTES = 64 << 20
# Threads of the piece encoder; the rule reserves as many cores.
THREADS = 2
ID_COUNTS_SCHEMA = pa.schema([("split", pa.string()), ("id", pa.int64()), ("count", pa.int64())])


@dataclass
class Rows:
    """The rows of every kind cut from one batch of documents: per kind, its columns named as in
    steps.formats.shard_schema (a fixed_size_list column a 2-D array, an integer column a 1-D
    array, a string column a list of str, a variable-length list column its values and lengths),
    and each row's stream position (steps.formats, provenance)."""

    columns: dict[str, dict[str, Any]]
    positions: dict[str, np.ndarray]


class RowCutter:
    """Cuts n-gram windows, blocks and streams from encoded documents, counting the stream ids
    and the ids that lie in at least one block."""

    def __init__(self, windows: dict, vocabulary: Vocabulary, dtype: np.dtype) -> None:
        # Cutting in the shard's own id type (e.g. uint16) keeps the job's memory 2-4x below int64.
        self.dtype = dtype
        reserved = vocabulary.reserved
        self.pad, self.bos, self.eos = reserved[PAD], reserved[BOS], reserved[EOS]
        self.ngram, self.block = windows["ngram"], windows["blocks"]
        self.corpus_blocks = (
            CorpusBlocks(self.block["length"], self.block["stride"], self.block["remainder"], self.pad) if self.block["span"] == "corpus" else None
        )
        self.stream_ids = self.block_ids = 0
        self.corpus_block_rows = 0  # blocks cut so far with span: corpus

    def cut(self, nested: pa.ListArray, doc_ids: list[str], shuffle: np.random.Generator | None = None) -> Rows:
        """The rows of a batch of documents (their ids as documents → sentences → ids); with
        `shuffle`, n-gram windows in a random order."""
        sentences = nested.flatten()
        ids = sentences.flatten().to_numpy().astype(self.dtype)
        sentence_lengths = np.diff(sentences.offsets.to_numpy()).astype(np.int64)
        per_doc = np.diff(nested.offsets.to_numpy()).astype(np.int64)
        eos = self.eos if self.ngram["predict_end"] else None
        rows = ngram_rows(sentence_lengths, eos is not None)
        # Drawn only when there is a window to cut, so the generator runs as it always did and
        # the train shards keep their bytes.
        drawn = shuffle is not None and rows + (self.ngram["n"] - 1) * len(sentence_lengths) > 0
        order = shuffle.permutation(rows) if drawn and shuffle is not None else None
        context, target = ngram_windows(ids, sentence_lengths, self.ngram["n"], self.bos, eos, order)
        base = self.stream_ids  # stream position of this batch's first id
        targets = base + ngram_target_positions(sentence_lengths, per_doc, eos is not None)
        stream, doc_lengths = document_streams(ids, sentence_lengths, per_doc, self.bos, self.eos)
        length, stride, remainder = self.block["length"], self.block["stride"], self.block["remainder"]
        if self.corpus_blocks is not None:
            blocks = self.corpus_blocks.feed(stream)
            block_positions = self._corpus_block_positions(len(blocks))
        else:
            blocks = document_blocks(stream, doc_lengths, length, stride, remainder, self.pad)
            block_positions = base + document_block_starts(doc_lengths, length, stride, remainder)
            self.block_ids += document_block_coverage(doc_lengths, length, stride, remainder)
        self.stream_ids += len(stream)
        columns: dict[str, dict[str, Any]] = {
            "ngram": {"context": context, "target": target},
            "block": {"ids": blocks},
            "stream": {"doc_id": doc_ids, "ids": (stream, doc_lengths)},
        }
        positions = {
            "ngram": targets if order is None else targets[order],
            "block": block_positions,
            "stream": base + np.cumsum(doc_lengths) - doc_lengths,
        }
        return Rows(columns, positions)

    def _corpus_block_positions(self, count: int) -> np.ndarray:
        """Blocks over the joined documents start every `stride` ids from the first."""
        first = self.corpus_block_rows
        self.corpus_block_rows += count
        return (first + np.arange(count, dtype=np.int64)) * self.block["stride"]

    def last_blocks(self) -> tuple[np.ndarray, np.ndarray]:
        """The padded last block of blocks over joined documents, if any, and its position."""
        width = self.block["length"] + 1
        if self.corpus_blocks is None:
            return np.empty((0, width), self.dtype), np.empty(0, np.int64)
        blocks = self.corpus_blocks.finish()
        return blocks, self._corpus_block_positions(len(blocks))

    def block_coverage(self) -> int:
        """Stream ids in at least one block, of everything cut (after `last_blocks`)."""
        return self.corpus_blocks.covered if self.corpus_blocks is not None else self.block_ids


def _column(values: Any, kind: pa.DataType) -> pa.Array:
    """One shard column as Arrow, by its type in the kind's schema (see Rows)."""
    if pa.types.is_fixed_size_list(kind):
        flat = pa.array(np.ascontiguousarray(values).reshape(-1), type=kind.value_type)
        return pa.FixedSizeListArray.from_arrays(flat, values.shape[1])
    if pa.types.is_list(kind):
        ids, lengths = values
        offsets = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64)
        return pa.LargeListArray.from_arrays(offsets, pa.array(ids, type=kind.value_type)).cast(kind)
    return pa.array(values, type=kind)


def kind_table(kind: str, rows: Rows, schema: pa.Schema) -> pa.Table:
    """An Arrow table of one kind's rows, its columns made by the schema's types."""
    columns = rows.columns[kind]
    return pa.Table.from_arrays([_column(columns[field.name], field.type) for field in schema], schema=schema)


class RowGroups:
    """Writes rows in row groups of exactly `size` rows (the last one shorter), whatever the
    sizes of the tables handed in, so a file's bytes never depend on how its input was chunked."""

    def __init__(self, sink: ParquetSink, size: int) -> None:
        self.sink, self.size = sink, size
        self.pending: list[pa.Table] = []
        self.rows = 0

    def write(self, table: pa.Table) -> None:
        self.pending.append(table)
        self.rows += table.num_rows
        if self.rows < self.size:
            return
        whole = pa.concat_tables(self.pending)
        full = whole.num_rows // self.size * self.size
        for start in range(0, full, self.size):
            self.sink.write(whole.slice(start, self.size).combine_chunks())
        rest = whole.slice(full)
        self.pending, self.rows = [rest], rest.num_rows

    def flush(self) -> None:
        if self.rows:
            self.sink.write(pa.concat_tables(self.pending).combine_chunks())
        self.pending, self.rows = [], 0


def chunk_seed(seed: int, chunk: str) -> list[int]:
    """The train shuffle's seed for one chunk: shards.seed and a hash of the chunk's key."""
    return [seed, int.from_bytes(hashlib.blake2b(chunk.encode("utf-8"), digest_size=8).digest(), "big")]


def train_batches(path: str, removed: pa.Table, column: str, seed: int) -> Iterator[pa.Table]:
    """The chunk's kept train rows, a bounded batch at a time, each in the seeded document order."""
    for rows in split_groups(path, "train", removed, ["doc_id", "doc_hash", "source", "offset", column], BATCH_BYTES):
        order = np.lexsort((np.arange(rows.num_rows), order_keys(rows["doc_hash"].to_numpy(), seed)))
        yield rows.take(pa.array(order))


def id_counts(nested: pa.ListArray, size: int) -> np.ndarray:
    """Occurrences of each id in the streams of these documents: their ids, and <s> once per
    document and </s> once per sentence (the reserved ids 2 and 3)."""
    ids = nested.flatten().flatten().to_numpy()
    counts = np.bincount(ids, minlength=size).astype(np.int64)
    counts[2] += len(nested)
    counts[3] += len(nested.flatten())
    return counts


def write_chunk(layout: Layout, chunk: str, removed: pa.Table, encoder: Encoder, options: dict) -> tuple[ShardStats, dict[str, np.ndarray]]:
    """Write one chunk's shard files for every split and enabled kind; return its statistics
    and its id counts per split."""
    prepared = layout.prepared(chunk)
    windows, shards = options["windows"], options["shards"]
    vocabulary = encoder.vocabulary
    id_type = id_type_name(shards["id_type"], vocabulary.size)
    kinds = enabled_kinds(windows)
    stats = ShardStats(chunk)
    counts = {split: np.zeros(vocabulary.size, np.int64) for split in SPLITS}
    codec = {"compression": shards["compression"], "level": shards["compression_level"], "dictionary": False}
    group = shards["row_group_rows"]
    for split in SPLITS:
        schemas = {kind: shard_schema(kind, id_type, windows).with_metadata(shard_metadata(split, kind, chunk, vocabulary, windows)) for kind in kinds}
        sinks = {kind: ParquetSink(layout.shard(split, kind, chunk), schemas[kind], **codec) for kind in kinds}
        writers = {kind: RowGroups(sink, group) for kind, sink in sinks.items()}
        steps = {kind: provenance_step(kind, windows) for kind in kinds}
        origins = {kind: RunWriter(layout.provenance(split, kind, chunk), provenance_metadata(split, kind, chunk, steps[kind]), steps[kind]) for kind in kinds}
        documents = DocumentWriter(layout.provenance_documents(split, chunk))
        cutter = RowCutter(windows, vocabulary, np.dtype(id_type))
        try:
            if split == "train":
                rng = np.random.default_rng(chunk_seed(shards["seed"], chunk))
                batches = train_batches(prepared, removed, encoder.column, shards["seed"])
            else:
                rng = None
                batches = kept_batches(prepared, split, removed, ["doc_id", "source", "offset", encoder.column], BATCH_BYTES)
            for rows in batches:
                nested = encoder.encode(rows, split, stats)
                counts[split] += id_counts(nested, vocabulary.size)
                cut = cutter.cut(nested, rows["doc_id"].to_pylist(), shuffle=rng)
                if rng is not None:
                    blocks = cut.columns["block"]
                    order = rng.permutation(len(blocks["ids"]))
                    blocks["ids"], cut.positions["block"] = blocks["ids"][order], cut.positions["block"][order]
                documents.add(rows, nested, cut.positions["stream"])
                for kind in kinds:
                    writers[kind].write(kind_table(kind, cut, schemas[kind]))
                    origins[kind].add(cut.positions[kind])
            if "block" in kinds:
                last, position = cutter.last_blocks()
                tail = Rows({"block": {"ids": last}}, {"block": position})
                writers["block"].write(kind_table("block", tail, schemas["block"]))
                origins["block"].add(position)
            for kind_writer in writers.values():
                kind_writer.flush()
        except BaseException:
            for sink in sinks.values():
                sink.abort()
            for origin in origins.values():
                origin.abort()
            documents.abort()
            raise
        for kind, sink in sinks.items():
            sink.close()
            path = layout.shard(split, kind, chunk)
            relative = Path(path).relative_to(layout.root).as_posix()
            stats.files.append(ShardFile(relative, split, kind, chunk, sink.rows, Path(path).stat().st_size, file_sha256(path)))
            stats.rows.setdefault(split, {})[kind] = sink.rows
        for origin in origins.values():
            origin.close()
        documents.close()
        for path in [*(layout.provenance(split, kind, chunk) for kind in kinds), layout.provenance_documents(split, chunk)]:
            stats.provenance[Path(path).relative_to(layout.root).as_posix()] = file_sha256(path)
        if "block" in kinds:
            stats.block_ids[split], stats.stream_ids[split] = cutter.block_coverage(), cutter.stream_ids
    return stats, counts


def main(argv: list[str] | None = None) -> None:
    run = job.start(argv, RULE, "Write one chunk's shard files.", per_chunk=True)
    layout, chunk = run.layout, run.chunk
    vocabulary = read_ids_table(layout.ids_table)
    encoder = encoder_for(vocabulary, run.options["vocabulary"]["unknown"], layout.subword_model, THREADS)
    removed = pq.ParquetFile(layout.removed(chunk)).read(use_threads=False)
    stats, counts = write_chunk(layout, chunk, removed, encoder, run.options)
    growth.record_sightings(layout.sightings(chunk), layout.prepared(chunk), removed, run.options["units"])
    table = pa.concat_tables(
        [
            pa.table({"split": [split] * int(np.count_nonzero(c)), "id": np.flatnonzero(c), "count": c[np.flatnonzero(c)]}, schema=ID_COUNTS_SCHEMA)
            for split, c in counts.items()
        ]
    )
    write_table(layout.id_counts(chunk), table)
    write_json(layout.shard_stats(chunk), stats.to_json())
    print(f"{chunk}: " + ", ".join(f"{split} {sum(kinds.values()):,} rows" for split, kinds in stats.rows.items()))


if __name__ == "__main__":
    main()
