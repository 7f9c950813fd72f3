"""Summary: the coverage statistics as a short plain-text table, printed at the end of a run.

Kept apart from steps.report so that Snakemake's `onsuccess` handler imports no Arrow or numpy
(about 0.3 s at the end of every run).
"""

from __future__ import annotations

from steps.layout import SPLITS


def format_subword_table(stats: dict) -> str:
    """The summary of a subword build: pieces per word and sentence, <unk> and byte rates."""
    lines = [f"subword vocabulary: {stats['vocabulary_size']} ids, {stats['pieces']} pieces, {stats['byte_pieces']} byte pieces"]
    lines.append(f"{'split':<6} {'pieces':>10} {'per word':>9} {'per sent.':>9} {'<unk>':>8} {'bytes':>8} {'<unk> w/o fallback':>19}")
    for split in SPLITS:
        f = stats["splits"][split]
        lines.append(
            f"{split:<6} {f['pieces']:>10} {f['pieces_per_word']:>9.3f} {f['pieces_per_sentence']:>9.2f} "
            f"{f['unknown_rate']:>8.3%} {f['byte_piece_rate']:>8.3%} {f['unknown_rate_without_byte_fallback']:>19.3%}"
        )
    return "\n".join(lines)


def format_table(stats: dict) -> str:
    """A short plain-text summary for the end of a run."""
    if stats.get("units") == "subword":
        return format_subword_table(stats)
    frozen = f" (frozen: {stats['frozen']})" if stats.get("frozen") else ""
    lines = [f"vocabulary: {stats['vocabulary_size']} ids, {stats['words']} words{frozen}"]
    lines.append(f"{'split':<6} {'tokens':>10} {'types':>8} {'OOV tokens':>11} {'OOV rate':>9} {'OOV types':>9}")
    for split in SPLITS:
        f = stats["splits"][split]
        lines.append(f"{split:<6} {f['tokens']:>10} {f['types']:>8} {f['oov_tokens']:>11} {f['oov_rate']:>9.2%} {f['oov_types']:>9}")
    lines.append(f"{'size':>8} {'train coverage':>15} {'dev OOV':>8}")
    for row in stats["sizes"]:
        mark = "  <- chosen" if row["chosen"] else ""
        lines.append(f"{row['size']:>8} {row['train_coverage']:>15.2%} {row['dev_oov_rate']:>8.2%}{mark}")
    top = stats["splits"]["dev"].get("top_oov", [])[:10]
    if top:
        lines.append("most frequent dev OOV words: " + ", ".join(f"{w} ({c})" for w, c in top))
    return "\n".join(lines)
