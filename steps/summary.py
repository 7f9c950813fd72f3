"""Summary: the coverage statistics as a short plain-text table, printed at the end of a run.

Kept apart from steps.report so that Snakemake's `onsuccess` handler imports no Arrow or numpy
(about 0.3 s at the end of every run).
"""

from __future__ import annotations

from steps.layout import SPLITS

# Shown for a rate whose denominator is zero (0 of 0 tokens): coverage.json stores 0.0 there.
DASH = "—"


def _shown(value: float, whole: float, spec: str) -> str:
    """`value` formatted by `spec`, or a dash when its denominator `whole` is zero."""
    return format(value, spec) if whole else DASH


def format_subword_table(stats: dict) -> str:
    """The summary of a subword build: pieces per word and sentence, <unk> and byte rates."""
    lines = [f"subword vocabulary: {stats['vocabulary_size']} ids, {stats['pieces']} pieces, {stats['byte_pieces']} byte pieces"]
    lines.append(f"{'split':<6} {'pieces':>10} {'per word':>9} {'per sent.':>9} {'<unk>':>8} {'bytes':>8} {'<unk> w/o fallback':>19}")
    for split in SPLITS:
        f = stats["splits"][split]
        lines.append(
            f"{split:<6} {f['pieces']:>10} {_shown(f['pieces_per_word'], f['words'], '.3f'):>9} "
            f"{_shown(f['pieces_per_sentence'], f['sentences'], '.2f'):>9} {_shown(f['unknown_rate'], f['pieces'], '.3%'):>8} "
            f"{_shown(f['byte_piece_rate'], f['pieces'], '.3%'):>8} {_shown(f['unknown_rate_without_byte_fallback'], f['pieces'], '.3%'):>19}"
        )
    return "\n".join(lines)


def format_table(stats: dict) -> str:
    """A short plain-text summary for the end of a run."""
    if stats.get("units") == "subword":
        return format_subword_table(stats)
    lines = [f"vocabulary: {stats['vocabulary_size']} ids, {stats['words']} words"]
    lines.append(f"{'split':<6} {'tokens':>10} {'types':>8} {'OOV tokens':>11} {'OOV rate':>9} {'OOV types':>9}")
    for split in SPLITS:
        f = stats["splits"][split]
        lines.append(f"{split:<6} {f['tokens']:>10} {f['types']:>8} {f['oov_tokens']:>11} {_shown(f['oov_rate'], f['tokens'], '.2%'):>9} {f['oov_types']:>9}")
    lines.append(f"{'size':>8} {'train coverage':>15} {'dev OOV':>8}")
    train, dev = stats["splits"]["train"]["tokens"], stats["splits"]["dev"]["tokens"]
    for row in stats["sizes"]:
        mark = "  <- chosen" if row["chosen"] else ""
        lines.append(f"{row['size']:>8} {_shown(row['train_coverage'], train, '.2%'):>15} {_shown(row['dev_oov_rate'], dev, '.2%'):>8}{mark}")
    top = stats["splits"]["dev"].get("top_oov", [])[:10]
    if top:
        lines.append("most frequent dev OOV words: " + ", ".join(f"{w} ({c})" for w, c in top))
    return "\n".join(lines)
