"""`corpusmill baseline` (steps/baseline.py): Kneser–Ney perplexity of a finished build's splits,
and the train totals the workflow's step keeps for its next run."""

from __future__ import annotations

import json
import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from conftest import REPO, require_file, run_workflow
from corpusmill import baseline, kneser_ney
from corpusmill.formats import NgramTotals, read_ngram_totals, writing_ngram_totals
from corpusmill.ngram_buckets import BUCKETS
from corpusmill.reader import open_build

FORTUNES = Path("/usr/share/games/fortunes")
# English collections of Debian's `fortunes` package.
FORTUNE_FILES = ["fortunes", "computers", "science", "wisdom", "work", "law"]


def run_command(capsys: pytest.CaptureFixture, *args: str) -> str:
    baseline.command([str(a) for a in args])
    return capsys.readouterr().out


def test_the_demo_build_has_perplexity_per_split_and_order_and_no_warning(demo_build: Path, capsys: pytest.CaptureFixture) -> None:
    """Orders 2..n with n the build's windows.ngram.n; the tokens scored per held-out split are
    the split's n-gram rows (one per id and per </s>: the same convention); train, having been
    counted, scores best; every order beats the add-one unigram; no leakage warning."""
    figures = json.loads(run_command(capsys, demo_build, "--json"))
    build = open_build(demo_build)
    n = build.info("train", "ngram")["n"]
    assert figures["order"] == n and figures["smoothing"] == "modified"
    assert figures["vocabulary_size"] == build.vocabulary.size == figures["predictable_ids"] + 2
    splits = figures["splits"]
    for split in ("train", "dev", "test"):
        assert splits[split]["tokens"] == build.rows(split, "ngram")
        assert list(splits[split]["perplexity"]) == [str(k) for k in range(2, n + 1)]
        assert max(splits[split]["perplexity"].values()) < splits[split]["unigram_perplexity"]
    for split in ("dev", "test"):
        for order, value in splits[split]["perplexity"].items():
            assert splits["train"]["perplexity"][order] < value
        seen = list(splits[split]["seen_in_train"].values())
        assert len(seen) == n and seen == sorted(seen, reverse=True) and 0 < seen[-1] <= seen[0] <= 1
    assert splits["train"]["seen_in_train"] == {str(k): 1.0 for k in range(1, n + 1)}
    assert set(figures["discounts"]) == {str(k) for k in range(1, n + 1)}
    assert figures["discounts"][str(n)]["counts"] == "raw" and figures["discounts"]["1"]["counts"] == "continuation"
    assert "</s> after it are predicted" in figures["conventions"] and "unknown classes are ordinary tokens" in figures["conventions"]
    assert figures["warnings"] == []


def test_the_workflow_counts_the_same_baseline_as_the_command(demo_build: Path, capsys: pytest.CaptureFixture) -> None:
    """The workflow's step reads the stream files its shard jobs recorded, before any manifest;
    the command reads a finished build through the reader: the same figures either way, in
    stats/baseline.json, in the manifest and on the report page."""
    recorded = json.loads((demo_build / "stats" / "baseline.json").read_text(encoding="utf-8"))
    assert recorded == json.loads(run_command(capsys, demo_build, "--json"))
    assert json.loads((demo_build / "manifest.json").read_text(encoding="utf-8"))["baseline"] == recorded
    page = (demo_build / "report" / "index.html").read_text(encoding="utf-8")
    section = page[page.index('<section id="baseline">') :].split("</section>", 1)[0]
    for split in ("train", "dev", "test"):
        assert f'<td class="n">{recorded["splits"][split]["perplexity"]["4"]:,.2f}</td>' in section


def test_the_summary_line_gives_the_highest_order_and_the_unigram_per_split(demo_build: Path) -> None:
    from corpusmill.summary import format_baseline

    recorded = json.loads((demo_build / "stats" / "baseline.json").read_text(encoding="utf-8"))
    line = format_baseline(recorded)
    dev = recorded["splits"]["dev"]
    assert line.startswith("n-gram baseline (interpolated modified Kneser-Ney, order 4, counted on train): perplexity train ")
    assert f"dev {dev['perplexity']['4']:,.2f}" in line and f"dev {dev['unigram_perplexity']:,.2f}" in line
    empty = {**recorded, "splits": {**recorded["splits"], "test": None}, "warnings": ["w"]}
    assert "test —" in format_baseline(empty) and format_baseline(empty).endswith("\nwarning: w")


def test_the_baseline_needs_the_streams_and_says_which_options_to_change() -> None:
    from corpusmill.settings import ConfigError, resolve

    with pytest.raises(ConfigError, match=r"baseline.enabled = true needs windows.streams.enabled = true"):
        resolve({"windows": {"streams": {"enabled": False}}})
    assert not resolve({"windows": {"streams": {"enabled": False}}, "baseline": {"enabled": False}})["baseline"]["enabled"]


def test_the_text_report_shows_the_figures_of_the_json(demo_build: Path, capsys: pytest.CaptureFixture) -> None:
    figures = json.loads(run_command(capsys, demo_build, "--json", "--order", "3", "--smoothing", "interpolated"))
    text = run_command(capsys, demo_build, "--order", "3", "--smoothing", "interpolated")
    assert "interpolated Kneser-Ney (Chen and Goodman 1998), order 3" in text
    dev = figures["splits"]["dev"]
    row = re.search(r"^  order 3 +([\d,.]+) +([\d,.]+) +([\d,.]+)$", text, re.M)
    assert row and row[2] == f"{dev['perplexity']['3']:,.2f}"
    assert re.search(rf"^  3-grams +{dev['seen_in_train']['3']:.1%}", text, re.M)
    assert "conventions: every id of a sentence" in text and "warning" not in text
    assert all(figures["discounts"][k]["d1"] == figures["discounts"][k]["d3+"] for k in ("1", "2", "3"))


def test_the_arpa_option_writes_the_model_of_the_chosen_order(demo_build: Path, tmp_path: Path, capsys: pytest.CaptureFixture) -> None:
    """The ARPA file's \\data\\ counts match its sections and the command's figures; its
    unigrams are the predictable vocabulary plus <s> as a context (probability 10^-99)."""
    path = tmp_path / "model.arpa"
    figures = json.loads(run_command(capsys, demo_build, "--order", "2", "--arpa", path, "--json"))
    text = path.read_text(encoding="utf-8")
    header = {int(k): int(v) for k, v in re.findall(r"^ngram (\d+)=(\d+)$", text, re.M)}
    assert figures["arpa"]["ngrams"] == {str(k): v for k, v in header.items()} and list(header) == [1, 2]
    sections = re.split(r"^\\\d-grams:$", text, flags=re.M)[1:]
    assert [sum("\t" in line for line in section.split("\n")) for section in sections] == [header[1], header[2]]
    assert header[1] == figures["vocabulary_size"] - 1
    assert re.search(r"^-99\t<s>\t-?[\d.]+$", text, re.M)
    assert "ARPA model written to" in run_command(capsys, demo_build, "--order", "2", "--arpa", path)


def test_a_build_without_stream_shards_is_refused_saying_how_to_enable_them(demo_build: Path, tmp_path: Path) -> None:
    copy = tmp_path / "build"
    shutil.copytree(demo_build, copy)
    manifest = json.loads((copy / "manifest.json").read_text(encoding="utf-8"))
    for figures in manifest["splits"].values():
        figures["shards"] = [entry for entry in figures["shards"] if entry["kind"] != "stream"]
    (copy / "manifest.json").write_text(json.dumps(manifest), encoding="utf-8")
    with pytest.raises(
        SystemExit,
        match=r"^corpusmill: .*manifest\.json: no stream shards for train, dev, test; .*"
        r"set windows\.streams\.enabled: true in the workflow config and rerun",
    ):
        baseline.command([str(copy)])


def test_an_order_below_two_and_a_missing_build_are_refused(tmp_path: Path, capsys: pytest.CaptureFixture) -> None:
    with pytest.raises(SystemExit):
        baseline.command([str(tmp_path), "--order", "1"])
    assert "the order must be at least 2" in capsys.readouterr().err
    with pytest.raises(SystemExit, match=r"^corpusmill: .*manifest\.json: missing"):
        baseline.command([str(tmp_path)])


def stream_batch(*documents: list[int]) -> dict:
    ids = np.array([i for document in documents for i in document], np.uint16)
    offsets = np.cumsum([0] + [len(document) for document in documents]).astype(np.int64)
    return {"ids": ids, "offsets": offsets, "doc_id": [f"doc{i}" for i in range(len(documents))]}


def test_streams_become_sentences_cut_at_the_end_symbol_without_the_document_start() -> None:
    """steps.windows.document_streams' layout: <s> s1 </s> s2 </s> …; a document may hold no sentence."""
    ids, lengths = baseline.sentences(stream_batch([2, 5, 6, 3, 7, 3], [2], [2, 3], [2, 1, 3]), "build: split dev", 10)
    assert ids.tolist() == [5, 6, 7, 1] and lengths.tolist() == [2, 1, 0, 1]


def test_dev_is_scored_in_batches_with_the_figures_of_one_pass(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    """Scored in three batches, dev has the figures of one kneser_ney.score_split
    call over all its sentences: the same tokens and seen counts, the same log sums up to
    rounding."""
    rng = np.random.default_rng(3)

    def sentences(count: int) -> tuple[np.ndarray, np.ndarray]:
        lengths = rng.integers(1, 20, count)
        return rng.integers(4, 50, int(lengths.sum())), lengths

    train, dev_parts = sentences(400), [sentences(10) for _ in range(40)]
    dev_ids, dev_lengths = (np.concatenate(column) for column in zip(*dev_parts))
    monkeypatch.setattr(baseline, "SCORE_TOKENS", len(dev_ids) // 3 + 1)  # two batches and a shorter last one
    result = baseline.score("t", {"train": lambda: iter([train]), "dev": lambda: iter(dev_parts), "test": None}, 50, 3, "modified", tmp_path)
    models = kneser_ney.estimate_models(kneser_ney.count(*train, 3, 50), "modified", range(2, 4))
    expected = kneser_ney.SplitScore()
    kneser_ney.score_split(expected, models, kneser_ney.AddOneUnigram.of(models[3].counts), dev_ids, dev_lengths)
    scored = result.scores["dev"]
    assert scored is not None and (scored.tokens, scored.seen) == (expected.tokens, expected.seen)
    assert scored.log_sums == pytest.approx(expected.log_sums, rel=1e-12)
    assert scored.unigram_log_sum == pytest.approx(expected.unigram_log_sum, rel=1e-12)


@pytest.mark.parametrize(
    ("documents", "message"),
    [
        ([[2, 5, 3], [5, 3]], r"document 'doc1': the stream does not start with <s> \(id 2\)"),
        ([[2, 5, 3], [2, 5]], r"document 'doc1': the stream does not end with </s> \(id 3\)"),
        ([[2, 5, 3], [2, 5, 2, 3]], r"document 'doc1': id 2 at position 2 "),
        ([[2, 5, 3], [2, 5, 12, 3]], r"document 'doc1': id 12 at position 2 \(ids run from 0 to 9;"),
        ([[2, 3], []], r"document 'doc1': an empty stream"),
    ],
)
def test_a_stream_that_is_not_one_of_this_vocabulary_is_refused_naming_the_document(documents: list, message: str) -> None:
    with pytest.raises(SystemExit, match=r"^corpusmill: build: split dev, " + message):
        baseline.sentences(stream_batch(*documents), "build: split dev", 10)


def test_a_closed_pipe_ends_the_command_without_a_traceback(demo_build: Path) -> None:
    """POSIX pipes: `head` closing its end early sends SIGPIPE / EPIPE to the writer (the ARPA
    file, over 200 kB, outgrows the pipe's buffer)."""
    command = f"{sys.executable} -m steps.cli baseline {demo_build} --arpa /dev/stdout | head -n 2"
    run = subprocess.run(["bash", "-c", command], capture_output=True, text=True, cwd=REPO)
    assert run.stdout == "\n\\data\\\n" and run.stderr == ""


@pytest.fixture(scope="module")
def fortune_corpus(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Debian's English fortunes as paragraphs (one record each), one file per collection."""
    root = tmp_path_factory.mktemp("fortunes") / "raw"
    root.mkdir()
    for name in FORTUNE_FILES:
        text = require_file(FORTUNES / name, "fortunes").read_text(encoding="utf-8", errors="replace")
        records = [record.strip() for record in re.split(r"(?m)^%\n", text) if record.strip()]
        (root / f"{name}.txt").write_text("\n\n".join(records) + "\n", encoding="utf-8")
    return root


def test_a_build_whose_dev_copies_train_warns_and_an_honest_one_does_not(fortune_corpus: Path, tmp_path: Path, capsys: pytest.CaptureFixture) -> None:
    """Debian's English fortunes built twice by the workflow. Honest: as configured by default
    (documents split by content, duplicates removed); dev perplexity is well above train's.
    Leaking: every file twice under another name, documents split by id, duplicates kept, so
    most dev documents have their copy in train; the warning names dev and the figures."""
    honest = tmp_path / "honest"
    run_workflow(honest, {"corpus": {"root": str(fortune_corpus)}})
    figures = json.loads(run_command(capsys, honest / "build", "--json"))
    assert figures["warnings"] == []
    train, dev = figures["splits"]["train"]["perplexity"]["4"], figures["splits"]["dev"]["perplexity"]["4"]
    assert dev > 2 * train

    doubled = tmp_path / "doubled"
    for copy in ("a", "b"):
        shutil.copytree(fortune_corpus, doubled / copy)
    leaking = tmp_path / "leaking"
    result = run_workflow(leaking, {"corpus": {"root": str(doubled)}, "split": {"key": "id", "deduplicate": False}})
    figures = json.loads(run_command(capsys, leaking / "build", "--json"))
    warnings = figures["warnings"]
    assert any(w.startswith("dev perplexity ") and "below 1.1 x train's" in w for w in warnings), warnings
    assert any(w.startswith("test perplexity ") for w in warnings), warnings
    assert "warning: dev perplexity" in run_command(capsys, leaking / "build")
    # The workflow counted the same baseline: its summary, report and manifest carry the warnings.
    assert f"warning: {warnings[0]}" in result.stderr
    assert json.loads((leaking / "build" / "manifest.json").read_text(encoding="utf-8"))["baseline"]["warnings"] == warnings
    page = (leaking / "build" / "report" / "index.html").read_text(encoding="utf-8")
    assert "<strong>Warning</strong>: dev perplexity" in page


def kept_totals(path: Path, counted: list[tuple[str, str]], order: int = 3, size: int = 300, code: str | None = None) -> None:
    """Write totals of three 3-grams, in bucket 0, as an earlier run would have kept them."""
    about = NgramTotals(order, size, code or baseline.counting_code(), tuple(counted), BUCKETS)
    with writing_ngram_totals(path, about) as write:
        write(np.array([5, 9, 40], np.uint64), np.zeros(3, np.uint64), np.array([2, 1, 7], np.int64))
        for _ in range(BUCKETS - 1):
            write(np.empty(0, np.uint64), np.empty(0, np.uint64), np.empty(0, np.int64))


TRAIN = [("shards/train/stream-a.parquet", "aa"), ("shards/train/stream-b.parquet", "bb")]


def test_kept_totals_are_carried_only_when_the_train_streams_only_gained_files(tmp_path: Path) -> None:
    path = str(tmp_path / "totals.arrow")
    kept_totals(tmp_path / "totals.arrow", TRAIN)
    added = [*TRAIN, ("shards/train/stream-c.parquet", "cc")]
    carried, counted = baseline.carried_totals(path, 3, 300, added)
    assert counted == set(TRAIN) and carried is not None
    assert carried(0)["count"].tolist() == [2, 1, 7] and carried(0)["low"].tolist() == [5, 9, 40] and len(carried(1)) == 0
    edited = [TRAIN[0], ("shards/train/stream-b.parquet", "b2")]
    removed = TRAIN[:1]
    for train, order, size in [(edited, 3, 300), (removed, 3, 300), (added, 4, 300), (added, 3, 301)]:
        assert baseline.carried_totals(path, order, size, train) == (None, set())
    # Counted by other code (another version of the counting): counted again.
    kept_totals(tmp_path / "totals.arrow", TRAIN, code="0" * 16)
    assert baseline.carried_totals(path, 3, 300, added) == (None, set())
    # Not a totals file, or a missing one: counted again.
    (tmp_path / "totals.arrow").write_bytes(b"ARROW1 but not really")
    assert read_ngram_totals(path) is None and baseline.carried_totals(path, 3, 300, added) == (None, set())
    assert read_ngram_totals(str(tmp_path / "nowhere.arrow")) is None
