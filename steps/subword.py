"""Subword units: a seeded train-split sample, a sentencepiece model learned on it, and its install.

Only train sentences of documents that survived deduplication reach the trainer. The sample is
a bottom-k sample: every sentence gets a 64-bit hash keyed by `subword.seed`, and the
`subword.max_sentences` sentences with the smallest hashes are kept. That needs memory for k
sentences only, and it depends on the set of train sentences alone, not on how the corpus was
cut into chunks or in which order chunks are read. Identical sentences share a hash, so they
are kept or left out together.

The sample file (JSON lines, one JSON string per sentence, in hash order; sentences may hold
line breaks) comes with a key file: a hash of the sample bytes, the training settings and the
sentencepiece version. The trained model is cached under that key
(interim/subword/models/<key>.model), so a run retrains only when train text or a training
setting changed; edits to dev or test documents give the same sample, hence the same key.

Training uses normalization_rule_name "identity" and keeps whitespace as it is: the clean step
has already normalized the text (Unicode form, spaces, line ends), and a second normalization
inside the model would make decoded ids differ from the cleaned sentence. With identity rules,
decoding the ids of a sentence gives back exactly that sentence (unknown characters aside,
which byte fallback covers).

Reserved symbols get the project's fixed ids: <pad>=0, <unk>=1, <s>=2, </s>=3; byte pieces
<0x00>..<0xFF> (with byte fallback) follow, then the learned pieces, in sentencepiece's order.
"""

from __future__ import annotations

import argparse
import hashlib
import io
import json
from collections.abc import Iterator, Sequence
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import sentencepiece as spm

from . import job
from .chunks import removed_mask
from .formats import BOS, EOS, PAD, RESERVED, UNK
from .storage import atomic_path, write_text

SECTIONS = ("subword",)

SAMPLE_BATCH = 8192
KEY_LENGTH = 20
# sentencepiece's unigram training gives different pieces with a different thread count, so
# training always uses this many threads, whatever the number of cores a run grants.
TRAIN_THREADS = 2
# Training settings that change the learned model; the sample key covers them.
TRAINING_SETTINGS = ("model_type", "vocab_size", "character_coverage", "byte_fallback", "seed")


def sentence_keys(sentences: Sequence[str], seed: int) -> np.ndarray:
    """A 64-bit hash per sentence keyed by the seed: the sampling order."""
    salt = seed.to_bytes(8, "big")
    return np.fromiter(
        (int.from_bytes(hashlib.blake2b(s.encode("utf-8"), digest_size=8, key=salt).digest(), "big") for s in sentences),
        dtype=np.uint64,
        count=len(sentences),
    )


class BottomK:
    """The k sentences with the smallest keys seen so far, in bounded memory (k plus one batch)."""

    def __init__(self, k: int) -> None:
        self.k = k
        self.keys = np.empty(0, np.uint64)
        self.sentences = np.empty(0, object)
        self.seen = 0

    def add(self, keys: np.ndarray, sentences: Sequence[str]) -> None:
        self.seen += len(keys)
        values = np.asarray(sentences, dtype=object)
        if len(self.keys) >= self.k:
            below = keys < self.keys.max()
            keys, values = keys[below], values[below]
        if not len(keys):
            return
        keys = np.concatenate([self.keys, keys])
        values = np.concatenate([self.sentences, values])
        if len(keys) > self.k:
            keep = np.argpartition(keys, self.k - 1)[: self.k]
            keys, values = keys[keep], values[keep]
        self.keys, self.sentences = keys, values

    def result(self) -> list[str]:
        """Kept sentences in key order (equal keys hold equal sentences, so the order is fixed)."""
        order = np.argsort(self.keys, kind="stable")
        return self.sentences[order].tolist()


def train_sentences(prepared: str, removed: pa.Table) -> Iterator[list[str]]:
    """Batches of the train sentences of one prepared chunk, removed duplicates left out."""
    parquet = pq.ParquetFile(prepared)
    for batch in parquet.iter_batches(batch_size=SAMPLE_BATCH, columns=["source", "offset", "split", "sentences"]):
        table = pa.Table.from_batches([batch])
        table = table.filter(pc.equal(table["split"], "train"))
        table = table.filter(pa.array(~removed_mask(removed, table["source"], table["offset"])))
        sentences = pc.list_flatten(table["sentences"]).to_pylist()
        if sentences:
            yield sentences


def draw_sample(chunks: Sequence[tuple[str, pa.Table]], k: int, seed: int) -> tuple[list[str], int]:
    """The bottom-k sample of all train sentences of the (prepared chunk, its removed documents)
    pairs, and how many train sentences there were."""
    sample = BottomK(k)
    for path, removed in chunks:
        for sentences in train_sentences(path, removed):
            sample.add(sentence_keys(sentences, seed), sentences)
    return sample.result(), sample.seen


def sample_text(sentences: Sequence[str]) -> str:
    """JSON lines: one JSON string per sentence, so line breaks inside a sentence survive."""
    return "".join(json.dumps(s, ensure_ascii=False) + "\n" for s in sentences)


def read_sample(path: str | Path) -> Iterator[str]:
    with open(path, encoding="utf-8") as handle:
        for number, line in enumerate(handle, start=1):
            try:
                yield json.loads(line)
            except json.JSONDecodeError as error:
                raise SystemExit(f"corpusmill: {path}: line {number}: not a JSON string ({error.msg}); delete the file to redraw the sample") from None


def sample_key(sample: str, subword: dict) -> str:
    """Hash of the sample and every setting that changes the learned model."""
    settings = {name: subword[name] for name in TRAINING_SETTINGS}
    hasher = hashlib.sha256()
    hasher.update(json.dumps({"settings": settings, "sentencepiece": spm.__version__}, sort_keys=True).encode("utf-8"))
    hasher.update(sample.encode("utf-8"))
    return hasher.hexdigest()[:KEY_LENGTH]


def trainer_options(subword: dict, threads: int) -> dict:
    """sentencepiece trainer options: the configured model plus the project's fixed choices."""
    return {
        "model_type": subword["model_type"],
        "vocab_size": subword["vocab_size"],
        "character_coverage": subword["character_coverage"],
        "byte_fallback": subword["byte_fallback"],
        "num_threads": threads,
        "pad_id": 0,
        "unk_id": 1,
        "bos_id": 2,
        "eos_id": 3,
        "pad_piece": PAD,
        "unk_piece": UNK,
        "bos_piece": BOS,
        "eos_piece": EOS,
        "normalization_rule_name": "identity",
        "remove_extra_whitespaces": False,
        "input_sentence_size": 0,
        "shuffle_input_sentence": False,
        "hard_vocab_limit": True,
        "minloglevel": 1,
    }


def train_model(sentences: Iterator[str], subword: dict, threads: int) -> bytes:
    """The serialized model learned from `sentences` (the whole sample; no further sampling)."""
    spm.set_random_generator_seed(subword["seed"])
    writer = io.BytesIO()
    spm.SentencePieceTrainer.train(sentence_iterator=sentences, model_writer=writer, **trainer_options(subword, threads))
    return writer.getvalue()


def check_model(path: str | Path) -> spm.SentencePieceProcessor:
    """Load a model and check that its reserved ids follow the project's layout."""
    try:
        processor = spm.SentencePieceProcessor(model_file=str(path))
    except (OSError, RuntimeError) as error:
        raise SystemExit(f"corpusmill: {path}: byte 0: not a readable sentencepiece model ({error}); check subword.frozen") from None
    expected = {piece: i for i, piece in enumerate(RESERVED)}
    found = {piece: processor.piece_to_id(piece) for piece in RESERVED}
    ids = {PAD: processor.pad_id(), UNK: processor.unk_id(), BOS: processor.bos_id(), EOS: processor.eos_id()}
    if found != expected or ids != expected:
        raise SystemExit(
            f"corpusmill: {path}: reserved ids {ids} differ from the required {expected}; "
            "train the model with pad_id=0 unk_id=1 bos_id=2 eos_id=3, or set subword.frozen: null to learn one"
        )
    return processor


def main_sample(argv: list[str]) -> None:
    run = job.start(argv, "subword_sample", "Sample the train sentences a subword model is learned on.")
    layout, subword = run.layout, run.options["subword"]
    chunks = [(layout.prepared(c), pq.ParquetFile(layout.removed(c)).read(use_threads=False)) for c in run.chunks()]
    sentences, seen = draw_sample(chunks, subword["max_sentences"], subword["seed"])
    if not sentences:
        raise SystemExit("corpusmill: no train sentences to learn a subword model from; check split.fractions (train > 0) and that the corpus has text")
    text = sample_text(sentences)
    write_text(layout.subword_sample, text)
    write_text(layout.subword_key, sample_key(text, subword) + "\n")
    print(f"subword sample: {len(sentences)} of {seen} train sentences")


def main_train(argv: list[str]) -> None:
    parser = argparse.ArgumentParser(prog="python -m steps.run subword train")
    parser.add_argument("--build", required=True)
    parser.add_argument("--output", required=True, help="the cached model for the sample's key")
    args = parser.parse_args(argv)
    run = job.start(["--build", args.build], "subword_train", "Learn a subword model from the sample.")
    subword = run.options["subword"]
    try:
        model = train_model(read_sample(run.layout.subword_sample), subword, TRAIN_THREADS)
    except RuntimeError as error:
        raise SystemExit(
            f"corpusmill: {run.layout.subword_sample}: sentencepiece could not learn the model: {error}; "
            "lower subword.vocab_size or give the corpus more train text"
        ) from None
    with atomic_path(args.output) as temporary:
        temporary.write_bytes(model)
    print(f"subword model: {len(model)} bytes, {subword['vocab_size']} pieces")


def main_install(argv: list[str]) -> None:
    parser = argparse.ArgumentParser(prog="python -m steps.run subword model")
    parser.add_argument("--build", required=True)
    parser.add_argument("--model", required=True, help="the learned or frozen model")
    args = parser.parse_args(argv)
    run = job.start(["--build", args.build], "subword_model", "Install the subword model the build uses.")
    check_model(args.model)
    with atomic_path(run.layout.subword_model) as temporary:
        temporary.write_bytes(Path(args.model).read_bytes())


main = job.entries(sample=main_sample, train=main_train, model=main_install)

if __name__ == "__main__":
    main()
