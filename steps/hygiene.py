"""Split hygiene, corpus-wide: near-duplicate clusters and the documents the policy drops, the
contamination of dev and test by train, and `corpusmill hygiene`, which lists both for review.

The deduplicate job (steps/deduplicate.py) runs `measure` after finding exact duplicates, from
every chunk's signatures (steps.signatures), so the removed lists it writes carry these drops.

Documents are numbered as steps.deduplicate.CorpusRows numbers them: chunks in corpus order,
rows by file (code point order) and offset. Documents removed as exact duplicates take no part:
their kept copy stands for them.

Clusters: steps.near_duplicates.cluster over the band keys, one band column in memory at a
time, verification slots fetched from each chunk's memory-mapped slot file. Policy
(near_duplicates.policy, rule and guarantee in steps.near_duplicates): "drop" drops every member
but the anchor (reason near_duplicate); "same_split" drops the members outside the anchor's
split (near_duplicate_other_split); "off" drops none. stats/near_duplicates.parquet names
every member's cluster and anchor.

Contamination, after those drops: every dev and test document still kept, against the train
documents still kept. The held-out documents' n-gram hashes are gathered and their distinct set
built; each chunk's kept train grams, a row group of its signatures file (one prepare batch)
at a time, are looked up in that set and only the hits kept
(steps.contamination.TrainGrams), so memory follows the size of dev and test, not of train.
With contamination.drop, documents at or above the threshold are dropped (contaminated).

Memory: what steps.near_duplicates.cluster holds (about 60 bytes a document), each chunk's order
and the splits (9 bytes a document), the cluster members' and measured documents' places
(file, offset, id) for the files written, and the dev and test grams (8 bytes a word); the
verification slots stay on disk, memory-mapped, each page unmapped again once read.
"""

from __future__ import annotations

import argparse
import json
import mmap
import os
import sys
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from . import contamination as audit
from . import near_duplicates as nd
from .layout import SPLITS, Layout
from .signatures import band_count, band_names
from .storage import ParquetSink, write_json, write_table

REASONS = ("near_duplicate", "near_duplicate_other_split", "contaminated")
POLICY_REASON = {"drop": "near_duplicate", "same_split": "near_duplicate_other_split"}
# Contaminated documents listed by name in stats/hygiene.json (and so in the report); the
# Parquet file beside it holds every measured document.
LISTED = 100
# Rows of stats/near_duplicates.parquet built and written at once: one row group, Parquet's
# default size.
CLUSTER_ROWS = 1 << 20
# Threads scanning the train chunks for the held-out grams (numpy's sorts and searches and
# Parquet's reads run without the interpreter lock); steps.deduplicate declares as many.
SCAN_THREADS = 2

DROPS_SCHEMA = pa.schema([("source", pa.string()), ("offset", pa.int64()), ("doc_id", pa.string()), ("reason", pa.string())])
CLUSTERS_SCHEMA = pa.schema(
    [("cluster", pa.int64()), ("chunk", pa.string()), ("source", pa.string()), ("offset", pa.int64()), ("doc_id", pa.string()),
     ("split", pa.string()), ("anchor", pa.bool_()), ("kept", pa.bool_()), ("reason", pa.string())]
)  # fmt: skip
CONTAMINATION_SCHEMA = pa.schema(
    [("chunk", pa.string()), ("source", pa.string()), ("offset", pa.int64()), ("doc_id", pa.string()), ("split", pa.string()),
     ("grams", pa.int64()), ("shared", pa.int64()), ("share", pa.float64()), ("dropped", pa.bool_())]
)  # fmt: skip


class CorpusSignatures:
    """Every chunk's signatures, rows in corpus order: the split of each document (1 byte), each
    chunk's order (8 bytes a document) and memory maps of the verification slots."""

    def __init__(self, paths: list[tuple[str, str]]) -> None:
        self.paths = paths
        self.orders: list[np.ndarray] = []
        # Each file's footer, parsed once rather than for every band read from it.
        self._footers: list[pq.FileMetaData] = []
        splits = []
        self.bands = 0
        for path, _ in paths:
            parquet = pq.ParquetFile(path)
            self._footers.append(parquet.metadata)
            self.bands = band_count(parquet.schema_arrow)
            table = parquet.read(columns=["source", "offset", "split"], use_threads=False)
            order = pc.sort_indices(table, [("source", "ascending"), ("offset", "ascending")]).to_numpy()
            self.orders.append(order)
            splits.append(pc.index_in(table["split"], value_set=pa.array(SPLITS)).to_numpy(zero_copy_only=False)[order].astype(np.uint8))
        self.starts = np.cumsum([0, *map(len, self.orders)])
        self.splits = np.concatenate(splits) if splits else np.zeros(0, np.uint8)
        self.permutations = 0
        self.slots: list[np.ndarray] = []
        self._maps: list[mmap.mmap | None] = []
        for (_, slots_path), order in zip(paths, self.orders):
            size = os.path.getsize(slots_path)
            if len(order):
                self.permutations = size // (2 * len(order))
                with open(slots_path, "rb") as handle:
                    mapped = mmap.mmap(handle.fileno(), 0, access=mmap.ACCESS_READ)
                self._maps.append(mapped)
                self.slots.append(np.frombuffer(mapped, dtype="<u2", count=len(order) * self.permutations).reshape(len(order), self.permutations))
            else:
                self._maps.append(None)
                self.slots.append(np.zeros((0, 0), np.uint16))

    def __len__(self) -> int:
        return int(self.starts[-1])

    def chunk_of(self, rows: np.ndarray) -> np.ndarray:
        return np.searchsorted(self.starts, rows, side="right") - 1

    def _file(self, chunk: int) -> pq.ParquetFile:
        return pq.ParquetFile(self.paths[chunk][0], metadata=self._footers[chunk])

    def band(self, name: str) -> np.ndarray:
        """One band column of every document, in corpus order."""
        columns = [self._file(chunk).read(columns=[name], use_threads=False).column(0).to_numpy()[order] for chunk, order in enumerate(self.orders)]
        return np.concatenate(columns) if columns else np.zeros(0, np.uint64)

    def digests(self) -> np.ndarray:
        """Each document's signature digest (steps.near_duplicates.signature_digests)."""

        def digests_of(chunk: int) -> np.ndarray:
            table = self._file(chunk).read(columns=band_names(self.bands), use_threads=False)
            keys = np.stack([column.to_numpy() for column in table.columns], axis=1) if table.num_rows else np.zeros((0, self.bands), np.uint64)
            return nd.signature_digests(keys)[self.orders[chunk]]

        with ThreadPoolExecutor(SCAN_THREADS) as pool:
            found = list(pool.map(digests_of, range(len(self.paths))))
        return np.concatenate(found) if found else np.zeros(0, np.uint64)

    def slots_of(self, rows: np.ndarray) -> np.ndarray:
        """The verification slots of the given rows, gathered chunk by chunk. The pages read
        are then unmapped from the job (they stay in the page cache): mapped pages count in
        its resident memory, and the kernel maps neighbouring pages with each one read, so
        scattered reads would otherwise make most of the slot files resident."""
        result = np.empty((len(rows), self.permutations), np.uint16)
        chunks = self.chunk_of(rows)
        by_chunk = np.argsort(chunks, kind="stable")
        bounds = np.searchsorted(chunks[by_chunk], np.arange(len(self.orders) + 1))
        for chunk in np.flatnonzero(np.diff(bounds)):
            picked = by_chunk[bounds[chunk] : bounds[chunk + 1]]
            result[picked] = self.slots[chunk][self.orders[chunk][rows[picked] - self.starts[chunk]]]
            mapped = self._maps[chunk]
            if mapped is not None and hasattr(mmap, "MADV_DONTNEED"):
                mapped.madvise(mmap.MADV_DONTNEED)
        return result

    def unmap_slots(self) -> None:
        """Drop the slot maps once clustering is done."""
        self.slots.clear()
        self._maps.clear()

    def grams(self, chunk: int, rows: np.ndarray) -> Iterator[tuple[np.ndarray, np.ndarray, np.ndarray]]:
        """The n-gram hashes of the given rows of one chunk, a row group of its signatures file at
        a time (a prepare job's batch): (positions in `rows`, hashes, starts), the row at
        positions[i] holding hashes[starts[i]:starts[i + 1]]."""
        local = self.orders[chunk][rows - self.starts[chunk]].astype(np.int64)
        parquet = self._file(chunk)
        bounds = np.cumsum([0, *(parquet.metadata.row_group(g).num_rows for g in range(parquet.num_row_groups))])
        group_of = np.searchsorted(bounds, local, side="right") - 1
        for group in np.unique(group_of):
            positions = np.flatnonzero(group_of == group)
            column = parquet.read_row_group(int(group), columns=["grams"], use_threads=False).column(0)
            taken = column.take(pa.array(local[positions] - bounds[group])).combine_chunks()
            offsets = taken.offsets.to_numpy()
            yield positions, taken.values.to_numpy()[offsets[0] : offsets[-1]], (offsets - offsets[0]).astype(np.int64)


@dataclass
class Findings:
    """What `measure` decided, by corpus row."""

    members: np.ndarray  # rows in clusters of two or more, ascending
    labels: np.ndarray  # their cluster (its least row)
    anchors: np.ndarray  # the anchor row of each member
    kept: np.ndarray  # whether each member stays
    reason: str  # the drop reason of members not kept
    measured: np.ndarray  # dev and test rows measured for contamination
    grams: np.ndarray  # their gram counts
    shared: np.ndarray  # their grams found in train
    contaminated_dropped: np.ndarray  # bool per measured row
    figures: dict = field(default_factory=dict)


def measure(signed: CorpusSignatures, fingerprints: np.ndarray, copies: tuple[np.ndarray, np.ndarray], options: dict) -> Findings:
    """Clusters, the policy's drops and the contamination shares (see the module docstring).
    `copies`: the rows repeating an earlier row's text, and that row (steps.deduplicate.
    first_occurrences); removed already under split.deduplicate, else kept with their first
    row's cluster and fate."""
    near, dirty = options["near_duplicates"], options["contamination"]
    size = len(signed)
    excluded = np.zeros(size, dtype=bool)
    excluded[copies[0]] = True
    digests = signed.digests()
    digests[excluded] = 0

    def bands() -> Iterator[np.ndarray]:
        for name in band_names(signed.bands):
            keys = signed.band(name)
            keys[excluded] = 0
            yield keys

    found, stats = nd.cluster(bands(), digests, signed.slots_of, near["threshold"])
    signed.unmap_slots()
    del digests
    labels = found.labels()
    del found
    members = np.flatnonzero(np.bincount(labels, minlength=size)[labels] > 1)
    labels = labels[members]
    ranks = nd.anchor_ranks(fingerprints[members], options["split"]["salt"])
    splits = signed.splits[members]
    if near["policy"] == "same_split":
        kept, anchor_index = nd.same_split_policy(labels, ranks, members, splits)
    else:
        kept, anchor_index = nd.drop_policy(labels, ranks, members)
        if near["policy"] == "off":
            kept = np.ones(len(members), dtype=bool)
    anchors = members[anchor_index]
    deduplicated = options["split"]["deduplicate"]
    if not deduplicated:
        members, labels, anchors, kept = _with_copies(members, labels, anchors, kept, copies, signed.splits, near["policy"])
    splits = signed.splits[members]
    removed = excluded if deduplicated else np.zeros(size, dtype=bool)
    removed[members[~kept]] = True
    measured, grams, shared = _contamination(signed, removed)
    share = audit.shares(shared, np.concatenate([[0], np.cumsum(grams)]))
    above = share >= dirty["threshold"]
    dropped = above & dirty["drop"]
    findings = Findings(members, labels, anchors, kept, POLICY_REASON.get(near["policy"], ""), measured, grams, shared, dropped)
    sizes = np.unique(labels, return_counts=True)[1]
    spans = _splits_per_cluster(labels, splits)
    findings.figures = {
        "policy": near["policy"], "threshold": near["threshold"], "clusters": len(sizes), "documents": len(members),
        "largest_cluster": int(sizes.max(initial=0)), "clusters_across_splits": int(np.count_nonzero(spans > 1)),
        "kept": int(np.count_nonzero(kept)), "dropped": {reason: int(np.count_nonzero(~kept)) for reason in [findings.reason] if reason},
        "compared_pairs": stats.compared, "confirmed_pairs": stats.confirmed, "long_runs": stats.long_runs,
    }  # fmt: skip
    return findings


def _with_copies(
    members: np.ndarray,
    labels: np.ndarray,
    anchors: np.ndarray,
    kept: np.ndarray,
    copies: tuple[np.ndarray, np.ndarray],
    splits: np.ndarray,
    policy: str,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The members with the kept exact copies of members added (split.deduplicate: false): each
    in its first row's cluster with its anchor, kept as that row is (same_split: when in the
    anchor's split)."""
    rows, owners = copies
    position = np.searchsorted(members, owners)
    inside = members[np.minimum(position, max(len(members) - 1, 0))] == owners if len(members) else np.zeros(len(owners), dtype=bool)
    rows, position = rows[inside], position[inside]
    copy_kept = splits[rows] == splits[anchors[position]] if policy == "same_split" else kept[position]
    order = np.argsort(np.concatenate([members, rows]), kind="stable")
    return (np.concatenate([members, rows])[order], np.concatenate([labels, labels[position]])[order],
            np.concatenate([anchors, anchors[position]])[order], np.concatenate([kept, copy_kept])[order])  # fmt: skip


def _splits_per_cluster(labels: np.ndarray, splits: np.ndarray) -> np.ndarray:
    """How many splits each cluster's members lie in."""
    if not len(labels):
        return np.zeros(0, np.int64)
    pairs = np.unique(labels.astype(np.int64) * 4 + splits)
    return np.unique(pairs // 4, return_counts=True)[1]


def _contamination(signed: CorpusSignatures, removed: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(rows, gram counts, shared counts) of every kept dev and test document, ascending."""
    held = np.flatnonzero((signed.splits > 0) & ~removed)
    train = np.flatnonzero((signed.splits == 0) & ~removed)
    held_chunks, train_chunks = signed.chunk_of(held), signed.chunk_of(train)
    grams, counts = _held_grams(signed, held, held_chunks)
    wanted = audit.SortedHashes(audit.distinct_sorted(grams))

    def found_in(chunks: np.ndarray) -> np.ndarray:
        hits = audit.TrainGrams()
        for chunk in chunks:
            for _, values, _ in signed.grams(chunk, train[train_chunks == chunk]):
                hits.add(wanted.common(values))
        return hits.finish()

    scanned = np.unique(train_chunks) if len(wanted.distinct) else np.zeros(0, np.int64)
    with ThreadPoolExecutor(SCAN_THREADS) as pool:  # the train chunks scanned in interleaved halves
        found = list(pool.map(found_in, [scanned[part::SCAN_THREADS] for part in range(SCAN_THREADS)]))
    starts = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    return held, counts, audit.shared_counts(grams, starts, audit.distinct_sorted(np.concatenate(found)))


def _held_grams(signed: CorpusSignatures, held: np.ndarray, held_chunks: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(hashes, counts): the n-gram hashes of the held-out rows laid end to end in their order,
    and how many each row has. Each row group's hashes are copied straight to their place, so
    the job holds them twice at most (as read and as placed)."""
    counts = np.zeros(len(held), np.int64)
    parts = []  # (row index in `held`, the row's hashes, their starts)
    for chunk in np.unique(held_chunks):
        mine = np.flatnonzero(held_chunks == chunk)
        for positions, values, starts in signed.grams(chunk, held[mine]):
            counts[mine[positions]] = np.diff(starts)
            parts.append((mine[positions], values, starts))
    places = np.concatenate([[0], np.cumsum(counts)])
    grams = np.empty(int(places[-1]), np.uint64)
    while parts:
        rows, values, starts = parts.pop()
        sizes = np.diff(starts)
        grams[np.repeat(places[rows] - starts[:-1], sizes) + np.arange(len(values))] = values
    return grams, counts


def contamination_figures(findings: Findings, sources: list[str], splits: np.ndarray, threshold: float, drop: bool) -> dict:
    """The distribution of the measured documents' shares, overall, per split and per source
    file (steps.contamination.summary), with how many were dropped."""
    share = audit.shares(findings.shared, np.concatenate([[0], np.cumsum(findings.grams)]))
    figures = audit.summary(share, sources, threshold)
    figures["by_split"] = {
        name: {key: value for key, value in audit.summary(share[splits == code], [], threshold).items() if key != "by_source"}
        for code, name in enumerate(SPLITS) if code
    }  # fmt: skip
    figures.update(drop=drop, dropped=int(np.count_nonzero(findings.contaminated_dropped)))
    return figures


def write_findings(
    layout: Layout, chunks: list[str], locate: Callable[[np.ndarray], pa.Table], signed: CorpusSignatures, findings: Findings, options: dict
) -> tuple[pa.Table, np.ndarray]:
    """Write the clusters, the contamination shares, the figures (stats/) and the documents
    dropped here (interim/); returns those (source, offset, doc_id, reason) and the chunk
    (position in `chunks`) of each."""
    dirty = options["contamination"]
    keys, split_names = pa.array(chunks, pa.string()), pa.array(SPLITS)
    members = findings.members
    located = locate(np.concatenate([members, findings.measured]))  # one pass over the chunk files
    placed, measured = located.slice(0, len(members)), located.slice(len(members))
    cluster_ids = np.unique(findings.labels, return_inverse=True)[1] + 1
    member_split = signed.splits[members]
    # By cluster, then file and offset (rows number documents in that order, steps.deduplicate),
    # a row group at a time.
    by_cluster = np.lexsort((members, cluster_ids))
    member_chunk, anchor, reasons = signed.chunk_of(members), members == findings.anchors, pa.array(["", findings.reason])
    with ParquetSink(layout.clusters, CLUSTERS_SCHEMA) as sink:
        for low in range(0, len(members), CLUSTER_ROWS):
            rows = by_cluster[low : low + CLUSTER_ROWS]
            taken = pa.array(rows)
            sink.write(pa.Table.from_arrays(
                [pa.array(cluster_ids[rows].astype(np.int64)), keys.take(pa.array(member_chunk[rows])), placed["source"].take(taken),
                 placed["offset"].take(taken), placed["doc_id"].take(taken), split_names.take(pa.array(member_split[rows])),
                 pa.array(anchor[rows]), pa.array(findings.kept[rows]), reasons.take(pa.array((~findings.kept[rows]).astype(np.int8)))],
                schema=CLUSTERS_SCHEMA,
            ))  # fmt: skip
    share = audit.shares(findings.shared, np.concatenate([[0], np.cumsum(findings.grams)]))
    held_split = signed.splits[findings.measured]
    contaminated = pa.Table.from_arrays(
        [keys.take(pa.array(signed.chunk_of(findings.measured))), measured["source"], measured["offset"], measured["doc_id"],
         split_names.take(pa.array(held_split)), pa.array(findings.grams.astype(np.int64)),
         pa.array(findings.shared.astype(np.int64)), pa.array(share), pa.array(findings.contaminated_dropped)],
        schema=CONTAMINATION_SCHEMA,
    )  # fmt: skip
    write_table(layout.contamination, contaminated)
    figures = contamination_figures(findings, measured["source"].to_pylist(), held_split, dirty["threshold"], dirty["drop"])
    by_source = figures.pop("by_source")
    above = contaminated.filter(pc.greater_equal(contaminated["share"], dirty["threshold"]))
    above = above.sort_by([("share", "descending"), ("source", "ascending"), ("offset", "ascending")]).slice(0, LISTED)
    figures["listed"] = [{key: row[key] for key in ("source", "offset", "doc_id", "split", "share", "dropped")} for row in above.to_pylist()]
    write_json(layout.hygiene, {
        "near_duplicates": findings.figures, "contamination": figures, "contamination_by_source": by_source,
        "ngram_words": dirty["ngram_words"],
    })  # fmt: skip
    # The dropped documents, taken from the rows located above (members, then measured).
    near, dirty = np.flatnonzero(~findings.kept), np.flatnonzero(findings.contaminated_dropped)
    rows = np.concatenate([members[near], findings.measured[dirty]])
    order = np.argsort(rows, kind="stable")
    code = REASONS.index(findings.reason) if findings.reason else 0
    reasons = np.concatenate([np.full(len(near), code), np.full(len(dirty), REASONS.index("contaminated"))])[order]
    dropped = pa.concat_tables([placed, measured]).take(pa.array(np.concatenate([near, len(members) + dirty])[order]))
    table = pa.Table.from_arrays([dropped["source"], dropped["offset"], dropped["doc_id"], pa.array(REASONS).take(pa.array(reasons))], schema=DROPS_SCHEMA)
    write_table(layout.hygiene_drops, table)
    return table, signed.chunk_of(rows[order])


# ---------------------------------------------------------------- the command


def _text(table: pa.Table, body: str) -> list[str]:
    """Each prepared row's text for reading: tokens joined by spaces, sentences by spaces."""
    column = table[body].to_pylist()
    if body == "tokens":
        return [" ".join(" ".join(sentence) for sentence in document) for document in column]
    return [" ".join(document) for document in column]


def texts(layout: Layout, places: pa.Table) -> list[str]:
    """The prepared (cleaned, segmented) text of each (chunk, source, offset) row."""
    found: dict[tuple[str, int], str] = {}
    for chunk in sorted(set(places["chunk"].to_pylist())):
        mine = places.filter(pc.equal(places["chunk"], chunk))
        parquet = pq.ParquetFile(layout.prepared(chunk))
        body = parquet.schema_arrow.names[-1]
        table = parquet.read(columns=["source", "offset", body], use_threads=False)
        wanted = pc.is_in(table["offset"], value_set=mine["offset"].combine_chunks())
        table = table.filter(wanted)
        for source, offset, text in zip(table["source"].to_pylist(), table["offset"].to_pylist(), _text(table, body)):
            found[(source, offset)] = text
    return [found.get((source, offset), "") for source, offset in zip(places["source"].to_pylist(), places["offset"].to_pylist())]


def _clip(text: str, chars: int) -> str:
    return text if len(text) <= chars else text[: chars - 1] + "…"


def report_lines(layout: Layout, clusters: int, documents: int, chars: int) -> Iterator[str]:
    """The lines `corpusmill hygiene` prints: clusters (largest first) with every member, then
    the contaminated documents (largest share first), each with its text."""
    figures = json.loads(Path(layout.hygiene).read_text(encoding="utf-8"))
    near, dirty = figures["near_duplicates"], figures["contamination"]
    members = pq.read_table(layout.clusters)
    yield (f"near-duplicates (policy {near['policy']}, threshold {near['threshold']}): {near['clusters']:,} clusters, "
           f"{near['documents']:,} documents, {near['kept']:,} kept")  # fmt: skip
    if members.num_rows:
        sizes = pc.value_counts(members["cluster"]).to_pylist()
        order = sorted(sizes, key=lambda entry: (-entry["counts"], entry["values"]))[:clusters]
        for entry in order:
            rows = members.filter(pc.equal(members["cluster"], entry["values"]))
            yield f"\ncluster {entry['values']} ({entry['counts']} documents)"
            for row, text in zip(rows.to_pylist(), texts(layout, rows)):
                fate = "anchor, kept" if row["anchor"] else ("kept" if row["kept"] else f"dropped: {row['reason']}")
                yield f"  {row['split']:<5} {fate:<36} {row['source']} byte {row['offset']}"
                yield f"        {_clip(text, chars)}"
        if len(sizes) > clusters:
            yield f"\n… {len(sizes) - clusters:,} more clusters (--clusters N shows more; all in {layout.clusters})"
    measured = pq.read_table(layout.contamination)
    above = measured.filter(pc.greater_equal(measured["share"], dirty["threshold"]))
    yield (f"\ncontamination ({figures['ngram_words']}-grams shared with train, threshold {dirty['threshold']}): "
           f"{above.num_rows:,} of {measured.num_rows:,} dev/test documents at or above it"
           + (f", {dirty['dropped']:,} dropped" if dirty["drop"] else ""))  # fmt: skip
    above = above.sort_by([("share", "descending"), ("source", "ascending"), ("offset", "ascending")])
    shown = above.slice(0, documents)
    for row, text in zip(shown.to_pylist(), texts(layout, shown)):
        yield f"  {row['split']:<5} share {row['share']:.3f} ({row['shared']}/{row['grams']}) {row['source']} byte {row['offset']}"
        yield f"        {_clip(text, chars)}"
    if above.num_rows > documents:
        yield f"… {above.num_rows - documents:,} more (--documents N shows more; all in {layout.contamination})"


def command(argv: list[str]) -> None:
    parser = argparse.ArgumentParser(
        prog="corpusmill hygiene", description="List a build's near-duplicate clusters and contaminated dev/test documents, with their text."
    )
    parser.add_argument("build", help="the build folder (build_dir of the configuration)")
    parser.add_argument("--clusters", type=int, default=10, help="clusters shown, largest first (default 10)")
    parser.add_argument("--documents", type=int, default=10, help="contaminated documents shown, largest share first (default 10)")
    parser.add_argument("--chars", type=int, default=200, help="characters of text shown per document (default 200)")
    args = parser.parse_args(argv)
    layout = Layout(args.build)
    missing = [path for path in (layout.hygiene, layout.clusters, layout.contamination) if not Path(path).exists()]
    if missing:
        raise SystemExit(f"corpusmill: {missing[0]} is missing: is {args.build} a finished build? Run the workflow first")
    for line in report_lines(layout, max(args.clusters, 0), max(args.documents, 0), max(args.chars, 8)):
        print(line)
    sys.stdout.flush()
