"""Vocabulary growth: distinct types after each prefix of the train stream, for the report's
Heaps plot and fit (stats/growth.json).

The stream is the train documents of the prepared chunks in corpus order, duplicates left out:
exactly what the vocabulary counts (word units: interim/vocabulary/counts.parquet). Word units count word tokens; subword units count
whitespace-separated words of the cleaned sentences, not pieces, because the model fixes the
number of pieces and nearly all of them occur early in the stream, while words describe the
corpus the model has to cover. Memory grows with the number of distinct types, never with the
number of tokens. The job runs beside the shard jobs: it needs only the prepared chunks, the
duplicates and the token counts.

growth.json: `unit` ("words"), `read` (stream positions, log-spaced) and `distinct` (types seen
among the first `read` tokens), lists of equal length.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Sequence

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from . import job
from .chunks import kept_batches
from .laws import growth_curve
from .storage import write_json

RULE = "growth"
SECTIONS = ("units",)
BATCH_TOKENS = 1 << 20
BATCH_ROWS = 4096
# Stored (uncompressed) bytes of a chunk's rows read at once: bounds the job's memory.
READ_BYTES = 16 << 20


def _train_rows(chunks: Sequence[tuple[str, pa.Table]], column: str) -> Iterator[tuple[str, pa.Array]]:
    """(chunk path, `column` of its kept train documents) in corpus order, for each (prepared
    chunk, its removed documents), in slices of BATCH_ROWS documents, never holding more of a
    chunk than READ_BYTES of stored rows."""
    for path, removed in chunks:
        for rows in kept_batches(path, "train", removed, [column], READ_BYTES):
            for start in range(0, rows.num_rows, BATCH_ROWS):
                yield path, rows[column].slice(start, BATCH_ROWS).combine_chunks()


def train_token_batches(chunks: Sequence[tuple[str, pa.Table]], vocabulary: pa.Array) -> Iterator[np.ndarray]:
    """Type ids (positions in `vocabulary`) of the train tokens in corpus order, in batches of
    at most BATCH_TOKENS tokens (however long one document is)."""
    pending: list[tuple[str, pa.Array]] = []
    size = 0
    for path, rows in _train_rows(chunks, "tokens"):
        tokens = pc.list_flatten(pc.list_flatten(rows))
        for start in range(0, len(tokens), BATCH_TOKENS):
            piece = tokens.slice(start, BATCH_TOKENS)
            pending.append((path, piece))
            size += len(piece)
            if size >= BATCH_TOKENS:
                yield _type_ids(pending, vocabulary)
                pending, size = [], 0
    if pending:
        yield _type_ids(pending, vocabulary)


def whitespace_words(sentences: pa.Array) -> pa.Array:
    """The runs of non-space characters of each sentence, in order: the same RE2 `\\S+` runs the
    encode step counts as words, so their total equals coverage.json's `words`."""
    parts = pc.list_flatten(pc.split_pattern_regex(sentences, r"\s+"))
    return parts.filter(pc.greater(pc.binary_length(parts), 0))


def train_word_batches(chunks: Sequence[tuple[str, pa.Table]]) -> Iterator[pa.Array]:
    """Whitespace words of the train sentences in corpus order (subword mode), in batches of
    at most BATCH_TOKENS words."""
    pending: list[pa.Array] = []
    size = 0
    for _, sentences in _train_rows(chunks, "sentences"):
        words = whitespace_words(pc.list_flatten(sentences))
        for start in range(0, len(words), BATCH_TOKENS):
            piece = words.slice(start, BATCH_TOKENS)
            pending.append(piece)
            size += len(piece)
            if size >= BATCH_TOKENS:
                yield pa.concat_arrays(pending)
                pending, size = [], 0
    if pending:
        yield pa.concat_arrays(pending)


def word_growth(batches: Iterable[pa.Array], points: int = 400) -> tuple[np.ndarray, np.ndarray]:
    """(words read, distinct words seen) at log-spaced positions of a stream of string batches.

    Each word gets an id on first sight, then laws.growth_curve counts; each batch is
    dictionary-encoded, so Python touches only its distinct words.
    """
    ids: dict[str, int] = {}

    def id_batches() -> Iterator[np.ndarray]:
        for words in batches:
            encoded = pc.dictionary_encode(words)
            distinct = np.array([ids.setdefault(word, len(ids)) for word in encoded.dictionary.to_pylist()], dtype=np.int64)
            yield distinct[encoded.indices.to_numpy(zero_copy_only=False)]

    return growth_curve(id_batches(), points=points)


def _type_ids(pieces: list[tuple[str, pa.Array]], vocabulary: pa.Array) -> np.ndarray:
    """Positions of the tokens of (chunk path, tokens) pieces in the token-count table.

    Arrow finds each count-table token among the batch's distinct tokens (hashing the batch's
    distinct tokens is cheaper than hashing the whole, larger table for every batch), and the
    result is inverted."""
    encoded = pc.dictionary_encode(pa.concat_arrays([tokens for _, tokens in pieces]))
    in_batch = pc.index_in(vocabulary, value_set=encoded.dictionary)
    present = np.flatnonzero(pc.is_valid(in_batch).to_numpy(zero_copy_only=False))
    positions = np.full(len(encoded.dictionary), -1, dtype=np.int64)
    positions[pc.drop_null(in_batch).to_numpy()] = present
    if (positions < 0).any():
        token = encoded.dictionary[int(np.argmax(positions < 0))]
        path = next(path for path, tokens in pieces if pc.any(pc.equal(tokens, token)).as_py())
        raise SystemExit(
            f"corpusmill: {path}: train token {token.as_py()!r} is not in the build's token counts; "
            "the counts are older than the prepared chunks: rerun the workflow"
        )
    return positions[encoded.indices.to_numpy(zero_copy_only=False)]


def main(argv: list[str] | None = None) -> None:
    run = job.start(argv, RULE, "Measure vocabulary growth over the train stream of a build.")
    layout = run.layout
    chunks = [(layout.prepared(c), pq.ParquetFile(layout.removed(c)).read(use_threads=False)) for c in run.chunks()]
    if run.options["units"] == "subword":
        read, distinct = word_growth(train_word_batches(chunks))
    else:
        vocabulary = pq.ParquetFile(layout.word_counts).read(columns=["token"], use_threads=False)["token"].combine_chunks()
        read, distinct = growth_curve(train_token_batches(chunks, vocabulary), len(vocabulary))
    write_json(layout.growth, {"unit": "words", "read": read.tolist(), "distinct": distinct.tolist()})


if __name__ == "__main__":
    main()
