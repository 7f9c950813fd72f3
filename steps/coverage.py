"""Coverage: how well the build's ids cover each split and each input file (stats/coverage.json).

The same figures for either units come from the shard jobs' statistics (steps.formats.Figures,
summed): per split and per input file, documents, sentences, tokens (words or pieces), unknown
tokens (out-of-vocabulary words mapped to <unk> or an unknown class; <unk> pieces) and their
rate, words (Figures.words) and tokens per word and per sentence, byte pieces and the <unk> rate the
same model would have without byte fallback (each run of byte pieces one <unk>), and where
unknown tokens went (per symbol). Then what describes the vocabulary itself, from
stats/token_counts.parquet and vocabulary.tsv: for a word cutoff, types and OOV types per
split, the most frequent dev/test OOV words, the share of train singletons and the size table
(train coverage and dev/test OOV rate if the vocabulary were the k most frequent words); for a
piece model, how many ids are learned pieces, byte pieces and symbols, and which are unused.
Rates of a zero denominator are 0.0 here; the report and the summary show a dash.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from . import job
from .formats import Figures, ShardStats, Vocabulary, read_shard_stats, read_vocabulary
from .layout import SPLITS
from .storage import write_json
from .summary import format_table

RULE = "coverage"
SECTIONS = ("report.top_oov", "units", "vocabulary.frozen")
TABLE_SIZES = (100, 1000, 2000, 5000, 10000, 20000, 50000, 100000)


def _rate(part: float, whole: float) -> float:
    return round(part / whole, 6) if whole else 0.0


def derived(figures: Figures) -> dict:
    """The figures of one split (or one file's split) with their rates."""
    without_fallback = figures.tokens - figures.byte_pieces + figures.byte_runs
    return {
        "documents": figures.documents,
        "sentences": figures.sentences,
        "tokens": figures.tokens,
        "unknown_tokens": figures.unknown,
        "unknown_rate": _rate(figures.unknown, figures.tokens),
        "words": figures.words,
        "tokens_per_word": _rate(figures.tokens, figures.words),
        "tokens_per_sentence": _rate(figures.tokens, figures.sentences),
        "byte_pieces": figures.byte_pieces,
        "byte_runs": figures.byte_runs,
        "byte_piece_rate": _rate(figures.byte_pieces, figures.tokens),
        "unknown_rate_without_byte_fallback": _rate(figures.unknown + figures.byte_runs, without_fallback),
    }


def encoded_figures(stats: Sequence[ShardStats], vocabulary: Vocabulary) -> dict:
    """Per split and per input file, what the shard jobs counted; and unknown tokens per symbol."""
    splits = {split: Figures() for split in SPLITS}
    sources: dict[str, dict[str, Figures]] = {}
    for chunk in stats:
        for source, per_split in chunk.sources.items():
            mine = sources.setdefault(source, {split: Figures() for split in SPLITS})
            for split, figures in per_split.items():
                mine[split].add(figures)
                splits[split].add(figures)
    return {
        "splits": {split: derived(figures) for split, figures in splits.items()},
        "sources": {source: {split: derived(f) for split, f in per.items()} for source, per in sorted(sources.items())},
        "unknown_classes": {split: dict(sorted((vocabulary.token(int(i)), n) for i, n in figures.by_unknown.items())) for split, figures in splits.items()},
    }


def word_description(counts: pa.Table, vocabulary: Vocabulary, top: int) -> tuple[dict, dict]:
    """What describes a word cutoff: per split types, OOV types and (dev, test) the most
    frequent OOV words; and the words, the train singletons and the size table."""
    words = vocabulary.token_array.slice(vocabulary.first_word_id)
    known = pc.is_in(counts["token"], value_set=words).to_numpy(zero_copy_only=False)
    per_split = {}
    for split in SPLITS:
        column = counts[split].to_numpy()
        present = column > 0
        oov = present & ~known
        figures: dict[str, object] = {"types": int(present.sum()), "oov_types": int(oov.sum())}
        if split != "train":
            order = np.argsort(-column[oov], kind="stable")[:top]
            names = counts["token"].filter(pa.array(oov)).to_pylist()
            figures["top_oov"] = [[names[i], int(column[oov][i])] for i in order]
        per_split[split] = figures
    train = counts["train"].to_numpy()
    singletons = train == 1
    description = {
        "words": vocabulary.size - vocabulary.first_word_id,
        "train_singletons": {
            "types_share": _rate(int(singletons.sum()), int(np.count_nonzero(train))),
            "tokens_share": _rate(int(singletons.sum()), int(train.sum())),
        },
        "sizes": size_table(counts, TABLE_SIZES, known, vocabulary.size - vocabulary.first_word_id),
    }
    return per_split, description


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


def piece_description(counts: pa.Table, vocabulary: Vocabulary) -> dict:
    """What describes a piece model: its ids by kind, the ones train never uses, the most frequent pieces."""
    kinds = vocabulary.kind_array.to_numpy(zero_copy_only=False)
    train = vocabulary.count_array
    return {
        "piece_ids": int(np.count_nonzero(kinds == "piece")),
        "byte_ids": int(np.count_nonzero(kinds == "byte")),
        "unused_in_train": int(np.count_nonzero((kinds != "control") & (train == 0))),
        "most_frequent_train_pieces": [[t, int(c)] for t, c in zip(counts["token"].to_pylist()[:10], counts["train"].to_pylist()[:10])],
    }


def coverage_statistics(stats: Sequence[ShardStats], counts: pa.Table, vocabulary: Vocabulary, top: int, frozen: str | None) -> dict:
    figures = encoded_figures(stats, vocabulary)
    result = {"units": vocabulary.units, "vocabulary_size": vocabulary.size, "frozen": frozen, **figures}
    if vocabulary.units == "word":
        per_split, description = word_description(counts, vocabulary, top)
        for split in SPLITS:
            result["splits"][split].update(per_split[split])
        result.update(description)
    else:
        result.update(piece_description(counts, vocabulary))
    return result


def main(argv: list[str] | None = None) -> None:
    run = job.start(argv, RULE, "Coverage statistics of a build.")
    layout, options = run.layout, run.options
    stats = [read_shard_stats(layout.shard_stats(chunk)) for chunk in run.chunks()]
    frozen = options["vocabulary"]["frozen"] if options["units"] == "word" else None
    result = coverage_statistics(
        stats, pq.ParquetFile(layout.token_counts).read(use_threads=False), read_vocabulary(layout.vocabulary), options["report"]["top_oov"], frozen
    )
    write_json(layout.coverage, result)
    print(format_table(result))


if __name__ == "__main__":
    main()
