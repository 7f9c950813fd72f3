"""Encoders (steps/encoder.py): a chunk's rows as ids, with the same figures whatever the units.

The word encoder and the piece encoder take the same prepared rows and give the same shape of
output (documents → sentences → uint32 ids) and the same statistics record. References:
collections.Counter recounts of each input file's figures from the rows themselves, a Python
dict lookup of every word, and sentencepiece's own `encode` for the piece ids.
"""

from __future__ import annotations

import dataclasses
import io
import itertools
from collections import Counter
from pathlib import Path

import pyarrow as pa
import pytest
import sentencepiece as spm

from conftest import DEMO
from corpusmill.encoder import PieceEncoder, WordEncoder, encoder_for
from corpusmill.formats import Figures, ShardStats, Vocabulary
from corpusmill.subword import trainer_options
from corpusmill.vocabulary import Cutoff, build_vocabulary, model_vocabulary, sort_by_frequency, unknown_class

# (input file, sentences) per document. Sentences hold ASCII spaces only, where str.split and
# the encoder's RE2 `\S+` agree on the words. The snowman, the CJK and the Thorn never occur in
# the text the piece models learn from (byte pieces, or <unk> without byte fallback).
DOCUMENTS = [
    ("journals/weather.txt", ["The tide rose at 6.40 and the quay flooded .", "Snow \u2603\u2603 fell on the \u65e5\u672c quay ."]),
    ("logs/ferry.txt", ["Plain words only ."]),
    ("logs/ferry.txt", ["The ferry left late , ice-cold and slow .", "NASA sent word .", "\u00de\u00f0 at the end \u2603"]),
    ("journals/weather.txt", ["The tide fell and the ferry left ."]),
    ("minutes/council.txt", ["Orrin moved that the quay be mended !!", "The council agreed at 7 ."]),
]


def rows_of(documents: list[tuple[str, list[str]]]) -> pa.Table:
    """Prepared rows holding both unit columns: `tokens` (a sentence's space-separated words)
    and `sentences`."""
    return pa.table({
        "source": [source for source, _ in documents],
        "tokens": pa.array([[s.split(" ") for s in sentences] for _, sentences in documents], pa.list_(pa.list_(pa.string()))),
        "sentences": pa.array([sentences for _, sentences in documents], pa.list_(pa.string())),
    })  # fmt: skip


def word_vocabulary() -> Vocabulary:
    """Words seen at least twice in DOCUMENTS, with the shape classes: the others are unknown."""
    counted = Counter(word for _, sentences in DOCUMENTS for sentence in sentences for word in sentence.split(" "))
    tokens = sorted(counted)
    table = pa.table({"token": tokens, "train": [counted[t] for t in tokens], "dev": [0] * len(tokens), "test": [0] * len(tokens)})
    return build_vocabulary(sort_by_frequency(table), Cutoff(min_count=2), "shape")


def train_model(path: Path, byte_fallback: bool) -> str:
    """A small piece model with the project's reserved ids, learned on the demo journals."""
    text = [line for file in sorted((DEMO / "journals").glob("*.txt")) for line in file.read_text(encoding="utf-8").splitlines() if line.strip()]
    settings = {"model_type": "unigram", "vocab_size": 400, "character_coverage": 1.0, "byte_fallback": byte_fallback}
    writer = io.BytesIO()
    spm.set_random_generator_seed(5)
    spm.SentencePieceTrainer.train(sentence_iterator=iter(text), model_writer=writer, **trainer_options(settings, 1))
    path.write_bytes(writer.getvalue())
    return str(path)


@pytest.fixture(scope="module")
def models(tmp_path_factory: pytest.TempPathFactory) -> dict[bool, str]:
    """Piece models with and without byte fallback."""
    folder = tmp_path_factory.mktemp("models")
    return {fallback: train_model(folder / f"fallback-{fallback}.model", fallback) for fallback in (True, False)}


def piece_encoder(model: str) -> PieceEncoder:
    return PieceEncoder(model, model_vocabulary(model), threads=2)


def encoders(models: dict[bool, str]) -> dict[str, WordEncoder | PieceEncoder]:
    return {"word": WordEncoder(word_vocabulary(), "shape"), "pieces": piece_encoder(models[True]), "pieces-no-fallback": piece_encoder(models[False])}


@pytest.mark.parametrize("name", ["word", "pieces", "pieces-no-fallback"])
def test_each_document_comes_back_as_its_sentences_of_uint32_ids(models: dict[bool, str], name: str) -> None:
    """The same nesting for both units, also for rows sliced out of a larger table (Arrow
    offsets not starting at 0): the ids of rows 1.. equal those of a fresh table of those rows."""
    encoder = encoders(models)[name]
    rows = rows_of(DOCUMENTS).slice(1)
    encoded = encoder.encode(rows, "train", ShardStats("chunk"))
    assert encoded.type == pa.list_(pa.list_(pa.uint32()))
    assert [len(document) for document in encoded.to_pylist()] == [len(sentences) for _, sentences in DOCUMENTS[1:]]
    fresh = encoder.encode(rows_of(DOCUMENTS[1:]), "train", ShardStats("chunk"))
    assert encoded.to_pylist() == fresh.to_pylist()


def counter_figures(documents: list[tuple[str, list[list[int]], int]], unknown_ids: set[int], byte_ids: set[int]) -> dict[str, Counter]:
    """Per input file, a Counter of every Figures field, from each document's (input file, ids
    of each sentence, words)."""
    found: dict[str, Counter] = {}
    for source, sentences, words in documents:
        counter = found.setdefault(source, Counter())
        counter["documents"] += 1
        for ids in sentences:
            counter["sentences"] += 1
            counter["tokens"] += len(ids)
            for token_id in ids:
                if token_id in unknown_ids:
                    counter["unknown"] += 1
                    counter[f"by_unknown:{token_id}"] += 1
            counter["byte_pieces"] += sum(1 for token_id in ids if token_id in byte_ids)
            counter["byte_runs"] += sum(1 for is_byte, _ in itertools.groupby(ids, key=lambda i: i in byte_ids) if is_byte)
        counter["words"] += words
    return found


def as_counter(figures: Figures) -> Counter:
    """A Figures record as a Counter of the same keys counter_figures uses (zeros left out)."""
    counter = Counter({f.name: getattr(figures, f.name) for f in dataclasses.fields(Figures) if f.name != "by_unknown"})
    counter.update({f"by_unknown:{key}": value for key, value in figures.by_unknown.items()})
    return +counter


def test_word_ids_and_figures_per_file_equal_a_dict_lookup_and_a_counter_recount() -> None:
    """A Python dict from token to id as the reference lookup (unknown words by the documented
    shape classes); collections.Counter per input file; each token is a word."""
    vocabulary = word_vocabulary()
    index = {token: i for i, token in enumerate(vocabulary.tokens) if vocabulary.kinds[i] == "word"}
    classes = {token: i for i, token in enumerate(vocabulary.tokens) if vocabulary.kinds[i] != "word"}
    stats = ShardStats("chunk")
    encoded = WordEncoder(vocabulary, "shape").encode(rows_of(DOCUMENTS), "dev", stats).to_pylist()
    expected_ids = [[[index.get(w, classes[unknown_class(w)]) for w in s.split(" ")] for s in sentences] for _, sentences in DOCUMENTS]
    assert encoded == expected_ids
    unknown = {i for token, i in classes.items() if token.startswith("<unk")}
    documents = [(source, ids, sum(len(s.split(" ")) for s in sentences)) for (source, sentences), ids in zip(DOCUMENTS, encoded)]
    expected = counter_figures(documents, unknown, set())
    assert sum(expected[source]["unknown"] for source in expected) >= 5
    assert {source: as_counter(per["dev"]) for source, per in stats.sources.items()} == expected
    assert all(set(per) == {"dev"} for per in stats.sources.values())


@pytest.mark.parametrize("fallback", [True, False], ids=["byte-fallback", "no-byte-fallback"])
def test_piece_ids_are_sentencepieces_own_and_figures_per_file_equal_a_counter_recount(models: dict[bool, str], fallback: bool) -> None:
    """sentencepiece's encode of each sentence as the reference ids; collections.Counter per
    input file of ids, <unk> pieces, byte pieces (sentencepiece's is_byte), runs of them
    (itertools.groupby within a sentence) and words (str.split)."""
    model = models[fallback]
    processor = spm.SentencePieceProcessor(model_file=model)
    stats = ShardStats("chunk")
    encoded = piece_encoder(model).encode(rows_of(DOCUMENTS), "test", stats).to_pylist()
    reference = [[processor.encode(s) for s in sentences] for _, sentences in DOCUMENTS]
    assert encoded == reference
    byte_ids = {i for i in range(processor.get_piece_size()) if processor.is_byte(i)}
    documents = [(source, ids, sum(len(s.split()) for s in sentences)) for (source, sentences), ids in zip(DOCUMENTS, reference)]
    expected = counter_figures(documents, {processor.unk_id()}, byte_ids)
    assert {source: as_counter(per["test"]) for source, per in stats.sources.items()} == expected
    unknown, byte_pieces = (sum(expected[s][key] for s in expected) for key in ("unknown", "byte_pieces"))
    assert (unknown == 0 and byte_pieces > 0) if fallback else (unknown > 0 and byte_pieces == 0)


def test_both_encoders_fill_the_same_figures_fields(models: dict[bool, str]) -> None:
    """For the same rows, each input file gets the same documents and sentences from either
    encoder, and the same fields are filled: tokens, words, unknown tokens and the symbol each
    went to (byte pieces only where a model falls back to bytes)."""
    filled = {}
    figures = {}
    for name, encoder in encoders(models).items():
        stats = ShardStats("chunk")
        encoder.encode(rows_of(DOCUMENTS), "train", stats)
        figures[name] = {source: per["train"] for source, per in stats.sources.items()}
        filled[name] = {field for per in figures[name].values() for field, value in dataclasses.asdict(per).items() if value}
        for per in figures[name].values():
            assert sum(per.by_unknown.values()) == per.unknown
    shape = {name: {source: (f.documents, f.sentences) for source, f in per.items()} for name, per in figures.items()}
    assert shape["word"] == shape["pieces"] == shape["pieces-no-fallback"]
    common = {"documents", "sentences", "tokens", "words", "unknown", "by_unknown"}
    assert filled["word"] == filled["pieces-no-fallback"] == common
    assert filled["pieces"] == common - {"unknown", "by_unknown"} | {"byte_pieces", "byte_runs"}


@pytest.mark.parametrize("name", ["word", "pieces"])
def test_figures_add_up_over_calls_and_keep_splits_apart(models: dict[bool, str], name: str) -> None:
    """Figures.add as the reference sum: encoding the rows in two calls gives the figures of
    one call; a call for another split leaves the first split's figures alone."""
    encoder = encoders(models)[name]
    whole, halves = ShardStats("chunk"), ShardStats("chunk")
    rows = rows_of(DOCUMENTS)
    encoder.encode(rows, "train", whole)
    encoder.encode(rows.slice(0, 2), "train", halves)
    encoder.encode(rows.slice(2), "train", halves)
    assert halves.sources == whole.sources
    encoder.encode(rows.slice(1, 1), "dev", halves)
    assert {source: per["train"] for source, per in halves.sources.items()} == {source: per["train"] for source, per in whole.sources.items()}
    assert halves.sources["logs/ferry.txt"]["dev"].documents == 1


def test_the_encoder_follows_the_units_of_the_ids(models: dict[bool, str]) -> None:
    """Ids of a piece model (kinds control, byte, piece) get the piece encoder, word ids the word encoder."""
    assert isinstance(encoder_for(word_vocabulary(), "shape", "unused.model", 1), WordEncoder)
    assert isinstance(encoder_for(model_vocabulary(models[True]), "shape", models[True], 1), PieceEncoder)


def test_each_encoder_hands_on_the_vocabulary_its_ids_index(models: dict[bool, str]) -> None:
    """The shard step writes the ids file and shard metadata from `encoder.vocabulary`."""
    words = word_vocabulary()
    pieces = model_vocabulary(models[True])
    assert encoder_for(words, "shape", "unused.model", 1).vocabulary is words
    assert encoder_for(pieces, "shape", models[True], 1).vocabulary is pieces
