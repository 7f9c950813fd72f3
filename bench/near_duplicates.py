"""Benchmark near-duplicate detection and the contamination audit on real English text
(Debian's dict-gcide, about 40 MB; paragraphs as documents) at 1x and 10x.

Two child processes per scale, each run under `/usr/bin/time` for its peak resident memory
(which counts the pages of the memory-mapped signature file; the anonymous part is sampled
apart):
- prepare: what the per-chunk prepare jobs will add. It reads the corpus in batches of 4,096
  documents (the prepare step's batch), tokenises each with the default segmenter
  (`steps.segment.Segmenter`, UAX #29; its CPU time is the floor F) and then, timed apart,
  finds the words, MinHash signatures, band keys, digests and 16-bit verification slots, the
  13-gram hashes, and sorts each batch's train grams. It writes them to files: one per band,
  digests, verification slots, fingerprints and splits, train gram runs, dev/test grams.
- aggregate: what the corpus-wide job will do. Clusters from the band files (one band in memory
  at a time, verification slots fetched from a memory map), the drop policy over the cluster
  members, the merged train gram set, every dev/test document's share and the summary.

The 10x corpus holds ten copies of every paragraph, copy k prefixed with `copyk` (as in
bench/pipeline.py), so each paragraph of 10x has nine near-duplicates: a heavy clustering load.
The split is drawn as the prepare step draws it (salted hash of the text, 80/10/10).

Usage: python bench/near_duplicates.py [--scales 1 10]   (needs Debian's time package)
Files go to bench/data/near_duplicates/, results to bench/results/near_duplicates.json.
"""

from __future__ import annotations

import argparse
import contextlib
import gzip
import json
import os
import re
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pyarrow as pa

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from corpusmill import contamination, near_duplicates  # noqa: E402
from corpusmill.segment import Segmenter  # noqa: E402
from corpusmill.settings import resolve  # noqa: E402
from corpusmill.split import assign_split, fingerprint  # noqa: E402

GCIDE = Path("/usr/share/dictd/gcide.dict.dz")
DATA = REPO / "bench" / "data" / "near_duplicates"
RESULTS = REPO / "bench" / "results"
BATCH = 4096
SPLITS = ("train", "dev", "test")
_PARAGRAPH_BREAK = re.compile(r"\n[ \t]*\n")


def paragraphs(copies: int) -> Iterator[tuple[str, str]]:
    """(source, paragraph) of gcide, `copies` times, copy k prefixed with `copyk` when copies > 1."""
    text = gzip.decompress(GCIDE.read_bytes()).decode("utf-8", "replace")
    found = [p for p in _PARAGRAPH_BREAK.split(text) if p.strip()]
    del text
    for copy in range(copies):
        prefix = f"copy{copy} " if copies > 1 else ""
        for number, paragraph in enumerate(found):
            yield f"copy{copy}-part-{number * 20 // len(found):02d}.txt", prefix + paragraph


class MemorySampler:
    """The largest anonymous and file-backed resident memory of this process, sampled every
    20 ms from /proc/self/status: /usr/bin/time's peak counts the pages of memory-mapped files
    too, which the kernel drops first when memory is short."""

    def __init__(self) -> None:
        self.peaks = {"RssAnon": 0, "RssFile": 0}
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()

    def _run(self) -> None:
        while not self._stop.wait(0.02):
            for line in Path("/proc/self/status").read_text().splitlines():
                name, _, value = line.partition(":")
                if name in self.peaks:
                    self.peaks[name] = max(self.peaks[name], int(value.split()[0]))

    def stop(self) -> dict:
        self._stop.set()
        self._thread.join()
        return {f"peak_{name.lower()}_mib": round(kib / 1024, 1) for name, kib in self.peaks.items()}


class Clock:
    """CPU seconds per phase."""

    def __init__(self) -> None:
        self.seconds: dict[str, float] = {}

    def time(self, phase: str, started: float) -> float:
        now = time.process_time()
        self.seconds[phase] = self.seconds.get(phase, 0.0) + now - started
        return now


def prepare(folder: Path, copies: int) -> dict:
    """The per-chunk work, batch by batch; writes what the aggregate reads."""
    folder.mkdir(parents=True, exist_ok=True)
    with contextlib.ExitStack() as stack:
        return _prepare(folder, copies, stack)


def _prepare(folder: Path, copies: int, stack: contextlib.ExitStack) -> dict:
    options = near_duplicates.MinHashOptions()
    segmenter = Segmenter.from_config(resolve({})["segment"])
    fractions = {"train": 0.8, "dev": 0.1, "test": 0.1}
    clock = Clock()
    names = [
        *(f"band{b:02d}" for b in range(options.bands)),
        "digests",
        "verification",
        "fingerprints",
        "splits",
        "train_runs",
        "train_sizes",
        "dev_grams",
        "dev_counts",
        "dev_sources",
    ]
    files = {name: stack.enter_context(open(folder / f"{name}.bin", "wb")) for name in names}
    documents = characters = tokens = 0
    batch: list[tuple[str, str]] = []

    def flush() -> None:
        nonlocal tokens
        started = time.process_time()
        segmented = [segmenter.segment(text) for _, text in batch]
        started = clock.time("tokenise (floor F)", started)
        tokens += sum(len(s) for d in segmented for s in d)
        array = pa.array(segmented, pa.list_(pa.list_(pa.string())))
        prints = [fingerprint(text) for _, text in batch]
        splits = np.array([SPLITS.index(assign_split(p, "corpusmill-split-v1", fractions)) for p in prints], dtype=np.uint8)
        started = clock.time("arrow table and split (prepare does it already)", started)
        words = near_duplicates.document_words(array)
        started = clock.time("words", started)
        signature = near_duplicates.signatures(words, options)
        started = clock.time("minhash", started)
        keys = near_duplicates.band_keys(signature, options.bands)
        digests = near_duplicates.signature_digests(keys)
        slots = near_duplicates.verification(signature)
        started = clock.time("band keys, digests, verification slots", started)
        grams, starts = near_duplicates.run_hashes(words, contamination.NGRAM)
        started = clock.time("13-gram hashes", started)
        owner = np.repeat(np.arange(len(batch)), np.diff(starts))
        train_run = contamination.distinct_sorted(grams[splits[owner] == 0])
        started = clock.time("train grams sorted", started)
        for band in range(options.bands):
            files[f"band{band:02d}"].write(np.ascontiguousarray(keys[:, band]).tobytes())
        files["digests"].write(digests.tobytes())
        files["verification"].write(slots.tobytes())
        files["fingerprints"].write(b"".join(prints))
        files["splits"].write(splits.tobytes())
        files["train_runs"].write(train_run.tobytes())
        files["train_sizes"].write(np.array([len(train_run)], dtype=np.int64).tobytes())
        held = np.flatnonzero(splits != 0)
        counts = np.diff(starts)[held]
        files["dev_grams"].write(np.concatenate([grams[starts[d] : starts[d + 1]] for d in held] or [np.zeros(0, np.uint64)]).tobytes())
        files["dev_counts"].write(counts.astype(np.int64).tobytes())
        files["dev_sources"].write("".join(f"{batch[d][0]}\n" for d in held).encode())
        clock.time("writing files (bench only)", started)

    for source, text in paragraphs(copies):
        batch.append((source, text))
        documents += 1
        characters += len(text)
        if len(batch) == BATCH:
            flush()
            batch = []
    if batch:
        flush()
    return {"documents": documents, "text_mb": round(characters / 1e6, 1), "tokens": tokens, "cpu_seconds": {k: round(v, 2) for k, v in clock.seconds.items()}}


def aggregate(folder: Path) -> dict:
    """The corpus-wide work: clusters, the drop policy, the train set, shares and summary."""
    options = near_duplicates.MinHashOptions()
    clock = Clock()
    started = time.process_time()
    digests = np.fromfile(folder / "digests.bin", dtype=np.uint64)
    size = len(digests)
    slots = np.memmap(folder / "verification.bin", dtype=np.uint16, mode="r", shape=(size, options.num_perm))

    def bands() -> Iterator[np.ndarray]:
        for band in range(options.bands):
            yield np.fromfile(folder / f"band{band:02d}.bin", dtype=np.uint64)

    found, stats = near_duplicates.cluster(bands(), digests, lambda rows: np.asarray(slots[rows]), options.threshold)
    labels = found.labels()
    del digests
    started = clock.time("clusters", started)
    members = np.flatnonzero(np.bincount(labels, minlength=size)[labels] > 1)
    prints = np.memmap(folder / "fingerprints.bin", dtype=np.uint8, mode="r", shape=(size, 16))
    ranks = near_duplicates.anchor_ranks(np.asarray(prints[members]), "corpusmill-split-v1")
    keep, _ = near_duplicates.drop_policy(labels[members], ranks, members)
    started = clock.time("drop policy", started)
    train = contamination.TrainGrams()
    sizes = np.fromfile(folder / "train_sizes.bin", dtype=np.int64)
    with open(folder / "train_runs.bin", "rb") as handle:
        for count in sizes:
            train.add(np.frombuffer(handle.read(8 * int(count)), dtype=np.uint64))
    train_set = train.finish()
    started = clock.time("train gram set", started)
    counts = np.fromfile(folder / "dev_counts.bin", dtype=np.int64)
    shares = np.empty(len(counts))
    with open(folder / "dev_grams.bin", "rb") as handle:
        for low in range(0, len(counts), 1 << 16):
            part = counts[low : low + (1 << 16)]
            starts = np.concatenate([[0], np.cumsum(part)])
            grams = np.frombuffer(handle.read(8 * int(starts[-1])), dtype=np.uint64)
            shares[low : low + len(part)] = contamination.shares(contamination.shared_counts(grams, starts, train_set), starts)
    started = clock.time("dev/test shares", started)
    sources = (folder / "dev_sources.bin").read_text().splitlines()
    summary = contamination.summary(shares, sources)
    clock.time("summary", started)
    return {
        "documents": size,
        "clustered_documents": len(members),
        "clusters": len(np.unique(labels[members])),
        "dropped_by_drop_policy": int(np.count_nonzero(~keep)),
        "compared_pairs": stats.compared,
        "confirmed_pairs": stats.confirmed,
        "long_runs": stats.long_runs,
        "distinct_train_grams": len(train_set),
        "dev_test_documents": len(shares),
        "contamination": {k: v for k, v in summary.items() if k != "by_source"},
        "cpu_seconds": {k: round(v, 2) for k, v in clock.seconds.items()},
    }


def child(stage: str, scale: int) -> dict:
    """Run one stage in a child under /usr/bin/time; its result with peak RSS and CPU."""
    folder = DATA / f"x{scale}"
    usage = folder.parent / f"time-{stage}-x{scale}.txt"
    folder.mkdir(parents=True, exist_ok=True)
    load = os.getloadavg()[0]
    command = ["/usr/bin/time", "-o", str(usage), "-f", "%M %U %S", sys.executable, __file__, "--stage", stage, "--scale", str(scale)]
    output = subprocess.run(command, check=True, capture_output=True, text=True).stdout
    peak_kib, user, system = usage.read_text().split()[-3:]
    result = json.loads(output)
    result.update({"peak_rss_mib": round(int(peak_kib) / 1024, 1), "process_cpu_seconds": round(float(user) + float(system), 2), "load_before": round(load, 2)})
    return result


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--scales", type=int, nargs="+", default=[1, 10])
    parser.add_argument("--stage", choices=["prepare", "aggregate"], help=argparse.SUPPRESS)
    parser.add_argument("--scale", type=int, default=1, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.stage:
        sampler = MemorySampler()
        result = (prepare if args.stage == "prepare" else lambda folder, _: aggregate(folder))(DATA / f"x{args.scale}", args.scale)
        print(json.dumps({**result, **sampler.stop()}))
        return
    results = {}
    for scale in args.scales:
        prepared, aggregated = child("prepare", scale), child("aggregate", scale)
        cpu = prepared["cpu_seconds"]
        floor = cpu["tokenise (floor F)"]
        added = sum(v for k, v in cpu.items() if k in ("words", "minhash", "band keys, digests, verification slots", "13-gram hashes", "train grams sorted"))
        total = added + sum(aggregated["cpu_seconds"].values())
        results[f"x{scale}"] = {
            "prepare": prepared,
            "aggregate": aggregated,
            "floor_cpu_seconds": floor,
            "added_in_prepare_cpu_seconds": round(added, 2),
            "signature_cpu_seconds_per_mb": round(added / prepared["text_mb"], 4),
            "total_added_cpu_seconds": round(total, 2),
            "total_over_floor": round(total / floor, 3),
        }
        print(
            f"{scale}x: {prepared['text_mb']} MB, {prepared['documents']:,} documents; floor F {floor:.2f} CPU-s; "
            f"added in prepare {added:.2f} CPU-s ({added / prepared['text_mb'] * 1000:.1f} ms/MB): {prepared['cpu_seconds']}; "
            f"aggregate {aggregated['cpu_seconds']} peak {aggregated['peak_rss_mib']} MiB (anonymous {aggregated['peak_rssanon_mib']}, "
            f"mapped files {aggregated['peak_rssfile_mib']}); prepare child peak {prepared['peak_rss_mib']} MiB; "
            f"total {total:.2f} CPU-s = {total / floor:.3f} x F; load {prepared['load_before']}/{aggregated['load_before']}"
        )
    RESULTS.mkdir(parents=True, exist_ok=True)
    (RESULTS / "near_duplicates.json").write_text(json.dumps(results, indent=1))


if __name__ == "__main__":
    main()
