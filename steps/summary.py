"""Summary: the coverage statistics as a short plain-text table, printed at the end of a run.

Kept apart from the other steps so that Snakemake's `onsuccess` handler imports no Arrow or
numpy (about 0.3 s at the end of every run).
"""

from __future__ import annotations

from .layout import SPLITS

# Shown for a rate whose denominator is zero (0 of 0 tokens): coverage.json stores 0.0 there.
DASH = "—"


def _shown(value: float, whole: float, spec: str) -> str:
    """`value` formatted by `spec`, or a dash when its denominator `whole` is zero."""
    return format(value, spec) if whole else DASH


def _vocabulary_line(stats: dict) -> str:
    if "piece_ids" in stats:
        return f"vocabulary: {stats['vocabulary_size']} ids, {stats['piece_ids']} pieces, {stats['byte_ids']} byte pieces"
    frozen = f" (frozen: {stats['frozen']})" if stats.get("frozen") else ""
    return f"vocabulary: {stats['vocabulary_size']} ids, {stats['words']} words{frozen}"


def format_table(stats: dict) -> str:
    """A short plain-text summary for the end of a run: the vocabulary, a row per split, and for
    a word cutoff its size table and the most frequent dev OOV words."""
    pieces = "piece_ids" in stats
    lines = [_vocabulary_line(stats)]
    header = f"{'split':<6} {'tokens':>10} {'unknown':>9} {'rate':>8}"
    header += f" {'per word':>9} {'bytes':>8} {'unknown w/o fallback':>21}" if pieces else f" {'types':>8} {'OOV types':>9}"
    lines.append(header)
    for split in SPLITS:
        f = stats["splits"][split]
        row = f"{split:<6} {f['tokens']:>10} {f['unknown_tokens']:>9} {_shown(f['unknown_rate'], f['tokens'], '.3%'):>8}"
        if pieces:
            row += (
                f" {_shown(f['tokens_per_word'], f['words'], '.3f'):>9} {_shown(f['byte_piece_rate'], f['tokens'], '.3%'):>8}"
                f" {_shown(f['unknown_rate_without_byte_fallback'], f['tokens'], '.3%'):>21}"
            )
        else:
            row += f" {f['types']:>8} {f['oov_types']:>9}"
        lines.append(row)
    if "sizes" in stats:
        lines.append(f"{'size':>8} {'train coverage':>15} {'dev OOV':>8}")
        train, dev = stats["splits"]["train"]["tokens"], stats["splits"]["dev"]["tokens"]
        for row_figures in stats["sizes"]:
            mark = "  <- chosen" if row_figures["chosen"] else ""
            lines.append(
                f"{row_figures['size']:>8} {_shown(row_figures['train_coverage'], train, '.2%'):>15} {_shown(row_figures['dev_oov_rate'], dev, '.2%'):>8}{mark}"
            )
        top = stats["splits"]["dev"].get("top_oov", [])[:10]
        if top:
            lines.append("most frequent dev OOV words: " + ", ".join(f"{w} ({c})" for w, c in top))
    return "\n".join(lines)


def _named(paths: list[str], shown: int = 3) -> str:
    more = f", +{len(paths) - shown} more" if len(paths) > shown else ""
    return ", ".join(paths[:shown]) + more


def format_accounting(accounting: dict, corpus: dict, dropped_path: str, shown: int = 5) -> str:
    """What became of the documents and files read: totals, files not read, and the files with
    the most drops or replacements (all of them in stats/accounting.json)."""
    dropped = accounting["dropped"]
    reasons = ", ".join(f"{reason} {count:,}" for reason, count in sorted(dropped.items(), key=lambda item: -item[1]))
    pieces = f" (+{accounting['pieces_added']:,} pieces of split documents)" if accounting["pieces_added"] else ""
    lines = [
        f"documents: read {accounting['read']:,}{pieces}, kept {accounting['kept']:,}, dropped {sum(dropped.values()):,}" + (f": {reasons}" if reasons else "")
    ]
    files = [f"{len(corpus['sources']):,} read"]
    if corpus["unselected"]:
        files.append(f"{len(corpus['unselected']):,} not matched by corpus.include ({_named(corpus['unselected'])})")
    if corpus["excluded"]:
        files.append(f"{len(corpus['excluded']):,} excluded ({_named(corpus['excluded'])})")
    if corpus["refused"]:
        refused = [f"{entry['path']}: {entry['reason']}" for entry in corpus["refused"]]
        files.append(f"{len(refused):,} refused ({_named(refused)})")
    lines.append("files: " + "; ".join(files))
    touched = [
        (sum(figures["dropped"].values()) + figures["replaced_sequences"] + figures["truncated"], source, figures)
        for source, figures in accounting["files"].items()
    ]
    touched = sorted((item for item in touched if item[0]), key=lambda item: (-item[0], item[1]))
    for _, source, figures in touched[:shown]:
        parts = [f"dropped {reason} {count:,}" for reason, count in sorted(figures["dropped"].items())]
        if figures["replaced_sequences"]:
            parts.append(f"{figures['replaced_sequences']:,} byte sequences replaced")
        if figures["truncated"]:
            parts.append(f"{figures['truncated']:,} truncated")
        lines.append(f"  {source}: {', '.join(parts)} (of {figures['read']:,} read)")
    if len(touched) > shown:
        lines.append(f"  and {len(touched) - shown:,} more files with drops or replacements (all in the accounting of the build)")
    if sum(dropped.values()):
        lines.append(f"every dropped document (file, byte offset, reason): {dropped_path}")
    return "\n".join(lines)


def failure_message(log: str) -> str:
    """The message a failed job left at the end of its log: from its last `corpusmill:` line
    to the end, else its last three lines (an unexpected error's traceback ends so)."""
    try:
        with open(log, encoding="utf-8", errors="replace") as handle:
            lines = [line.rstrip("\n") for line in handle if line.strip()]
    except OSError:
        return "(its log is missing)"
    starts = [number for number, line in enumerate(lines) if line.startswith("corpusmill:")]
    return "\n".join(lines[starts[-1] :] if starts else lines[-3:])


def format_failures(path: str) -> str:
    """Each failed job of the run (its log named in `path`) with its own message."""
    with open(path, encoding="utf-8") as handle:
        logs = list(dict.fromkeys(line.strip() for line in handle if line.strip()))
    lines = [f"corpusmill: {len(logs)} job(s) failed; what each said (the whole log is named):"]
    for log in logs:
        lines.append(f"- {log}:")
        lines += [f"    {line}" for line in failure_message(log).splitlines()]
    return "\n".join(lines)


# Below this share of train ids held by blocks, the summary and the report say so. Our own
# choice, not a published figure: by then most of the text never reaches a block-trained model.
LOW_BLOCK_SHARE = 0.5


def block_share(split_figures: dict) -> float | None:
    """The share of a split's stream ids that lie in at least one block, or None without blocks."""
    if "block_ids" not in split_figures or not split_figures.get("stream_ids"):
        return None
    return split_figures["block_ids"] / split_figures["stream_ids"]


def format_blocks(manifest: dict) -> str:
    """How much of train the blocks hold, with a warning when most of it is left out."""
    share = block_share(manifest["splits"]["train"])
    if share is None:
        return ""
    blocks = manifest["config"]["windows"]["blocks"]
    line = f"blocks (L={blocks['length']}, span {blocks['span']}, remainder {blocks['remainder']}) hold {share:.1%} of train ids"
    if share < LOW_BLOCK_SHARE:
        line += (
            f"; warning: {1 - share:.0%} of train is in no block (documents shorter than L+1 ids give none, and the "
            "last partial block is dropped): use a smaller windows.blocks.length, span: corpus or remainder: pad"
        )
    return line


SMOOTHING_NAMES = {"modified": "interpolated modified Kneser-Ney", "interpolated": "interpolated Kneser-Ney"}


def format_baseline(baseline: dict) -> str:
    """The n-gram baseline's perplexity per split at its highest order, with the add-one unigram
    beside it, and its warnings."""
    order, splits = str(baseline["order"]), baseline["splits"]

    def perplexity(split: str, key: str) -> str:
        figures = splits.get(split)
        if not figures or not figures["tokens"]:
            return f"{split} {DASH}"
        value = figures["perplexity"][order] if key == "order" else figures["unigram_perplexity"]
        return f"{split} {value:,.2f}"

    lines = [
        f"n-gram baseline ({SMOOTHING_NAMES[baseline['smoothing']]}, order {order}, counted on train): perplexity "
        + ", ".join(perplexity(split, "order") for split in SPLITS)
        + "; add-one unigram "
        + ", ".join(perplexity(split, "unigram") for split in SPLITS)
    ]
    lines += [f"warning: {warning}" for warning in baseline["warnings"]]
    return "\n".join(lines)


def format_hygiene(hygiene: dict, build: str) -> str:
    """Near-duplicate clusters and what the policy dropped; how many dev/test documents share
    much of their n-grams with train, with the command that lists both."""
    near, dirty = hygiene["near_duplicates"], hygiene["contamination"]
    dropped = ", ".join(f"{reason} {count:,}" for reason, count in sorted(near["dropped"].items())) or "none (policy off)"
    lines = [
        f"near-duplicates (policy {near['policy']}, Jaccard >= {near['threshold']:g}): {near['clusters']:,} clusters of "
        f"{near['documents']:,} documents ({near['clusters_across_splits']:,} across splits); dropped {dropped}"
    ]
    quantiles = dirty.get("quantiles", {})
    shown = ", ".join(f"{float(q):.0%} {value:.3f}" for q, value in quantiles.items())
    spread = f" (quantiles {shown}; max {dirty['max']:.3f})" if quantiles else ""
    fate = f"dropped {dirty['dropped']:,}" if dirty["drop"] else "kept (contamination.drop: false)"
    lines.append(
        f"contamination ({hygiene['ngram_words']}-grams shared with train): {dirty['at_or_above_threshold']:,} of "
        f"{dirty['documents']:,} dev/test documents at or above {dirty['threshold']:g}{spread}; {fate}"
    )
    if near["documents"] or dirty["at_or_above_threshold"]:
        lines.append(f"review them with their text: corpusmill hygiene {build}")
    return "\n".join(lines)
