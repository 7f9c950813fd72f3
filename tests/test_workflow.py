"""End to end: the workflow on the demo corpus, checked against the manifest and outside readers."""

from __future__ import annotations

import copy
import hashlib
import json
import re
import shutil
from collections import Counter
from pathlib import Path

import duckdb
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import pytest
import yaml

from conftest import DEMO, REPO, run_workflow, scenario
from corpusmill import settings
from corpusmill.formats import read_vocabulary
from corpusmill.plan import Plan


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def manifest(build: Path) -> dict:
    return json.loads((build / "manifest.json").read_text())


def test_the_files_at_the_top_of_the_build_agree_with_the_manifest(demo_build: Path):
    """README's layout: vocabulary.tsv, stats/coverage.json and stats/baseline.json are the
    files the manifest hashed (hashlib.sha256), token_counts.parquet's per-split sums are the manifest's token
    figures, and growth.json ends at the train token count."""
    recorded = manifest(demo_build)
    assert sha256(demo_build / "vocabulary.tsv") == recorded["vocabulary"]["sha256"]
    listed = [demo_build / "stats" / "coverage.json", demo_build / "stats" / "baseline.json", *sorted((demo_build / "provenance").rglob("*.parquet"))]
    assert recorded["files"] == {path.relative_to(demo_build).as_posix(): sha256(path) for path in listed}
    counts = pq.read_table(demo_build / "stats" / "token_counts.parquet")
    assert counts.column_names == ["token", "train", "dev", "test"]
    for split in ("train", "dev", "test"):
        assert pc.sum(counts[split]).as_py() == recorded["splits"][split]["tokens"] > 0
    growth = json.loads((demo_build / "stats" / "growth.json").read_text())
    assert growth["read"][-1] == recorded["splits"]["train"]["tokens"]
    assert (demo_build / "report" / "index.html").read_text(encoding="utf-8").startswith("<!DOCTYPE html>")


def test_ngram_rows_are_the_windows_of_the_stream_shards(demo_chunks_build: Path):
    """The n-gram shards against windows cut in plain Python from the stream shards
    (tests/test_readiness.py's heldout_windows), both read in manifest order, a file per chunk:
    dev and test row for row, train as the same multiset (its windows are shuffled). A context
    holding its own target breaks this."""
    from tests.test_readiness import heldout_windows

    for split, figures in manifest(demo_chunks_build)["splits"].items():
        context, target = heldout_windows(demo_chunks_build, split, 4)
        expected = list(zip(map(tuple, context.tolist()), target.tolist()))
        rows = []
        for entry in figures["shards"]:
            if entry["kind"] == "ngram":
                table = pq.read_table(demo_chunks_build / entry["file"])
                rows += list(zip(map(tuple, table["context"].to_pylist()), table["target"].to_pylist()))
        if split == "train":
            assert Counter(rows) == Counter(expected)
        else:
            assert rows == expected, split


def test_every_shard_matches_its_manifest_entry(demo_build: Path):
    shards = [s for figures in manifest(demo_build)["splits"].values() for s in figures["shards"]]
    assert {s["file"] for s in shards} == {p.relative_to(demo_build).as_posix() for p in demo_build.glob("shards/*/*.parquet")}
    for shard in shards:
        path = demo_build / shard["file"]
        assert sha256(path) == shard["sha256"] and path.stat().st_size == shard["bytes"]
        assert pq.ParquetFile(path).metadata.num_rows == shard["rows"]


def test_accounting_balances_and_counts_the_demo_messes(demo_build: Path):
    accounting = manifest(demo_build)["accounting"]
    assert accounting["balanced"]
    assert accounting["read"] + accounting["pieces_added"] == accounting["kept"] + sum(accounting["dropped"].values())
    assert accounting["dropped"]["duplicate"] >= 5  # the demo repeats paragraphs on purpose
    assert accounting["dropped"].get("few_letters", 0) >= 1  # and holds a tally table of numbers


def test_duckdb_reads_the_same_rows_and_ids_as_pyarrow(demo_build: Path):
    """DuckDB as an independent Parquet reader."""
    for path in sorted(demo_build.glob("shards/*/*.parquet")):
        table = pq.read_table(path)
        rows = duckdb.sql(f"SELECT * FROM read_parquet('{path}')").fetchall()
        assert len(rows) == table.num_rows
        for column, values in zip(table.column_names, zip(*rows) if rows else [[]] * table.num_columns):
            assert [list(v) if isinstance(v, (list, tuple)) else v for v in values] == table[column].to_pylist(), (path, column)


def test_vocabulary_counts_equal_a_counter_recount_of_train(demo_build: Path):
    """collections.Counter recount over the train documents' tokens, duplicates removed."""
    duplicates = pq.read_table(demo_build / "interim" / "duplicates.parquet")
    removed = set(zip(duplicates["source"].to_pylist(), duplicates["offset"].to_pylist()))
    recount: Counter[str] = Counter()
    for path in (demo_build / "interim" / "prepared").glob("*.parquet"):
        table = pq.read_table(path)
        for source, offset, split, sentences in zip(*(table[c].to_pylist() for c in ("source", "offset", "split", "tokens"))):
            if split == "train" and (source, offset) not in removed:
                recount.update(token for sentence in sentences for token in sentence)
    vocabulary = read_vocabulary(demo_build / "vocabulary.tsv")
    for token, count, kind in zip(vocabulary.tokens, vocabulary.counts, vocabulary.kinds):
        if kind == "word":
            assert recount[token] == count, token
    words = {t for t, k in zip(vocabulary.tokens, vocabulary.kinds) if k == "word"}
    assert words == {t for t, c in recount.items() if c >= 2}  # the default cutoff: min_count 2
    counts = pq.read_table(demo_build / "stats" / "token_counts.parquet")
    assert dict(zip(counts["token"].to_pylist(), counts["train"].to_pylist())) == {**dict.fromkeys(counts["token"].to_pylist(), 0), **recount}


def test_boundary_symbols_count_their_train_occurrences_in_the_id_streams(demo_build: Path):
    """A recount over the prepared train documents, duplicates removed: <s> once per document,
    </s> once per sentence (so a unigram model read off vocabulary.tsv sees them); the stream
    shards hold exactly that many of each."""
    duplicates = pq.read_table(demo_build / "interim" / "duplicates.parquet")
    removed = set(zip(duplicates["source"].to_pylist(), duplicates["offset"].to_pylist()))
    documents = sentences = 0
    for path in (demo_build / "interim" / "prepared").glob("*.parquet"):
        table = pq.read_table(path)
        for source, offset, split, tokens in zip(*(table[c].to_pylist() for c in ("source", "offset", "split", "tokens"))):
            if split == "train" and (source, offset) not in removed:
                documents, sentences = documents + 1, sentences + len(tokens)
    vocabulary = read_vocabulary(demo_build / "vocabulary.tsv")
    assert vocabulary.counts[vocabulary.reserved["<s>"]] == documents > 0
    assert vocabulary.counts[vocabulary.reserved["</s>"]] == sentences > documents
    streams = pc.list_flatten(pa.concat_tables([pq.read_table(p) for p in demo_build.glob("shards/train/stream-*.parquet")])["ids"])
    assert pc.sum(pc.equal(streams, 2)).as_py() == documents and pc.sum(pc.equal(streams, 3)).as_py() == sentences


def ids_sha256(vocabulary: Path) -> str:
    """hashlib.sha256 over vocabulary.tsv's lines without their counts (`id<TAB>token<TAB>kind`):
    what the ids mean, whatever this build counted."""
    hasher = hashlib.sha256()
    for line in vocabulary.read_text(encoding="utf-8").splitlines()[1:]:
        number, token, _, kind = line.split("\t")
        hasher.update(f"{number}\t{token}\t{kind}\n".encode())
    return hasher.hexdigest()


def test_windows_have_three_context_ids_and_ids_below_vocabulary_size(demo_chunks_build: Path):
    """n = 4 gives exactly 3 context ids per window (common practice). Each shard's metadata
    names its split, kind and chunk (the file name's) and the ids it was written with: the
    manifest's ids_sha256, recomputed here from vocabulary.tsv."""
    recorded = manifest(demo_chunks_build)
    size = recorded["vocabulary"]["size"]
    assert recorded["vocabulary"]["ids_sha256"] == ids_sha256(demo_chunks_build / "vocabulary.tsv")
    for split, figures in recorded["splits"].items():
        for entry in figures["shards"]:
            metadata = json.loads(pq.read_schema(demo_chunks_build / entry["file"]).metadata[b"corpusmill"])
            assert entry["file"] == f"shards/{split}/{entry['kind']}-{entry['chunk']}.parquet"
            assert (metadata["split"], metadata["kind"], metadata["chunk"]) == (split, entry["kind"], entry["chunk"])
            assert metadata["ids_sha256"] == recorded["vocabulary"]["ids_sha256"]
            if entry["kind"] == "ngram":
                table = pq.read_table(demo_chunks_build / entry["file"])
                assert table.schema.field("context").type.list_size == 3 and metadata["n"] == 4
                assert pc.max(pc.list_flatten(table["context"])).as_py() < size and pc.max(table["target"]).as_py() < size


def test_rows_per_split_add_up_across_kinds(demo_build: Path):
    splits = manifest(demo_build)["splits"]
    for split, figures in splits.items():
        assert figures["rows"]["stream"] == figures["documents"]
        # one window per token plus one </s> per sentence
        assert figures["rows"]["ngram"] == figures["tokens"] + figures["sentences"], split


def test_dev_and_test_stream_files_read_in_manifest_order_give_corpus_order(demo_chunks_build: Path):
    """The prepared documents of the split sorted by (input file as the manifest lists them,
    byte offset), duplicates left out, as reference: the stream shards, one per chunk, read in
    manifest order hold exactly those documents in that order."""
    build = demo_chunks_build
    recorded = manifest(build)
    inputs = [entry["path"] for entry in recorded["inputs"]]
    removed = set(zip(*(pq.read_table(build / "interim" / "duplicates.parquet")[c].to_pylist() for c in ("source", "offset"))))
    rows = [row for path in (build / "interim" / "prepared").glob("*.parquet")
            for row in pq.read_table(path, columns=["doc_id", "source", "offset", "split"]).to_pylist()]  # fmt: skip
    rows.sort(key=lambda row: (inputs.index(row["source"]), row["offset"]))
    for split in ("dev", "test"):
        expected = [r["doc_id"] for r in rows if r["split"] == split and (r["source"], r["offset"]) not in removed]
        files = [entry["file"] for entry in recorded["splits"][split]["shards"] if entry["kind"] == "stream"]
        assert len(files) == len(json.loads((build / "interim" / "plan" / "chunks.json").read_text())) > 2
        read = [doc for file in files for doc in pq.read_table(build / file)["doc_id"].to_pylist()]
        assert read == expected and len(read) > 5, split


@pytest.mark.parametrize("pack_mb", [0, 0.1])
def test_changing_one_input_reruns_only_its_chunk_and_the_aggregates(tmp_path: Path, pack_mb: float):
    """Snakemake's own dry-run job list after editing one file: with one job per file, and with
    the demo's files packed into several jobs (pack_mb 0.1: the files are 11-61 KB), where the
    packs to rerun are those holding the edited file or formed anew around it."""
    corpus = tmp_path / "corpus"
    shutil.copytree(DEMO, corpus)
    overrides = {"corpus": {"root": str(corpus), "pack_mb": pack_mb}}
    run_workflow(tmp_path / "run", overrides)
    assert "Nothing to be done" in run_workflow(tmp_path / "run", overrides, "-n").stdout
    before = planned_chunks(overrides)
    with open(corpus / "journals" / "recipes.txt", "a", encoding="utf-8") as handle:
        handle.write("\nA new recipe for ember bread needs four cups of grey flour.\n")
    after = planned_chunks(overrides)
    plan = run_workflow(tmp_path / "run", overrides, "-n", "--quiet", "rules").stdout
    jobs = {line.split()[0]: int(line.split()[1]) for line in plan.splitlines() if len(line.split()) == 2 and line.split()[1].isdigit()}
    touched = [c for c in after if c not in before or "journals/recipes.txt" in c.sources]
    assert len(after) > 2 and 1 <= len(touched) <= 2
    assert jobs["prepare"] == len(touched)  # the other chunk tables and counts stay as they are
    assert "vocabulary" in jobs and "manifest" in jobs


def planned_chunks(overrides: dict) -> list:
    config = settings.resolve(copy.deepcopy(overrides))
    return Plan.from_config(config).chunks


def test_two_builds_are_byte_identical(tmp_path: Path, demo_build: Path):
    again = tmp_path / "again"
    run_workflow(again, scenario("demo"), cores=1)
    for path in [*demo_build.glob("shards/*/*.parquet"), demo_build / "vocabulary.tsv", demo_build / "manifest.json"]:
        relative = path.relative_to(demo_build)
        assert sha256(again / "build" / relative) == sha256(path), relative


def test_a_config_error_stops_before_any_job(tmp_path: Path):
    result = run_workflow(tmp_path, scenario("demo", {"vocabulary": {"unknown": "shapes"}}), check=False)
    assert result.returncode != 0
    assert 'vocabulary.unknown = "shapes": allowed: one of "single", "shape"' in result.stderr
    assert not (tmp_path / "build").exists()


@pytest.mark.parametrize("kinds", [{"ngram": {"enabled": False}}, {"blocks": {"enabled": False}, "streams": {"enabled": False}}])
def test_disabled_kinds_write_no_files(tmp_path: Path, kinds: dict):
    baseline = {"enabled": "streams" not in kinds}  # the baseline counts the document streams
    run_workflow(tmp_path, scenario("journals", {"windows": kinds, "baseline": baseline}))
    written = {p.name.split("-")[0] for p in (tmp_path / "build" / "shards").rglob("*.parquet")}
    expected = {"ngram", "block", "stream"} - {{"ngram": "ngram", "blocks": "block", "streams": "stream"}[k] for k in kinds}
    assert written == expected
    assert {p.name.split("-")[0] for p in (tmp_path / "build" / "provenance").rglob("*.parquet")} == expected | {"documents"}


def test_blocks_that_hold_little_of_train_are_flagged_in_the_summary_and_the_report(tmp_path: Path):
    """L = 128 with span document and remainder drop on short journal paragraphs: most documents
    are shorter than 129 ids and give no block. The share is recounted from the stream shards
    (the same ids, cut independently): with stride 128 a document of d >= 129 ids gives blocks
    at 0, 128, … that hold its first ((d - 129) // 128) * 128 + 129 ids."""
    run = run_workflow(tmp_path, scenario("journals", {"windows": {"blocks": {"length": 128, "stride": 128}}}))
    build = tmp_path / "build"
    train = manifest(build)["splits"]["train"]
    lengths = [len(ids) for p in build.glob("shards/train/stream-*.parquet") for ids in pq.read_table(p)["ids"].to_pylist()]
    held = sum(min(d, ((d - 129) // 128) * 128 + 129) for d in lengths if d >= 129)
    assert (train["block_ids"], train["stream_ids"]) == (held, sum(lengths))
    assert held / sum(lengths) < 0.5
    assert "of train ids; warning:" in run.stderr and "windows.blocks.length" in run.stderr
    page = (build / "report" / "index.html").read_text(encoding="utf-8")
    assert f"Blocks hold {held / sum(lengths):.1%} of the train split" in page and "<strong>Warning</strong>" in page


def test_every_run_reads_the_workflow_profile_that_picks_the_greedy_scheduler(tmp_path: Path):
    """Snakemake says which workflow profile it read (a dry run); the profile names the greedy
    scheduler, turns input checksums off, has a scheduling round look at 16 ready jobs and
    counts the rate limit over 10 seconds."""
    result = run_workflow(tmp_path / "run", scenario("demo"), "--dry-run")
    assert re.search(r"workflow specific profile \S*profiles/default ", result.stdout + result.stderr)
    profile = yaml.safe_load((REPO / "profiles" / "default" / "config.yaml").read_text(encoding="utf-8"))
    assert profile == {"scheduler": "greedy", "max-checksum-file-size": 0, "scheduler-subsample": 16, "max-jobs-per-timespan": "1000/10s"}


def test_a_scheduling_round_looks_at_sixteen_of_the_ready_jobs(tmp_path: Path):
    """Snakemake's own debug log (--verbose) of its rounds: with 20 prepare jobs ready at once (20
    small files, one chunk each), a round looks at 16 of them."""
    root = tmp_path / "raw"
    root.mkdir()
    for number in range(20):
        (root / f"note-{number:02d}.txt").write_text(f"Note {number} says the lamp is lit.\n", encoding="utf-8")
    result = run_workflow(tmp_path / "run", {"corpus": {"root": str(root), "pack_mb": 0}}, "--until", "prepare", "--verbose", cores=1)
    assert "Ready subsampled jobs: 16 (out of 20)" in result.stdout + result.stderr


def job_plans(text: str) -> dict[str, str]:
    """Each rule's job as Snakemake's dry run shows it (its lines up to the next job), by rule."""
    found = re.finditer(r"^(?:local)?(?:rule|checkpoint) (\w+):\n((?:    .*\n)+)", text, re.M)
    return {match[1]: match[2] for match in found}


def test_the_baseline_reserves_one_core_on_this_machine_and_starts_first(tmp_path: Path):
    """A dry run lists each job's priority and its threads when more than one: the baseline, the
    longest job after the shards, is preferred and reserves one core, so that it starts beside
    a one-core job instead of waiting for two free cores; the deduplicate job reserves its two."""
    result = run_workflow(tmp_path / "run", scenario("demo"), "--dry-run")
    jobs = job_plans(result.stdout + result.stderr)
    assert "    priority: 1\n" in jobs["baseline"]
    assert "threads:" not in jobs["baseline"]
    assert "    threads: 2\n" in jobs["deduplicate"]


def test_a_build_records_no_input_checksums_in_snakemakes_metadata(demo_build: Path):
    """Snakemake's own record of each finished job (.snakemake/metadata, JSON) holds no input
    checksums: the profile spares the files' hashing at every job's end."""
    records = [json.loads(path.read_text(encoding="utf-8")) for path in (demo_build.parent / ".snakemake" / "metadata").iterdir()]
    assert len(records) > 20
    assert not any(record["input_checksums"] for record in records)
