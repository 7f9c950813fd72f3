"""Baseline: the n-gram model a neural model has to beat, from the build's stream shards.

Reads the train, dev and test stream shards (each document is <s>, then every sentence's ids
followed by </s>), counts train with steps.kneser_ney a bucket of n-grams at a time
(steps.ngram_buckets: memory follows the largest bucket, not the corpus), and gives the
perplexity of every split for each order 2..n, an add-one unigram baseline beside it, and the
share of dev and test n-grams that occur in train. Two entries: the workflow's `baseline` step
(stats/baseline.json, with the options of the `baseline` section, reading the files the shard
jobs recorded), and the command `corpusmill baseline BUILD …` on a finished build (through
steps.reader), where another order or smoothing costs one pass over the shards and `--arpa`
writes the order-n model for other tools.

The leakage warning is our own rule: an n-gram model scores the text it was counted from far
better than new text, so a held-out split whose perplexity at the highest order is below
LEAK_RATIO x train's probably shares much of its text with train.
"""

from __future__ import annotations

import argparse
import contextlib
import functools
import json
import math
import shutil
import sys
import tempfile
from collections.abc import Callable, Iterator, Mapping
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq

from . import job, kneser_ney, ngram_buckets, windows
from .formats import NgramTotals, code_digest, read_ids_table, read_ngram_totals, read_shard_stats, writing_ngram_totals
from .kneser_ney import BOS_ID, EOS_ID, SMOOTHINGS, KneserNey, SplitScore
from .layout import SPLITS
from .ngram_buckets import BUCKETS, BucketStore, LevelFigures
from .reader import MANIFEST, REBUILD, Build, BuildError, open_build
from .storage import write_json

RULE = "baseline"
SECTIONS = ("baseline", "windows.ngram")
DEFAULT_ORDER = 4
LEAK_RATIO = 1.1
DOCUMENTS_PER_BATCH = 1024
# Train counted in two parts and dev and test scored side by side, in threads: numpy's sorts
# and searches, most of the work, run without holding the interpreter lock.
THREADS = 2
# Dev and test windows of one group scored at once. Each batch's lookups walk the count tables in
# key order, so a larger batch shares more of its paths through the tables; its columns take a few MB.
SCORE_TOKENS = 1 << 17
# Bytes of dev's or test's windows held in memory while train is counted; the rest wait on disk
# until their bucket is scored.
WINDOWS_HELD = 8 << 20
CONVENTIONS = (
    "every id of a sentence and the </s> after it are predicted, <s> never; each sentence is preceded by n-1 <s>; "
    "<unk> and the unknown classes are ordinary tokens (an out-of-vocabulary word is scored as its class); "
    "the predictable vocabulary is every id but <pad> and <s>"
)
ENABLE_STREAMS = "set windows.streams.enabled: true in the workflow config and rerun the workflow (snakemake)"


def fail(message: str) -> SystemExit:
    return SystemExit(f"corpusmill: {message}")


def sentences(batch: dict, where: str, vocabulary_size: int) -> tuple[np.ndarray, np.ndarray]:
    """(ids laid end to end, sentence lengths) of a batch of stream rows: each document's
    leading <s> dropped, sentences cut at </s>. Raises naming `where` (build and split) and the
    first document that is not a stream of this vocabulary."""
    ids, offsets = batch["ids"], batch["offsets"]
    starts, ends = offsets[:-1], offsets[1:]

    def refuse(document: int | np.integer, what: str) -> SystemExit:
        return fail(f"{where}, document {batch['doc_id'][document]!r}: {what}; not a corpusmill stream shard of this vocabulary; {REBUILD}")

    if np.any(ends <= starts):
        raise refuse(np.argmax(ends <= starts), "an empty stream (every stream starts with <s>)")
    if np.any(ids[starts] != BOS_ID):
        raise refuse(np.argmax(ids[starts] != BOS_ID), f"the stream does not start with <s> (id {BOS_ID})")
    unended = (ends - starts > 1) & (ids[ends - 1] != EOS_ID)
    if unended.any():
        raise refuse(np.argmax(unended), f"the stream does not end with </s> (id {EOS_ID})")
    body = np.ones(len(ids), bool)
    body[starts] = False
    wrong = body & ((ids == BOS_ID) | (ids == kneser_ney.PAD_ID) | (ids >= vocabulary_size))
    if wrong.any():
        at = int(np.argmax(wrong))
        document = int(np.searchsorted(offsets, at, side="right")) - 1
        raise refuse(
            document,
            f"id {int(ids[at])} at position {at - int(starts[document])} "
            f"(ids run from 0 to {vocabulary_size - 1}; <pad> and <s> occur only as padding and document start)",
        )
    tokens = ids[body]
    ends_of_sentences = np.flatnonzero(tokens == EOS_ID)
    lengths = np.diff(np.concatenate([[-1], ends_of_sentences])) - 1
    return tokens[tokens != EOS_ID], lengths


Sentences = Callable[[], Iterator[tuple[np.ndarray, np.ndarray]]]


def split_sentences(build: Build, split: str) -> Iterator[tuple[np.ndarray, np.ndarray]]:
    """The split's sentences, a bounded number of documents at a time, in manifest order."""
    for batch in build.batches(split, "stream", DOCUMENTS_PER_BATCH):
        yield sentences(batch, f"{build.root}: split {split}", build.vocabulary.size)


def file_sentences(paths: list[Path], where: str, vocabulary_size: int) -> Iterator[tuple[np.ndarray, np.ndarray]]:
    """The sentences of stream shard files, a bounded number of documents at a time, in the
    order given (the workflow's step, before any manifest exists)."""
    for path in paths:
        for batch in pq.ParquetFile(path).iter_batches(DOCUMENTS_PER_BATCH, columns=["doc_id", "ids"], use_threads=False):
            lists = batch.column("ids")
            offsets = lists.offsets.to_numpy().astype(np.int64)
            rows = {"ids": lists.flatten().to_numpy(), "offsets": offsets - offsets[0], "doc_id": batch.column("doc_id").to_numpy(zero_copy_only=False)}
            yield sentences(rows, f"{where}: {path}", vocabulary_size)


@dataclass(frozen=True)
class Baseline:
    """Everything the command reports."""

    name: str  # what was scored: the build folder
    order: int
    smoothing: kneser_ney.Smoothing
    vocabulary_size: int
    scores: dict[str, SplitScore | None]  # None: the split has no documents
    figures: tuple[LevelFigures, ...]  # per k = 1..order: the discounts of the order-n model and their count-of-counts
    model: KneserNey | None  # the order-n model, when it was built whole (for --arpa)

    @property
    def orders(self) -> list[int]:
        return list(range(2, self.order + 1))

    def warnings(self) -> list[str]:
        """Held-out splits implausibly close to train (see LEAK_RATIO)."""
        train = self.scores["train"]
        found = []
        for split in ("dev", "test"):
            score = self.scores[split]
            if train is None or score is None or not score.tokens:
                continue
            held_out, counted = score.perplexity(self.order), train.perplexity(self.order)
            if held_out < LEAK_RATIO * counted:
                found.append(
                    f"{split} perplexity {held_out:,.2f} at order {self.order} is below {LEAK_RATIO} x train's {counted:,.2f}, "
                    f"and {score.seen_share(self.order):.1%} of its {self.order}-grams occur in train: {split} probably "
                    "shares text with train (documents copied between splits, or near-duplicates kept apart); "
                    "check the deduplication settings and the sources"
                )
        return found

    def to_json(self) -> dict:
        def figures(score: SplitScore | None) -> dict | None:
            if score is None:
                return None
            return {
                "tokens": score.tokens,
                "perplexity": {str(order): score.perplexity(order) for order in self.orders},
                "unigram_perplexity": score.unigram_perplexity,
                "seen_in_train": {str(k): score.seen_share(k) for k in range(1, self.order + 1)},
            }

        return {
            "order": self.order,
            "smoothing": self.smoothing,
            "vocabulary_size": self.vocabulary_size,
            "predictable_ids": kneser_ney.predictable(self.vocabulary_size),
            "conventions": CONVENTIONS,
            "splits": {split: figures(score) for split, score in self.scores.items()},
            "discounts": {
                str(k): {
                    "d1": w.discounts.d1,
                    "d2": w.discounts.d2,
                    "d3+": w.discounts.d3,
                    "fallback": w.discounts.fallback,
                    "count_of_counts": list(w.count_of_counts),
                    "counts": "raw" if k == self.order else "continuation",
                }
                for k, w in enumerate(self.figures, start=1)
            },
            "warnings": self.warnings(),
        }


def _number(value: float) -> str:
    return "—" if value is None or math.isnan(value) else f"{value:,.2f}"


def format_baseline(baseline: Baseline) -> str:
    """The report as plain text: perplexity per split and order, seen shares, discounts, warnings."""
    scores = baseline.scores
    name = {"modified": "interpolated modified Kneser-Ney", "interpolated": "interpolated Kneser-Ney"}[baseline.smoothing]
    train_tokens = train.tokens if (train := scores["train"]) else 0
    lines = [
        f"baseline of {baseline.name}: {name} (Chen and Goodman 1998), order {baseline.order}, counted on train ({train_tokens:,} predicted tokens)",
        f"vocabulary: {baseline.vocabulary_size:,} ids, {kneser_ney.predictable(baseline.vocabulary_size):,} predictable",
        "",
        f"{'perplexity':<22}" + "".join(f"{split:>14}" for split in scores),
    ]

    def row(label: str, value: Callable[[SplitScore], float]) -> str:
        return f"  {label:<20}" + "".join(f"{_number(value(s)) if s else '—':>14}" for s in scores.values())

    def at_order(order: int) -> Callable[[SplitScore], float]:
        return lambda score: score.perplexity(order)

    for order in baseline.orders:
        lines.append(row(f"order {order}", at_order(order)))
    lines.append(row("unigram (add-one)", lambda s: s.unigram_perplexity))
    lines.append(f"  {'predicted tokens':<20}" + "".join(f"{s.tokens if s else 0:>14,}" for s in scores.values()))
    lines += ["", f"{'seen in train':<22}" + "".join(f"{split:>14}" for split in scores if split != "train")]
    for k in range(1, baseline.order + 1):
        shares = [scores[split] for split in scores if split != "train"]
        lines.append(f"  {f'{k}-grams':<20}" + "".join(f"{s.seen_share(k):>14.1%}" if s and s.tokens else f"{'—':>14}" for s in shares))
    lines += ["", "discounts D1 / D2 / D3+ (from the count-of-counts n1..n4 of each order):"]
    for k, figures in enumerate(baseline.figures, start=1):
        d = figures.discounts
        kind = "raw" if k == baseline.order else "continuation"
        note = "  (fallback: the count-of-counts cannot give them)" if d.fallback else ""
        lines.append(f"  {k}-grams ({kind} counts): {d.d1:.4f} / {d.d2:.4f} / {d.d3:.4f}{note}")
    lines += ["", f"conventions: {CONVENTIONS}."]
    lines += [f"warning: {warning}" for warning in baseline.warnings()]
    return "\n".join(lines)


def default_order(build: Build) -> int:
    """The build's n-gram order, or DEFAULT_ORDER without n-gram shards."""
    if "ngram" in build.kinds("train"):
        return int(build.info("train", "ngram")["n"])
    return DEFAULT_ORDER


def _parts(sentences: Sentences | list[Sentences]) -> list[Sentences]:
    return sentences if isinstance(sentences, list) else [sentences]


Carried = Callable[[int], np.ndarray]  # bucket -> n-gram records counted by an earlier run
Keep = Callable[[np.ndarray], None]  # given each bucket's summed records, in bucket order


def score(
    name: str,
    splits: Mapping[str, Sentences | list[Sentences] | None],
    vocabulary_size: int,
    order: int,
    smoothing: kneser_ney.Smoothing,
    work: Path,
    whole: bool = False,
    carried: Carried | None = None,
    keep: Keep | None = None,
) -> Baseline:
    """Count train, estimate the models of orders 2..n, and score every split (`splits` gives
    each split's sentences, None for a split without documents; train may come in parts,
    counted side by side with dev's and test's windows). The counts go through
    steps.ngram_buckets, bucket by bucket, with what does not fit in memory written to `work`;
    `whole` builds the model in one piece and keeps it (for --arpa). `carried`: each bucket's
    totals of train sentences counted before, added to those of `splits["train"]`; `keep` is
    given the summed totals of each bucket."""
    try:
        kneser_ney.check_order(order, vocabulary_size)
    except ValueError as error:
        raise fail(f"order {order}: {error}") from None
    train = splits["train"]
    if train is None and carried is None:
        raise fail(f"{name}: the train split has no documents; nothing to count")
    counted = BucketStore(ngram_buckets.RECORD, work, "train", compact=ngram_buckets.merge_records)
    window = ngram_buckets.window_record(order)
    held_out = {split: BucketStore(window, work, split, WINDOWS_HELD) if splits.get(split) is not None else None for split in ("dev", "test")}

    def count(sentences: Sentences) -> None:
        counting = ngram_buckets.Counting(order, vocabulary_size, counted)
        for ids, lengths in sentences():
            counting.add(ids, lengths)

    def hold(store: BucketStore, read: Sentences | list[Sentences]) -> None:
        for part in _parts(read):
            for ids, lengths in part():
                ngram_buckets.hold_windows(store, order, vocabulary_size, ids, lengths)

    tasks: list[tuple[Callable[..., None], tuple]] = [(count, (part,)) for part in (_parts(train) if train is not None else [])]
    tasks += [(hold, (store, read)) for split, store in held_out.items() if store is not None and (read := splits[split]) is not None]
    try:
        with ThreadPoolExecutor(THREADS) as pool:
            for done in [pool.submit(task, *arguments) for task, arguments in tasks]:
                done.result()
        scored = ngram_buckets.score(counted, held_out, order, vocabulary_size, smoothing, work, whole, carried, keep, SCORE_TOKENS, THREADS)
    except ngram_buckets.NoTokens:
        raise fail(f"{name}: the train split has no sentences; nothing to count") from None
    except ngram_buckets.WorkFolderError as error:
        raise fail(
            f"{error}; the baseline writes there the counts it cannot hold in memory: free disk space "
            "(or point TMPDIR elsewhere for `corpusmill baseline`), or turn it off with baseline.enabled: false"
        ) from None
    return Baseline(name, order, smoothing, vocabulary_size, scored.scores, scored.figures, scored.model)


def run(build: Build, order: int | None, smoothing: kneser_ney.Smoothing, whole: bool = False) -> Baseline:
    """The baseline of a finished build, read through steps.reader, counted in a temporary folder."""
    missing = [split for split in SPLITS if split in build.splits and "stream" not in build.kinds(split)]
    if "train" not in build.splits or missing:
        raise fail(
            f"{build.root / MANIFEST}: no stream shards for {', '.join(missing) or 'train'}; the baseline reads each split's document streams: {ENABLE_STREAMS}"
        )
    splits: dict[str, Sentences | None] = {split: functools.partial(split_sentences, build, split) if split in build.splits else None for split in SPLITS}
    with tempfile.TemporaryDirectory(prefix="corpusmill-baseline-") as work:
        return score(str(build.root), splits, build.vocabulary.size, default_order(build) if order is None else order, smoothing, Path(work), whole)


def counting_code() -> str:
    """A digest of the code that turns stream files into n-gram totals: kept totals count only
    while it is unchanged."""
    return code_digest(kneser_ney, ngram_buckets, windows, sys.modules[__name__])


def carried_totals(path: str, order: int, vocabulary_size: int, train: list[tuple[str, str]]) -> tuple[Carried | None, set[tuple[str, str]]]:
    """The totals an earlier run kept (each bucket's records, for `score`) and the stream files
    they count, when they are of this order, vocabulary size, bucketing and counting code and
    every file they count is still a train stream file with the same bytes (the train split
    only gained files: an append); else nothing, and every file is counted."""
    kept = read_ngram_totals(path)
    if kept is None:
        return None, set()
    about = kept.about
    if (about.order, about.vocabulary_size, about.code, about.buckets) != (order, vocabulary_size, counting_code(), BUCKETS):
        return None, set()
    if not set(about.counted) <= set(train):
        return None, set()
    return (lambda bucket: ngram_buckets.records_of(*kept.bucket(bucket))), set(about.counted)


def step_order(options: dict) -> int:
    """baseline.order, else the n of the n-gram rows (when enabled), else DEFAULT_ORDER."""
    ngram = options["windows"]["ngram"]
    return options["baseline"]["order"] or (ngram["n"] if ngram["enabled"] else DEFAULT_ORDER)


def step(argv: list[str] | None = None) -> None:
    """The workflow's step: stats/baseline.json from the stream shards the shard jobs wrote."""
    run_ = job.start(argv, RULE, "Count an n-gram baseline on train and score every split.")
    layout = run_.layout
    files: dict[str, list[Path]] = {split: [] for split in SPLITS}
    train: list[tuple[str, str]] = []  # (file, SHA-256) of the train streams
    for chunk in run_.chunks():
        for written in read_shard_stats(layout.shard_stats(chunk)).files:
            if written.kind == "stream":
                files[written.split].append(Path(layout.root, written.file))
                if written.split == "train":
                    train.append((written.file, written.sha256))
    size, order = read_ids_table(layout.ids_table).size, step_order(run_.options)
    carried, counted = carried_totals(layout.baseline_totals, order, size, train)
    files["train"] = [Path(layout.root, file) for file, digest in train if (file, digest) not in counted]
    splits: dict[str, Sentences | list[Sentences] | None] = {
        split: functools.partial(file_sentences, paths, f"split {split}", size) if paths else None for split, paths in files.items()
    }
    if len(files["train"]) > 1:  # counted in THREADS parts, every part's counts summed
        splits["train"] = [functools.partial(file_sentences, files["train"][part::THREADS], "split train", size) for part in range(THREADS)]

    print(f"train stream files: {len(counted)} counted by an earlier run, {len(files['train'])} counted now")
    work = Path(layout.baseline_overflow)
    shutil.rmtree(work, ignore_errors=True)  # what a killed run left
    # With no file counted now, every train file was counted before: the kept totals stand as they are.
    about = NgramTotals(order, size, counting_code(), tuple(train), BUCKETS)
    keeping = writing_ngram_totals(layout.baseline_totals, about) if files["train"] else contextlib.nullcontext(None)
    try:
        with keeping as write:
            keep: Keep | None = None if write is None else (lambda records: write(records["low"], records["high"], records["count"]))
            baseline = score(layout.root, splits, size, order, run_.options["baseline"]["smoothing"], work, carried=carried, keep=keep)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    write_json(layout.baseline, baseline.to_json())
    print(format_baseline(baseline))


def _order(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if value < 2:
        raise argparse.ArgumentTypeError(f"the order must be at least 2 (a bigram model), got {value}")
    return value


def command(argv: list[str] | None = None) -> None:
    """`corpusmill baseline BUILD …`."""
    parser = argparse.ArgumentParser(
        prog="corpusmill baseline",
        description="Perplexity of Kneser-Ney n-gram models counted on a build's train split, on every split "
        "(the baseline a neural language model has to beat), from the stream shards; nothing is rebuilt.",
    )
    parser.add_argument("build", type=Path, help="a finished build folder (holding manifest.json)")
    parser.add_argument("--order", type=_order, help="highest order n (default: the build's windows.ngram.n, else 4)")
    parser.add_argument(
        "--smoothing", choices=SMOOTHINGS, default="modified", help="modified: three discounts per order (default); interpolated: one discount per order"
    )
    parser.add_argument("--arpa", type=Path, metavar="PATH", help="also write the order-n model in the ARPA back-off format")
    parser.add_argument("--json", action="store_true", help="print the figures as JSON")
    args = parser.parse_args(argv)
    try:
        build = open_build(args.build)
        baseline = run(build, args.order, args.smoothing, whole=args.arpa is not None)
    except BuildError as error:
        raise fail(str(error)) from None
    if args.arpa:
        try:
            assert baseline.model is not None  # built whole for --arpa
            with open(args.arpa, "w", encoding="utf-8") as out:
                written = kneser_ney.write_arpa(baseline.model, build.vocabulary.tokens, out)
        except BrokenPipeError:
            raise  # `--arpa /dev/stdout | head`: ends quietly, like a closed standard output
        except OSError as error:
            raise fail(f"--arpa {args.arpa}: cannot be written ({error.strerror}); choose a writable path") from None
    if args.json:
        figures = baseline.to_json()
        if args.arpa:
            figures["arpa"] = {"path": str(args.arpa), "ngrams": {str(k): v for k, v in written.items()}}
        print(json.dumps(figures, indent=2, ensure_ascii=False))
    else:
        print(format_baseline(baseline))
        if args.arpa:
            print(f"ARPA model written to {args.arpa} ({', '.join(f'{v:,} {k}-grams' for k, v in written.items())})")


main = step

if __name__ == "__main__":
    main()
