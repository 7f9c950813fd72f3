"""Encoders: a chunk's text as ids, with the same figures whatever the units.

Both encoders take prepared rows (column `source` and their unit column) and return the
documents' ids as nested lists (documents → sentences → uint32 ids), adding the figures of
each input file and split to a ShardStats (steps.formats.Figures): documents, sentences,
tokens, words, unknown tokens and the symbol each went to. The word encoder looks words up in
the build's ids and maps the others to their unknown class (by shape, or <unk>); each token is
a word. The piece encoder runs the sentencepiece model, counting whitespace words, <unk>
pieces, byte pieces and runs of them (each run one <unk> without byte fallback). Nothing after
the encoder asks which units it has.
"""

from __future__ import annotations

from typing import Protocol

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from .formats import UNK, Figures, ShardStats, Vocabulary
from .storage import rebased_offsets
from .vocabulary import unknown_class


class Encoder(Protocol):
    vocabulary: Vocabulary
    column: str  # the prepared column it reads

    def encode(self, rows: pa.Table, split: str, stats: ShardStats) -> pa.ListArray: ...


def _per_source(rows: pa.Table) -> tuple[list[str], np.ndarray]:
    """The distinct input files of `rows` and each row's position among them."""
    encoded = pc.dictionary_encode(rows["source"].combine_chunks())
    return encoded.dictionary.to_pylist(), encoded.indices.to_numpy(zero_copy_only=False)


def _nested(nested: pa.ListArray, ids: np.ndarray) -> pa.ListArray:
    """`ids` (one per token of `nested`, a list of sentences per row) in the shape of `nested`."""
    sentences = nested.flatten()
    inner = pa.ListArray.from_arrays(rebased_offsets(sentences), pa.array(ids.astype(np.uint32), pa.uint32()))
    return pa.ListArray.from_arrays(rebased_offsets(nested), inner)


def _add_shape(figures: dict[str, Figures], names: list[str], source_of_row: np.ndarray, nested: pa.ListArray) -> np.ndarray:
    """Count documents and sentences per source; return each token's source code."""
    sentences = nested.flatten()
    per_row_sentences = np.diff(np.asarray(rebased_offsets(nested)))
    token_ends = np.asarray(rebased_offsets(sentences))
    row_ends = np.asarray(rebased_offsets(nested))
    tokens_per_row = token_ends[row_ends[1:]] - token_ends[row_ends[:-1]]
    for code, name in enumerate(names):
        mine = source_of_row == code
        figures[name].documents += int(mine.sum())
        figures[name].sentences += int(per_row_sentences[mine].sum())
        figures[name].tokens += int(tokens_per_row[mine].sum())
    return np.repeat(source_of_row, tokens_per_row)


class WordEncoder:
    """Words → ids; out-of-vocabulary words → their unknown class.

    Each call dictionary-encodes its tokens, then looks the vocabulary's words up among those
    distinct tokens with Arrow's `index_in`: the hash table is built over the batch's few
    distinct tokens, not over every word of the vocabulary on every call (the cost that grew
    with the vocabulary), and each word is one probe. Only OOV tokens are classified in Python."""

    column = "tokens"

    def __init__(self, vocabulary: Vocabulary, unknown: str) -> None:
        self.vocabulary = vocabulary
        self._first = vocabulary.first_word_id
        self._words = vocabulary.token_array.slice(self._first)
        self._unknown = unknown
        self._classes = vocabulary.unknown_ids()
        self._unknown_ids = np.array(sorted(self._classes.values()), dtype=np.int64)

    def ids(self, tokens: pa.Array) -> np.ndarray:
        """int64 ids of `tokens` (a string array)."""
        encoded = pc.dictionary_encode(tokens)
        place = pc.index_in(self._words, value_set=encoded.dictionary)  # each word's place among the distinct tokens
        words = np.flatnonzero(pc.is_valid(place).to_numpy(zero_copy_only=False))
        distinct = np.full(len(encoded.dictionary), -1, np.int64)
        distinct[pc.drop_null(place).to_numpy()] = words + self._first  # ids name distinct words (steps.vocabulary)
        missing = np.flatnonzero(distinct < 0)
        unk = self._classes[UNK]
        if self._unknown == "shape" and len(missing):
            classes = self._classes
            oov = pc.take(encoded.dictionary, pa.array(missing)).to_pylist()
            distinct[missing] = [classes.get(unknown_class(t), unk) for t in oov]
        else:
            distinct[missing] = unk
        return distinct[encoded.indices.to_numpy(zero_copy_only=False)]

    def encode(self, rows: pa.Table, split: str, stats: ShardStats) -> pa.ListArray:
        nested = rows[self.column].combine_chunks()
        ids = self.ids(nested.flatten().flatten())
        names, source_of_row = _per_source(rows)
        figures = {name: stats.figures(name, split) for name in names}
        source_of_token = _add_shape(figures, names, source_of_row, nested)
        for code, words in enumerate(np.bincount(source_of_token, minlength=len(names)).tolist()):
            figures[names[code]].words += words  # each token is a word of the text
        unknown = np.isin(ids, self._unknown_ids)
        span = int(self._unknown_ids[-1]) + 1  # one key per (source, unknown id)
        keys, counts = np.unique(source_of_token[unknown] * span + ids[unknown], return_counts=True)
        for key, count in zip(keys.tolist(), counts.tolist()):
            code, value = divmod(key, span)
            target = figures[names[code]]
            target.unknown += count
            target.by_unknown[str(value)] = target.by_unknown.get(str(value), 0) + count
        return _nested(nested, ids)


class PieceEncoder:
    """Cleaned sentences → piece ids with a sentencepiece model, in batched calls on `threads`."""

    column = "sentences"

    def __init__(self, model: str, vocabulary: Vocabulary, threads: int) -> None:
        import sentencepiece as spm

        self.vocabulary = vocabulary
        self._processor = spm.SentencePieceProcessor(model_file=model)
        self._threads = threads
        self._byte = pc.equal(vocabulary.kind_array, "byte").to_numpy(zero_copy_only=False)
        self._unk = vocabulary.id(UNK)

    def encode(self, rows: pa.Table, split: str, stats: ShardStats) -> pa.ListArray:
        sentences = rows[self.column].combine_chunks()
        texts = sentences.flatten()
        # Plain id lists converted by Arrow in one call: faster than sentencepiece's per-sentence
        # numpy arrays and than flattening the lists in Python (measured 3x).
        pieces = pa.array(self._processor.encode(texts.to_pylist(), num_threads=self._threads), type=pa.list_(pa.uint32()))
        nested = pa.ListArray.from_arrays(rebased_offsets(sentences), pieces)
        names, source_of_row = _per_source(rows)
        figures = {name: stats.figures(name, split) for name in names}
        source_of_token = _add_shape(figures, names, source_of_row, nested)
        ids = pieces.flatten().to_numpy().astype(np.int64)
        is_byte = self._byte[ids]
        starts = np.zeros(len(ids), dtype=bool)
        offsets = np.asarray(rebased_offsets(pieces))
        starts[offsets[:-1][offsets[:-1] < offsets[-1]]] = True
        run_starts = is_byte & ~(np.concatenate([[False], is_byte[:-1]]) & ~starts)
        words_per_sentence = pc.count_substring_regex(texts, r"\S+").to_numpy(zero_copy_only=False)
        sentence_row = np.repeat(np.arange(len(sentences)), np.diff(np.asarray(rebased_offsets(sentences))))
        for code, name in enumerate(names):
            mine = source_of_token == code
            target = figures[name]
            unknown = int(np.count_nonzero(ids[mine] == self._unk))
            if unknown:
                target.unknown += unknown
                target.by_unknown[str(self._unk)] = target.by_unknown.get(str(self._unk), 0) + unknown
            target.byte_pieces += int(is_byte[mine].sum())
            target.byte_runs += int(run_starts[mine].sum())
            target.words += int(words_per_sentence[source_of_row[sentence_row] == code].sum())
        return nested


def encoder_for(vocabulary: Vocabulary, unknown: str, model: str, threads: int) -> Encoder:
    """The encoder of the build's units: its ids tell (pieces of a model, or words)."""
    if vocabulary.units == "subword":
        return PieceEncoder(model, vocabulary, threads)
    return WordEncoder(vocabulary, unknown)
