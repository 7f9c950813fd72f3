"""Encode one prepared chunk with the sentencepiece model (subword units): sentences → piece
ids, documents spread over shard parts.

Each document goes to the part of its split that holds its `doc_hash` (steps.split.part_of)
and carries `order`, a seeded mix of its `doc_hash`, by which the shard step orders train
documents, so shards do not depend on how the corpus was chunked. Encoded file columns: doc_id,
order (uint64), sentences (list of sentences, each a list of uint32 ids).

The model encodes whole cleaned sentences in batched calls on the rule's threads; the job
also writes the chunk's piece counts per split (split, id, count; the vocabulary step sums
them) and subword figures per input file and split in its statistics (a pack holds several
files). Word units need no such job: the shard step maps
the prepared tokens itself (steps/shards.py).
"""

from __future__ import annotations

import argparse
import json

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import sentencepiece as spm

from .layout import SPLITS
from .split import kept_part, order_keys, part_of
from .storage import ParquetSink, rebased_offsets, write_json, write_table
from .vocab import BOS, EOS, RESERVED, UNK

BATCH_ROWS = 4096
# The statistics kept per input file and split.
FIGURES = ("documents", "sentences", "tokens", "oov_tokens", "words", "byte_pieces", "byte_runs")

ENCODED_SCHEMA = pa.schema(
    [("doc_id", pa.string()), ("order", pa.uint64()), ("sentences", pa.list_(pa.list_(pa.uint32())))]
)


class PieceEncoder:
    """Maps a chunk table's sentence lists to nested id lists with a sentencepiece model."""

    def __init__(self, model: str, threads: int) -> None:
        self._processor = spm.SentencePieceProcessor(model_file=model)
        self._threads = threads
        self.size = self._processor.get_piece_size()
        self.byte_mask = np.array([self._processor.is_byte(i) for i in range(self.size)], dtype=bool)

    def encode(self, sentences: pa.ChunkedArray | pa.Array) -> pa.Array:
        nested = sentences.combine_chunks() if isinstance(sentences, pa.ChunkedArray) else sentences
        texts = nested.flatten().to_pylist()
        # Plain id lists converted by Arrow in one call: faster than sentencepiece's per-sentence
        # numpy arrays and than flattening the lists in Python (measured 3x).
        pieces = self._processor.encode(texts, num_threads=self._threads)
        inner = pa.array(pieces, type=pa.list_(pa.uint32()))
        return pa.ListArray.from_arrays(rebased_offsets(nested), inner)


PIECE_COUNTS_SCHEMA = pa.schema([("split", pa.string()), ("id", pa.int64()), ("count", pa.int64())])


class PieceTally:
    """Subword figures per split: piece counts by id, whitespace words, byte pieces and byte runs.

    A run of consecutive byte pieces inside a sentence is what one <unk> would be without byte
    fallback (sentencepiece merges adjacent unknown characters into one <unk>)."""

    def __init__(self, encoder: PieceEncoder) -> None:
        self._byte_mask = encoder.byte_mask
        self.counts = {split: np.zeros(encoder.size, np.int64) for split in SPLITS}

    def add(self, split: str, sentences: pa.ChunkedArray, encoded: pa.ListArray) -> dict[str, int]:
        """Count the pieces of one batch, and <s> and </s> as they occur in its id streams (once
        per document and once per sentence); returns its whitespace words, byte pieces and byte runs."""
        texts = pc.list_flatten(sentences)
        per_sentence = encoded.flatten()
        ids = per_sentence.flatten().to_numpy().astype(np.int64)
        self.counts[split] += np.bincount(ids, minlength=len(self.counts[split]))
        self.counts[split][RESERVED.index(BOS)] += len(encoded)
        self.counts[split][RESERVED.index(EOS)] += len(per_sentence)
        is_byte = self._byte_mask[ids]
        starts = np.zeros(len(ids), dtype=bool)
        offsets = per_sentence.offsets.to_numpy()
        starts[offsets[:-1][offsets[:-1] < offsets[-1]] - offsets[0]] = True
        previous = np.concatenate([[False], is_byte[:-1]]) & ~starts
        return {
            "words": int(pc.sum(pc.count_substring_regex(texts, r"\S+")).as_py() or 0),
            "byte_pieces": int(is_byte.sum()),
            "byte_runs": int((is_byte & ~previous).sum()),
        }

    def table(self) -> pa.Table:
        """Non-zero piece counts as (split, id, count) rows."""
        parts = []
        for split in SPLITS:
            ids = np.flatnonzero(self.counts[split])
            parts.append(
                pa.table(
                    {"split": pa.array([split] * len(ids), pa.string()), "id": pa.array(ids, pa.int64()), "count": pa.array(self.counts[split][ids], pa.int64())},
                    schema=PIECE_COUNTS_SCHEMA,
                )
            )
        return pa.concat_tables(parts)


def encode_chunk(
    prepared: str,
    duplicates: pa.Table,
    encoder: PieceEncoder,
    parts: dict[str, int],
    seed: int,
    outputs: dict[tuple[str, int], str],
    pieces: PieceTally,
) -> dict[str, dict]:
    """Write the encoded parts of one chunk; return its statistics per input file and split."""
    stats: dict[str, dict] = {}
    sinks = {key: ParquetSink(path, ENCODED_SCHEMA, compression="zstd", level=1) for key, path in outputs.items()}
    try:
        for split in SPLITS:
            rows_of_split = kept_part(prepared, split, 0, 1, duplicates, ["doc_id", "doc_hash", "source", "sentences"])
            for source, rows_of_source in _by_source(rows_of_split):
                figures = stats.setdefault(source, {name: dict.fromkeys(FIGURES, 0) for name in SPLITS})[split]
                for start in range(0, rows_of_source.num_rows, BATCH_ROWS):
                    rows = rows_of_source.slice(start, BATCH_ROWS)
                    encoded = encoder.encode(rows["sentences"])
                    _tally(figures, encoded)
                    for key, value in pieces.add(split, rows["sentences"], encoded).items():
                        figures[key] += value
                    _spread(rows, encoded, parts[split], seed, {p: sinks[(split, p)] for p in range(parts[split])})
    except BaseException:
        for sink in sinks.values():
            sink.abort()
        raise
    for sink in sinks.values():
        sink.close()
    return dict(sorted(stats.items()))


def _by_source(rows: pa.Table) -> list[tuple[str, pa.Table]]:
    """The runs of rows of one input file each, in order (rows come sorted by file)."""
    if not rows.num_rows:
        return []
    codes = pc.dictionary_encode(rows["source"].combine_chunks())
    indices = codes.indices.to_numpy(zero_copy_only=False)
    starts = [0, *(np.flatnonzero(indices[1:] != indices[:-1]) + 1).tolist()]
    names = codes.dictionary.to_pylist()
    return [
        (names[indices[start]], rows.slice(start, stop - start))
        for start, stop in zip(starts, [*starts[1:], rows.num_rows])
    ]


def _spread(rows: pa.Table, encoded: pa.ListArray, parts: int, seed: int, sinks: dict[int, ParquetSink]) -> None:
    """Write each encoded document to the part of its split that holds its `doc_hash`."""
    order = order_keys(rows["doc_hash"].to_numpy(), seed)
    placed = part_of(rows["doc_hash"].to_numpy(), parts)
    for part in range(parts):
        mask = placed == part
        if mask.any():
            selected = pa.array(mask)
            sinks[part].write(
                pa.Table.from_arrays(
                    [pc.filter(rows["doc_id"], selected), pa.array(order[mask]), pc.filter(encoded, selected)],
                    schema=ENCODED_SCHEMA,
                )
            )


def _tally(stats: dict, encoded: pa.ListArray) -> None:
    sentences = encoded.flatten()
    ids = sentences.flatten().to_numpy()
    stats["documents"] += len(encoded)
    stats["sentences"] += len(sentences)
    stats["tokens"] += len(ids)
    stats["oov_tokens"] += int(np.count_nonzero(ids == RESERVED.index(UNK)))


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Encode one prepared chunk into piece-id parts per split (subword units).")
    parser.add_argument("--prepared", required=True)
    parser.add_argument("--duplicates", required=True)
    parser.add_argument("--model", required=True, help="sentencepiece model")
    parser.add_argument("--pieces", required=True, help="output: piece counts per split")
    parser.add_argument("--threads", type=int, default=1, help="threads of the batched encoder")
    parser.add_argument("--options", required=True)
    parser.add_argument("--stats", required=True)
    parser.add_argument("outputs", nargs="+", help="encoded part files, named <split>-<part>.parquet")
    args = parser.parse_args(argv)
    config = json.loads(args.options)
    parts = {"train": config["shards"]["train_files"], "dev": config["shards"]["heldout_files"], "test": config["shards"]["heldout_files"]}
    outputs = {}
    for path in args.outputs:
        split, part = path.rsplit("/", 1)[-1].removesuffix(".parquet").split("-")
        outputs[(split, int(part))] = path
    encoder = PieceEncoder(args.model, args.threads)
    tally = PieceTally(encoder)
    stats = encode_chunk(
        args.prepared, pq.read_table(args.duplicates), encoder, parts, config["shards"]["seed"], outputs, tally
    )
    write_table(args.pieces, tally.table())
    write_json(args.stats, {"units": "subword", "sources": stats})


if __name__ == "__main__":
    main()
