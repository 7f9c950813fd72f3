"""Encode one prepared chunk: tokens → ids, documents spread over shard parts.

Each document goes to part `order % parts` of its split, where `order` is a seeded hash of the
document id; the shard step later orders train documents by that hash, so shards do not
depend on how the corpus was chunked. Encoded file columns: doc_id, order (uint64),
sentences (list of sentences, each a list of uint32 ids).
"""

from __future__ import annotations

import argparse
import hashlib
import json

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from steps.layout import SPLITS
from steps.split import duplicate_mask
from steps.storage import ParquetSink, write_json
from steps.vocab import Lookup, Vocabulary, read_vocabulary

ENCODED_SCHEMA = pa.schema(
    [("doc_id", pa.string()), ("order", pa.uint64()), ("sentences", pa.list_(pa.list_(pa.uint32())))]
)


def order_keys(doc_ids: list[str], seed: int) -> np.ndarray:
    """A seeded 64-bit hash per document id: the train shuffle order and the part number."""
    salt = seed.to_bytes(8, "big")
    return np.array(
        [int.from_bytes(hashlib.blake2b(d.encode("utf-8"), digest_size=8, key=salt).digest(), "big") for d in doc_ids],
        dtype=np.uint64,
    )


class TokenEncoder:
    """Maps a chunk table's nested token lists to nested id lists (word units)."""

    def __init__(self, vocabulary: Vocabulary, unknown: str) -> None:
        self._lookup = Lookup(vocabulary, unknown)

    def encode(self, tokens: pa.ChunkedArray | pa.Array) -> pa.Array:
        nested = tokens.combine_chunks() if isinstance(tokens, pa.ChunkedArray) else tokens
        sentences = nested.flatten()
        flat = sentences.flatten()
        ids = pa.array(self._lookup.ids(flat).astype(np.uint32), pa.uint32())
        inner = pa.ListArray.from_arrays(_rebased(sentences), ids)
        return pa.ListArray.from_arrays(_rebased(nested), inner)


def _rebased(array: pa.ListArray) -> pa.Array:
    offsets = array.offsets.to_numpy()
    return pa.array((offsets - offsets[0]).astype(np.int32), pa.int32())


def encode_chunk(
    prepared: str,
    source: str,
    duplicates: pa.Table,
    encoder: TokenEncoder,
    unknown_ids: np.ndarray,
    parts: dict[str, int],
    seed: int,
    outputs: dict[tuple[str, int], str],
) -> dict:
    """Write the encoded parts of one chunk; return its statistics per split."""
    stats = {split: {"documents": 0, "sentences": 0, "tokens": 0, "oov_tokens": 0, "unknown": {}} for split in SPLITS}
    sinks = {key: ParquetSink(path, ENCODED_SCHEMA, compression="zstd", level=1) for key, path in outputs.items()}
    try:
        parquet = pq.ParquetFile(prepared)
        for batch in parquet.iter_batches(batch_size=4096, columns=["doc_id", "offset", "split", "tokens"]):
            table = pa.Table.from_batches([batch])
            table = table.filter(pc.invert(duplicate_mask(duplicates, source, table["offset"])))
            for split in SPLITS:
                rows = table.filter(pc.equal(table["split"], split))
                if not rows.num_rows:
                    continue
                encoded = encoder.encode(rows["tokens"])
                _tally(stats[split], encoded, unknown_ids)
                doc_ids = rows["doc_id"].to_pylist()
                order = order_keys(doc_ids, seed)
                part_of = order % np.uint64(parts[split])
                for part in range(parts[split]):
                    mask = part_of == part
                    if mask.any():
                        selected = pa.array(mask)
                        sinks[(split, part)].write(
                            pa.Table.from_arrays(
                                [pc.filter(rows["doc_id"], selected), pa.array(order[mask]), pc.filter(encoded, selected)],
                                schema=ENCODED_SCHEMA,
                            )
                        )
    except BaseException:
        for sink in sinks.values():
            sink.abort()
        raise
    for sink in sinks.values():
        sink.close()
    return stats


def _tally(stats: dict, encoded: pa.ListArray, unknown_ids: np.ndarray) -> None:
    sentences = encoded.flatten()
    ids = sentences.flatten().to_numpy()
    stats["documents"] += len(encoded)
    stats["sentences"] += len(sentences)
    stats["tokens"] += len(ids)
    unknown = ids[np.isin(ids, unknown_ids)]
    stats["oov_tokens"] += len(unknown)
    values, counts = np.unique(unknown, return_counts=True)
    for value, count in zip(values.tolist(), counts.tolist()):
        stats["unknown"][str(value)] = stats["unknown"].get(str(value), 0) + count


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Encode one prepared chunk into id parts per split.")
    parser.add_argument("--prepared", required=True)
    parser.add_argument("--source", required=True, help="the chunk's input file, relative to the corpus root")
    parser.add_argument("--duplicates", required=True)
    parser.add_argument("--vocabulary", required=True)
    parser.add_argument("--options", required=True)
    parser.add_argument("--stats", required=True)
    parser.add_argument("outputs", nargs="+", help="encoded part files, named <split>-<part>.parquet")
    args = parser.parse_args(argv)
    config = json.loads(args.options)
    vocabulary = read_vocabulary(args.vocabulary)
    parts = {"train": config["shards"]["train_files"], "dev": config["shards"]["heldout_files"], "test": config["shards"]["heldout_files"]}
    outputs = {}
    for path in args.outputs:
        split, part = path.rsplit("/", 1)[-1].removesuffix(".parquet").split("-")
        outputs[(split, int(part))] = path
    encoder = TokenEncoder(vocabulary, config["vocabulary"]["unknown"])
    unknown_ids = np.array(sorted(vocabulary.unknown_ids().values()), dtype=np.int64)
    stats = encode_chunk(
        args.prepared, args.source, pq.read_table(args.duplicates), encoder, unknown_ids, parts, config["shards"]["seed"], outputs
    )
    write_json(args.stats, {"source": args.source, "splits": stats})


if __name__ == "__main__":
    main()
