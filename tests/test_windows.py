"""Windows: n-gram windows, document streams and blocks cut with numpy."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from corpusmill.windows import CorpusBlocks, document_block_coverage, document_blocks, document_streams, ngram_windows

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


def test_windows_in_a_given_order_are_the_windows_taken_in_that_order():
    sentences = [[10, 11, 12, 13, 14], [20], [30, 31]]
    ids, lengths = np.array([i for s in sentences for i in s], np.uint32), np.array([len(s) for s in sentences])
    context, target = ngram_windows(ids, lengths, 3, BOS, EOS)
    order = np.random.default_rng(7).permutation(len(target))
    shuffled_context, shuffled_target = ngram_windows(ids, lengths, 3, BOS, EOS, order)
    assert shuffled_context.tolist() == context[order].tolist() and shuffled_target.tolist() == target[order].tolist()
    assert shuffled_context.flags.c_contiguous and shuffled_target.flags.c_contiguous and shuffled_target.dtype == np.uint32


def test_n_of_four_gives_exactly_three_context_ids():
    """n = 4 means three context ids per window (common practice for n-gram models)."""
    context, _ = ngram_windows(np.array([5, 6, 7]), np.array([3]), 4, BOS, EOS)
    assert context.shape[1] == 3 and context[0].tolist() == [BOS, BOS, BOS]


def reference_stream(documents, bos=BOS, eos=EOS):
    """A plain-Python reference: each document as <s> s1 </s> s2 </s> …, laid end to end."""
    return [i for document in documents for i in [bos] + [i for sentence in document for i in sentence + [eos]]]


def reference_blocks(ids, length, stride, remainder, pad=PAD):
    """A plain-Python reference: L+1 ids every `stride` ids while whole blocks fit; then, with
    "pad", the ids left (when at least two, so there is a target) padded with <pad>."""
    span, blocks, start = length + 1, [], 0
    while start + span <= len(ids):
        blocks.append(list(ids[start : start + span]))
        start += stride
    if remainder == "pad" and len(ids) - start >= 2:
        blocks.append(list(ids[start:]) + [pad] * (span - (len(ids) - start)))
    return blocks


def test_streams_mark_document_and_sentence_ends():
    stream, lengths = document_streams(np.array([5, 6, 7, 8, 9]), np.array([2, 1, 2]), np.array([2, 1]), BOS, EOS)
    assert stream.tolist() == [BOS, 5, 6, EOS, 7, EOS, BOS, 8, 9, EOS]
    assert lengths.tolist() == [6, 4]


def test_streams_match_the_reference_for_uneven_sentences_and_documents():
    """Documents of one to three sentences of one to six ids each, against the reference."""
    documents = [[[10, 11, 12, 13, 14, 15]], [[20], [21, 22, 23], [24]], [[30, 31], [32]], [[40, 41, 42, 43]]]
    sentences = [s for d in documents for s in d]
    stream, lengths = document_streams(
        np.array([i for s in sentences for i in s], np.uint16), np.array([len(s) for s in sentences]), np.array([len(d) for d in documents]), BOS, EOS
    )
    assert stream.tolist() == reference_stream(documents)
    assert lengths.tolist() == [len(reference_stream([d])) for d in documents]
    assert stream.dtype == np.uint16


def test_windows_streams_and_blocks_keep_the_id_type_of_their_input():
    """Shard jobs cut rows in the shard's own id type (uint16 for |V| <= 65,536) to keep their
    memory low; every function returns that type, also when there is nothing to cut."""
    cases = ((np.array([5, 6, 7], np.uint16), np.array([3]), np.array([1])), (np.empty(0, np.uint16), np.empty(0, np.int64), np.empty(0, np.int64)))
    for ids, lengths, per_doc in cases:
        context, target = ngram_windows(ids, lengths, 3, BOS, EOS)
        stream, doc_lengths = document_streams(ids, lengths, per_doc, BOS, EOS)
        blocks = document_blocks(stream, doc_lengths, 3, 3, "pad", PAD)
        corpus = CorpusBlocks(3, 3, "pad", PAD)
        joined = [corpus.feed(stream), corpus.finish()]
        assert {a.dtype for a in (context, target, stream, blocks, *joined)} == {np.dtype(np.uint16)}
        assert context.shape[1] == 2 and all(b.shape[1] == 4 for b in (blocks, *joined))
    assert blocks.shape == joined[1].shape == (0, 4) and joined[0].shape == (0, 4)  # the empty input
    assert document_blocks(np.array([2, 5, 6, 7, 3], np.uint16), np.array([5]), 3, 3, "pad", PAD).tolist() == [[2, 5, 6, 7], [7, 3, PAD, PAD]]


def test_document_blocks_match_the_reference_for_every_stride_and_remainder():
    """Each document's stream cut on its own, for documents shorter than, exactly as long as,
    and longer than a block, at every stride from 1 to L+1."""
    length = 4
    documents = [list(range(100, 100 + size)) for size in (1, 2, 3, 5, 6, 7, 11, 13)]
    stream = np.array([i for d in documents for i in d])
    doc_lengths = np.array([len(d) for d in documents])
    for stride in range(1, length + 2):
        for remainder in ("drop", "pad"):
            expected = [b for d in documents for b in reference_blocks(d, length, stride, remainder)]
            assert document_blocks(stream, doc_lengths, length, stride, remainder, PAD).tolist() == expected, (stride, remainder)


def test_corpus_blocks_match_the_reference_over_the_joined_stream():
    """Blocks across documents: the whole stream cut as one, the padded last block included,
    however the stream is fed (one piece, single ids, or uneven pieces)."""
    stream = list(range(1, 40))
    for length, stride in ((5, 5), (5, 6), (5, 3), (4, 1), (7, 7)):
        for remainder in ("drop", "pad"):
            expected = reference_blocks(stream, length, stride, remainder)
            for cuts in ([], list(range(1, 39)), [7, 8, 20, 21, 22]):
                blocks = CorpusBlocks(length, stride, remainder, PAD)
                pieces = np.split(np.array(stream, np.int64), cuts)
                got = np.concatenate([*(blocks.feed(p) for p in pieces), blocks.finish()])
                assert got.tolist() == expected, (length, stride, remainder, cuts)


def test_corpus_blocks_pad_the_last_block_only_when_it_holds_a_target():
    """Two ids left (one input, one target) give a padded block; one id left gives none."""
    blocks = CorpusBlocks(4, 4, "pad", PAD)
    assert blocks.feed(np.arange(1, 7)).tolist() == [[1, 2, 3, 4, 5]]
    assert blocks.finish().tolist() == [[5, 6, PAD, PAD, PAD]]
    one_left = CorpusBlocks(4, 4, "pad", PAD)
    assert one_left.feed(np.arange(1, 6)).tolist() == [[1, 2, 3, 4, 5]]
    assert one_left.finish().shape == (0, 5)
    dropped = CorpusBlocks(4, 4, "drop", PAD)
    dropped.feed(np.arange(1, 8))
    assert dropped.finish().shape == (0, 5)


def test_corpus_blocks_start_over_after_finish():
    """finish() hands out the tail and forgets it: a second finish adds nothing and the next
    ids are cut as by a new instance."""
    blocks = CorpusBlocks(3, 3, "pad", PAD)
    blocks.feed(np.arange(1, 7))
    assert blocks.finish().tolist() == [[4, 5, 6, PAD]]
    assert blocks.finish().shape == (0, 4)
    assert blocks.feed(np.arange(50, 56)).tolist() == [[50, 51, 52, 53]]
    assert blocks.finish().tolist() == [[53, 54, 55, PAD]]


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


def test_one_id_left_after_the_last_whole_block_is_neither_padded_nor_covered():
    """Blocks of 4 ids at stride 4 over documents of 9, 6 and 1 ids, remainder "pad": the 9th id
    of the first would be a padded block without a target, so it stays out, while the 6-id
    document gets its padded block; the coverage counts the ids the blocks hold."""
    doc_lengths = np.array([9, 6, 1], dtype=np.int64)
    stream = np.arange(16, dtype=np.int64)
    blocks = document_blocks(stream, doc_lengths, 3, 4, "pad", -1)
    assert blocks.tolist() == [[0, 1, 2, 3], [4, 5, 6, 7], [9, 10, 11, 12], [13, 14, -1, -1]]
    assert document_block_coverage(doc_lengths, 3, 4, "pad") == 14
