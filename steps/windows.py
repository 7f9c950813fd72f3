"""Windows: training rows cut from id sequences with numpy, no per-token Python loop.

- n-gram windows: for every token of a sentence, its n-1 preceding ids (sentence start padded
  with <s>) and the token as target; optionally </s> as a last target per sentence.
- document streams: <s>, then every sentence's ids each followed by </s>.
- blocks: L+1 consecutive ids of a stream every `stride` ids, within one document or across
  documents joined in order; the last partial block dropped or padded with <pad>.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view


def _segment_starts(lengths: np.ndarray) -> np.ndarray:
    return np.cumsum(lengths) - lengths


def _within(lengths: np.ndarray) -> np.ndarray:
    """For segments of the given lengths, each element's position inside its segment."""
    total = int(lengths.sum())
    return np.arange(total, dtype=np.int64) - np.repeat(_segment_starts(lengths), lengths)


def ngram_rows(sentence_lengths: np.ndarray, predict_end: bool) -> int:
    """How many n-gram windows sentences of these lengths give."""
    return int(sentence_lengths.sum()) + (len(sentence_lengths) if predict_end else 0)


def ngram_windows(
    ids: np.ndarray, sentence_lengths: np.ndarray, n: int, bos: int, eos: int | None, order: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """(context [rows, n-1], target [rows]) for sentences laid end to end in `ids`, both
    C-contiguous; with `order` (a permutation of the rows), rows in that order, gathered once."""
    lengths = sentence_lengths.astype(np.int64)
    extra = 1 if eos is not None else 0
    targets = lengths + extra
    padded_lengths = targets + (n - 1)
    starts = _segment_starts(padded_lengths)
    padded = np.full(int(padded_lengths.sum()), bos, dtype=ids.dtype)
    padded[np.repeat(starts + (n - 1), lengths) + _within(lengths)] = ids
    if eos is not None:
        padded[starts + (n - 1) + lengths] = eos
    if not len(padded):
        return np.empty((0, n - 1), ids.dtype), np.empty(0, ids.dtype)
    picks = np.repeat(starts, targets) + _within(targets)
    if order is not None:
        picks = picks[order]
    return sliding_window_view(padded, n - 1)[picks], padded[picks + (n - 1)]


def _sentence_starts(lengths: np.ndarray, per_doc: np.ndarray) -> np.ndarray:
    """Where each sentence's first id lies in the documents' streams laid end to end: every
    sentence takes its ids plus one </s>, every document one leading <s>."""
    doc_of_sentence = np.repeat(np.arange(len(per_doc)), per_doc)
    return _segment_starts(lengths + 1) + doc_of_sentence + 1


def ngram_target_positions(sentence_lengths: np.ndarray, sentences_per_document: np.ndarray, predict_end: bool) -> np.ndarray:
    """Where the target of each `ngram_windows` row (unshuffled) lies in `document_streams`'
    stream: a token's own place, a </s> target its sentence's </s>."""
    lengths = sentence_lengths.astype(np.int64)
    targets = lengths + (1 if predict_end else 0)
    starts = _sentence_starts(lengths, sentences_per_document.astype(np.int64))
    return np.repeat(starts, targets) + _within(targets)


def document_streams(ids: np.ndarray, sentence_lengths: np.ndarray, sentences_per_document: np.ndarray, bos: int, eos: int) -> tuple[np.ndarray, np.ndarray]:
    """(stream, document lengths): each document as <s> s1 </s> s2 </s> …, laid end to end."""
    lengths = sentence_lengths.astype(np.int64)
    per_doc = sentences_per_document.astype(np.int64)
    doc_of_sentence = np.repeat(np.arange(len(per_doc)), per_doc)
    sentence_room = lengths + 1
    sentence_start = _sentence_starts(lengths, per_doc)
    doc_lengths = np.bincount(doc_of_sentence, weights=sentence_room, minlength=len(per_doc)).astype(np.int64) + 1
    stream = np.empty(int(doc_lengths.sum()), dtype=ids.dtype)
    stream[_segment_starts(doc_lengths)] = bos
    stream[np.repeat(sentence_start, lengths) + _within(lengths)] = ids
    stream[sentence_start + lengths] = eos
    return stream, doc_lengths


def _block_starts(length: int, span: int, stride: int) -> np.ndarray:
    """Starts of the whole blocks of `span` ids within a stream of `length` ids."""
    full = (length - span) // stride + 1 if length >= span else 0
    return np.arange(full, dtype=np.int64) * stride


def _document_block_layout(doc_lengths: np.ndarray, length: int, stride: int, remainder: str) -> tuple[np.ndarray, np.ndarray]:
    """(start, end of its document) in the stream of every block of `document_blocks`."""
    span = length + 1
    doc_lengths = np.asarray(doc_lengths, dtype=np.int64)
    doc_starts = _segment_starts(doc_lengths)
    full = np.where(doc_lengths >= span, (doc_lengths - span) // stride + 1, 0)
    counts = full + ((remainder == "pad") & (doc_lengths - full * stride >= 2))
    starts = np.repeat(doc_starts, counts) + _within(counts) * stride
    return starts, np.repeat(doc_starts + doc_lengths, counts)


def document_block_starts(doc_lengths: np.ndarray, length: int, stride: int, remainder: str) -> np.ndarray:
    """Where each block of `document_blocks` starts in the stream."""
    return _document_block_layout(doc_lengths, length, stride, remainder)[0]


def document_blocks(stream: np.ndarray, doc_lengths: np.ndarray, length: int, stride: int, remainder: str, pad_id: int) -> np.ndarray:
    """Blocks of length+1 ids that never cross a document, [rows, length+1]."""
    span = length + 1
    starts, ends = _document_block_layout(doc_lengths, length, stride, remainder)
    if not len(starts):
        return np.empty((0, span), stream.dtype)
    padded = np.concatenate([stream, np.full(span, pad_id, stream.dtype)])
    blocks = sliding_window_view(padded, span)[starts].copy()
    overflow = np.arange(span)[None, :] >= (ends - starts)[:, None]
    blocks[overflow] = pad_id
    return blocks


def document_block_coverage(doc_lengths: np.ndarray, length: int, stride: int, remainder: str) -> int:
    """How many stream ids lie in at least one of `document_blocks`' blocks: consecutive blocks
    overlap or touch (stride <= L+1), so a document's blocks cover its first
    (blocks - 1) * stride + L + 1 ids, and a padded last block the rest."""
    lengths = np.asarray(doc_lengths, dtype=np.int64)
    span = length + 1
    full = np.where(lengths >= span, (lengths - span) // stride + 1, 0)
    padded = (remainder == "pad") & (lengths - full * stride >= 2)
    covered = np.where(padded, lengths, np.where(full > 0, (full - 1) * stride + span, 0))
    return int(np.minimum(covered, lengths).sum())


@dataclass
class CorpusBlocks:
    """Blocks over documents joined in order; keeps the unfinished tail between calls."""

    length: int
    stride: int
    remainder: str
    pad_id: int
    _pending: np.ndarray = field(default_factory=lambda: np.empty(0, np.int64))
    fed: int = 0  # ids fed so far
    covered: int = 0  # of them, ids in at least one block (final after `finish`)

    def feed(self, stream: np.ndarray) -> np.ndarray:
        """Blocks completed by appending `stream`; the rest waits for more ids."""
        buffer = np.concatenate([self._pending.astype(stream.dtype), stream])
        span = self.length + 1
        starts = _block_starts(len(buffer), span, self.stride)
        taken = len(starts) * self.stride
        self._pending = buffer[taken:]
        self.fed += len(stream)
        if not len(starts):
            return np.empty((0, span), stream.dtype)
        # The last block reaches span - stride ids into what is pending.
        self.covered = self.fed - len(self._pending) + span - self.stride
        return sliding_window_view(buffer, span)[starts].copy()

    def finish(self) -> np.ndarray:
        """The padded last block, if configured and at least two ids remain."""
        span = self.length + 1
        rest = self._pending
        self._pending = rest[:0]
        if self.remainder != "pad" or len(rest) < 2:
            return np.empty((0, span), rest.dtype)
        self.covered = self.fed
        block = np.full((1, span), self.pad_id, rest.dtype)
        block[0, : len(rest)] = rest
        return block
