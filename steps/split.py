"""Split: train/dev/test by a salted hash of a document key, and removal of exact duplicates.

A document's split depends only on its key (by default its cleaned text) and the salt, so
adding documents never moves existing ones, and exact duplicates always land together.
Duplicates are then removed across the whole corpus: the first by (path, offset) is kept.
"""

from __future__ import annotations

import argparse
import hashlib
from collections.abc import Sequence

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from steps.layout import SPLITS
from steps.storage import write_table

_TWO_64 = float(1 << 64)

DUPLICATES_SCHEMA = pa.schema(
    [("source", pa.string()), ("offset", pa.int64()), ("doc_id", pa.string()), ("duplicate_of", pa.string())]
)


def fingerprint(text: str) -> bytes:
    """16-byte content hash of a cleaned document (exact-duplicate detection)."""
    return hashlib.blake2b(text.encode("utf-8"), digest_size=16).digest()


def split_position(key: bytes, salt: str) -> float:
    """A uniform number in [0, 1) drawn from the key and the salt."""
    digest = hashlib.blake2b(key, digest_size=8, key=salt.encode("utf-8")[:64]).digest()
    return int.from_bytes(digest, "big") / _TWO_64


def assign_split(key: bytes, salt: str, fractions: dict[str, float]) -> str:
    """'train', 'dev' or 'test' for a document key, by cumulative fractions in that order."""
    position = split_position(key, salt)
    bound = 0.0
    for name in SPLITS:
        bound += fractions[name]
        if position < bound:
            return name
    return SPLITS[-1] if fractions[SPLITS[-1]] > 0 else next(n for n in reversed(SPLITS) if fractions[n] > 0)


def find_duplicates(prepared_paths: Sequence[str]) -> pa.Table:
    """Rows (source, offset, doc_id, duplicate_of) for every document whose fingerprint was seen
    earlier; `prepared_paths` must be in corpus order (path, then chunk index)."""
    tables = [pq.read_table(p, columns=["source", "offset", "doc_id", "fingerprint"]) for p in prepared_paths]
    table = pa.concat_tables(tables) if tables else DUPLICATES_SCHEMA.empty_table()
    if table.num_rows == 0:
        return DUPLICATES_SCHEMA.empty_table()
    column = table["fingerprint"].combine_chunks()
    prints = np.frombuffer(column.buffers()[1], dtype="V16", count=len(column), offset=column.offset * 16)
    _, first, inverse = np.unique(prints, return_index=True, return_inverse=True)
    owner = first[inverse]
    rows = np.flatnonzero(owner != np.arange(len(prints)))
    doc_ids = table["doc_id"]
    return pa.table(
        {
            "source": table["source"].take(rows),
            "offset": table["offset"].take(rows),
            "doc_id": doc_ids.take(rows),
            "duplicate_of": doc_ids.take(owner[rows]),
        },
        schema=DUPLICATES_SCHEMA,
    )


def duplicate_mask(duplicates: pa.Table, source: str, offsets: pa.Array) -> pa.Array:
    """Boolean mask over a chunk's rows: True where the row is a removed duplicate."""
    mine = duplicates.filter(pc.equal(duplicates["source"], source))["offset"]
    return pc.is_in(offsets, value_set=mine.combine_chunks() if mine.num_chunks else pa.array([], pa.int64()))


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Find exact duplicate documents across prepared chunks.")
    parser.add_argument("--output", required=True)
    parser.add_argument("--enabled", choices=["true", "false"], default="true")
    parser.add_argument("prepared", nargs="*", help="prepared chunk files in corpus order")
    args = parser.parse_args(argv)
    table = find_duplicates(args.prepared) if args.enabled == "true" else DUPLICATES_SCHEMA.empty_table()
    write_table(args.output, table)


if __name__ == "__main__":
    main()
