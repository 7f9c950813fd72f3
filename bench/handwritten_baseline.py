"""The script a practitioner would write by hand instead of using corpusmill: the yardstick a build must beat.

It uses no corpusmill code. On a folder of .txt files (documents are paragraphs separated by blank lines):
- two worker processes (a multiprocessing pool, files handed out one at a time) read each file,
  apply Unicode NFC, cut paragraphs, cut sentences after `.!?` followed by whitespace and a
  capital, cut words with `\\w+|[^\\w\\s]`, hash each document with MD5 (train/dev/test by the hash,
  90/5/5) and dictionary-encode the file's tokens (its distinct tokens plus one int32 per token);
- the parent, as files arrive in order, drops exact duplicates (first by file and offset wins)
  and counts the train tokens of each file with numpy, summed into a `collections.Counter`;
- a vocabulary of train tokens seen at least twice (0 <pad>, 1 <unk>, 2 <s>, 3 </s>, then by
  descending count, ties by token), each file's distinct tokens mapped to ids once, every token
  through that lookup table with numpy;
- 4-gram windows built with numpy (3 context ids padded with <s>, one row per token plus </s>
  per sentence), one zstd Parquet file per split: `context` fixed_size_list<uint16>[3] and
  `target` uint16 (uint32 if the vocabulary outgrows uint16), rows in corpus order, plus vocab.txt.

    python bench/handwritten_baseline.py --input FOLDER --output FOLDER [--workers 2] [--json]
    from handwritten_baseline import run_script; run_script(FOLDER, OUTPUT)   # from bench/pipeline.py

Figures, for the whole process from its start (run it as its own process; `run_script` does):
wall seconds, user+system CPU seconds of the parent and its workers (getrusage), the peak of the
summed resident memory of the parent and its workers sampled with psutil every 20 ms (pages shared
after fork are counted in every process that maps them), each process's own peak (ru_maxrss), and
the wall seconds of each phase.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import re
import resource
import subprocess
import sys
import threading
import time
import unicodedata
from collections import Counter
from multiprocessing import Pool
from pathlib import Path

import numpy as np
import psutil
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

PARAGRAPH = re.compile(r"\n\s*\n")
SENTENCE = re.compile(r"(?<=[.!?])\s+(?=[A-Z])")
WORD = re.compile(r"\w+|[^\w\s]")
SPLITS = ("train", "dev", "test")
PAD, UNK, BOS, EOS = 0, 1, 2, 3
SPECIALS = ["<pad>", "<unk>", "<s>", "</s>"]
MIN_COUNT = 2
ORDER = 4


def split_of(digest: bytes) -> int:
    """0 train, 1 dev, 2 test: the first 8 bytes of the hash modulo 100, 90/5/5."""
    bucket = int.from_bytes(digest[:8], "big") % 100
    return 0 if bucket < 90 else 1 if bucket < 95 else 2


def prepare_file(path: Path) -> dict:
    """One file's documents: hashes, splits, sentence and token counts, and its dictionary-encoded tokens."""
    text = unicodedata.normalize("NFC", path.read_text(encoding="utf-8"))
    digests: list[bytes] = []
    doc_sentences: list[int] = []
    sentence_tokens: list[int] = []
    tokens: list[str] = []
    for paragraph in PARAGRAPH.split(text):
        paragraph = paragraph.strip()
        if not paragraph:
            continue
        digests.append(hashlib.md5(paragraph.encode("utf-8")).digest())
        sentences = SENTENCE.split(paragraph)
        doc_sentences.append(len(sentences))
        for sentence in sentences:
            words = WORD.findall(sentence)
            tokens.extend(words)
            sentence_tokens.append(len(words))
    encoded = pa.array(tokens, pa.large_string()).dictionary_encode()
    sentence_tokens_array = np.array(sentence_tokens, dtype=np.int64)
    doc_sentences_array = np.array(doc_sentences, dtype=np.int64)
    sentence_doc = np.repeat(np.arange(len(digests)), doc_sentences_array)
    return {
        "digests": digests,
        "splits": np.array([split_of(d) for d in digests], dtype=np.int8),
        "doc_sentences": doc_sentences_array,
        "doc_tokens": np.bincount(sentence_doc, weights=sentence_tokens_array, minlength=len(digests)).astype(np.int64),
        "sentence_tokens": sentence_tokens_array,
        "dictionary": encoded.dictionary,
        "indices": encoded.indices.to_numpy(),
    }


def seconds_since_start() -> float:
    """Wall seconds since this process started, interpreter start and imports included (Linux /proc, 10 ms steps)."""
    started_ticks = int(Path("/proc/self/stat").read_text().rsplit(")", 1)[1].split()[19])
    return float(Path("/proc/uptime").read_text().split()[0]) - started_ticks / os.sysconf("SC_CLK_TCK")


class TreeMemory:
    """Peak of the summed resident memory of this process and all its descendants, sampled."""

    def __init__(self, interval: float = 0.02) -> None:
        self.interval = interval
        self.peak = 0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _run(self) -> None:
        me = psutil.Process()
        while not self._stop.is_set():
            total = me.memory_info().rss
            for child in me.children(recursive=True):
                try:
                    total += child.memory_info().rss
                except (psutil.NoSuchProcess, psutil.ZombieProcess):
                    continue
            self.peak = max(self.peak, total)
            time.sleep(self.interval)

    def __enter__(self) -> TreeMemory:
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join()


def windows(ids: np.ndarray, sentence_tokens: np.ndarray, dtype: type) -> tuple[np.ndarray, np.ndarray]:
    """(context, target): per sentence of L tokens, L+1 rows of ORDER-1 context ids and a target.

    The targets are every sentence's ids followed by </s>; context column `back` steps back is the
    target column shifted by `back`, with <s> wherever that reaches before the sentence's start.
    """
    rows = len(ids) + len(sentence_tokens)
    ends = np.cumsum(sentence_tokens + 1)
    target = np.empty(rows, dtype)
    is_end = np.zeros(rows, dtype=bool)
    is_end[ends - 1] = True
    target[is_end] = EOS
    target[~is_end] = ids
    position = np.arange(rows) - np.repeat(ends - sentence_tokens - 1, sentence_tokens + 1)
    context = np.empty((rows, ORDER - 1), dtype)
    for back in range(1, ORDER):
        column = context[:, ORDER - 1 - back]
        column[back:] = target[:-back]
        column[:back] = BOS
        column[position < back] = BOS
    return context, target


def write_split(path: Path, context: np.ndarray, target: np.ndarray, id_type: pa.DataType) -> None:
    """One zstd Parquet file: context fixed_size_list[ORDER-1] and target.

    Without dictionary encoding: ids of a large vocabulary overflow the dictionary page anyway, and
    trying first made writing slower and the files larger.
    """
    table = pa.table(
        {
            "context": pa.FixedSizeListArray.from_arrays(pa.array(context.ravel(), id_type), ORDER - 1),
            "target": pa.array(target, id_type),
        }
    )
    pq.write_table(table, path, compression="zstd", use_dictionary=False)


def run(source: Path, output: Path, workers: int) -> dict:
    """Build the three splits of `source` into `output`; returns the figures."""
    paths = sorted(source.glob("*.txt"))
    if not paths:
        raise SystemExit(f"handwritten baseline: no .txt files in {source}; pass a folder of UTF-8 text files with --input")
    output.mkdir(parents=True, exist_ok=True)
    phases: dict[str, float] = {}
    clock = time.perf_counter()

    files: list[dict] = []
    seen: set[bytes] = set()
    counts: Counter[str] = Counter()
    duplicates = 0
    pa.array([""])  # pyarrow's first conversion imports pandas: pay that once here, not in every forked worker
    with Pool(workers) as pool:
        for result in pool.imap(prepare_file, paths):
            keep = np.zeros(len(result["digests"]), dtype=bool)
            for number, digest in enumerate(result["digests"]):
                if digest not in seen:
                    seen.add(digest)
                    keep[number] = True
            duplicates += len(keep) - int(keep.sum())
            result["keep"] = keep
            train = np.repeat(keep & (result["splits"] == 0), result["doc_tokens"])
            file_counts = np.bincount(result["indices"][train], minlength=len(result["dictionary"]))
            present = np.flatnonzero(file_counts)
            counts.update(dict(zip(result["dictionary"].take(present).to_pylist(), file_counts[present].tolist())))
            files.append(result)
        pool.close()
        pool.join()
    phases["prepare"], clock = time.perf_counter() - clock, time.perf_counter()

    kept = sorted(((-n, token) for token, n in counts.items() if n >= MIN_COUNT))
    vocabulary = SPECIALS + [token for _, token in kept]
    (output / "vocab.txt").write_text("".join(token + "\n" for token in vocabulary), encoding="utf-8")
    value_set = pa.array(vocabulary[len(SPECIALS) :], pa.large_string())
    dtype = np.uint16 if len(vocabulary) <= 2**16 else np.uint32
    phases["vocabulary"], clock = time.perf_counter() - clock, time.perf_counter()

    for result in files:
        lookup = pc.fill_null(pc.add(pc.index_in(result["dictionary"], value_set=value_set), len(SPECIALS)), UNK)
        result["ids"] = lookup.to_numpy().astype(dtype)[result["indices"]]
    phases["mapping"], clock = time.perf_counter() - clock, time.perf_counter()

    figures: dict = {"tokens": {}, "sentences": {}, "rows": {}}
    for split_number, split in enumerate(SPLITS):
        ids_parts, sentence_parts = [], []
        for result in files:
            chosen = result["keep"] & (result["splits"] == split_number)
            ids_parts.append(result["ids"][np.repeat(chosen, result["doc_tokens"])])
            sentence_parts.append(result["sentence_tokens"][np.repeat(chosen, result["doc_sentences"])])
        ids, sentence_tokens = np.concatenate(ids_parts), np.concatenate(sentence_parts)
        context, target = windows(ids, sentence_tokens, dtype)
        figures["tokens"][split], figures["sentences"][split], figures["rows"][split] = len(ids), len(sentence_tokens), len(target)
        phases["windows"], clock = phases.get("windows", 0.0) + time.perf_counter() - clock, time.perf_counter()
        write_split(output / f"{split}.parquet", context, target, pa.from_numpy_dtype(dtype))
        phases["writing"], clock = phases.get("writing", 0.0) + time.perf_counter() - clock, time.perf_counter()

    figures.update(
        {
            "files": len(paths),
            "documents": sum(len(r["digests"]) for r in files),
            "duplicates": duplicates,
            "vocabulary_size": len(vocabulary),
            "id_type": np.dtype(dtype).name,
            "phases": {name: round(seconds, 2) for name, seconds in phases.items()},
        }
    )
    return figures


def main(argv: list[str] | None = None) -> dict:
    parser = argparse.ArgumentParser(description="Hand-written baseline: NFC, regex sentences and words, dedup, Counter vocabulary, 4-gram Parquet.")
    parser.add_argument("--input", required=True, type=Path, help="folder of .txt files")
    parser.add_argument("--output", required=True, type=Path, help="folder for train/dev/test.parquet and vocab.txt")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--json", action="store_true", help="print the figures as one JSON line")
    args = parser.parse_args(argv)
    load = os.getloadavg()[0]
    with TreeMemory() as memory:
        figures = run(args.input, args.output, args.workers)
    seconds = seconds_since_start()
    own = resource.getrusage(resource.RUSAGE_SELF)
    workers = resource.getrusage(resource.RUSAGE_CHILDREN)
    user, system = own.ru_utime + workers.ru_utime, own.ru_stime + workers.ru_stime
    figures.update(
        {
            "input_mb": round(sum(p.stat().st_size for p in args.input.glob("*.txt")) / 1e6, 2),
            "workers": args.workers,
            "seconds": round(seconds, 2),
            "user_seconds": round(user, 2),
            "system_seconds": round(system, 2),
            "cpu_seconds": round(user + system, 2),
            "peak_rss_tree_mib": round(memory.peak / 2**20, 1),
            "peak_rss_parent_mib": round(own.ru_maxrss / 1024, 1),
            "peak_rss_worker_mib": round(workers.ru_maxrss / 1024, 1),
            "load_before": round(load, 2),
        }
    )
    if args.json:
        print(json.dumps(figures, sort_keys=True))
    else:
        print(
            f"{figures['input_mb']} MB in {figures['files']} files, {figures['documents']:,} documents ({figures['duplicates']:,} duplicates), "
            f"|V| {figures['vocabulary_size']:,} ({figures['id_type']})"
        )
        print(
            f"wall {figures['seconds']:.2f} s, CPU {figures['cpu_seconds']:.2f} s (user {figures['user_seconds']:.2f}, sys {figures['system_seconds']:.2f}), "
            f"peak RSS {figures['peak_rss_tree_mib']:.0f} MiB summed over the process tree "
            f"(parent {figures['peak_rss_parent_mib']:.0f}, largest worker {figures['peak_rss_worker_mib']:.0f}), load average {load:.2f}"
        )
        print("phases (s): " + ", ".join(f"{name} {value:.2f}" for name, value in figures["phases"].items()))
        print("rows: " + ", ".join(f"{split} {figures['rows'][split]:,}" for split in SPLITS))
    return figures


def run_script(source: Path, output: Path, workers: int = 2) -> dict:
    """Run this script as its own process on `source`; its figures plus `outside_seconds`, the wall
    time seen by the caller (interpreter start and imports included, as in a workflow's wall time)."""
    started = time.perf_counter()
    command = [sys.executable, str(Path(__file__).resolve()), "--input", str(source), "--output", str(output), "--workers", str(workers), "--json"]
    done = subprocess.run(command, capture_output=True, text=True)
    if done.returncode != 0:
        raise SystemExit(f"handwritten baseline failed on {source} (exit {done.returncode}):\n{done.stderr[-4000:]}")
    figures = json.loads(done.stdout.splitlines()[-1])
    figures["outside_seconds"] = round(time.perf_counter() - started, 2)
    return figures


if __name__ == "__main__":
    main()
