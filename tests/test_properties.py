"""Property-based tests (hypothesis) over random Unicode text and id sequences.

Outside reference: hypothesis draws the inputs; each property is a definition the functions
must meet for every input (lossless tokenization, id range, window and block shapes, split
stability), not an example.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import regex
from hypothesis import given, settings
from hypothesis import strategies as st

from steps.segment import Segmenter, is_lossless
from steps.split import assign_split
from steps.vocab import Cutoff, Lookup, build_vocabulary, sort_by_frequency
from steps.windows import CorpusBlocks, document_blocks, document_streams, ngram_windows

FAST = settings(max_examples=60, deadline=None)
TEXT = st.text(st.characters(exclude_categories=("Cs",)), max_size=200)
WORDS = st.lists(st.text(st.characters(exclude_categories=("Cs", "Zs", "Cc")), min_size=1, max_size=6), min_size=1, max_size=40)


@FAST
@given(text=TEXT, words=st.sampled_from(["uax29", "pattern"]), apostrophes=st.sampled_from(["keep", "split"]),
       hyphens=st.sampled_from(["keep", "split"]))  # fmt: skip
def test_tokenization_is_lossless_up_to_whitespace(text: str, words: str, apostrophes: str, hyphens: str) -> None:
    """Tokens in order, separated only by whitespace, rebuild the sentence (both word modes)."""
    segmenter = Segmenter(words_mode=words, apostrophes=apostrophes, hyphens=hyphens)
    tokens = segmenter.tokens(text)
    assert is_lossless(text, tokens)
    assert all(token and not regex.search(r"\s", token) for token in tokens)  # Unicode White_Space


@FAST
@given(train=WORDS, queries=WORDS, min_count=st.integers(1, 3), unknown=st.sampled_from(["single", "shape"]))
def test_every_token_maps_to_an_id_inside_the_vocabulary(train: list[str], queries: list[str], min_count: int, unknown: str) -> None:
    """0 <= id < |V| for words seen and unseen; a kept word maps to its own row."""
    values, counts = np.unique(np.array(train, dtype=object), return_counts=True)
    table = sort_by_frequency(pa.table({"token": pa.array(list(values), pa.string()), "train": pa.array(counts, pa.int64()),
                                        "dev": pa.array([0] * len(values), pa.int64()), "test": pa.array([0] * len(values), pa.int64())}))  # fmt: skip
    vocabulary = build_vocabulary(table, Cutoff(min_count=min_count), unknown)
    ids = Lookup(vocabulary, unknown).ids(pa.array(train + queries, pa.string()))
    assert ((0 <= ids) & (ids < vocabulary.size)).all()
    for token, token_id in zip(train + queries, ids):
        if token in vocabulary.tokens[vocabulary.first_word_id :]:
            assert vocabulary.tokens[token_id] == token


# Sentences are never empty: Segmenter.segment leaves out sentences without tokens.
SENTENCES = st.lists(st.lists(st.integers(10, 500), min_size=1, max_size=12), min_size=0, max_size=8)


@FAST
@given(sentences=SENTENCES, n=st.integers(2, 6), predict_end=st.booleans())
def test_ngram_windows_hold_n_minus_1_context_ids_and_one_row_per_target(sentences: list[list[int]], n: int, predict_end: bool) -> None:
    """One row per token (plus </s> per sentence), context = the n-1 ids before it, <s>-padded."""
    bos, eos = 2, 3
    ids = np.array([i for s in sentences for i in s], np.int64)
    lengths = np.array([len(s) for s in sentences], np.int64)
    context, target = ngram_windows(ids, lengths, n, bos, eos if predict_end else None)
    assert context.shape == (len(target), n - 1)
    expected = [t for s in sentences for t in s + ([eos] if predict_end else [])]
    assert target.tolist() == expected
    row = 0
    for sentence in sentences:
        padded = [bos] * (n - 1) + sentence
        for position in range(len(sentence) + (1 if predict_end else 0)):
            assert context[row].tolist() == padded[position : position + n - 1]
            row += 1


@FAST
@given(sentences=SENTENCES, per_doc=st.integers(1, 3), length=st.integers(1, 16), stride_part=st.floats(0.1, 1.0),
       remainder=st.sampled_from(["drop", "pad"]))  # fmt: skip
def test_blocks_hold_length_plus_one_ids_from_the_stream(sentences: list[list[int]], per_doc: int, length: int, stride_part: float, remainder: str) -> None:
    """Every block has L+1 ids; document blocks are windows of one document's stream, pad-filled."""
    pad, bos, eos = 0, 2, 3
    stride = max(1, min(length + 1, round(stride_part * (length + 1))))
    ids = np.array([i for s in sentences for i in s], np.int64)
    lengths = np.array([len(s) for s in sentences], np.int64)
    documents = [len(sentences[i : i + per_doc]) for i in range(0, len(sentences), per_doc)]
    stream, doc_lengths = document_streams(ids, lengths, np.array(documents, np.int64), bos, eos)
    blocks = document_blocks(stream, doc_lengths, length, stride, remainder, pad)
    assert blocks.shape[1] == length + 1
    starts = np.concatenate([[0], np.cumsum(doc_lengths)])
    for block in blocks:
        body = block.tolist()
        while body and body[-1] == pad:
            body.pop()
        assert any(
            body == stream[a:b].tolist()[k : k + len(body)] for a, b in zip(starts[:-1], starts[1:]) for k in range(0, b - a, stride)
        )
    joined = CorpusBlocks(length, stride, remainder, pad)
    corpus = np.concatenate([joined.feed(stream), joined.finish()])
    assert corpus.shape[1] == length + 1


@FAST
@given(old=st.lists(st.binary(min_size=1, max_size=16), min_size=1, max_size=30, unique=True),
       new=st.lists(st.binary(min_size=1, max_size=16), max_size=30), salt=st.text(max_size=10))  # fmt: skip
def test_a_documents_split_does_not_change_when_documents_are_added(old: list[bytes], new: list[bytes], salt: str) -> None:
    """The split is a function of the key and salt alone: adding documents moves none."""
    fractions = {"train": 0.8, "dev": 0.1, "test": 0.1}
    before = {key: assign_split(key, salt, fractions) for key in old}
    after = {key: assign_split(key, salt, fractions) for key in [*new, *reversed(old)]}
    assert all(after[key] == split for key, split in before.items())
    assert set(after.values()) <= {"train", "dev", "test"}
