"""Signatures: what each prepare job keeps of its documents for near-duplicates and
contamination, computed from the batches it already holds (no second pass over the text).

Per chunk, one row per kept document in the order the job met them (`Layout.signatures`):
source, offset, split, the band keys `band_00` … (steps.near_duplicates.band_keys; 0 for a
document without words) and `grams`, the hashes of its runs of n words (steps.contamination).
Beside it (`Layout.verification`) the 16-bit verification slots of each row's signature, raw
little-endian uint16, `permutations` a row: the corpus-wide job fetches the rows of candidate
pairs from a memory map instead of holding every signature.
"""

from __future__ import annotations

from contextlib import ExitStack
from dataclasses import dataclass
from types import TracebackType
from typing import BinaryIO

import numpy as np
import pyarrow as pa

from .near_duplicates import MinHashOptions, band_keys, document_words, run_hashes, signatures, verification
from .storage import ParquetSink, atomic_path


@dataclass(frozen=True)
class SignatureOptions:
    """The options prepare reads: shingles and permutations, and the n of the n-grams."""

    minhash: MinHashOptions
    ngram: int

    @classmethod
    def from_config(cls, config: dict) -> SignatureOptions:
        near = config["near_duplicates"]
        minhash = MinHashOptions(near["shingle_words"], near["permutations"], near["bands"], seed=near["seed"])
        return cls(minhash, config["contamination"]["ngram_words"])


def band_names(bands: int) -> list[str]:
    return [f"band_{band:02d}" for band in range(bands)]


def signature_schema(bands: int) -> pa.Schema:
    return pa.schema(
        [("source", pa.string()), ("offset", pa.int64()), ("split", pa.string())]
        + [(name, pa.uint64()) for name in band_names(bands)]
        + [("grams", pa.list_(pa.uint64()))]
    )


def band_count(schema: pa.Schema) -> int:
    """The bands a signatures file holds."""
    return sum(name.startswith("band_") for name in schema.names)


class SignatureWriter:
    """Writes a chunk's signatures file and its verification slots, batch by batch; both are
    renamed into place only when the chunk completes."""

    def __init__(self, path: str, slots_path: str, options: SignatureOptions) -> None:
        self.options = options
        self.schema = signature_schema(options.minhash.bands)
        self._stack = ExitStack()
        # Band keys and gram hashes are random 64-bit values: neither a dictionary nor a codec
        # makes them smaller, and trying both cost a third of this writer's time. Only the
        # repeated names get a dictionary.
        self._sink = self._stack.enter_context(ParquetSink(path, self.schema, compression="none", dictionary=["source", "split"]))
        temporary = self._stack.enter_context(atomic_path(slots_path))
        self._slots: BinaryIO = self._stack.enter_context(open(temporary, "wb"))

    def add(self, batch: pa.Table, body: str) -> None:
        """Take in a batch of prepared rows; `body` names its text column (tokens or sentences)."""
        words = document_words(batch[body])
        signature = signatures(words, self.options.minhash)
        keys = band_keys(signature, self.options.minhash.bands)
        grams, starts = run_hashes(words, self.options.ngram)
        columns = [batch["source"], batch["offset"], batch["split"]]
        columns += [pa.array(np.ascontiguousarray(keys[:, band])) for band in range(keys.shape[1])]
        columns.append(pa.ListArray.from_arrays(pa.array(starts.astype(np.int32)), pa.array(grams, pa.uint64())))
        self._sink.write(pa.Table.from_arrays(columns, schema=self.schema))
        self._slots.write(verification(signature).astype("<u2").tobytes())

    def __enter__(self) -> SignatureWriter:
        return self

    def __exit__(self, kind: type[BaseException] | None, error: BaseException | None, trace: TracebackType | None) -> None:
        self._stack.__exit__(kind, error, trace)
