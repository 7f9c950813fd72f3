"""Property-based tests (hypothesis) over random Unicode text and id sequences.

Outside reference: hypothesis draws the inputs; each property is a definition the functions
must meet for every input (lossless tokenization, id range, windows, streams and blocks equal
to plain-Python references, split stability), not an example. The number of examples comes
from the hypothesis profile chosen in conftest.py (few locally, many under CI=true).
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import regex
from hypothesis import given
from hypothesis import strategies as st

from corpusmill.clean import CleanOptions, clean_text
from corpusmill.encoder import WordEncoder
from corpusmill.segment import Segmenter, is_lossless
from corpusmill.split import assign_split, fingerprint
from corpusmill.vocabulary import Cutoff, build_vocabulary, sort_by_frequency
from corpusmill.windows import CorpusBlocks, document_blocks, document_streams, ngram_windows
from tests.test_split import prepared_splits
from tests.test_windows import reference_blocks, reference_stream

TEXT = st.text(st.characters(exclude_categories=("Cs",)), max_size=200)
WORDS = st.lists(st.text(st.characters(exclude_categories=("Cs", "Zs", "Cc")), min_size=1, max_size=6), min_size=1, max_size=40)


@given(text=TEXT, words=st.sampled_from(["uax29", "pattern"]), apostrophes=st.sampled_from(["keep", "split"]),
       hyphens=st.sampled_from(["keep", "split"]))  # fmt: skip
def test_tokenization_is_lossless_up_to_whitespace(text: str, words: str, apostrophes: str, hyphens: str) -> None:
    """Tokens in order, separated only by whitespace, rebuild the sentence (both word modes)."""
    segmenter = Segmenter(words_mode=words, apostrophes=apostrophes, hyphens=hyphens)
    tokens = segmenter.tokens(text)
    assert is_lossless(text, tokens)
    assert all(token and not regex.search(r"\s", token) for token in tokens)  # Unicode White_Space


@given(train=WORDS, queries=WORDS, min_count=st.integers(1, 3), unknown=st.sampled_from(["single", "shape"]))
def test_every_token_maps_to_an_id_inside_the_vocabulary(train: list[str], queries: list[str], min_count: int, unknown: str) -> None:
    """0 <= id < |V| for words seen and unseen; a kept word maps to its own row."""
    values, counts = np.unique(np.array(train, dtype=object), return_counts=True)
    table = sort_by_frequency(pa.table({"token": pa.array(list(values), pa.string()), "train": pa.array(counts, pa.int64()),
                                        "dev": pa.array([0] * len(values), pa.int64()), "test": pa.array([0] * len(values), pa.int64())}))  # fmt: skip
    vocabulary = build_vocabulary(table, Cutoff(min_count=min_count), unknown)
    ids = WordEncoder(vocabulary, unknown).ids(pa.array(train + queries, pa.string()))
    assert ((0 <= ids) & (ids < vocabulary.size)).all()
    for token, token_id in zip(train + queries, ids):
        if token in vocabulary.tokens[vocabulary.first_word_id :]:
            assert vocabulary.tokens[token_id] == token


# Sentences are never empty: Segmenter.segment leaves out sentences without tokens.
SENTENCES = st.lists(st.lists(st.integers(10, 500), min_size=1, max_size=12), min_size=0, max_size=8)


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


@given(sentences=SENTENCES, per_doc=st.integers(1, 3), length=st.integers(1, 16), stride_part=st.floats(0.1, 1.0),
       remainder=st.sampled_from(["drop", "pad"]), cuts=st.lists(st.integers(0, 200), max_size=6))  # fmt: skip
def test_streams_and_blocks_equal_the_plain_python_cut(
    sentences: list[list[int]], per_doc: int, length: int, stride_part: float, remainder: str, cuts: list[int]
) -> None:
    """Streams are <s> s1 </s> s2 </s> … per document; document blocks cut each document's
    stream alone; corpus blocks cut the joined stream, however it is fed (the references in
    test_windows.py)."""
    pad, bos, eos = 0, 2, 3
    stride = max(1, min(length + 1, round(stride_part * (length + 1))))
    documents = [sentences[i : i + per_doc] for i in range(0, len(sentences), per_doc)]
    ids = np.array([i for s in sentences for i in s], np.int64)
    lengths = np.array([len(s) for s in sentences], np.int64)
    stream, doc_lengths = document_streams(ids, lengths, np.array([len(d) for d in documents], np.int64), bos, eos)
    assert stream.tolist() == reference_stream(documents, bos, eos)
    assert doc_lengths.tolist() == [len(reference_stream([d], bos, eos)) for d in documents]
    blocks = document_blocks(stream, doc_lengths, length, stride, remainder, pad)
    expected = [b for d in documents for b in reference_blocks(reference_stream([d], bos, eos), length, stride, remainder, pad)]
    assert blocks.reshape(-1, length + 1).tolist() == expected
    joined = CorpusBlocks(length, stride, remainder, pad)
    pieces = np.split(stream, sorted({c for c in cuts if c < len(stream)}))
    corpus = np.concatenate([*(joined.feed(piece) for piece in pieces), joined.finish()])
    assert corpus.tolist() == reference_blocks(stream.tolist(), length, stride, remainder, pad)


# Mostly letters, so that most documents pass the cleaning filters and get a split.
DOCUMENTS = st.lists(st.text(st.characters(categories=("Lu", "Ll", "Lo", "Mn", "Nd", "Zs", "Po")), min_size=1, max_size=60), min_size=1, max_size=12)


@given(old=DOCUMENTS, new=DOCUMENTS, salt=st.text(max_size=80), key=st.sampled_from(["content", "id"]))
def test_a_documents_split_does_not_change_when_documents_are_added(old: list[str], new: list[str], salt: str, key: str) -> None:
    """The prepare step assigns every kept document the split of its own key and the salt
    (assign_split as the reference), whatever documents come before or after it."""
    fractions = {"train": 0.6, "dev": 0.2, "test": 0.2}
    before = [(f"old.txt:{i}", text) for i, text in enumerate(old)]
    after = [(f"new.txt:{i}", text) for i, text in enumerate(new)]
    alone = prepared_splits(before, key=key, salt=salt, fractions=fractions)
    among = prepared_splits(after[:3] + before[::-1] + after[3:], key=key, salt=salt, fractions=fractions)
    assert {doc_id: among[doc_id] for doc_id in alone} == alone
    for doc_id, text in before:
        if doc_id in alone:
            reference = fingerprint(clean_text(text, CleanOptions())) if key == "content" else doc_id.encode("utf-8")
            assert alone[doc_id] == assign_split(reference, salt, fractions)
