"""Subword encoding throughput: the pipeline's encoder against sentencepiece's own batched encode.

Both encode the same sentences (about 20 MB of dictionary text from Debian's dict-gcide) with
the same model and thread count, in batches of about the shard job's budget of text, best of
several interleaved rounds. The pipeline's encoder is called as the shard job calls it: on a
table of prepared rows (`source`, `sentences`), with the ids of the model built as the
vocabulary job builds them, adding its figures to a ShardStats. Its figure therefore includes
everything it does beyond sentencepiece: reading the strings out of Arrow, building the nested
Arrow id lists and counting words, unknown and byte pieces per input file.

    python bench/subword_encode.py [--mb 20] [--threads 2] [--rounds 3]
"""

from __future__ import annotations

import argparse
import gzip
import json
import sys
import tempfile
import time
from pathlib import Path

import pyarrow as pa
import sentencepiece as spm

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
from corpusmill.encoder import PieceEncoder
from corpusmill.formats import ShardStats
from corpusmill.shards import BATCH_BYTES
from corpusmill.subword import train_model
from corpusmill.vocabulary import model_vocabulary

GCIDE = Path("/usr/share/dictd/gcide.dict.dz")
SENTENCES_PER_DOCUMENT = 8
SPLIT = "train"


def read_sentences(path: Path, megabytes: float) -> list[str]:
    """Non-empty lines with single spaces (as the clean step leaves them), up to `megabytes` of UTF-8."""
    sentences, size, limit = [], 0, int(megabytes * 1e6)
    with gzip.open(path, "rt", encoding="utf-8", errors="replace") as handle:
        for line in handle:
            sentence = " ".join(line.split())
            if sentence:
                sentences.append(sentence)
                size += len(sentence.encode("utf-8"))
                if size >= limit:
                    break
    return sentences


def batches(sentences: list[str], source: str) -> list[pa.Table]:
    """Prepared rows of SENTENCES_PER_DOCUMENT sentences each, the columns the encoder reads, in
    tables of about BATCH_BYTES of text (the shard job bounds its batches by stored bytes)."""
    documents = [sentences[i : i + SENTENCES_PER_DOCUMENT] for i in range(0, len(sentences), SENTENCES_PER_DOCUMENT)]
    tables, start, held = [], 0, 0
    for end, document in enumerate(documents, start=1):
        held += sum(len(s.encode("utf-8")) for s in document)
        if held >= BATCH_BYTES or end == len(documents):
            rows = documents[start:end]
            tables.append(pa.table({"source": pa.array([source] * len(rows), pa.string()), "sentences": pa.array(rows, pa.list_(pa.string()))}))
            start, held = end, 0
    return tables


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--mb", type=float, default=20.0)
    parser.add_argument("--threads", type=int, default=2)
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--vocab-size", type=int, default=8000)
    args = parser.parse_args()
    if not GCIDE.exists():
        raise SystemExit(f"{GCIDE} is missing: apt-get install -y dict-gcide")
    sentences = read_sentences(GCIDE, args.mb)
    megabytes = sum(len(s.encode("utf-8")) for s in sentences) / 1e6
    settings = {"model_type": "unigram", "vocab_size": args.vocab_size, "character_coverage": 0.9995, "byte_fallback": True, "seed": 17}
    started = time.perf_counter()
    try:
        model = train_model(iter(sentences[::20]), settings, args.threads)
    except RuntimeError as error:
        raise SystemExit(
            f"sentencepiece could not learn {args.vocab_size} pieces from 5% of {megabytes:.1f} MB: {error}; lower --vocab-size or raise --mb"
        ) from None
    training = time.perf_counter() - started
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "bench.model"
        path.write_bytes(model)
        encoder = PieceEncoder(str(path), model_vocabulary(str(path)), args.threads)
        reference = spm.SentencePieceProcessor(model_file=str(path))
        tables = batches(sentences, GCIDE.name)
        texts = [table["sentences"].combine_chunks().flatten().to_pylist() for table in tables]
        best = {"pipeline": float("inf"), "sentencepiece": float("inf")}
        pieces = 0
        for _ in range(args.rounds):
            stats = ShardStats("bench")
            started = time.perf_counter()
            for rows in tables:
                encoder.encode(rows, SPLIT, stats)
            best["pipeline"] = min(best["pipeline"], time.perf_counter() - started)
            pieces = stats.figures(GCIDE.name, SPLIT).tokens
            started = time.perf_counter()
            for batch in texts:
                reference.encode(batch, num_threads=args.threads)
            best["sentencepiece"] = min(best["sentencepiece"], time.perf_counter() - started)
    figures = {
        "sentences": len(sentences),
        "megabytes": round(megabytes, 2),
        "pieces": pieces,
        "threads": args.threads,
        "training_seconds_on_5_percent": round(training, 2),
        "pipeline_mb_per_s": round(megabytes / best["pipeline"], 2),
        "sentencepiece_mb_per_s": round(megabytes / best["sentencepiece"], 2),
        "ratio": round(best["sentencepiece"] / best["pipeline"], 3),
    }
    print(json.dumps(figures, indent=2))
    if figures["ratio"] < 0.8:
        raise SystemExit(f"pipeline encoder reaches {figures['ratio']:.2f} of sentencepiece's batched encode; the target is 0.8")


if __name__ == "__main__":
    main()
