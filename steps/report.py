"""Coverage statistics: how well the vocabulary covers each split, and at other sizes.

Figures come from the merged token counts (stats/token_counts.parquet, frequency-sorted) and
the vocabulary; the shard jobs' statistics (word units) add the unknown-class breakdown and
OOV per source file.

In subword mode (units = subword) the figures are per split: pieces per whitespace word,
pieces per sentence, the <unk> rate as encoded, the share of byte pieces, and the <unk> rate
the same model would have without byte fallback (each run of byte pieces would be one <unk>),
from the per-chunk encode statistics.
"""

from __future__ import annotations

import argparse
import json
from collections.abc import Sequence

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from .layout import SPLITS
from .settings import read_json
from .storage import write_json
from .summary import format_table
from .vocab import Vocabulary, read_vocabulary

TABLE_SIZES = (100, 1000, 2000, 5000, 10000, 20000, 50000, 100000)


def _rate(part: float, whole: float) -> float:
    """part / whole to six decimals; 0.0 for 0 of 0, which JSON cannot mark otherwise. Each rate's
    denominator is in coverage.json too, and the page and the summary show a dash where it is zero."""
    return round(part / whole, 6) if whole else 0.0


def in_vocabulary(counts: pa.Table, vocabulary: Vocabulary) -> np.ndarray:
    words = pa.array(vocabulary.tokens[vocabulary.first_word_id :], pa.string())
    return pc.is_in(counts["token"], value_set=words).to_numpy(zero_copy_only=False)


def split_figures(counts: pa.Table, known: np.ndarray, split: str, top: int) -> dict:
    column = counts[split].to_numpy()
    present = column > 0
    oov = present & ~known
    tokens = int(column.sum())
    oov_tokens = int(column[oov].sum())
    figures = {
        "tokens": tokens,
        "types": int(present.sum()),
        "oov_tokens": oov_tokens,
        "oov_rate": _rate(oov_tokens, tokens),
        "oov_types": int(oov.sum()),
    }
    if split != "train":
        order = np.argsort(-column[oov], kind="stable")[:top]
        names = counts["token"].filter(pa.array(oov)).to_pylist()
        values = column[oov]
        figures["top_oov"] = [[names[i], int(values[i])] for i in order]
    return figures


def size_table(counts: pa.Table, sizes: Sequence[int], known: np.ndarray, words: int) -> list[dict]:
    """Train coverage and dev/test OOV rate if the vocabulary were the k most frequent words,
    and the row of the build's own `words` words (`chosen`), figured from the words themselves
    (`known`): a frozen vocabulary need not be the most frequent words of this corpus, and
    may hold words it never uses."""
    train = counts["train"].to_numpy()
    distinct = int(np.count_nonzero(train))
    cumulative = {split: np.concatenate([[0], np.cumsum(counts[split].to_numpy())]) for split in SPLITS}

    def row(size: int, covered: dict[str, int], chosen: bool) -> dict:
        figures = {"size": size, "chosen": chosen, "train_coverage": _rate(covered["train"], cumulative["train"][-1])}
        for split in ("dev", "test"):
            total = cumulative[split][-1]
            figures[f"{split}_oov_rate"] = _rate(total - covered[split], total)
        return figures

    rows = [row(k, {split: cumulative[split][k] for split in SPLITS}, False) for k in sorted({k for k in sizes if k < distinct} | {distinct}) if k != words]
    rows.append(row(words, {split: int(counts[split].to_numpy()[known].sum()) for split in SPLITS}, True))
    return sorted(rows, key=lambda r: (r["size"], not r["chosen"]))


def coverage_statistics(counts: pa.Table, vocabulary: Vocabulary, part_stats: Sequence[dict], top: int, frozen: str | None = None) -> dict:
    """Word-unit coverage; `part_stats` are the shard jobs' statistics, each holding its split's
    tokens, OOV tokens and unknown ids per input file."""
    known = in_vocabulary(counts, vocabulary)
    train = counts["train"].to_numpy()
    singletons = train == 1
    words = vocabulary.size - vocabulary.first_word_id
    unknown = {split: {} for split in SPLITS}
    by_source: dict[str, dict] = {}
    for stats in part_stats:
        split = stats["split"]
        for name, figures in stats["sources"].items():
            source = by_source.setdefault(name, {s: {"tokens": 0, "oov_tokens": 0} for s in SPLITS})
            source[split]["tokens"] += figures["tokens"]
            source[split]["oov_tokens"] += figures["oov_tokens"]
            for key, value in figures["unknown"].items():
                token = vocabulary.tokens[int(key)]
                unknown[split][token] = unknown[split].get(token, 0) + value
    for source in by_source.values():
        for figures in source.values():
            figures["oov_rate"] = _rate(figures["oov_tokens"], figures["tokens"])
    return {
        "vocabulary_size": vocabulary.size,
        "words": words,
        "frozen": frozen,
        "splits": {split: split_figures(counts, known, split, top) for split in SPLITS},
        "train_singletons": {
            "types_share": _rate(int(singletons.sum()), int(np.count_nonzero(train))),
            "tokens_share": _rate(int(singletons.sum()), int(train.sum())),
        },
        "sizes": size_table(counts, TABLE_SIZES, known, words),
        "unknown_classes": {split: dict(sorted(v.items())) for split, v in unknown.items()},
        "sources": dict(sorted(by_source.items())),
    }


def subword_statistics(counts: pa.Table, vocabulary: Vocabulary, encode_stats: Sequence[dict]) -> dict:
    """Subword coverage figures from the encode statistics and the piece counts."""
    totals = {
        split: dict.fromkeys(("documents", "sentences", "tokens", "oov_tokens", "words", "byte_pieces", "byte_runs"), 0)
        for split in SPLITS
    }
    for stats in encode_stats:
        for figures in stats["sources"].values():
            for split in SPLITS:
                for key in totals[split]:
                    totals[split][key] += figures[split][key]
    splits = {}
    for split, t in totals.items():
        pieces, runs = t["tokens"], t["byte_runs"]
        without_fallback = pieces - t["byte_pieces"] + runs
        splits[split] = {
            "documents": t["documents"],
            "sentences": t["sentences"],
            "words": t["words"],
            "pieces": pieces,
            "pieces_per_word": _rate(pieces, t["words"]),
            "pieces_per_sentence": _rate(pieces, t["sentences"]),
            "unknown_pieces": t["oov_tokens"],
            "unknown_rate": _rate(t["oov_tokens"], pieces),
            "byte_pieces": t["byte_pieces"],
            "byte_piece_rate": _rate(t["byte_pieces"], pieces),
            "unknown_rate_without_byte_fallback": _rate(t["oov_tokens"] + runs, without_fallback),
        }
    kinds = np.array(vocabulary.kinds)
    train = np.array(vocabulary.counts)
    return {
        "units": "subword",
        "vocabulary_size": vocabulary.size,
        "pieces": int(np.count_nonzero(kinds == "piece")),
        "byte_pieces": int(np.count_nonzero(kinds == "byte")),
        "unused_in_train": int(np.count_nonzero((kinds != "control") & (train == 0))),
        "splits": splits,
        "most_frequent_train_pieces": [[t, int(c)] for t, c in zip(counts["token"].to_pylist()[:10], counts["train"].to_pylist()[:10])],
    }


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Compute coverage statistics of a build.")
    parser.add_argument("--token-counts", required=True)
    parser.add_argument("--vocabulary", required=True)
    parser.add_argument("--options", required=True)
    parser.add_argument("--output", required=True)
    parser.add_argument("stats", nargs="*", help="the shard jobs' statistics (word units) or the encode jobs' (subword units)")
    args = parser.parse_args(argv)
    config = json.loads(args.options)
    if config["units"] == "subword":
        stats = subword_statistics(
            pq.read_table(args.token_counts), read_vocabulary(args.vocabulary), [read_json(p) for p in args.stats]
        )
        write_json(args.output, stats)
        print(format_table(stats))
        return
    stats = coverage_statistics(
        pq.read_table(args.token_counts),
        read_vocabulary(args.vocabulary),
        [read_json(p) for p in args.stats],
        config["report"]["top_oov"],
        config["vocabulary"]["frozen"],
    )
    write_json(args.output, stats)
    print(format_table(stats))


if __name__ == "__main__":
    main()
