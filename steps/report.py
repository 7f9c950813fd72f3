"""The vocabulary coverage report: one self-contained HTML page per build (build/report/index.html).

It reads the coverage statistics, the manifest, the merged token counts, the near-duplicate and
contamination figures (stats/hygiene.json) and the vocabulary growth curve (stats/growth.json,
steps/growth.py, merged from the shard jobs' sightings). Plots are PNG images embedded as
base64, drawn with matplotlib's Agg backend without metadata, so the page needs no network and
its bytes are the same on every run.

Subword mode (coverage.json has `units: subword`) shows what applies to a piece model instead:
pieces per word and per sentence, the <unk> rate with and without byte fallback (by split and by
input file, from the coverage statistics), the rank-frequency law of the pieces, and vocabulary
growth measured in whitespace-separated words (see steps/growth.py).

No text from the corpus is drawn into a plot: file names and words go into HTML tables, plots
label them by rank. DejaVu, matplotlib's only font here, lacks CJK glyphs, and matplotlib reads
`$…$` in a label as mathematics.
"""

from __future__ import annotations

import base64
import heapq
import html
import io
from collections.abc import Callable, Sequence
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
from matplotlib.axes import Axes
from matplotlib.axis import Axis
from matplotlib.figure import Figure
from matplotlib.ticker import PercentFormatter

from . import job
from .formats import escape
from .laws import FLOAT32_BYTES, ModelSize, PowerFit, fit_heaps, fit_zipf, log_points
from .layout import SPLITS
from .settings import read_json
from .storage import write_text
from .summary import block_share, format_blocks

RULE = "report"
SECTIONS = ("report", "windows.ngram")
COLOURS = {"train": "#1f5f8b", "dev": "#d9822b", "test": "#3a8f4b"}
STYLE = """
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;max-width:62rem;margin:2rem auto;padding:0 1rem;color:#1b1f24;line-height:1.45}
h1{font-size:1.6rem;margin-bottom:.2rem} h2{font-size:1.25rem;margin-top:2.4rem;border-bottom:1px solid #d0d7de;padding-bottom:.2rem}
h3{font-size:1.05rem} p.lead{color:#57606a;margin-top:0} nav ol{columns:2}
table{border-collapse:collapse;margin:.6rem 0 1rem;font-size:.92rem} th,td{padding:.22rem .6rem;border-bottom:1px solid #eaeef2}
th{text-align:left;background:#f6f8fa} td.n{text-align:right;font-variant-numeric:tabular-nums} tr.chosen td{font-weight:600;background:#fff8c5}
td.file{overflow-wrap:anywhere;min-width:12rem}
figure{margin:1rem 0} figure img{max-width:100%;height:auto;border:1px solid #eaeef2} figcaption{color:#57606a;font-size:.9rem}
.pair{display:flex;gap:2rem;flex-wrap:wrap} code{background:#f6f8fa;padding:0 .2rem}
"""
# Shown for a rate whose denominator is zero (0 of 0 tokens): coverage.json stores 0.0 there.
DASH = "—"
# Input files shown per file in the chart and in the table: those with the most out-of-vocabulary
# (or would-be <unk>) tokens. Bounds the page and the report job's memory whatever the number of
# files; coverage.json keeps every file.
CHART_FILES = 20
TABLE_FILES = 100


# ---------------------------------------------------------------- data


def top_sources(sources: dict[str, dict], weight: Callable[[dict], int], count: int) -> list[tuple[str, dict]]:
    """The `count` files of largest `weight` (largest first, then by name), without sorting them all."""
    return heapq.nsmallest(count, sources.items(), key=lambda item: (-weight(item[1]), item[0]))


def coverage_curve(counts: pa.Table, points: int = 300) -> dict[str, np.ndarray]:
    """Train coverage and dev/test OOV rate if the vocabulary were the k most frequent train words."""
    train = counts["train"].to_numpy()
    sizes = log_points(int(np.count_nonzero(train)), points)
    curve = {"size": sizes}
    for split in SPLITS:
        column = counts[split].to_numpy()
        cumulative = np.concatenate([[0], np.cumsum(column, dtype=np.int64)])
        total = cumulative[-1]
        covered = cumulative[sizes] / total if total else np.zeros(len(sizes))
        curve[split] = covered if split == "train" else 1.0 - covered
    return curve


# ---------------------------------------------------------------- plots


def _png(figure: Figure) -> str:
    """The figure as a base64 PNG without metadata (no software version, no date)."""
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=96, metadata={"Software": None})
    return base64.b64encode(buffer.getvalue()).decode("ascii")


def _figure() -> tuple[Figure, Axes]:
    # Fixed margins that fit these plots' tick labels and axis titles: the constrained layout
    # engine measured every text box again and took 1.3 of the report job's 6.4 s (cProfile).
    figure = Figure(figsize=(8.0, 4.3))
    figure.subplots_adjust(left=0.09, right=0.98, bottom=0.12, top=0.97)
    axes = figure.add_subplot()
    axes.grid(True, which="major", color="#dddddd", linewidth=0.6)
    return figure, axes


def _percent(axis: Axis) -> None:
    axis.set_major_formatter(PercentFormatter(1.0))


def plot_coverage(curve: dict[str, np.ndarray], chosen: int) -> str:
    figure, axes = _figure()
    axes.plot(curve["size"], curve["train"], color=COLOURS["train"], label="train tokens covered")
    for split in ("dev", "test"):
        axes.plot(curve["size"], curve[split], color=COLOURS[split], label=f"{split} tokens out of vocabulary")
    axes.axvline(chosen, color="#8250df", linestyle="--", linewidth=1.2, label=f"this build: {chosen:,} words")
    axes.set_xscale("log")
    axes.set_ylim(0, 1)
    _percent(axes.yaxis)
    axes.set_xlabel("words kept (most frequent in train first)")
    axes.set_ylabel("share of tokens")
    axes.legend(loc="center right", fontsize=9)
    return _png(figure)


def plot_zipf(ranks: np.ndarray, counts: np.ndarray, fit: PowerFit, unit: str = "words") -> str:
    figure, axes = _figure()
    axes.loglog(ranks, counts, ".", color=COLOURS["train"], markersize=4, label=f"train {unit}")
    axes.loglog(
        ranks,
        fit.constant * ranks.astype(np.float64) ** (-fit.exponent),
        color="#cf222e",
        linewidth=1.2,
        label=f"fit: count ≈ {fit.constant:,.0f} · rank$^{{-{fit.exponent:.3f}}}$",
    )
    axes.set_xlabel("rank")
    axes.set_ylabel("train count")
    axes.legend(fontsize=9)
    return _png(figure)


def growth_figure(read: np.ndarray, types: np.ndarray, fit: PowerFit, unit: str, order: str) -> Figure:
    """Distinct words after each prefix of the stream; `unit` is what the stream counts (tokens or words)."""
    figure, axes = _figure()
    axes.loglog(read, types, color=COLOURS["train"], label="distinct words seen")
    axes.loglog(read, fit(read), color="#cf222e", linestyle="--", linewidth=1.2, label=f"fit: types ≈ {fit.constant:.2f} · {unit}$^{{{fit.exponent:.3f}}}$")
    axes.axvspan(fit.fit_from, float(read.max()), color="#cf222e", alpha=0.06, label="fitted range")
    axes.set_xlabel(f"train {unit} read ({order})")
    axes.set_ylabel("distinct words")
    axes.legend(fontsize=9)
    return figure


def plot_sources(ranked: Sequence[tuple[str, dict]], key: str, label: str) -> str:
    """One bar per split for each file, labelled by its rank (the row number of the table beside)."""
    inches = 0.9 + 0.42 * len(ranked)
    figure = Figure(figsize=(8.0, inches))
    figure.subplots_adjust(left=0.09, right=0.98, bottom=0.6 / inches, top=1 - 0.1 / inches)
    axes = figure.add_subplot()
    axes.grid(True, axis="x", color="#dddddd", linewidth=0.6)
    height = 0.8 / len(SPLITS)
    positions = np.arange(len(ranked))
    for index, split in enumerate(SPLITS):
        rates = [figures[split][key] for _, figures in ranked]
        axes.barh(positions + (index - 1) * height, rates, height=height, color=COLOURS[split], label=split)
    axes.set_yticks(positions, [str(rank) for rank in range(1, len(ranked) + 1)], fontsize=8)
    axes.invert_yaxis()
    axes.set_ylabel("input file, # in the table")
    _percent(axes.xaxis)
    axes.set_xlabel(label)
    axes.legend(fontsize=9)
    return _png(figure)


# ---------------------------------------------------------------- HTML


class Shown(str):
    """A number already formatted for display (a rate, a byte size): right-aligned like numbers."""


class FileName(str):
    """An input file's path: may wrap anywhere, as long paths have no spaces to wrap at."""


def _cell(value: object) -> str:
    if isinstance(value, bool):
        return f"<td>{'yes' if value else 'no'}</td>"
    if isinstance(value, int):
        return f'<td class="n">{value:,}</td>'
    if isinstance(value, Shown):
        return f'<td class="n">{html.escape(value)}</td>'
    if isinstance(value, FileName):
        return f'<td class="file">{html.escape(value)}</td>'
    return f"<td>{html.escape(str(value))}</td>"


def table(headers: Sequence[str], rows: Sequence[Sequence[object]], marked: Sequence[bool] = ()) -> str:
    head = "".join(f"<th>{html.escape(h)}</th>" for h in headers)
    body = []
    for index, row in enumerate(rows):
        mark = ' class="chosen"' if index < len(marked) and marked[index] else ""
        body.append(f"<tr{mark}>" + "".join(_cell(v) for v in row) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def image(png: str, alt: str, caption: str) -> str:
    return f'<figure><img src="data:image/png;base64,{png}" alt="{html.escape(alt)}"><figcaption>{html.escape(caption)}</figcaption></figure>'


def _rate(value: float, whole: float) -> Shown:
    """A percentage; a dash when its denominator `whole` is zero (0 of 0 tokens is no rate)."""
    return Shown(f"{value:.2%}" if whole else DASH)


def _bytes(count: int) -> str:
    for unit, scale in (("GiB", 1 << 30), ("MiB", 1 << 20), ("KiB", 1 << 10)):
        if count >= scale:
            return f"{count / scale:,.1f} {unit}"
    return f"{count:,} B"


def _sized(count: int) -> Shown:
    """A parameter or value count with its float32 size beside it."""
    return Shown(f"{count:,} ({_bytes(count * FLOAT32_BYTES)})")


SIZING_ROWS = (
    ("embedding table, |V|·m parameters", "embedding_parameters"),
    ("context input, (n−1)·m values per example", "input_values"),
    ("hidden layer, (n−1)·m·h + h parameters", "hidden_parameters"),
    ("output layer, h·|V| + |V| parameters", "output_parameters"),
    ("all parameters", "parameters"),
)


def sizing_rows(vocabulary: int, widths: Sequence[int], context: int, hidden: int) -> list[list[object]]:
    """One row per figure, one column per embedding width; counts with float32 bytes."""
    tables = [ModelSize(vocabulary, width, context, hidden).table() for width in widths]
    rows: list[list[object]] = [[label, *(_sized(t[key]) for t in tables)] for label, key in SIZING_ROWS]
    rows.append(["softmax multiply-adds per predicted token, h·|V|"] + [t["softmax_multiply_adds"] for t in tables])
    return rows


def frozen_note(coverage: dict) -> str:
    """With a frozen vocabulary, which file it is, and that its words follow another corpus."""
    if not coverage.get("frozen"):
        return ""
    return (
        f"<p><strong>Frozen vocabulary</strong>: <code>{html.escape(coverage['frozen'])}</code>, used unchanged "
        "(vocabulary.frozen). Its words need not be the most frequent of this corpus; the highlighted row is "
        "figured from its own words.</p>"
    )


def files_not_read(manifest: dict) -> str:
    """The files under the corpus root that were not read, and why."""
    not_read = manifest.get("not_read", {"unselected": [], "excluded": [], "refused": []})
    rows: list[list[object]] = [[FileName(path), "matched by no corpus.include pattern"] for path in not_read["unselected"]]
    rows += [[FileName(path), "removed by a corpus.exclude pattern"] for path in not_read["excluded"]]
    rows += [[FileName(entry["path"]), "refused: " + entry["reason"]] for entry in not_read["refused"]]
    if not rows:
        return "<p>Every file under the corpus root was read.</p>"
    more = f"<p>{len(rows) - TABLE_FILES:,} more are listed in manifest.json, key <code>not_read</code>.</p>" if len(rows) > TABLE_FILES else ""
    return f"<p>{len(rows):,} files under the corpus root were not read:</p>" + table(["file", "why"], rows[:TABLE_FILES]) + more


def files_with_drops(manifest: dict) -> str:
    """The input files with the most dropped, replaced or truncated documents."""
    files = manifest["accounting"].get("files", {})
    touched = sorted(
        ((sum(f["dropped"].values()) + f["replaced_sequences"] + f["truncated"], source, f) for source, f in files.items()),
        key=lambda item: (-item[0], item[1]),
    )
    touched = [item for item in touched if item[0]]
    if not touched:
        return ""
    reasons = sorted({reason for _, _, f in touched for reason in f["dropped"]})
    rows = [
        [FileName(source), f["read"]] + [f["dropped"].get(r, 0) for r in reasons] + [f["replaced_sequences"], f["truncated"]]
        for _, source, f in touched[:TABLE_FILES]
    ]
    more = (
        f"<p>{len(touched) - TABLE_FILES:,} more files; every file's figures are in <code>stats/accounting.json</code>.</p>"
        if len(touched) > TABLE_FILES
        else ""
    )
    return (
        "<p>Files with dropped, replaced or truncated documents (most first). Every dropped document, with its file, "
        "byte offset and reason, is in <code>stats/dropped.parquet</code>.</p>"
        + table(["file", "read"] + [f"dropped: {r.replace('_', ' ')}" for r in reasons] + ["sequences replaced", "truncated"], rows)
        + more
    )


def blocks_note(manifest: dict) -> str:
    """How much of train the blocks hold, with the summary's warning when it is little."""
    share = block_share(manifest["splits"]["train"])
    if share is None:
        return ""
    line = format_blocks(manifest)
    warning = line.split("; warning: ", 1)[1] if "; warning: " in line else ""
    text = f"<p>Blocks hold {share:.1%} of the train split's ids (ids in at least one block, of all ids of the train streams)."
    return text + (f" <strong>Warning</strong>: {html.escape(warning)}.</p>" if warning else "</p>")


def accounting_section(manifest: dict, unit: str) -> tuple[str, str, str]:
    """Documents read, dropped and kept (from the manifest), per file where something was lost,
    the files not read, and rows per split; `unit` names the ids."""
    accounting = manifest["accounting"]
    dropped = accounting["dropped"]
    account_rows = [["documents read", accounting["read"]], ["pieces added by splitting long documents", accounting["pieces_added"]]]
    account_rows += [[f"dropped: {reason.replace('_', ' ')}", count] for reason, count in dropped.items()]
    account_rows += [
        ["kept", accounting["kept"]],
        ["truncated", accounting["truncated"]],
        ["invalid UTF-8 sequences replaced", accounting["replaced_sequences"]],
        ["read + pieces = kept + dropped", accounting["balanced"]],
    ]
    kinds = sorted({kind for figures in manifest["splits"].values() for kind in figures["rows"]})
    size_rows = [
        [s, manifest["splits"][s]["documents"], manifest["splits"][s]["sentences"], manifest["splits"][s]["tokens"]]
        + [manifest["splits"][s]["rows"].get(k, 0) for k in kinds]
        for s in SPLITS
    ]
    return (
        "accounting",
        "Documents and rows",
        "".join(
            [
                f"<p>Duplicates removed: {dropped.get('duplicate', 0):,}.</p>",
                table(["documents", "count"], account_rows),
                files_with_drops(manifest),
                files_not_read(manifest),
                table(["split", "documents", "sentences", unit] + [f"{k} rows" for k in kinds], size_rows),
                blocks_note(manifest),
            ]
        ),
    )


def baseline_section(baseline: dict) -> tuple[str, str, str]:
    """The n-gram model a neural model has to beat: perplexity per split and order, the share of
    held-out n-grams seen in train, and the warnings (from stats/baseline.json)."""
    order, splits = baseline["order"], baseline["splits"]
    orders = range(2, order + 1)

    def value(split: str, pick: Callable[[dict], float]) -> Shown:
        figures = splits.get(split)
        return Shown(f"{pick(figures):,.2f}") if figures and figures["tokens"] else Shown(DASH)

    def perplexity(k: int) -> Callable[[dict], float]:
        return lambda figures: figures["perplexity"][str(k)]

    rows: list[list[object]] = [[f"order {k}", *(value(split, perplexity(k)) for split in SPLITS)] for k in orders]
    rows.append(["add-one unigram", *(value(split, lambda f: f["unigram_perplexity"]) for split in SPLITS)])
    rows.append(["predicted tokens"] + [(splits.get(split) or {}).get("tokens", 0) for split in SPLITS])
    held_out = [split for split in SPLITS if split != "train"]
    seen = [
        [f"{k}-grams"] + [Shown(f"{splits[s]['seen_in_train'][str(k)]:.1%}") if splits.get(s) and splits[s]["tokens"] else Shown(DASH) for s in held_out]
        for k in range(1, order + 1)
    ]
    warnings = "".join(f"<p><strong>Warning</strong>: {html.escape(w)}.</p>" for w in baseline["warnings"])
    name = {"modified": "interpolated modified Kneser–Ney", "interpolated": "interpolated Kneser–Ney"}[baseline["smoothing"]]
    return (
        "baseline",
        "The n-gram model to beat",
        "".join(
            [
                f"<p>Perplexity of {name} models (Chen &amp; Goodman 1998) of orders 2 to {order}, counted on the train ids of this "
                f"build, on every split; a neural model of these ids should score below them on dev and test. Conventions: "
                f"{html.escape(baseline['conventions'])}. Another order or smoothing: <code>corpusmill baseline BUILD --order N</code>.</p>",
                warnings,
                table(["perplexity"] + list(SPLITS), rows),
                "<p>Share of the predicted tokens of dev and test whose n-gram (the token with its n−1 preceding ids) occurs in train. "
                "A high share at the highest order means the held-out text repeats train's.</p>",
                table(["seen in train"] + held_out, seen),
            ]
        ),
    )


def _share(value: float | None) -> Shown:
    return Shown(DASH if value is None else f"{value:.3f}")


def _distribution_row(name: str, figures: dict) -> list[object]:
    quantiles = figures.get("quantiles", {})
    return (
        [name, figures["documents"], figures["with_shared_gram"], _share(figures["mean"])]
        + [_share(quantiles.get(q)) for q in ("0.5", "0.9", "0.99")]
        + [_share(figures["max"]), figures["at_or_above_threshold"]]
    )


def hygiene_section(hygiene: dict) -> tuple[str, str, str]:
    """Near-duplicate clusters and what the policy dropped; the share of each dev and test
    document's n-grams found in train (distribution, the documents at or above the threshold,
    per source file), from stats/hygiene.json."""
    near, dirty, n = hygiene["near_duplicates"], hygiene["contamination"], hygiene["ngram_words"]
    dropped = near["dropped"]
    cluster_rows: list[list[object]] = [
        ["clusters (two or more documents at estimated Jaccard similarity ≥ threshold)", near["clusters"]],
        ["documents in clusters", near["documents"]],
        ["clusters whose members lie in more than one split", near["clusters_across_splits"]],
        ["largest cluster", near["largest_cluster"]],
        ["members kept", near["kept"]],
    ] + [[f"dropped: {reason.replace('_', ' ')}", count] for reason, count in sorted(dropped.items())]
    cluster_rows += [["candidate pairs compared", near["compared_pairs"]], ["pairs confirmed", near["confirmed_pairs"]]]
    if near["long_runs"]:
        cluster_rows.append(["band runs over the comparison limit (growth guarantee may not hold there)", near["long_runs"]])
    headers = ["documents", "measured", "with a shared n-gram", "mean", "median", "90 %", "99 %", "max", f"≥ {dirty['threshold']:g}"]
    distribution = [_distribution_row("dev and test", dirty)] + [_distribution_row(split, figures) for split, figures in dirty["by_split"].items()]
    bins = [[Shown(f"{low / 10:.1f}–{(low + 1) / 10:.1f}"), count] for low, count in enumerate(dirty["histogram"])]
    listed = [[FileName(row["source"]), Shown(str(row["offset"])), row["split"], _share(row["share"]), row["dropped"]] for row in dirty["listed"]]
    above = dirty["at_or_above_threshold"]
    more = f"<p>{above - len(listed):,} more are in <code>stats/contamination.parquet</code>.</p>" if above > len(listed) else ""
    by_source = sorted(hygiene["contamination_by_source"].items(), key=lambda item: (-item[1]["at_or_above_threshold"], -(item[1]["mean"] or 0.0), item[0]))
    source_rows = [[FileName(source), f["documents"], f["with_shared_gram"], _share(f["mean"]), _share(f["max"]), f["at_or_above_threshold"]]
                   for source, f in by_source[:TABLE_FILES]]  # fmt: skip
    fate = (f"they are dropped (contamination.drop): {dirty['dropped']:,} documents." if dirty["drop"]
            else "they are kept (contamination.drop: false).")  # fmt: skip
    return (
        "hygiene",
        "Near-duplicates and train text in dev and test",
        "".join(
            [
                f"<p>Near-duplicates: documents whose word shingles overlap by an estimated Jaccard similarity of at least "
                f"{near['threshold']:g} (MinHash with banding). Policy <code>{html.escape(near['policy'])}</code>"
                + {
                    "drop": ": every cluster keeps its anchor alone.",
                    "same_split": ": every cluster keeps the members in its anchor's split.",
                    "off": ": nothing is dropped.",
                }[near["policy"]]  # fmt: skip
                + "</p>",
                table(["near-duplicates", "count"], cluster_rows),
                f"<p>Contamination: the share of each kept dev and test document's {n}-word n-grams that also occur in a kept train "
                f"document. {above:,} documents reach {dirty['threshold']:g}; {fate}</p>",
                table(headers, distribution),
                table(["share", "documents"], bins),
                (f"<h3>Documents at or above {dirty['threshold']:g}</h3>" + table(["file", "byte offset", "split", "share", "dropped"], listed) + more)
                if listed
                else "",
                "<h3>By source file</h3>"
                + table(["file", "measured", "with a shared n-gram", "mean", "max", f"≥ {dirty['threshold']:g}"], source_rows)
                + left_out(len(by_source), len(source_rows), "<code>stats/hygiene.json</code>")
                if source_rows
                else "",
                "<p>Every cluster member and every measured document are in <code>stats/near_duplicates.parquet</code> and "
                "<code>stats/contamination.parquet</code>; <code>corpusmill hygiene BUILD</code> (the build folder) lists them with their text.</p>",
            ]
        ),
    )


def sizing_section(size: int, options: dict, context_unit: str) -> tuple[str, str, str]:
    """Parameters, bytes and softmax cost of a feed-forward model over `size` ids."""
    report = options["report"]
    context = options["windows"]["ngram"]["n"] - 1
    return (
        "sizing",
        "What a model of this vocabulary costs",
        "".join(
            [
                f"<p>A feed-forward model over {size:,} ids with {context} context {context_unit}, hidden width h = {report['hidden_width']}, "
                "one column per embedding width m. Counts with their size as float32; the output layer's multiply-adds "
                "score every id for each predicted token.</p>",
                table(
                    ["figure"] + [f"m = {width:,}" for width in report["embedding_widths"]],
                    sizing_rows(size, report["embedding_widths"], context, report["hidden_width"]),
                ),
            ]
        ),
    )


def ranked_lead(files: int, listed: int, what: str) -> str:
    """What orders the per-file chart and table, which share the rank numbers."""
    return f"<p>{files:,} input files, ranked by {html.escape(what)}. The chart shows the first {min(CHART_FILES, listed)}, numbered as in the table.</p>"


def left_out(files: int, listed: int, where: str) -> str:
    """How many files the table leaves out and where (`where`, HTML) every file's figures are."""
    if files <= listed:
        return ""
    return f"<p>{files - listed:,} more input files are not listed; the figures of every file are in {where}.</p>"


def page(sections: list[tuple[str, str, str]], lead: str, manifest: dict) -> str:
    """The sections as one HTML page with a table of contents."""
    nav = "".join(f'<li><a href="#{key}">{html.escape(title)}</a></li>' for key, title, _ in sections)
    body = "".join(f'<section id="{key}"><h2>{html.escape(title)}</h2>{content}</section>' for key, title, content in sections)
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>Vocabulary coverage report</title><style>{STYLE}</style></head><body>"
        "<h1>Vocabulary coverage report</h1>"
        f'<p class="lead">{lead}; '
        f"configuration {html.escape(manifest.get('config_sha256', '')[:12])}, vocabulary {html.escape(manifest['vocabulary']['sha256'][:12])}.</p>"
        f"<nav><ol>{nav}</ol></nav>{body}</body></html>\n"
    )


def _would_be_unknown(figures: dict) -> int:
    """A file's unknown tokens over all splits, each run of byte pieces counted as the one
    <unk> it would be without byte fallback: what ranks the files on the page."""
    return sum(figures[split]["unknown_tokens"] + figures[split]["byte_runs"] for split in SPLITS)


def _fine_rate(value: float, whole: float) -> Shown:
    """A rate as a percentage with four decimals: exactly the six decimals coverage.json keeps;
    a dash when its denominator `whole` is zero."""
    return Shown(f"{value:.4%}" if whole else DASH)


def _ratio(value: float, whole: float) -> Shown:
    return Shown(f"{value:.3f}" if whole else DASH)


def cutoff_sections(coverage: dict, curve: dict[str, np.ndarray], options: dict) -> list[tuple[str, str, str]]:
    """What describes a word cutoff: coverage at every size, the words missing, where they go."""
    words, size, splits = coverage["words"], coverage["vocabulary_size"], coverage["splits"]
    chosen_rows = coverage["sizes"]
    sections = [
        (
            "coverage",
            "How much the vocabulary covers",
            "".join(
                [
                    frozen_note(coverage),
                    f"<p>{words:,} words kept ({size:,} ids with the reserved and unknown-class symbols). "
                    f"They cover {_rate(1 - splits['train']['unknown_rate'], splits['train']['tokens'])} of train tokens; "
                    f"{_rate(splits['dev']['unknown_rate'], splits['dev']['tokens'])} of dev and "
                    f"{_rate(splits['test']['unknown_rate'], splits['test']['tokens'])} of test tokens are out of vocabulary.</p>",
                    image(
                        plot_coverage(curve, words),
                        "coverage curve",
                        "Keeping the k most frequent train words: share of train tokens covered, and dev/test tokens left out.",
                    ),
                    table(
                        ["words kept", "train covered", "dev OOV", "test OOV"],
                        [
                            [
                                r["size"],
                                _rate(r["train_coverage"], splits["train"]["tokens"]),
                                _rate(r["dev_oov_rate"], splits["dev"]["tokens"]),
                                _rate(r["test_oov_rate"], splits["test"]["tokens"]),
                            ]
                            for r in chosen_rows
                        ],
                        [r["chosen"] for r in chosen_rows],
                    ),
                    f"<p>Words seen once in train: {_rate(coverage['train_singletons']['types_share'], splits['train']['types'])} of train types, "
                    f"{_rate(coverage['train_singletons']['tokens_share'], splits['train']['tokens'])} of train tokens. "
                    "Try other cutoffs without rebuilding: <code>corpusmill cutoffs BUILD --min-count N</code>.</p>",
                ]
            ),
        )
    ]
    lists = []
    for split in ("dev", "test"):
        top = splits[split].get("top_oov", [])[: options["report"]["top_oov"]]
        lists.append(f"<div><h3>{split}</h3>" + table(["word", "count"], top) + "</div>")
    sections.append(("top-oov", "Most frequent words missing from the vocabulary", f'<div class="pair">{"".join(lists)}</div>'))
    classes = sorted({name for per in coverage["unknown_classes"].values() for name in per})
    class_rows = []
    for name in classes:
        row: list[object] = [name]
        for split in SPLITS:
            count = coverage["unknown_classes"][split].get(name, 0)
            total = splits[split]["unknown_tokens"]
            row += [count, _rate(count / total if total else 0.0, total)]
        class_rows.append(row)
    sections.append(
        (
            "classes",
            "Where out-of-vocabulary tokens go",
            "".join(
                [
                    "<p>Each out-of-vocabulary token maps to one unknown-class symbol; the share is of that split's OOV tokens.</p>",
                    table(["symbol"] + [f"{s} {label}" for s in SPLITS for label in ("tokens", "share")], class_rows),
                ]
            ),
        )
    )
    return sections


def model_sections(coverage: dict) -> list[tuple[str, str, str]]:
    """What describes a piece model: its ids, the most frequent pieces, pieces per word."""
    size, splits = coverage["vocabulary_size"], coverage["splits"]
    controls = size - coverage["piece_ids"] - coverage["byte_ids"]
    model_rows = [
        ["learned pieces", coverage["piece_ids"]],
        ["byte pieces", coverage["byte_ids"]],
        ["reserved symbols", controls],
        ["all ids, |V|", size],
        ["pieces and byte pieces never used in train", coverage["unused_in_train"]],
    ]
    length_rows = [
        [
            s,
            splits[s]["documents"],
            splits[s]["sentences"],
            splits[s]["words"],
            splits[s]["tokens"],
            _ratio(splits[s]["tokens_per_word"], splits[s]["words"]),
            _ratio(splits[s]["tokens_per_sentence"], splits[s]["sentences"]),
        ]
        for s in SPLITS
    ]
    return [
        (
            "model",
            "The subword model",
            "".join(
                [
                    f"<p>{size:,} ids: {coverage['piece_ids']:,} learned pieces, {coverage['byte_ids']:,} byte pieces and {controls:,} reserved symbols. "
                    "Every word of every split is spelled by pieces, so there is no word cutoff and no out-of-vocabulary word; "
                    "what remains to measure is how many pieces a word takes and how often the model falls back to bytes or &lt;unk&gt;.</p>",
                    table(["ids", "count"], model_rows),
                    "<h3>Most frequent train pieces</h3>",
                    table(["piece", "train count"], [[escape(piece), count] for piece, count in coverage["most_frequent_train_pieces"]]),
                ]
            ),
        ),
        (
            "lengths",
            "Pieces per word and per sentence",
            "".join(
                [
                    f"<p>A train word takes {_ratio(splits['train']['tokens_per_word'], splits['train']['words'])} pieces on average "
                    f"(dev {_ratio(splits['dev']['tokens_per_word'], splits['dev']['words'])}, "
                    f"test {_ratio(splits['test']['tokens_per_word'], splits['test']['words'])}); "
                    "words are runs of non-space characters of the cleaned sentences. "
                    "More pieces per word mean longer id sequences for the same text: n-gram contexts and blocks span fewer words. "
                    "A dev or test figure well above train's suggests text unlike the train sample (a rule of thumb).</p>",
                    table(["split", "documents", "sentences", "words", "pieces", "pieces per word", "pieces per sentence"], length_rows),
                ]
            ),
        ),
    ]


def unknown_section(coverage: dict, unit: str) -> tuple[str, str, str]:
    """Unknown tokens by split and input file. With byte pieces in the build, the byte share and
    the rate without byte fallback (each run of byte pieces one <unk>) too."""
    splits, sources = coverage["splits"], coverage["sources"]
    bytes_shown = any(splits[s]["byte_pieces"] for s in SPLITS) or bool(coverage.get("byte_ids"))
    headers = ["split", unit, f"unknown {unit}", "unknown rate"]
    rows = [[s, splits[s]["tokens"], splits[s]["unknown_tokens"], _fine_rate(splits[s]["unknown_rate"], splits[s]["tokens"])] for s in SPLITS]
    if bytes_shown:
        headers += ["byte pieces", "byte-piece share", "unknown rate without byte fallback"]
        for row, s in zip(rows, SPLITS):
            row += [
                splits[s]["byte_pieces"],
                _fine_rate(splits[s]["byte_piece_rate"], splits[s]["tokens"]),
                _fine_rate(splits[s]["unknown_rate_without_byte_fallback"], splits[s]["tokens"]),
            ]
    else:
        headers += ["types", "OOV types"]
        for row, s in zip(rows, SPLITS):
            row += [splits[s].get("types", 0), splits[s].get("oov_types", 0)]
    lead = "<p>Unknown tokens: words outside the vocabulary (mapped to &lt;unk&gt; or an unknown class) or &lt;unk&gt; pieces. " + (
        "Byte-piece share: pieces that are UTF-8 bytes of characters outside the model. Without byte fallback the same "
        "model would write one &lt;unk&gt; for each run of byte pieces (sentencepiece merges adjacent unknown characters); "
        "the last column is that rate.</p>"
        if bytes_shown
        else "</p>"
    )
    parts = [lead, table(headers, rows)]
    if sources:
        what = f"unknown {unit}" + (" (a run of byte pieces counted as one)" if bytes_shown else "")
        listed = top_sources(sources, _would_be_unknown, TABLE_FILES)
        parts += [
            ranked_lead(len(sources), len(listed), f"{what}, in all splits"),
            image(
                plot_sources(
                    listed[:CHART_FILES], "unknown_rate_without_byte_fallback", f"share of {unit} unknown" + (" without byte fallback" if bytes_shown else "")
                ),
                "unknown rate by source file",
                f"Share of unknown {unit} per input file and split, numbered as in the table.",
            ),
            table(
                ["#", "input file", f"unknown {unit}"] + [f"{s} {label}" for s in SPLITS for label in (unit, "unknown")],
                [
                    [rank, FileName(name), _would_be_unknown(figures)]
                    + [v for s in SPLITS for v in (figures[s]["tokens"], _fine_rate(figures[s]["unknown_rate_without_byte_fallback"], figures[s]["tokens"]))]
                    for rank, (name, figures) in enumerate(listed, 1)
                ],
            ),
            left_out(len(sources), len(listed), "<code>stats/coverage.json</code>, key <code>sources</code>"),
        ]
    return ("unknown", "Unknown tokens by split and source", "".join(parts))


def render(coverage: dict, manifest: dict, counts: pa.Table, growth: tuple[np.ndarray, np.ndarray], options: dict, hygiene: dict | None = None) -> str:
    """The whole page as one HTML string: the section that describes the vocabulary (a word
    cutoff or a piece model), then what every build has."""
    pieces = "piece_ids" in coverage
    unit = "pieces" if pieces else "tokens"
    size, splits = coverage["vocabulary_size"], coverage["splits"]
    zipf_fit, ranks, ranked = fit_zipf(counts["train"].to_numpy())
    read, types = growth
    heaps_fit = fit_heaps(read, types)
    # A piece model is described first; a word cutoff by its coverage first and, after the
    # unknown tokens, by the words missing and where they go.
    description = model_sections(coverage) if pieces else cutoff_sections(coverage, coverage_curve(counts), options)
    sections, later = (description, []) if pieces else (description[:1], description[1:])
    described = f"the {int(ranks.max()) if len(ranks) else 0:,} pieces used in train" if pieces else (f"{int(ranks.max()) if len(ranks) else 0:,} train types")
    note = (
        "A small piece inventory rarely follows one straight line: single characters and frequent short pieces fill the head, "
        "rarely used byte pieces the tail, so read s as a summary of the slope rather than as the word law."
        if pieces
        else "Zipf's law gives exponents near 1 for the words of natural-language text."
    )
    sections.append(
        (
            "zipf",
            f"Rank and frequency{' of pieces' if pieces else ''}",
            "".join(
                [
                    f"<p>Fitted Zipf exponent s = {zipf_fit.exponent:.3f} (least squares on log–log axes "
                    f"at {len(ranks)} log-spaced ranks of {described}). {note}</p>",
                    image(
                        plot_zipf(ranks, ranked, zipf_fit, "pieces" if pieces else "words"),
                        f"rank-frequency plot{' of pieces' if pieces else ''}",
                        f"Train count of the {'piece' if pieces else 'word'} at each rank, log–log axes.",
                    ),
                ]
            ),
        )
    )
    stream = "words" if pieces else "tokens"
    sections.append(
        (
            "growth",
            "Vocabulary growth",
            "".join(
                [
                    (
                        "<p>Measured in words, not pieces: distinct whitespace-separated words of the train sentences, in corpus order, "
                        "duplicates left out; the number of pieces is fixed at |V| by the model and does not grow. "
                        if pieces
                        else "<p>"
                    )
                    + f"Heaps fit: types ≈ K · {stream}<sup>β</sup> with K = {heaps_fit.constant:.2f}, β = {heaps_fit.exponent:.3f}, "
                    f"fitted from a tenth of the stream to its end, the last decade on the log axis (from {int(heaps_fit.fit_from):,} "
                    f"of {int(read.max()) if len(read) else 0:,} {stream}; {int(types[-1]) if len(types) else 0:,} distinct words; shaded in the plot). "
                    "Large English collections usually give β between 0.4 and 0.6; a small or mixed corpus gives more.</p>",
                    image(
                        _png(growth_figure(read, types, heaps_fit, stream, "whitespace-separated, corpus order" if pieces else "corpus order")),
                        "vocabulary growth plot",
                        f"Distinct words after each prefix of the train {stream}, in corpus order, duplicates left out.",
                    ),
                ]
            ),
        )
    )
    sections.append(unknown_section(coverage, unit))
    sections += later
    sections.append(accounting_section(manifest, unit))
    if hygiene is not None:
        sections.append(hygiene_section(hygiene))
    if "baseline" in manifest:
        sections.append(baseline_section(manifest["baseline"]))
    sections.append(sizing_section(size, options, "pieces" if pieces else "words"))
    lead = (
        f"{splits['train']['tokens']:,} train pieces, subword model of {size:,} ids"
        if pieces
        else f"{splits['train']['tokens']:,} train tokens, {coverage['words']:,} words kept"
    )
    return page(sections, lead, manifest)


def read_growth(path: str) -> tuple[np.ndarray, np.ndarray]:
    """(stream positions, distinct types seen) from stats/growth.json."""
    growth = read_json(path)
    return np.array(growth["read"], dtype=np.int64), np.array(growth["distinct"], dtype=np.int64)


def main(argv: list[str] | None = None) -> None:
    run = job.start(argv, RULE, "Write the vocabulary coverage report of a build as one HTML page.")
    layout = run.layout
    text = render(
        read_json(layout.coverage), read_json(layout.manifest), pq.ParquetFile(layout.token_counts).read(use_threads=False),
        read_growth(layout.growth), run.options, read_json(layout.hygiene) if Path(layout.hygiene).exists() else None,
    )  # fmt: skip
    write_text(layout.report, text)
    print(f"report: {layout.report} ({len(text):,} bytes)")


if __name__ == "__main__":
    main()
