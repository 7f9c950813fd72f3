"""Shards: gather one part of one split from every chunk, as ids, and write its Parquet files.

Word units: the job reads its part's slice of every prepared chunk (`steps.split.kept_part`),
leaves out removed duplicates and maps tokens to ids with the vocabulary, counting tokens, OOV
tokens and unknown classes per input file for the coverage statistics. Subword units: it reads
the parts the encode step wrote with the sentencepiece model.

Train parts order their documents by `order`, a seeded mix of their `doc_hash` (so chunking
never matters), cut rows, and shuffle them with a seeded permutation; a part holds only its
own documents (about 1/train_files of train), which bounds memory. Dev and test parts stream
their chunks in corpus order and keep that order.

Files per part, one per enabled kind:
  ngram-PPPP.parquet  context: fixed_size_list<id>[n-1], target: id
  block-PPPP.parquet  ids: fixed_size_list<id>[L+1]
  stream-PPPP.parquet doc_id: string, ids: list<id>
Each file's key-value metadata `corpusmill` holds JSON: split, kind, part, vocabulary hash and
size, the reserved ids, and n or L.
"""

from __future__ import annotations

import argparse
import json
from collections.abc import Iterable, Iterator
from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from .encode import ENCODED_SCHEMA
from .split import kept_part, order_keys
from .storage import ParquetSink, rebased_offsets, write_json
from .vocab import BOS, EOS, PAD, Lookup, Vocabulary, read_vocabulary
from .windows import CorpusBlocks, document_block_coverage, document_blocks, document_streams, ngram_windows

# Tokens per vocabulary lookup in dev and test parts (train looks its whole part up at once).
LOOKUP_TOKENS = 1 << 20

ID_TYPES = {"uint16": pa.uint16(), "uint32": pa.uint32(), "int64": pa.int64()}


def id_type(name: str, vocabulary_size: int) -> pa.DataType:
    """The configured id type, or the narrowest unsigned one holding every id."""
    if name == "auto":
        return pa.uint16() if vocabulary_size <= 1 << 16 else pa.uint32()
    chosen = ID_TYPES[name]
    if name == "uint16" and vocabulary_size > 1 << 16:
        raise SystemExit(f"corpusmill: shards.id_type = uint16 cannot hold {vocabulary_size} ids; use auto or uint32")
    return chosen


def kind_schema(kind: str, ids: pa.DataType, windows: dict) -> pa.Schema:
    if kind == "ngram":
        n = windows["ngram"]["n"]
        return pa.schema([("context", pa.list_(ids, n - 1)), ("target", ids)])
    if kind == "block":
        return pa.schema([("ids", pa.list_(ids, windows["blocks"]["length"] + 1))])
    return pa.schema([("doc_id", pa.string()), ("ids", pa.list_(ids))])


@dataclass
class Rows:
    """The rows of every enabled kind cut from one batch of documents (numpy arrays)."""

    context: np.ndarray
    target: np.ndarray
    blocks: np.ndarray
    doc_ids: list[str]
    streams: np.ndarray
    stream_lengths: np.ndarray


class RowCutter:
    """Cuts n-gram windows, blocks and streams from encoded documents."""

    def __init__(self, windows: dict, vocabulary: Vocabulary, dtype: np.dtype = np.dtype(np.int64)) -> None:
        # Cutting in the shard's own id type (e.g. uint16) keeps the job's memory 2-4x below int64.
        self.dtype = dtype
        reserved = vocabulary.reserved
        self.pad, self.bos, self.eos = reserved[PAD], reserved[BOS], reserved[EOS]
        self.ngram, self.block = windows["ngram"], windows["blocks"]
        self.corpus_blocks = (
            CorpusBlocks(self.block["length"], self.block["stride"], self.block["remainder"], self.pad)
            if self.block["span"] == "corpus"
            else None
        )
        # Stream ids cut so far, and of them those in at least one block (document span).
        self.stream_ids = self.block_ids = 0

    def block_coverage(self) -> tuple[int, int]:
        """(stream ids in at least one block, stream ids) of everything cut, after `last_blocks`."""
        covered = self.corpus_blocks.covered if self.corpus_blocks is not None else self.block_ids
        return covered, self.stream_ids

    def cut(self, table: pa.Table, shuffle: np.random.Generator | None = None) -> Rows:
        """The rows of a batch of documents; with `shuffle`, n-gram windows in a random order."""
        nested = table["sentences"].combine_chunks()
        sentences = nested.flatten()
        ids = sentences.flatten().to_numpy().astype(self.dtype)
        sentence_lengths = np.diff(sentences.offsets.to_numpy()).astype(np.int64)
        per_doc = np.diff(nested.offsets.to_numpy()).astype(np.int64)
        eos = self.eos if self.ngram["predict_end"] else None
        context, target = ngram_windows(ids, sentence_lengths, self.ngram["n"], self.bos, eos, shuffle)
        stream, doc_lengths = document_streams(ids, sentence_lengths, per_doc, self.bos, self.eos)
        if self.corpus_blocks is not None:
            blocks = self.corpus_blocks.feed(stream)
        else:
            blocks = document_blocks(
                stream, doc_lengths, self.block["length"], self.block["stride"], self.block["remainder"], self.pad
            )
            self.block_ids += document_block_coverage(doc_lengths, self.block["length"], self.block["stride"], self.block["remainder"])
        self.stream_ids += len(stream)
        return Rows(context, target, blocks, table["doc_id"].to_pylist(), stream, doc_lengths)

    def last_blocks(self) -> np.ndarray:
        width = self.block["length"] + 1
        return self.corpus_blocks.finish() if self.corpus_blocks is not None else np.empty((0, width), self.dtype)


def _fixed(values: np.ndarray, width: int, ids: pa.DataType) -> pa.Array:
    flat = pa.array(np.ascontiguousarray(values).reshape(-1), type=ids)
    return pa.FixedSizeListArray.from_arrays(flat, width)


def kind_table(kind: str, rows: Rows, ids: pa.DataType, schema: pa.Schema) -> pa.Table:
    """An Arrow table of one kind's rows."""
    if kind == "ngram":
        columns = [_fixed(rows.context, rows.context.shape[1], ids), pa.array(rows.target, type=ids)]
    elif kind == "block":
        columns = [_fixed(rows.blocks, rows.blocks.shape[1], ids)]
    else:
        offsets = np.concatenate([[0], np.cumsum(rows.stream_lengths)]).astype(np.int64)
        values = pa.array(rows.streams, type=ids)
        columns = [pa.array(rows.doc_ids, pa.string()), pa.LargeListArray.from_arrays(offsets, values).cast(pa.list_(ids))]
    return pa.Table.from_arrays(columns, schema=schema)


def _metadata(split: str, kind: str, part: int, vocabulary: Vocabulary, windows: dict) -> dict[bytes, bytes]:
    detail = {"ngram": {"n": windows["ngram"]["n"], "predict_end": windows["ngram"]["predict_end"]}, "block": dict(windows["blocks"]), "stream": {}}[kind]
    detail.pop("enabled", None)
    value = {
        "split": split,
        "kind": kind,
        "part": part,
        "vocabulary_sha256": vocabulary.digest(),
        "vocabulary_size": vocabulary.size,
        "reserved": vocabulary.reserved,
        **detail,
    }
    return {b"corpusmill": json.dumps(value, sort_keys=True).encode("utf-8")}


def encoded_parts(paths: list[str]) -> Iterator[pa.Table]:
    """The encode step's part files (subword units), in bounded batches."""
    for path in paths:
        parquet = pq.ParquetFile(path)
        for batch in parquet.iter_batches(batch_size=2048):
            yield pa.Table.from_batches([batch])


class TokenIds:
    """Maps prepared token lists to id lists and counts, per input file, tokens, OOV tokens and
    each unknown class (word units)."""

    def __init__(self, vocabulary: Vocabulary, unknown: str) -> None:
        self._lookup = Lookup(vocabulary, unknown)
        self._unknown_ids = np.array(sorted(vocabulary.unknown_ids().values()), dtype=np.int64)
        self.sources: dict[str, dict] = {}

    def encode(self, rows: pa.Table) -> pa.ListArray:
        """The id lists of `rows` (columns source, tokens), which may hold several input files."""
        nested = rows["tokens"].combine_chunks()
        sentences = nested.flatten()
        ids = self._lookup.ids(sentences.flatten())
        sources = pc.dictionary_encode(rows["source"].combine_chunks())
        tokens_per_row = np.diff(np.asarray(sentences.offsets)[np.asarray(rebased_offsets(nested))])
        source_of_token = np.repeat(sources.indices.to_numpy(zero_copy_only=False), tokens_per_row)
        names = sources.dictionary.to_pylist()
        tokens = np.bincount(source_of_token, minlength=len(names))
        # One key per (source, unknown id): unknown ids are below `span`.
        span = int(self._unknown_ids[-1]) + 1
        unknown = np.isin(ids, self._unknown_ids)
        keys, counts = np.unique(source_of_token[unknown] * span + ids[unknown], return_counts=True)
        for code, name in enumerate(names):
            figures = self.sources.setdefault(name, {"tokens": 0, "oov_tokens": 0, "unknown": {}})
            figures["tokens"] += int(tokens[code])
        for key, count in zip(keys.tolist(), counts.tolist()):
            code, value = divmod(key, span)
            figures = self.sources[names[code]]
            figures["oov_tokens"] += count
            figures["unknown"][str(value)] = figures["unknown"].get(str(value), 0) + count
        inner = pa.ListArray.from_arrays(rebased_offsets(sentences), pa.array(ids.astype(np.uint32), pa.uint32()))
        return pa.ListArray.from_arrays(rebased_offsets(nested), inner)


def prepared_parts(
    paths: list[str], split: str, part: int, parts: int, duplicates: pa.Table, token_ids: TokenIds, seed: int
) -> Iterator[pa.Table]:
    """One part of a split as id tables (doc_id, order, sentences), chunks in corpus order,
    each chunk's documents in corpus order, removed duplicates left out (word units).

    Tokens are looked up a batch of chunks at a time: each lookup hashes the vocabulary once,
    so one per chunk would cost more than the lookup itself. A train part comes as one table
    (its shard job holds the whole part to shuffle it anyway); dev and test in batches of
    about LOOKUP_TOKENS tokens, which bounds their memory."""
    budget = None if split == "train" else LOOKUP_TOKENS
    pending: list[pa.Table] = []
    held = 0
    for path in paths:
        rows = kept_part(path, split, part, parts, duplicates, ["doc_id", "doc_hash", "source", "tokens"])
        if rows.num_rows:
            pending.append(rows)
            held += len(pc.list_flatten(pc.list_flatten(rows["tokens"])))
        if pending and budget is not None and held >= budget:
            yield _encoded(pa.concat_tables(pending), token_ids, seed)
            pending, held = [], 0
    if pending:
        yield _encoded(pa.concat_tables(pending), token_ids, seed)


def _encoded(rows: pa.Table, token_ids: TokenIds, seed: int) -> pa.Table:
    order = pa.array(order_keys(rows["doc_hash"].to_numpy(), seed), pa.uint64())
    return pa.Table.from_arrays([rows["doc_id"], order, token_ids.encode(rows)], schema=ENCODED_SCHEMA)


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


def write_part(
    split: str, part: int, inputs: Iterable[pa.Table], outputs: dict[str, str], vocabulary: Vocabulary, config: dict
) -> dict:
    """Write one part's shard files from its id tables (doc_id, order, sentences); returns rows
    per kind, document/sentence/token counts and, with blocks, how many stream ids they hold
    (`block_ids` of `stream_ids`)."""
    windows, shards = config["windows"], config["shards"]
    ids = id_type(shards["id_type"], vocabulary.size)
    cutter = RowCutter(windows, vocabulary, np.dtype(ids.to_pandas_dtype()))
    schemas = {kind: kind_schema(kind, ids, windows).with_metadata(_metadata(split, kind, part, vocabulary, windows)) for kind in outputs}
    # No dictionary pages: id columns do not shrink by them, and without them the files write
    # and read faster (reading the train shards: 56 → 78 M ids per CPU-second, measured).
    codec = {"compression": shards["compression"], "level": shards["compression_level"], "dictionary": False}
    stats = {"split": split, "part": part, "documents": 0, "sentences": 0, "tokens": 0, "rows": dict.fromkeys(outputs, 0)}
    sinks = {kind: ParquetSink(path, schemas[kind], **codec) for kind, path in outputs.items()}
    group = shards["row_group_rows"]
    try:
        if split == "train":
            parts = list(inputs)
            table = pa.concat_tables(parts) if parts else None
            if table is not None and table.num_rows:
                table = table.sort_by([("order", "ascending"), ("doc_id", "ascending")])
                rng = np.random.default_rng([shards["seed"], part])
                rows = cutter.cut(table, shuffle=rng)
                rows.blocks = np.concatenate([rows.blocks, cutter.last_blocks()])
                _count(stats, table)
                rows.blocks = rows.blocks[rng.permutation(len(rows.blocks))]
                for kind, sink in sinks.items():
                    whole = kind_table(kind, rows, ids, schemas[kind])
                    for start in range(0, whole.num_rows, group):
                        sink.write(whole.slice(start, group))
        else:
            groups = {kind: RowGroups(sink, group) for kind, sink in sinks.items()}
            for table in inputs:
                _count(stats, table)
                rows = cutter.cut(table)
                for kind in sinks:
                    groups[kind].write(kind_table(kind, rows, ids, schemas[kind]))
            if "block" in sinks:
                tail = cutter.last_blocks()
                rows = Rows(np.empty((0, 1)), np.empty(0), tail, [], np.empty(0), np.empty(0, np.int64))
                groups["block"].write(kind_table("block", rows, ids, schemas["block"]))
            for rows_of_kind in groups.values():
                rows_of_kind.flush()
    except BaseException:
        for sink in sinks.values():
            sink.abort()
        raise
    for kind, sink in sinks.items():
        sink.close()
        stats["rows"][kind] = sink.rows
    if "block" in outputs:
        stats["block_ids"], stats["stream_ids"] = cutter.block_coverage()
    return stats


def _count(stats: dict, table: pa.Table) -> None:
    nested = table["sentences"].combine_chunks()
    stats["documents"] += len(nested)
    stats["sentences"] += len(nested.flatten())
    stats["tokens"] += len(nested.flatten().flatten())


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Write the shard files of one part of one split.")
    parser.add_argument("--split", required=True)
    parser.add_argument("--part", type=int, required=True)
    parser.add_argument("--vocabulary", required=True)
    parser.add_argument("--duplicates", help="removed duplicates (word units)")
    parser.add_argument("--options", required=True)
    parser.add_argument("--stats", required=True)
    parser.add_argument("--output", action="append", default=[], help="KIND=PATH, once per enabled kind")
    parser.add_argument(
        "inputs", nargs="*", help="in corpus order: prepared chunk tables (word units) or this part's encoded files (subword units)"
    )
    args = parser.parse_args(argv)
    config = json.loads(args.options)
    outputs = dict(item.split("=", 1) for item in args.output)
    vocabulary = read_vocabulary(args.vocabulary)
    if config["units"] == "subword":
        write_json(args.stats, write_part(args.split, args.part, encoded_parts(args.inputs), outputs, vocabulary, config))
        return
    if not args.duplicates:
        raise SystemExit("corpusmill: shards: units = word needs --duplicates")
    shards = config["shards"]
    parts = shards["train_files"] if args.split == "train" else shards["heldout_files"]
    token_ids = TokenIds(vocabulary, config["vocabulary"]["unknown"])
    tables = prepared_parts(args.inputs, args.split, args.part, parts, pq.read_table(args.duplicates), token_ids, shards["seed"])
    stats = write_part(args.split, args.part, tables, outputs, vocabulary, config)
    write_json(args.stats, {**stats, "sources": dict(sorted(token_ids.sources.items()))})


if __name__ == "__main__":
    main()
