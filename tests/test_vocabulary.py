"""Vocabulary: cutoffs, deterministic ids, reserved symbols, unknown classes, the counts of
vocabulary.tsv, frozen vocabularies."""

from __future__ import annotations

import json
import os
import re
from collections import Counter
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from conftest import run_workflow, scenario
from corpusmill.encoder import WordEncoder
from corpusmill.formats import RESERVED, UNK, VOCABULARY_HEADER, FormatError, read_vocabulary
from corpusmill.vocabulary import (
    COUNTS_SCHEMA,
    MERGE_FILES,
    Cutoff,
    VocabularyError,
    build_counts,
    build_vocabulary,
    choose_size,
    merge_counts,
    read_frozen,
    sort_by_frequency,
    unknown_class,
)


def counts_table(train: dict[str, int], dev: dict[str, int] | None = None) -> pa.Table:
    tokens = sorted(set(train) | set(dev or {}))
    dev = dev or {}
    return sort_by_frequency(
        pa.table(
            {
                "token": tokens,
                "train": [train.get(t, 0) for t in tokens],
                "dev": [dev.get(t, 0) for t in tokens],
                "test": [0] * len(tokens),
            }
        )
    )


TRAIN = {"the": 10, "lamp": 4, "ferry": 4, "Oréla": 2, "1,200": 1, "ice-cold": 1, "ZZ": 1, "!!": 1, "rare": 1}


def test_reserved_symbols_have_fixed_low_ids():
    vocabulary = build_vocabulary(counts_table(TRAIN), Cutoff(min_count=2), "single")
    assert vocabulary.tokens[:4] == ["<pad>", "<unk>", "<s>", "</s>"] == list(RESERVED)
    assert vocabulary.reserved == {"<pad>": 0, "<unk>": 1, "<s>": 2, "</s>": 3}


def test_words_by_descending_count_with_ties_in_code_point_order():
    vocabulary = build_vocabulary(counts_table(TRAIN), Cutoff(min_count=2), "single")
    assert vocabulary.tokens[4:] == ["the", "ferry", "lamp", "Oréla"]
    assert vocabulary.counts[1] == 5  # <unk> carries the train tokens it stands for


def test_cutoffs_by_count_size_and_coverage_combine():
    train = np.array([50, 20, 10, 10, 5, 3, 1, 1])
    assert choose_size(train, Cutoff(min_count=5)) == 5
    assert choose_size(train, Cutoff(max_size=3)) == 3
    assert choose_size(train, Cutoff(coverage=0.70)) == 2  # 70/100 covered by the top two
    assert choose_size(train, Cutoff(coverage=0.71)) == 3
    assert choose_size(train, Cutoff(min_count=2, max_size=4, coverage=0.99)) == 4
    assert choose_size(train, Cutoff()) == 8


def test_words_never_seen_in_train_are_never_kept():
    """Only train counts choose the vocabulary: words seen only in dev or test (train count 0)
    stay out under every limit, also with none set."""
    train = np.array([9, 4, 1, 0, 0])
    assert choose_size(train, Cutoff()) == 3
    assert choose_size(train, Cutoff(max_size=5)) == 3
    assert choose_size(train, Cutoff(min_count=0)) == 3
    assert choose_size(np.zeros(4, np.int64), Cutoff(coverage=0.5)) == 0
    vocabulary = build_vocabulary(counts_table({"seen": 3}, dev={"held": 5}), Cutoff(), "single")
    assert vocabulary.tokens[4:] == ["seen"]


def test_a_coverage_met_exactly_keeps_the_prefix_that_meets_it_despite_float_rounding():
    """0.07 × 100,000 is 7000.000000000001 in floating point; two words of 3,500 cover exactly
    7% of 100,000 tokens, so two words are kept, not three (hand count)."""
    train = np.array([3500] * 28 + [2000])
    assert train.sum() == 100_000 and 0.07 * 100_000 > 7000
    assert choose_size(train, Cutoff(coverage=0.07)) == 2
    assert choose_size(train, Cutoff(coverage=0.0701)) == 3
    assert choose_size(train, Cutoff(coverage=1.0)) == 29


def test_rows_carry_their_kind_and_symbols_count_what_they_stand_for_in_the_train_streams():
    """vocabulary.tsv's kind column: reserved, unknown, word. Counts are those of the train id
    streams: <pad> never occurs (0), <s> once per document and </s> once per sentence (the
    train boundary counts given), <unk> and the classes the train tokens they stand for."""
    vocabulary = build_vocabulary(counts_table(TRAIN), Cutoff(min_count=2), "shape", {"<s>": 3, "</s>": 11})
    assert vocabulary.kinds == ["reserved"] * 4 + ["unknown"] * 5 + ["word"] * 4
    assert [vocabulary.counts[i] for i in (0, 2, 3)] == [0, 3, 11]
    assert vocabulary.counts[1] + sum(vocabulary.counts[4:9]) == sum(c for c in TRAIN.values() if c < 2)
    assert build_vocabulary(counts_table(TRAIN), Cutoff(min_count=2), "shape").counts[2:4] == [0, 0]


def test_shape_classes_for_rare_words():
    assert [unknown_class(t) for t in ["1,200", "ice-cold", "NASA", "Tüvvik", "!!", "rare"]] == [
        "<unk-digits>",
        "<unk-hyphenated>",
        "<unk-upper>",
        "<unk-title>",
        "<unk-symbol>",
        UNK,
    ]


def test_the_word_encoder_maps_known_words_and_classes_unknown_ones():
    vocabulary = build_vocabulary(counts_table(TRAIN), Cutoff(min_count=2), "shape")
    ids = WordEncoder(vocabulary, "shape").ids(pa.array(["the", "Oréla", "1,200", "Zed", "unseen", "!!"]))
    names = [vocabulary.tokens[i] for i in ids]
    assert names == ["the", "Oréla", "<unk-digits>", "<unk-title>", "<unk>", "<unk-symbol>"]
    single = build_vocabulary(counts_table(TRAIN), Cutoff(min_count=2), "single")
    assert WordEncoder(single, "single").ids(pa.array(["Zed", "the"])).tolist() == [1, 4]


def test_the_word_encoder_follows_the_configured_unknown_mode_whatever_the_vocabulary_holds():
    """A vocabulary made under the other mode (a frozen file reused): with unknown = single
    every OOV word maps to <unk> even when shape classes exist; with unknown = shape, classes
    the vocabulary lacks fall back to <unk>."""
    shaped = build_vocabulary(counts_table(TRAIN), Cutoff(min_count=2), "shape")
    words = pa.array(["1,200", "Zed", "the", "unseen", "!!"])
    assert [shaped.tokens[i] for i in WordEncoder(shaped, "single").ids(words)] == ["<unk>", "<unk>", "the", "<unk>", "<unk>"]
    single = build_vocabulary(counts_table(TRAIN), Cutoff(min_count=2), "single")
    assert [single.tokens[i] for i in WordEncoder(single, "shape").ids(words)] == ["<unk>", "<unk>", "the", "<unk>", "<unk>"]
    assert WordEncoder(shaped, "shape").ids(pa.array(["the", "the"])).tolist() == [9, 9]


def test_unknown_class_counts_match_a_counter_recount():
    """collections.Counter recount of the train tokens that fall outside the vocabulary."""
    vocabulary = build_vocabulary(counts_table(TRAIN), Cutoff(min_count=2), "shape")
    recount = Counter()
    for token, count in TRAIN.items():
        if count < 2:
            recount[unknown_class(token)] += count
    for token, count in zip(vocabulary.tokens, vocabulary.counts):
        if token.startswith("<unk"):
            assert count == recount[token], token


def test_file_round_trips_and_rejects_a_foreign_file(tmp_path):
    vocabulary = build_vocabulary(counts_table(TRAIN), Cutoff(min_count=1), "shape")
    path = tmp_path / "vocabulary.tsv"
    path.write_text(vocabulary.to_tsv(), encoding="utf-8")
    again = read_vocabulary(path)
    assert again == vocabulary and (again.sha256, again.ids_digest) == (vocabulary.sha256, vocabulary.ids_digest)
    assert path.read_text(encoding="utf-8").splitlines()[0] == VOCABULARY_HEADER
    bad_third_lines = {"bad": "2\tx\t1\tword", "wide": "1\tx\t1\tword\textra", "count": "1\tx\tmany\tword"}
    for name, line in bad_third_lines.items():
        (tmp_path / f"{name}.tsv").write_text(VOCABULARY_HEADER + f"\n0\t<pad>\t0\treserved\n{line}\n")
        with pytest.raises(FormatError, match=rf"{name}\.tsv: line 3"):
            read_vocabulary(tmp_path / f"{name}.tsv")
    (tmp_path / "huge.tsv").write_text(VOCABULARY_HEADER + "\n0\t<pad>\t99999999999999999999999\treserved\n")
    with pytest.raises(FormatError, match=r"huge\.tsv: cannot be read as a vocabulary file \(.*Row #2.*99999999999999999999999"):
        read_vocabulary(tmp_path / "huge.tsv")


def test_file_keeps_tokens_that_look_like_csv_syntax(tmp_path):
    """Quotes, commas, 'null' and 'NA' are ordinary word tokens, read back unchanged."""
    odd = ['"', '""', "'quoted'", "a,b", "null", "NA", "nan", "#", "\\"]
    vocabulary = build_vocabulary(counts_table(dict.fromkeys(odd, 5)), Cutoff(min_count=1), "shape")
    path = tmp_path / "vocabulary.tsv"
    path.write_text(vocabulary.to_tsv(), encoding="utf-8")
    assert read_vocabulary(path).tokens == vocabulary.tokens


# --- frozen vocabularies -------------------------------------------------------------------------

JOURNALS = scenario("journals")


def frozen_variant(tmp_path: Path, vocabulary: Path, edit) -> Path:
    """A copy of a vocabulary.tsv with its rows (after the header) passed through `edit`."""
    lines = vocabulary.read_text(encoding="utf-8").splitlines()
    rows = [line.split("\t") for line in lines[1:]]
    rows = edit(rows)
    path = tmp_path / f"variant-{len(list(tmp_path.glob('variant-*')))}.tsv"
    path.write_text("\n".join([lines[0], *("\t".join(map(str, row)) for row in rows)]) + "\n", encoding="utf-8")
    return path


def renumbered(rows: list[list]) -> list[list]:
    return [[i, *row[1:]] for i, row in enumerate(rows)]


@pytest.mark.parametrize(
    ("edit", "message"),
    [
        (lambda rows: renumbered(rows[1:]), "line 2: expected '<pad>' of kind 'reserved' (id 0), found '<unk>'"),
        (lambda rows: renumbered([rows[4], *rows[:4], *rows[5:]]), "line 2: expected '<pad>'"),
        (lambda rows: renumbered([*rows[:4], rows[0], *rows[4:]]), "line 6: expected '<unk-digits>' of kind 'unknown'"),
        (lambda rows: renumbered([*rows, rows[-1]]), "is listed again (first on line"),
        (lambda rows: renumbered([*rows, ["", "", "3", "word"]]), "is not a word with a count >= 0"),
        (lambda rows: renumbered([*rows[:9], ["", "again", "-1", "word"], *rows[9:]]), "variant-0.tsv: line 11: a negative count"),
        (lambda rows: renumbered([*rows, ["", "x", "1", "unknown"]]), "kind 'unknown' after the reserved and unknown ids"),
        (lambda rows: renumbered([*rows[:4], *rows[9:]]), "line 6: expected '<unk-digits>'"),
    ],
    ids=["no-pad", "pad-at-4", "reserved-twice", "duplicate-word", "empty-word", "negative-count", "class-among-words", "no-classes"],
)
def test_a_frozen_vocabulary_is_checked_fully_naming_the_line(tmp_path: Path, demo_build: Path, edit, message: str):
    """The frozen file must keep the layout every shard relies on (README, "Vocabulary")."""
    variant = frozen_variant(tmp_path, demo_build / "vocabulary.tsv", edit)
    with pytest.raises(VocabularyError, match=re.escape(message)):
        read_frozen(variant, "shape")


def test_a_frozen_vocabulary_without_classes_needs_unknown_single(tmp_path: Path, demo_build: Path):
    variant = frozen_variant(tmp_path, demo_build / "vocabulary.tsv", lambda rows: renumbered([*rows[:4], *rows[9:]]))
    read_frozen(variant, "single")
    with pytest.raises(VocabularyError, match="with vocabulary.unknown = 'shape' ids 0-8 are"):
        read_frozen(variant, "shape")


def test_a_missing_frozen_vocabulary_stops_before_any_job_in_a_fresh_and_a_built_folder(tmp_path: Path):
    """The run stops while the workflow is read (no job, no new file), naming the field and the fix;
    before, a built folder silently kept its old vocabulary and a fresh one gave an engine error."""
    run_workflow(tmp_path / "built", JOURNALS)
    manifest = (tmp_path / "built" / "build" / "manifest.json").read_bytes()
    for folder in ("built", "fresh"):
        run = run_workflow(tmp_path / folder, {**JOURNALS, "vocabulary": {"frozen": "/nonexistent/vocabulary.tsv"}}, check=False)
        assert run.returncode != 0
        assert "vocabulary.frozen = '/nonexistent/vocabulary.tsv': no such file or directory" in run.stderr
        assert "set vocabulary.frozen: null" in run.stderr and "Job stats" not in run.stdout + run.stderr
    assert (tmp_path / "built" / "build" / "manifest.json").read_bytes() == manifest
    assert not (tmp_path / "fresh" / "build").exists()
    run = run_workflow(tmp_path / "fresh", {**JOURNALS, "units": "subword", "subword": {"frozen": "nowhere.model"}}, check=False)
    assert run.returncode != 0 and "subword.frozen = 'nowhere.model': no such file or directory" in run.stderr


def test_a_frozen_vocabulary_with_a_row_that_does_not_read_stops_before_any_shard_job(tmp_path: Path, demo_build: Path):
    """The job that writes a frozen vocabulary's ids reads it in full: a row that does not read
    stops the run there, naming the file and line, and no shard file is written."""
    frozen = tmp_path / "frozen.tsv"
    lines = (demo_build / "vocabulary.tsv").read_text(encoding="utf-8").split("\n")
    frozen.write_text("\n".join([*lines[:12], "11\tword\tmany\tword", *lines[13:]]), encoding="utf-8")
    run = run_workflow(tmp_path / "run", {**JOURNALS, "vocabulary": {"frozen": str(frozen)}}, check=False)
    assert run.returncode != 0
    assert f"corpusmill: vocabulary.frozen: {frozen}: line 13: expected '11<TAB>token<TAB>count<TAB>kind'" in run.stderr
    assert "vocabulary_frozen" in run.stderr and not list((tmp_path / "run" / "build").glob("shards/*/*.parquet"))


@pytest.mark.parametrize("path", ["/dev/zero", "FIFO"])
def test_a_frozen_path_that_is_not_a_regular_file_is_refused_at_once(tmp_path: Path, path: str):
    """/dev/zero never ends and a FIFO blocks its reader: only regular files are read."""
    if path == "FIFO":
        os.mkfifo(tmp_path / "fifo")
        path = str(tmp_path / "fifo")
    run = run_workflow(tmp_path / "run", {**JOURNALS, "vocabulary": {"frozen": path}}, check=False)
    assert run.returncode != 0 and f"vocabulary.frozen = {path!r}: not a regular file" in run.stderr


def train_stream_counts(build: Path, size: int) -> np.ndarray:
    """Occurrences of each id in the train stream shards (numpy bincount, an independent count)."""
    ids = [np.concatenate(pq.read_table(p)["ids"].to_numpy(zero_copy_only=False)) for p in sorted(build.glob("shards/train/stream-*.parquet"))]
    return np.bincount(np.concatenate(ids).astype(np.int64), minlength=size)


def test_vocabulary_counts_are_each_ids_occurrences_in_the_train_streams(demo_build: Path):
    """numpy bincount over the train stream shards (<s> once per document, </s> once per
    sentence, as the streams hold them); the ids file the shards were written from names the
    same ids, and in a fresh build already the same counts (predicted from the chunks' counts)."""
    vocabulary = read_vocabulary(demo_build / "vocabulary.tsv")
    assert vocabulary.counts == train_stream_counts(demo_build, vocabulary.size).tolist()
    manifest = json.loads((demo_build / "manifest.json").read_text())
    assert vocabulary.counts[2:4] == [manifest["splits"]["train"]["documents"], manifest["splits"]["train"]["sentences"]]
    assert read_vocabulary(demo_build / "interim" / "vocabulary" / "ids.tsv") == vocabulary


def dry_run_rules(result) -> set[str]:
    """Rule names of the jobs a dry run lists (its job table: rule name, then a count)."""
    names = set()
    for line in result.stdout.splitlines():
        words = line.split()
        if len(words) == 2 and words[1].isdigit() and words[0] not in ("total", "job"):
            names.add(words[0])
    return names


def test_a_frozen_vocabulary_larger_than_the_corpus_builds_with_consistent_figures(tmp_path: Path):
    """A frozen vocabulary may hold words the corpus never uses: 5,000 extra words on the two
    journal files (it crashed the coverage step). The chosen size row, the split figures and a
    recount of the shards' ids (numpy bincount, an independent count) agree; the summary and
    coverage.json say the vocabulary is frozen. vocabulary.tsv keeps the frozen file's ids
    (the same ids_sha256) with this build's counts, whatever counts the frozen file holds.
    Changing the file's content reruns the vocabulary and shard jobs; the ids follow the new file."""
    run_workflow(tmp_path / "first", JOURNALS)
    original = tmp_path / "first" / "build" / "vocabulary.tsv"
    extra = ([0, f"unseenword{n}", 0, "word"] for n in range(5000))
    frozen = frozen_variant(tmp_path, original, lambda rows: renumbered([[i, t, 7, k] for i, t, _, k in rows] + list(extra)))
    run = run_workflow(tmp_path / "second", {**JOURNALS, "vocabulary": {"frozen": str(frozen)}})
    build = tmp_path / "second" / "build"
    given, written = read_vocabulary(frozen), read_vocabulary(build / "vocabulary.tsv")
    assert (written.tokens, written.kinds, written.ids_digest) == (given.tokens, given.kinds, given.ids_digest)
    manifest = json.loads((build / "manifest.json").read_text())
    assert manifest["vocabulary"]["ids_sha256"] == given.ids_digest
    assert written.counts == train_stream_counts(build, given.size).tolist() != given.counts
    assert written.counts[: read_vocabulary(original).size] == read_vocabulary(original).counts and not any(written.counts[-5000:])
    coverage = json.loads((build / "stats" / "coverage.json").read_text())
    assert coverage["frozen"] == str(frozen) and f"(frozen: {frozen})" in run.stderr
    chosen = [row for row in coverage["sizes"] if row["chosen"]]
    assert len(chosen) == 1 and chosen[0]["size"] == coverage["words"] == given.size - 9
    assert chosen[0]["dev_oov_rate"] == coverage["splits"]["dev"]["unknown_rate"]
    assert chosen[0]["train_coverage"] == pytest.approx(1 - coverage["splits"]["train"]["unknown_rate"], abs=2e-6)
    targets = np.concatenate([pq.read_table(p)["target"].to_numpy() for p in build.glob("shards/dev/ngram-*.parquet")])
    unknown = np.isin(targets, [1, 4, 5, 6, 7, 8])  # <unk> and the five shape classes
    sentences = manifest["splits"]["dev"]["sentences"]
    assert unknown.sum() / (len(targets) - sentences) == pytest.approx(coverage["splits"]["dev"]["unknown_rate"], abs=1e-6)
    with open(frozen, "a", encoding="utf-8") as handle:
        handle.write(f"{given.size}\tlateword\t0\tword\n")
    plan = dry_run_rules(run_workflow(tmp_path / "second", {**JOURNALS, "vocabulary": {"frozen": str(frozen)}}, "-n"))
    assert {"vocabulary_frozen", "shards", "vocabulary_table"} <= plan and not {"prepare", "vocabulary"} & plan
    run_workflow(tmp_path / "second", {**JOURNALS, "vocabulary": {"frozen": str(frozen)}})
    written = read_vocabulary(build / "vocabulary.tsv")
    assert written.ids_digest == read_vocabulary(frozen).ids_digest and written.tokens[-1] == "lateword"


def job_graph(result) -> tuple[dict[str, str], set[tuple[str, str]]]:
    """Snakemake's job graph as `--dag` prints it (Graphviz dot): each job's rule by node, and
    the edges (from, to) as node numbers."""
    rules = dict(re.findall(r"^\s*(\d+)\[label = \"([a-z_]+)", result.stdout, re.M))
    edges = set(re.findall(r"^\s*(\d+) -> (\d+)", result.stdout, re.M))
    return rules, edges


def test_with_a_frozen_vocabulary_the_shard_jobs_wait_for_no_count(tmp_path: Path):
    """Freezing a build's own vocabulary.tsv keeps its ids, so no shard job reruns (their record
    of the ids, the ids digest, is the same); Snakemake's job graph then has the shard jobs take
    their ids from rule vocabulary_frozen, which reads no count, and none of them depends on the
    vocabulary job (the build's counts). Without a frozen vocabulary every shard job does."""
    run_workflow(tmp_path, JOURNALS)
    build = tmp_path / "build"

    def shards() -> dict[Path, tuple[bytes, int]]:
        return {path: (path.read_bytes(), path.stat().st_mtime_ns) for path in build.glob("shards/*/*.parquet")}

    before = shards()
    frozen = tmp_path / "frozen.tsv"
    frozen.write_bytes((build / "vocabulary.tsv").read_bytes())
    overrides = {**JOURNALS, "vocabulary": {"frozen": str(frozen)}}
    run_workflow(tmp_path, overrides)
    assert "ids: " in (build / "logs" / "vocabulary_frozen" / "vocabulary_frozen.log").read_text(encoding="utf-8")
    assert shards() == before  # not one shard job ran
    rules, edges = job_graph(run_workflow(tmp_path, overrides, "--dag", "--forceall"))
    assert {rules[a] for a, b in edges if rules[b] == "shards"} == {"prepare", "deduplicate", "vocabulary_frozen"}
    assert {rules[a] for a, b in edges if rules[b] == "vocabulary_frozen"} == set()
    assert {rules[b] for a, b in edges if rules[a] == "vocabulary"} == {"vocabulary_table"}
    rules, edges = job_graph(run_workflow(tmp_path, JOURNALS, "--dag", "--forceall"))
    assert {rules[a] for a, b in edges if rules[b] == "shards"} == {"prepare", "deduplicate", "vocabulary"}
    assert "vocabulary_frozen" not in rules.values()


def test_a_corpus_with_no_train_document_stops_at_the_vocabulary_saying_so(tmp_path: Path):
    """All documents in dev (fractions 0.0001 / 0.9999 / 0): the report used to crash on a zero-size
    array; now the vocabulary step stops naming the empty split and the fix."""
    run = run_workflow(tmp_path, {**JOURNALS, "split": {"fractions": {"train": 0.0001, "dev": 0.9999, "test": 0.0}}}, check=False)
    assert run.returncode != 0
    assert "the train split is empty: no kept document landed in train" in run.stderr
    assert not (tmp_path / "build" / "vocabulary.tsv").exists()


def chunk_counts(path: Path, rows: list[tuple[str, str, int]]) -> str:
    """A chunk's counts table (split, token, count) as a prepare job writes it."""
    pq.write_table(pa.table({"split": [r[0] for r in rows], "token": [r[1] for r in rows], "count": [r[2] for r in rows]}, schema=COUNTS_SCHEMA), path)
    return str(path)


def recount(tables: list[list[tuple[str, str, int]]]) -> dict[tuple[str, str], int]:
    """The per-split sums by collections.Counter, without the boundary symbols."""
    total: Counter = Counter()
    for rows in tables:
        for split, token, count in rows:
            total[split, token] += count
    return {key: value for key, value in total.items() if key[1] not in ("<s>", "</s>")}


def merged(table: pa.Table) -> dict[tuple[str, str], int]:
    """The nonzero counts of merge_counts' table by (split, token); a missing count (null) fails."""
    assert all(row[split] is not None for row in table.to_pylist() for split in ("train", "dev", "test"))
    return {(split, token): row[split] for row in table.to_pylist() for split, token in [(s, row["token"]) for s in ("train", "dev", "test")] if row[split]}


@pytest.mark.parametrize("merge_files", [MERGE_FILES, 1])
def test_a_kept_sum_is_reused_when_chunks_are_added_and_dropped_when_one_changes(
    tmp_path: Path, capsys: pytest.CaptureFixture, monkeypatch: pytest.MonkeyPatch, merge_files: int
) -> None:
    """merge_counts with a kept sum gives the Counter recount of every chunk table, summing
    only the tables it has not summed before while the earlier ones are unchanged; a changed
    or missing table sums everything again. With one table per step, the running sum takes
    several steps and gives the same counts."""
    monkeypatch.setattr("corpusmill.vocabulary.MERGE_FILES", merge_files)
    rows = [
        [("train", "lamp", 3), ("dev", "lamp", 1), ("train", "<s>", 2), ("train", "</s>", 4)],
        [("train", "ferry", 2), ("test", "lamp", 5), ("train", "<s>", 1)],
        [("train", "lamp", 1), ("train", "ice", 7)],
    ]
    paths = [chunk_counts(tmp_path / f"c{i}.parquet", r) for i, r in enumerate(rows)]
    kept = str(tmp_path / "kept.parquet")

    def merge(count: int) -> tuple[dict, str]:
        table, boundaries = merge_counts(paths[:count], None, kept)
        assert boundaries["<s>"]["train"] == sum(c for r in rows[:count] for s, t, c in r if (s, t) == ("train", "<s>"))
        return merged(table), capsys.readouterr().out

    assert merge(2) == (recount(rows[:2]), "chunk count tables: 0 summed by an earlier run, 2 summed now\n")
    assert merge(3) == (recount(rows), "chunk count tables: 2 summed by an earlier run, 1 summed now\n")
    rows[1][0] = ("train", "ferry", 9)
    chunk_counts(tmp_path / "c1.parquet", rows[1])
    assert merge(3) == (recount(rows), "chunk count tables: 0 summed by an earlier run, 3 summed now\n")
    assert merge(2) == (recount(rows[:2]), "chunk count tables: 0 summed by an earlier run, 2 summed now\n")
    (tmp_path / "kept.parquet").write_bytes(b"not parquet")
    assert merge(2) == (recount(rows[:2]), "chunk count tables: 0 summed by an earlier run, 2 summed now\n")
    written = (tmp_path / "kept.parquet").stat().st_mtime_ns
    assert merge(2) == (recount(rows[:2]), "chunk count tables: 2 summed by an earlier run, 0 summed now\n")
    assert (tmp_path / "kept.parquet").stat().st_mtime_ns == written  # nothing new: not written again


def test_merged_counts_subtract_the_removed_documents_and_give_every_split_a_count(tmp_path: Path) -> None:
    """Against a Counter recount: the chunks' counts minus those of the removed duplicates, one
    row per token with a count (zero when unseen) in every split, sorted by train count then
    token; a token whose every count was removed is gone; the boundary symbols' counts per split
    (zero where a split has none) come apart from the words."""
    rows = [
        [("train", "lamp", 3), ("dev", "lamp", 1), ("train", "ferry", 3), ("train", "<s>", 2), ("train", "</s>", 4)],
        [("test", "ice", 2), ("train", "ice", 5)],
    ]
    removed = [("train", "lamp", 1), ("dev", "lamp", 1), ("test", "ice", 2), ("train", "<s>", 1), ("train", "</s>", 1)]
    paths = [chunk_counts(tmp_path / f"c{i}.parquet", r) for i, r in enumerate(rows)]
    table, boundaries = merge_counts(paths, chunk_counts(tmp_path / "removed.parquet", removed))
    expected = Counter(recount(rows))
    expected.subtract({(split, token): count for split, token, count in removed if token not in ("<s>", "</s>")})
    assert merged(table) == {key: count for key, count in expected.items() if count}
    assert table.to_pylist() == [
        {"token": "ice", "train": 5, "dev": 0, "test": 0},
        {"token": "ferry", "train": 3, "dev": 0, "test": 0},
        {"token": "lamp", "train": 2, "dev": 0, "test": 0},
    ]
    assert boundaries == {"<s>": {"train": 1, "dev": 0, "test": 0}, "</s>": {"train": 3, "dev": 0, "test": 0}}


def test_the_build_counts_are_the_merged_counts_and_stop_when_no_document_is_left_in_train(tmp_path: Path) -> None:
    """build_counts gives what merge_counts gives while a train document remains; when the
    removed documents take every train document (<s> counts documents), it stops naming the
    documents left in dev and test and the fix."""
    rows = [("train", "kite", 2), ("train", "<s>", 1), ("dev", "kite", 1), ("dev", "<s>", 2), ("test", "<s>", 1)]
    paths = [chunk_counts(tmp_path / "c0.parquet", rows)]
    nothing_removed = chunk_counts(tmp_path / "none.parquet", [])
    table, boundaries = build_counts(paths, nothing_removed, str(tmp_path / "kept.parquet"))
    merged_table, merged_boundaries = merge_counts(paths, nothing_removed)
    assert table.equals(merged_table) and boundaries == merged_boundaries
    assert boundaries["<s>"] == {"train": 1, "dev": 2, "test": 1}
    assert (tmp_path / "kept.parquet").exists()  # the sum kept for the next run, as merge_counts keeps it
    train_removed = chunk_counts(tmp_path / "train.parquet", [("train", "kite", 2), ("train", "<s>", 1)])
    message = (
        "the train split is empty: no kept document landed in train (dev 2, test 1 documents); give the corpus more documents "
        "or raise split.fractions.train (the vocabulary and every model are learned on train)"
    )
    with pytest.raises(VocabularyError, match=re.escape(message)):
        build_counts(paths, train_removed)


def test_merging_no_chunk_tables_gives_an_empty_table_of_the_same_columns() -> None:
    table, boundaries = merge_counts([])
    assert table.num_rows == 0 and table.schema.names == ["token", "train", "dev", "test"]
    assert table.schema.field("token").type == pa.string() and boundaries["<s>"] == {"train": 0, "dev": 0, "test": 0}
