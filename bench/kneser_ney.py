"""CPU time and peak memory of the Kneser–Ney baseline (steps.kneser_ney) at 1x and 10x.

Corpus: Debian's dict-gcide (about 40 MB of English text), cut into paragraphs (documents)
and segmented with the default segmenter; one paragraph in 20 is dev, the rest train. The
vocabulary is every train word seen at least twice (a Counter), other words map to <unk>.
The segmentation pass is timed as the floor F of bench/pipeline.py (read, cut paragraphs,
segment), so the baseline's CPU time is compared with F measured in the same run.

Two 10x corpora, train and dev alike, bracket real ones:
- `10x`: ten copies of the 1x ids: ten times the tokens, the same distinct n-grams;
- `10xd`: ten copies with the word ids of copy j permuted by a seeded permutation (reserved
  ids kept): the copies share almost no n-gram, so the tables hold about ten times the
  distinct n-grams of 1x, the case where memory grows the most.

Each measurement runs in a child process under `/usr/bin/time -f %M` (peak RSS): count
order 4 in batches of 1 M tokens, estimate orders 2..4 (modified), the train perplexity from
the counts, and the dev perplexity token by token; `--arpa` adds a run of 1x that also writes
the order-4 model as an ARPA file.

Usage: python bench/kneser_ney.py [--scales 1x 10x 10xd] [--arpa]
Ids go to bench/data/kneser_ney/, figures to bench/results/kneser_ney.json.
"""

from __future__ import annotations

import argparse
import gzip
import json
import os
import subprocess
import sys
import time
from collections import Counter
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "bench"))

from corpusmill import kneser_ney  # noqa: E402
from corpusmill.segment import Segmenter  # noqa: E402
from pipeline import _PARAGRAPH_BREAK, DATA, GCIDE, RESULTS, default_config, machine  # noqa: E402

FOLDER = DATA / "kneser_ney"
TIME = "/usr/bin/time"
ORDER = 4
MIN_COUNT = 2
DEV_EVERY = 20


def flatten(documents: list[list[list[str]]], ids: dict[str, int]) -> tuple[np.ndarray, np.ndarray]:
    """(ids laid end to end, sentence lengths) of segmented documents."""
    sentences = [sentence for document in documents for sentence in document]
    lengths = np.array([len(s) for s in sentences], np.int64)
    flat = np.array([ids.get(token, kneser_ney.UNK_ID) for sentence in sentences for token in sentence], np.int32)
    return flat, lengths


def segment_corpus() -> tuple[list, dict]:
    """The floor F: read gcide, cut paragraphs, segment (timed on one core)."""
    segmenter = Segmenter.from_config(default_config()["segment"])
    load = os.getloadavg()[0]
    cpu = time.process_time()
    text = gzip.decompress(GCIDE.read_bytes()).decode("utf-8", "replace")
    documents = [segmenter.segment(p) for p in _PARAGRAPH_BREAK.split(text) if p.strip()]
    floor = time.process_time() - cpu
    return documents, {"floor_cpu_seconds": round(floor, 2), "load_before": round(load, 2), "text_mb": round(len(text.encode()) / 1e6, 1)}


def make_ids(documents: list) -> int:
    """Store the id arrays of every scale (once); returns the vocabulary size."""
    marker = FOLDER / "ready.json"
    if marker.exists():
        return json.loads(marker.read_text())["vocabulary_size"]
    train = [d for i, d in enumerate(documents) if i % DEV_EVERY]
    dev = [d for i, d in enumerate(documents) if not i % DEV_EVERY]
    counts = Counter(token for document in train for sentence in document for token in sentence)
    words = sorted((w for w, c in counts.items() if c >= MIN_COUNT), key=lambda w: (-counts[w], w))
    ids = {word: index for index, word in enumerate(words, start=4)}
    size = 4 + len(words)
    rng = np.random.default_rng(10)
    mappings = [np.arange(size, dtype=np.int32)]
    for _ in range(9):
        mapping = np.arange(size, dtype=np.int32)
        mapping[4:] = 4 + rng.permutation(size - 4).astype(np.int32)
        mappings.append(mapping)
    for name, part in (("train", train), ("dev", dev)):
        flat, lengths = flatten(part, ids)
        for scale, copies in (("1x", [flat]), ("10x", [flat] * 10), ("10xd", [mapping[flat] for mapping in mappings])):
            folder = FOLDER / scale
            folder.mkdir(parents=True, exist_ok=True)
            np.save(folder / f"{name}_ids.npy", np.concatenate(copies))
            np.save(folder / f"{name}_lengths.npy", np.tile(lengths, len(copies)))
    marker.write_text(json.dumps({"vocabulary_size": size}))
    return size


def child(folder: Path, vocabulary_size: int, arpa: bool) -> None:
    """The measured work; prints its figures as JSON."""
    phases = {}
    clock = time.process_time()

    def lap(name: str) -> None:
        nonlocal clock
        now = time.process_time()
        phases[name] = round(now - clock, 2)
        clock = now

    train_ids = np.load(folder / "train_ids.npy", mmap_mode="r")
    train_lengths = np.load(folder / "train_lengths.npy")
    counter = kneser_ney.NgramCounter(ORDER, vocabulary_size)
    ends = np.cumsum(train_lengths)
    first, start = 0, 0
    while first < len(train_lengths):
        last = max(int(np.searchsorted(ends, start + (1 << 20), side="right")), first + 1)
        end = int(ends[last - 1])
        counter.add(np.asarray(train_ids[start:end]), train_lengths[first:last])
        first, start = last, end
    counts = counter.finish()
    lap("count")
    models = kneser_ney.estimate_models(counts, "modified", range(2, ORDER + 1))
    unigram = kneser_ney.AddOneUnigram.of(counts)
    lap("estimate")
    train = kneser_ney.training_score(models, unigram)
    lap("train perplexity")
    dev = kneser_ney.SplitScore()
    kneser_ney.score_split(dev, models, unigram, np.load(folder / "dev_ids.npy"), np.load(folder / "dev_lengths.npy"))
    lap("dev perplexity")
    if arpa:
        with open(folder / "model.arpa", "w", encoding="utf-8") as out:
            kneser_ney.write_arpa(models[ORDER], [str(i) for i in range(vocabulary_size)], out)
        phases["arpa_mb"] = round((folder / "model.arpa").stat().st_size / 1e6, 1)
        lap("arpa")
    print(
        json.dumps(
            {
                "train_tokens": counts.tokens,
                "dev_tokens": dev.tokens,
                "distinct": {k: len(level) for k, level in enumerate(counts.levels, start=1)},
                "train_perplexity": {m: round(train.perplexity(m), 2) for m in models},
                "dev_perplexity": {m: round(dev.perplexity(m), 2) for m in models},
                "dev_unigram_perplexity": round(dev.unigram_perplexity, 2),
                "phases_cpu_seconds": phases,
            }
        )
    )


def measure(scale: str, vocabulary_size: int, arpa: bool) -> dict:
    command = [TIME, "-f", "%M %U %S %e", sys.executable, __file__, "--child", str(FOLDER / scale), str(vocabulary_size)]
    load = os.getloadavg()[0]
    result = subprocess.run(command + (["--arpa"] if arpa else []), capture_output=True, text=True, env={**os.environ, "OPENBLAS_NUM_THREADS": "1"})
    if result.returncode != 0:
        raise SystemExit(f"bench: the {scale} child failed:\n{result.stderr[-3000:]}")
    kib, user, system, wall = result.stderr.strip().splitlines()[-1].split()
    figures = json.loads(result.stdout)
    figures.update(
        peak_rss_mib=round(int(kib) / 1024, 1), cpu_seconds=round(float(user) + float(system), 2), wall_seconds=float(wall), load_before=round(load, 2)
    )
    return figures


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--scales", nargs="+", default=["1x", "10x", "10xd"], choices=["1x", "10x", "10xd"])
    parser.add_argument("--arpa", action="store_true", help="add a 1x run that also writes the order-4 model as an ARPA file")
    parser.add_argument("--child", nargs=2, metavar=("FOLDER", "V"), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        child(Path(args.child[0]), int(args.child[1]), args.arpa)
        return
    if not GCIDE.exists():
        raise SystemExit(f"bench: {GCIDE} is missing: apt-get install -y dict-gcide")
    documents, floor = segment_corpus()
    size = make_ids(documents)
    del documents
    results = {"machine": machine(), "floor": floor, "vocabulary_size": size, "scales": {}}
    f = floor["floor_cpu_seconds"]
    print(f"floor F (segmenting {floor['text_mb']} MB of gcide, 1 core): {f:.2f} CPU-s (load {floor['load_before']}); |V| = {size:,}")
    runs = [(scale, scale, False) for scale in args.scales] + ([("1x + ARPA", "1x", True)] if args.arpa else [])
    for name, scale, arpa in runs:
        figures = measure(scale, size, arpa)
        results["scales"][name] = figures
        print(
            f"{name}: {figures['train_tokens']:,} train tokens, {figures['dev_tokens']:,} dev; CPU {figures['cpu_seconds']:.2f} s "
            f"= {figures['cpu_seconds'] / f:.2f} x F; peak RSS {figures['peak_rss_mib']:.0f} MiB; load {figures['load_before']}"
        )
        print(f"    phases (CPU-s): {figures['phases_cpu_seconds']}; distinct n-grams {figures['distinct']}")
        print(f"    perplexity train {figures['train_perplexity']}, dev {figures['dev_perplexity']}, dev unigram {figures['dev_unigram_perplexity']}")
    one = results["scales"].get("1x")
    for scale in ("10x", "10xd"):
        if one and scale in results["scales"]:
            ten = results["scales"][scale]
            print(f"{scale} / 1x: CPU {ten['cpu_seconds'] / one['cpu_seconds']:.2f}, peak RSS {ten['peak_rss_mib'] / one['peak_rss_mib']:.2f}")
    RESULTS.mkdir(parents=True, exist_ok=True)
    (RESULTS / "kneser_ney.json").write_text(json.dumps(results, indent=2))


if __name__ == "__main__":
    main()
