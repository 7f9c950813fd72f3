"""Windows: n-gram windows, document streams and blocks cut with numpy."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from steps.windows import CorpusBlocks, document_block_coverage, document_blocks, document_streams, ngram_windows

BOS, EOS, PAD = 2, 3, 0


def reference_windows(sentences, n, eos):
    """A plain-Python reference: every target with its n-1 predecessors, <s>-padded."""
    rows = []
    for sentence in sentences:
        padded = [BOS] * (n - 1) + sentence + ([eos] if eos is not None else [])
        for i in range(n - 1, len(padded)):
            rows.append((tuple(padded[i - n + 1 : i]), padded[i]))
    return rows


@pytest.mark.parametrize("n", [2, 3, 4, 6])
@pytest.mark.parametrize("eos", [EOS, None])
def test_ngram_windows_match_the_reference(n, eos):
    sentences = [[10, 11, 12, 13, 14], [20], [30, 31], [40, 41, 42, 43, 44, 45, 46]]
    ids = np.array([i for s in sentences for i in s])
    context, target = ngram_windows(ids, np.array([len(s) for s in sentences]), n, BOS, eos)
    assert context.shape == (len(target), n - 1)
    assert list(zip(map(tuple, context.tolist()), target.tolist())) == reference_windows(sentences, n, eos)


def test_shuffled_windows_are_the_windows_in_the_generator_order():
    sentences = [[10, 11, 12, 13, 14], [20], [30, 31]]
    ids, lengths = np.array([i for s in sentences for i in s], np.uint32), np.array([len(s) for s in sentences])
    context, target = ngram_windows(ids, lengths, 3, BOS, EOS)
    order = np.random.default_rng(7).permutation(len(target))
    shuffled_context, shuffled_target = ngram_windows(ids, lengths, 3, BOS, EOS, np.random.default_rng(7))
    assert shuffled_context.tolist() == context[order].tolist() and shuffled_target.tolist() == target[order].tolist()
    assert shuffled_context.flags.c_contiguous and shuffled_target.flags.c_contiguous and shuffled_target.dtype == np.uint32


def test_n_of_four_gives_exactly_three_context_ids():
    """n = 4 means three context ids per window (common practice for n-gram models)."""
    context, _ = ngram_windows(np.array([5, 6, 7]), np.array([3]), 4, BOS, EOS)
    assert context.shape[1] == 3 and context[0].tolist() == [BOS, BOS, BOS]


def test_streams_mark_document_and_sentence_ends():
    stream, lengths = document_streams(np.array([5, 6, 7, 8, 9]), np.array([2, 1, 2]), np.array([2, 1]), BOS, EOS)
    assert stream.tolist() == [BOS, 5, 6, EOS, 7, EOS, BOS, 8, 9, EOS]
    assert lengths.tolist() == [6, 4]


def test_blocks_within_documents_drop_or_pad_the_remainder():
    stream = np.arange(100, 110)
    lengths = np.array([7, 3])
    dropped = document_blocks(stream, lengths, 3, 3, "drop", PAD)
    assert dropped.tolist() == [[100, 101, 102, 103], [103, 104, 105, 106]]
    padded = document_blocks(stream, lengths, 3, 3, "pad", PAD)
    assert padded.tolist() == [[100, 101, 102, 103], [103, 104, 105, 106], [107, 108, 109, PAD]]
    assert all(len(b) == 4 for b in padded)


def test_every_id_is_predicted_once_when_stride_equals_length():
    stream = np.arange(1, 23)
    blocks = document_blocks(stream, np.array([22]), 4, 4, "pad", PAD)
    targets = [t for b in blocks for t in b[1:] if t != PAD]
    assert targets == list(range(2, 23))


def test_corpus_blocks_span_documents_and_batches_consistently():
    stream = np.arange(1, 40)
    whole = CorpusBlocks(5, 5, "pad", PAD)
    expected = np.concatenate([whole.feed(stream), whole.finish()])
    pieces = CorpusBlocks(5, 5, "pad", PAD)
    got = np.concatenate([pieces.feed(stream[:7]), pieces.feed(stream[7:8]), pieces.feed(stream[8:]), pieces.finish()])
    assert got.tolist() == expected.tolist()
    assert got[-1].tolist()[-1] == PAD and got.shape[1] == 6


@settings(max_examples=200, deadline=None)
@given(
    lengths=st.lists(st.integers(0, 40), min_size=0, max_size=12),
    length=st.integers(1, 12),
    stride_back=st.integers(0, 12),
    remainder=st.sampled_from(["drop", "pad"]),
)
def test_block_coverage_counts_exactly_the_ids_some_block_holds(lengths: list[int], length: int, stride_back: int, remainder: str):
    """Reference: cut the blocks of a stream whose ids are their own positions (pad id -1) and
    count the distinct positions they hold; document span and corpus span."""
    stride = max(1, length + 1 - stride_back)
    doc_lengths = np.array(lengths, dtype=np.int64)
    stream = np.arange(int(doc_lengths.sum()), dtype=np.int64)
    blocks = document_blocks(stream, doc_lengths, length, stride, remainder, -1)
    assert document_block_coverage(doc_lengths, length, stride, remainder) == len(np.unique(blocks[blocks >= 0]))
    joined = CorpusBlocks(length, stride, remainder, pad_id=-1)
    pieces = np.split(stream, np.cumsum(doc_lengths)[:-1]) if lengths else []
    cut = [joined.feed(piece) for piece in pieces] + [joined.finish()]
    held = np.concatenate([block.reshape(-1) for block in cut]) if cut else np.empty(0)
    assert joined.covered == len(np.unique(held[held >= 0]))
