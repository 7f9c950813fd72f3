"""Subword units: the train-only sample, the sentencepiece model, its ids, and when it is retrained.

sentencepiece itself is the reference for decoding, sizes and piece types; a small corpus whose
documents' splits are known in advance (steps.split.assign_split) carries sentinel words that
occur only in dev or test documents.
"""

from __future__ import annotations

import hashlib
import json
import shutil
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import pytest
import sentencepiece as spm

from conftest import DEMO, run_workflow, scenario
from corpusmill.chunks import removed_mask
from corpusmill.encoder import PieceEncoder
from corpusmill.formats import ShardStats, Vocabulary, read_vocabulary
from corpusmill.split import assign_split, doc_hash
from corpusmill.subword import TRAIN_THREADS, BottomK, check_model, read_sample, sentence_keys, train_model
from corpusmill.vocabulary import model_vocabulary
from tests.test_shards import heldout_corpus_order, stream_doc_ids

SALT = "corpusmill-split-v1"
FRACTIONS = {"train": 0.9, "dev": 0.05, "test": 0.05}
# Targets after "--", since --configfile takes every word that follows it.
TARGETS = ("--", "build/manifest.json", "build/stats/coverage.json")
OVERRIDES = scenario("subword-split-by-id", {"corpus": {"root": "corpus"}})
SUBWORD = OVERRIDES["subword"]
SENTINEL = {"train": "kjaxplodrient", "dev": "vquombelradix", "test": "zhyrtwexolpan"}


def ids_in_split(split: str, count: int) -> list[str]:
    """Document ids that assign_split puts in `split` (split.key = id)."""
    found, n = [], 0
    while len(found) < count:
        doc_id = f"held-{n}"
        if assign_split(doc_id.encode("utf-8"), SALT, FRACTIONS) == split:
            found.append(doc_id)
        n += 1
    return found


def held_documents() -> list[dict]:
    """Three documents per split, each naming its split's sentinel word."""
    documents = []
    for split in ("train", "dev", "test"):
        for i, doc_id in enumerate(ids_in_split(split, 3)):
            text = f"The harbour clerk wrote {SENTINEL[split]} in ledger {i}. The tide stood at {SENTINEL[split]} for hour {i}."
            documents.append({"id": doc_id, "text": text, "split": split})
    return documents


def write_held(corpus: Path, documents: list[dict]) -> None:
    lines = [json.dumps({"id": d["id"], "text": d["text"]}) for d in documents]
    (corpus / "held.jsonl").write_text("\n".join(lines) + "\n", encoding="utf-8")


def jobs_run(result) -> set[str]:
    """Rule names of the jobs a Snakemake run started, read from its log."""
    names = set()
    for line in (result.stdout + result.stderr).splitlines():
        words = line.split()
        if len(words) == 2 and words[0] in ("rule", "localrule", "checkpoint", "localcheckpoint") and words[1].endswith(":"):
            names.add(words[1][:-1])
    return names


@pytest.fixture(scope="module")
def workdir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A subword build of two demo files plus the sentinel documents; returns the working folder."""
    directory = tmp_path_factory.mktemp("subword")
    corpus = directory / "corpus"
    corpus.mkdir()
    for name in ("journals/weather_journal.txt", "logs/ferry_log_autumn.txt"):
        shutil.copy2(DEMO / name, corpus / Path(name).name)
    write_held(corpus, held_documents())
    run_workflow(directory, OVERRIDES, *TARGETS)
    return directory


def processor(build: Path) -> spm.SentencePieceProcessor:
    return spm.SentencePieceProcessor(model_file=str(build / "subword.model"))


def prepared_sentences(build: Path, split: str) -> dict[str, list[str]]:
    """doc_id → cleaned sentences of kept documents of one split, from the prepared chunk tables."""
    duplicates = pq.read_table(build / "interim" / "duplicates.parquet")
    found = {}
    for path in sorted((build / "interim" / "prepared").glob("*.parquet")):
        table = pq.read_table(path)
        table = table.filter(pc.equal(table["split"], split))
        table = table.filter(pa.array(~removed_mask(duplicates, table["source"], table["offset"])))
        found.update(zip(table["doc_id"].to_pylist(), table["sentences"].to_pylist()))
    return found


def stream_sentences(build: Path, split: str) -> dict[str, list[list[int]]]:
    """doc_id → id lists per sentence, cut from the stream shards at </s> (stream: <s> s1 </s> s2 </s> …)."""
    found = {}
    for path in sorted((build / "shards" / split).glob("stream-*.parquet")):
        table = pq.read_table(path)
        for doc_id, ids in zip(table["doc_id"].to_pylist(), table["ids"].to_pylist()):
            assert ids[0] == 2 and ids[-1] == 3
            cuts = [i for i, value in enumerate(ids) if value == 3]
            starts = [1] + [c + 1 for c in cuts[:-1]]
            found[doc_id] = [ids[s:c] for s, c in zip(starts, cuts)]
    return found


# The sample.


def test_dev_and_test_streams_keep_corpus_order(workdir: Path) -> None:
    """The prepared rows sorted by input file and byte offset as the reference; stream files
    read in manifest order."""
    build = workdir / "build"
    for split in ("dev", "test"):
        expected = heldout_corpus_order(build, split)
        assert stream_doc_ids(build, split) == expected
        assert expected != sorted(expected, key=doc_hash), "storage order would pass too"


def test_bottom_k_sample_keeps_the_k_smallest_hashes_whatever_the_batching():
    """Python's sorted() over all (hash, sentence) pairs as the reference bottom-k."""
    sentences = [f"sentence number {i % 700} of the sample" for i in range(2000)]
    keys = sentence_keys(sentences, seed=5)
    expected = [s for _, s in sorted(zip(keys.tolist(), sentences))[:300]]
    for batch in (1, 7, 256, 2000):
        sample = BottomK(300)
        for start in range(0, len(sentences), batch):
            sample.add(keys[start : start + batch], sentences[start : start + batch])
        assert sample.result() == expected, batch
    shuffled = np.random.default_rng(0).permutation(len(sentences))
    sample = BottomK(300)
    sample.add(keys[shuffled], [sentences[i] for i in shuffled])
    assert sample.result() == expected


def test_sample_seed_changes_the_draw():
    """Different seeds give different hash orders (blake2b keyed hashing)."""
    sentences = [f"line {i}" for i in range(100)]
    assert not np.array_equal(np.argsort(sentence_keys(sentences, 1)), np.argsort(sentence_keys(sentences, 2)))


def test_no_dev_or_test_sentence_reaches_the_trainer(workdir: Path):
    """steps.split.assign_split as the reference for each document's split; sentencepiece's piece list."""
    build = workdir / "build"
    sample = "\n".join(read_sample(build / "interim" / "subword" / "train_sample.jsonl"))
    assert SENTINEL["train"] in sample  # the check can see a sentinel when one is there
    assert SENTINEL["dev"] not in sample and SENTINEL["test"] not in sample
    pieces = [processor(build).id_to_piece(i) for i in range(processor(build).get_piece_size())]
    assert not [p for p in pieces if SENTINEL["dev"] in p or SENTINEL["test"] in p]
    assert set(prepared_sentences(build, "dev")) >= set(ids_in_split("dev", 3))


# The model.


def test_model_has_exactly_the_requested_size_and_the_reserved_ids(workdir: Path):
    """sentencepiece's own piece count and reserved ids."""
    model = processor(workdir / "build")
    assert model.get_piece_size() == SUBWORD["vocab_size"]
    assert (model.pad_id(), model.unk_id(), model.bos_id(), model.eos_id()) == (0, 1, 2, 3)
    assert [model.id_to_piece(i) for i in range(4)] == ["<pad>", "<unk>", "<s>", "</s>"]


def test_vocabulary_rows_are_the_model_pieces_in_id_order(workdir: Path):
    """sentencepiece's id_to_piece and piece types; train counts recounted from the train stream
    shards (numpy add.at over each sentence's ids, <s> once per document, </s> once per sentence)."""
    build = workdir / "build"
    model = processor(build)
    vocabulary = read_vocabulary(build / "vocabulary.tsv")
    assert vocabulary.tokens == [model.id_to_piece(i) for i in range(model.get_piece_size())]
    kinds = ["byte" if model.is_byte(i) else "control" if model.is_control(i) or model.is_unknown(i) else "piece" for i in range(vocabulary.size)]
    assert vocabulary.kinds == kinds
    assert vocabulary.kinds.count("byte") == 256
    recount = np.zeros(vocabulary.size, np.int64)
    for sentences in stream_sentences(build, "train").values():
        recount[2] += 1
        for ids in sentences:
            np.add.at(recount, ids, 1)
            recount[3] += 1
    assert recount.tolist() == vocabulary.counts
    assert vocabulary.counts[0] == 0 and vocabulary.counts[2] == len(stream_sentences(build, "train"))


def test_decoding_the_ids_of_every_dev_sentence_gives_back_the_cleaned_sentence(workdir: Path):
    """sentencepiece's decoder as the reference: ids → text equals the prepared (cleaned) sentence."""
    build = workdir / "build"
    model = processor(build)
    expected = prepared_sentences(build, "dev")
    encoded = stream_sentences(build, "dev")
    assert encoded.keys() == expected.keys() and expected
    for doc_id, sentences in expected.items():
        assert [model.decode(ids) for ids in encoded[doc_id]] == sentences, doc_id


def test_training_twice_on_the_sample_gives_the_identical_model_file(workdir: Path):
    """Byte equality with the model the workflow installed (SHA-256); the thread count is fixed
    because sentencepiece's unigram pieces change with it."""
    build = workdir / "build"
    settings = {"model_type": "unigram", "character_coverage": 0.9995, "byte_fallback": True, **SUBWORD}
    sample = build / "interim" / "subword" / "train_sample.jsonl"
    first = train_model(read_sample(sample), settings, TRAIN_THREADS)
    second = train_model(read_sample(sample), settings, TRAIN_THREADS)
    assert first == second
    assert hashlib.sha256(first).hexdigest() == hashlib.sha256((build / "subword.model").read_bytes()).hexdigest()


def test_manifest_records_the_model_sha256(workdir: Path):
    """hashlib.sha256 of the installed file."""
    build = workdir / "build"
    recorded = json.loads((build / "manifest.json").read_text())["vocabulary"]["subword_model"]
    assert recorded == {"file": "subword.model", "sha256": hashlib.sha256((build / "subword.model").read_bytes()).hexdigest()}


def test_a_model_without_the_reserved_layout_is_refused_naming_the_file(tmp_path: Path):
    """sentencepiece's default ids (unk=0, bos=1, eos=2) are not the project's layout."""
    writer = __import__("io").BytesIO()
    text = [f"the quick brown fox number {i} jumps" for i in range(200)]
    spm.SentencePieceTrainer.train(sentence_iterator=iter(text), model_writer=writer, vocab_size=40, minloglevel=2)
    path = tmp_path / "default.model"
    path.write_bytes(writer.getvalue())
    with pytest.raises(SystemExit, match=r"default\.model: reserved ids .* pad_id=0 unk_id=1"):
        check_model(path)


# Figures.


def _without_byte_fallback(model: bytes) -> bytes:
    """The same model with trainer_spec.byte_fallback (field 35 of field 2) set to false and its
    byte pieces (type BYTE = 6, field 3 of each piece in field 1) marked UNUSED = 5, which
    sentencepiece requires of a model without byte fallback (sentencepiece_model.proto)."""

    def varint(data: bytes, i: int) -> tuple[int, int]:
        value = shift = 0
        while True:
            byte = data[i]
            i += 1
            value |= (byte & 0x7F) << shift
            shift += 7
            if byte < 0x80:
                return value, i

    def fields(data: bytes, start: int, end: int):
        i = start
        while i < end:
            tag, i = varint(data, i)
            number, wire = tag >> 3, tag & 7
            value_start = i
            if wire == 0:
                _, i = varint(data, i)
            elif wire == 2:
                length, value_start = varint(data, i)
                i = value_start + length
            elif wire == 5:
                i += 4
            elif wire == 1:
                i += 8
            yield number, wire, value_start, i

    patched = bytearray(model)
    spec = next((s, e) for n, w, s, e in fields(model, 0, len(model)) if n == 2 and w == 2)
    flag = next(s for n, w, s, e in fields(model, *spec) if n == 35 and w == 0)
    assert patched[flag] == 1
    patched[flag] = 0
    for number, wire, start, end in fields(model, 0, len(model)):
        if number == 1 and wire == 2:
            for field, kind, at, _ in fields(model, start, end):
                if field == 3 and kind == 0 and patched[at] == 6:
                    patched[at] = 5
    return bytes(patched)


def test_byte_runs_count_the_unk_pieces_of_the_same_model_without_byte_fallback(workdir: Path, tmp_path: Path):
    """sentencepiece with byte fallback switched off in a copy of the model; str.split word counts."""
    model_path = workdir / "build" / "subword.model"
    sentences = [["Snow \u2603\u2603 fell on the \u65e5\u672c quay.", "Plain words only."], ["\u00de\u00f0 at the end \u2603"]]
    encoder = PieceEncoder(str(model_path), model_vocabulary(str(model_path)), threads=2)
    stats = ShardStats("chunk")
    encoded = encoder.encode(pa.table({"source": ["a.txt", "a.txt"], "sentences": pa.array(sentences, pa.list_(pa.string()))}), "dev", stats)
    figures = stats.sources["a.txt"]["dev"]
    copy = tmp_path / "no_fallback.model"
    copy.write_bytes(_without_byte_fallback(model_path.read_bytes()))
    plain = spm.SentencePieceProcessor(model_file=str(copy))
    flat = [s for document in sentences for s in document]
    unknown = sum(ids.count(plain.unk_id()) for ids in plain.encode(flat))
    assert unknown > 0
    assert figures.byte_runs == unknown
    assert figures.words == sum(len(s.split()) for s in flat)
    reference = spm.SentencePieceProcessor(model_file=str(model_path)).encode(flat)
    assert [ids for document in encoded.to_pylist() for ids in document] == reference


def test_coverage_reports_pieces_per_word_and_unknown_rates_by_split(workdir: Path):
    """Pieces (coverage.json's tokens) and words recounted from the stream shards and prepared
    sentences (str.split)."""
    build = workdir / "build"
    coverage = json.loads((build / "stats" / "coverage.json").read_text())
    assert coverage["units"] == "subword"
    for split in ("train", "dev", "test"):
        figures = coverage["splits"][split]
        pieces = sum(len(ids) for doc in stream_sentences(build, split).values() for ids in doc)
        words = sum(len(s.split()) for doc in prepared_sentences(build, split).values() for s in doc)
        assert figures["tokens"] == pieces and figures["words"] == words
        assert figures["tokens_per_word"] == pytest.approx(pieces / words, abs=1e-6)
        assert figures["unknown_rate"] == 0.0  # byte fallback leaves no <unk>
        assert 0.0 <= figures["unknown_rate_without_byte_fallback"] <= figures["byte_piece_rate"]


def test_vocabulary_tsv_keeps_one_row_per_line_for_pieces_with_line_breaks(tmp_path: Path):
    """str.splitlines as an independent line reader."""
    vocabulary = Vocabulary(["<pad>", "<unk>", "<s>", "</s>", "\n", "a\\nb", "\t"], [0, 0, 0, 0, 5, 2, 1], ["control"] * 4 + ["piece"] * 3)
    path = tmp_path / "vocabulary.tsv"
    path.write_text(vocabulary.to_tsv(), encoding="utf-8")
    assert len(path.read_text(encoding="utf-8").splitlines()) == 1 + vocabulary.size
    assert read_vocabulary(path) == vocabulary


# Reuse and retraining.


def test_frozen_model_reuse_gives_identical_ids(workdir: Path, tmp_path: Path):
    """Stream shards of a build with subword.frozen compared id for id with the learned build."""
    frozen = tmp_path / "frozen"
    frozen.mkdir()
    shutil.copytree(workdir / "corpus", frozen / "corpus")
    shutil.copy2(workdir / "build" / "subword.model", tmp_path / "kept.model")
    result = run_workflow(frozen, {**OVERRIDES, "subword": {**SUBWORD, "frozen": str(tmp_path / "kept.model")}}, *TARGETS)
    assert not jobs_run(result) & {"subword_sample", "subword_train"}
    assert (frozen / "build" / "subword.model").read_bytes() == (workdir / "build" / "subword.model").read_bytes()
    for split in ("train", "dev", "test"):
        assert stream_sentences(frozen / "build", split) == stream_sentences(workdir / "build", split)


def test_dev_and_test_edits_do_not_retrain_but_train_edits_do(workdir: Path, tmp_path: Path):
    """Snakemake's own dry-run job list and run log; the sentinel documents' splits by assign_split."""
    copy = tmp_path / "copy"
    shutil.copytree(workdir, copy, symlinks=True)
    model = copy / "build" / "subword.model"
    before = model.read_bytes(), model.stat().st_mtime_ns
    documents = held_documents()
    for document in documents:
        if document["split"] in ("dev", "test"):
            document["text"] += " A late note was added."
    write_held(copy / "corpus", documents)
    dry = run_workflow(copy, OVERRIDES, "-n", *TARGETS)
    assert "prepare" in jobs_run(dry) and "subword_train" not in jobs_run(dry)
    ran = jobs_run(run_workflow(copy, OVERRIDES, *TARGETS))
    assert "subword_sample" in ran and "shards" in ran
    assert not ran & {"subword_train", "subword_model"}
    assert (model.read_bytes(), model.stat().st_mtime_ns) == before

    documents[0]["text"] += " The clerk counted seventeen barrels of salted herring."
    assert documents[0]["split"] == "train"
    write_held(copy / "corpus", documents)
    ran = jobs_run(run_workflow(copy, OVERRIDES, *TARGETS))
    assert {"subword_sample", "subword_train", "subword_model"} <= ran
    assert len(list((copy / "build" / "interim" / "subword" / "models").glob("*.model"))) == 2
