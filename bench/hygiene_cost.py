"""What near-duplicate detection and the contamination audit add to a build, measured on the
workflow's own code paths at 1x (Debian's dict-gcide, the corpus of bench/pipeline.py).

- prepare side: for every chunk of a finished build, the chunk's documents are read and
  prepared as the prepare job does (untimed), then the job's `SignatureWriter` takes every
  batch and closes its files (timed: words, MinHash signatures, band keys, verification slots,
  13-gram hashes, Arrow and Parquet);
- corpus-wide side: the deduplicate job's share, from opening the signature files to writing
  the clusters, drops and contamination figures (`hygiene.CorpusSignatures`, `measure`,
  `write_findings`) on a copy of the build;
- F: the floor of bench/pipeline.py (one single-core pass of the default segmenter), in the
  same process, so the ratio holds on a loaded host.

CPU times are this process's (user + system), best of `--repeats`.

Usage: python bench/hygiene_cost.py [--repeats 3]   (builds bench/data/runs/hygiene once)
Result: bench/results/hygiene_cost.json.
"""

from __future__ import annotations

import argparse
import json
import shutil
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "bench"))

import pipeline  # noqa: E402
from corpusmill import hygiene, prepare  # noqa: E402
from corpusmill.accounting import Tally  # noqa: E402
from corpusmill.deduplicate import CorpusRows, first_occurrences  # noqa: E402
from corpusmill.ingest import ReadOptions, read_documents  # noqa: E402
from corpusmill.layout import Layout  # noqa: E402
from corpusmill.signatures import SignatureOptions, SignatureWriter  # noqa: E402


def best_cpu(work, repeats: int) -> float:
    """The least CPU time (user + system) of `repeats` runs of `work()`."""
    best = float("inf")
    for _ in range(repeats):
        started = time.process_time()
        work()
        best = min(best, time.process_time() - started)
    return best


def prepare_side(layout: Layout, chunks: list[str], repeats: int) -> float:
    options = json.loads(Path(layout.options("prepare")).read_text(encoding="utf-8"))
    signing = SignatureOptions.from_config(options)
    preparer = prepare.ChunkPreparer(options)
    read = ReadOptions.from_config(options["corpus"])
    chunk_bytes = int(options["corpus"]["chunk_mb"] * (1 << 20))
    total = 0.0
    for key in chunks:
        chunk = prepare.read_chunk_plan(layout.chunk_plan(key))
        documents = read_documents(options["corpus"]["root"], chunk, chunk_bytes, read, Tally(), collect_problems=True)
        batches = list(preparer.batches(documents, Tally(), min(prepare.BATCH_CHARS, chunk_bytes)))
        body = preparer.schema.names[-1]

        def sign(batches=batches, body=body) -> None:
            with tempfile.TemporaryDirectory() as folder, SignatureWriter(f"{folder}/s.parquet", f"{folder}/v.bin", signing) as writer:
                for batch in batches:
                    writer.add(batch, body)

        total += best_cpu(sign, repeats)
    return total


def corpus_side(build: Path, chunks: list[str], repeats: int) -> float:
    def measure() -> float:
        """CPU time of the hygiene part of one deduplicate run, on a copy of the build."""
        with tempfile.TemporaryDirectory() as folder:
            copy = Path(folder) / "build"
            shutil.copytree(build, copy)
            layout = Layout(str(copy))
            options = json.loads(Path(layout.options("deduplicate")).read_text(encoding="utf-8"))
            corpus = CorpusRows([layout.prepared(chunk) for chunk in chunks])
            found = first_occurrences(corpus.words)
            started = time.process_time()
            signed = hygiene.CorpusSignatures([(layout.signatures(chunk), layout.verification(chunk)) for chunk in chunks])
            findings = hygiene.measure(signed, corpus.words, found, options)
            hygiene.write_findings(layout, chunks, corpus.locate, signed, findings, options)
            return time.process_time() - started

    return min(measure() for _ in range(repeats))


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="CPU cost of near-duplicates and contamination inside the workflow, against F.")
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args(argv)
    corpus = pipeline.DATA / "x1"
    pipeline.write_corpus(corpus, 1)
    directory = pipeline.DATA / "runs" / "hygiene"
    build = directory / "build"
    if not (build / "manifest.json").exists():
        pipeline.run_build(directory, {"corpus": {"root": str(corpus)}, "near_duplicates": {"policy": "off"}}, 2)
    layout = Layout(str(build))
    chunks = list(json.loads(Path(layout.chunk_list).read_text(encoding="utf-8")))
    floor = min(pipeline.floor_pass(corpus, pipeline.default_config())["cpu_seconds"] for _ in range(args.repeats))
    signing = prepare_side(layout, chunks, args.repeats)
    aggregate = corpus_side(build, chunks, args.repeats)
    result = {
        "floor_cpu_seconds": round(floor, 2),
        "prepare_signatures_cpu_seconds": round(signing, 2),
        "deduplicate_hygiene_cpu_seconds": round(aggregate, 2),
        "added_cpu_over_floor": round((signing + aggregate) / floor, 3),
        "chunks": len(chunks),
    }
    pipeline.RESULTS.mkdir(parents=True, exist_ok=True)
    (pipeline.RESULTS / "hygiene_cost.json").write_text(json.dumps(result, indent=2) + "\n", encoding="utf-8")
    print(
        f"F {floor:.2f} CPU-s; signatures in the prepare jobs {signing:.2f} CPU-s, clusters and contamination in the "
        f"deduplicate job {aggregate:.2f} CPU-s: together {(signing + aggregate) / floor:.3f} x F"
    )


if __name__ == "__main__":
    main()
