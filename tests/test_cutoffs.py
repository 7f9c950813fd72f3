"""Coverage figures and the `corpusmill cutoffs` command, against a brute-force recount.

The reference counts come from collections.Counter over the prepared chunk files
(build/interim/prepared/*.parquet, column `tokens`), leaving out the documents listed in
build/interim/duplicates.parquet: the same tokens the workflow counted, recounted independently.
"""

from __future__ import annotations

import json
import subprocess
import sys
from collections import Counter
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from conftest import REPO
from corpusmill.coverage import TABLE_SIZES
from corpusmill.cutoffs import Figures, WordList, format_answer, what_if
from corpusmill.formats import UNK, Vocabulary, read_vocabulary
from corpusmill.vocabulary import SHAPE_CLASSES, Cutoff, unknown_class

SPLITS = ("train", "dev", "test")


def recount(build: Path) -> tuple[dict[str, Counter], dict[tuple[str, str], Counter]]:
    """Counter per split and per (source, split) of every kept document's tokens."""
    removed = {(row["source"], row["offset"]) for row in pq.read_table(build / "interim" / "duplicates.parquet").to_pylist()}
    per_split = {split: Counter() for split in SPLITS}
    per_source: dict[tuple[str, str], Counter] = {}
    for path in sorted((build / "interim" / "prepared").glob("*.parquet")):
        for row in pq.read_table(path, columns=["source", "offset", "split", "tokens"]).to_pylist():
            if (row["source"], row["offset"]) in removed:
                continue
            tokens = [token for sentence in row["tokens"] for token in sentence]
            per_split[row["split"]].update(tokens)
            per_source.setdefault((row["source"], row["split"]), Counter()).update(tokens)
    return per_split, per_source


def reference_words(train: Counter, min_count: int | None, max_size: int | None, coverage: float | None) -> list[str]:
    """The cutoff written out longhand: most frequent first (ties by code point), then each limit."""
    ranked = sorted(train, key=lambda token: (-train[token], token))
    if min_count is not None:
        ranked = [token for token in ranked if train[token] >= min_count]
    if max_size is not None:
        ranked = ranked[:max_size]
    if coverage is not None:
        total, running = sum(train.values()), 0
        for index, token in enumerate(ranked):
            running += train[token]
            if running >= coverage * total:
                ranked = ranked[: index + 1]
                break
    return ranked


def shares(counts: dict[str, Counter], words: set[str]) -> dict[str, float]:
    """Train coverage and dev/test OOV rates of a word set, from the recount."""

    def share(split: str, inside: bool) -> float:
        return sum(c for t, c in counts[split].items() if (t in words) == inside) / sum(counts[split].values())

    return {"train_coverage": share("train", True), "dev_oov_rate": share("dev", False), "test_oov_rate": share("test", False)}


@pytest.fixture(scope="module")
def counted(demo_build: Path) -> tuple[dict[str, Counter], dict[tuple[str, str], Counter]]:
    return recount(demo_build)


def test_every_coverage_figure_equals_a_counter_recount(demo_build: Path, counted) -> None:
    """collections.Counter recount of the prepared tokens minus duplicates, split by split."""
    per_split, _ = counted
    stats = json.loads((demo_build / "stats" / "coverage.json").read_text())
    vocabulary = read_vocabulary(demo_build / "vocabulary.tsv")
    words = set(vocabulary.tokens[vocabulary.first_word_id :])
    assert stats["words"] == len(words) and stats["vocabulary_size"] == vocabulary.size
    for split in SPLITS:
        counter, figures = per_split[split], stats["splits"][split]
        oov = {t: c for t, c in counter.items() if t not in words}
        assert figures["tokens"] == figures["words"] == sum(counter.values())
        assert figures["types"] == len(counter)
        assert figures["unknown_tokens"] == sum(oov.values())
        assert figures["oov_types"] == len(oov)
        assert figures["unknown_rate"] == round(sum(oov.values()) / sum(counter.values()), 6)
        if split != "train":
            listed = dict(figures["top_oov"])
            assert all(oov[t] == c for t, c in listed.items())
            assert max((c for t, c in oov.items() if t not in listed), default=0) <= min(listed.values())
    train = per_split["train"]
    assert stats["train_singletons"]["types_share"] == round(sum(1 for c in train.values() if c == 1) / len(train), 6)


def test_size_table_equals_a_counter_recount(demo_build: Path, counted) -> None:
    """collections.Counter recount: coverage of the k most frequent train words, for every row of the table."""
    per_split, _ = counted
    stats = json.loads((demo_build / "stats" / "coverage.json").read_text())
    assert {row["size"] for row in stats["sizes"]} >= {k for k in TABLE_SIZES if k < len(per_split["train"])}
    for row in stats["sizes"]:
        expected = shares(per_split, set(reference_words(per_split["train"], None, row["size"], None)))
        assert {key: row[key] for key in expected} == {key: round(value, 6) for key, value in expected.items()}
    assert [row["chosen"] for row in stats["sizes"]].count(True) == 1


def test_oov_per_source_and_unknown_classes_equal_a_counter_recount(demo_build: Path, counted) -> None:
    """collections.Counter recount per source file; unknown classes by the documented shape rules."""
    per_split, per_source = counted
    stats = json.loads((demo_build / "stats" / "coverage.json").read_text())
    vocabulary = read_vocabulary(demo_build / "vocabulary.tsv")
    words = set(vocabulary.tokens[vocabulary.first_word_id :])
    for (source, split), counter in per_source.items():
        figures = stats["sources"][source][split]
        assert figures["tokens"] == sum(counter.values())
        assert figures["unknown_tokens"] == sum(c for t, c in counter.items() if t not in words)
    for split in SPLITS:
        classes = Counter()
        for token, count in per_split[split].items():
            if token not in words:
                classes[unknown_class(token)] += count
        assert {k: v for k, v in stats["unknown_classes"][split].items() if v} == dict(classes)
        assert set(classes) <= {UNK} | {name for name, _ in SHAPE_CLASSES}


@pytest.mark.parametrize(
    "cutoff",
    [Cutoff(1, None, None), Cutoff(3, None, None), Cutoff(None, 100, None), Cutoff(2, None, 0.9), Cutoff(None, None, 0.5)],
    ids=["min1", "min3", "max100", "min2-cov0.9", "cov0.5"],
)
def test_what_if_figures_and_word_changes_equal_a_counter_recount(demo_build: Path, counted, cutoff: Cutoff) -> None:
    """collections.Counter recount: |V|, train coverage, dev/test OOV and the words entering and leaving."""
    per_split, _ = counted
    vocabulary = read_vocabulary(demo_build / "vocabulary.tsv")
    current = set(vocabulary.tokens[vocabulary.first_word_id :])
    proposed = reference_words(per_split["train"], cutoff.min_count, cutoff.max_size, cutoff.coverage)
    answer = what_if(pq.read_table(demo_build / "stats" / "token_counts.parquet"), WordList.of(vocabulary), cutoff, 5)
    reserved = vocabulary.first_word_id
    assert (answer.proposed.ids, answer.proposed.words) == (reserved + len(proposed), len(proposed))
    assert (answer.current.ids, answer.current.words) == (vocabulary.size, len(current))
    for mine, words in ((answer.proposed, set(proposed)), (answer.current, current)):
        expected = shares(per_split, words)
        assert mine.train_coverage == pytest.approx(expected["train_coverage"], abs=1e-12)
        assert mine.dev_oov_rate == pytest.approx(expected["dev_oov_rate"], abs=1e-12)
        assert mine.test_oov_rate == pytest.approx(expected["test_oov_rate"], abs=1e-12)
    entering = set(proposed) - current
    leaving = current - set(proposed)
    assert (answer.entering_total, answer.leaving_total) == (len(entering), len(leaving))
    train = per_split["train"]
    assert answer.entering == sorted(((t, train[t]) for t in entering), key=lambda p: (-p[1], p[0]))[:5]
    assert answer.leaving == sorted(((t, train[t]) for t in leaving), key=lambda p: (-p[1], p[0]))[:5]
    assert "entering" in format_answer(answer) and f"{answer.proposed.ids:,}" in format_answer(answer)


def test_cutoffs_command_keeps_the_build_limits_it_is_not_given(demo_build: Path, counted) -> None:
    """The build's own cutoff (min_count 2 in the default config) changes nothing; Counter recount of the rest."""
    per_split, _ = counted
    stats = json.loads((demo_build / "stats" / "coverage.json").read_text())

    def run(*options: str) -> dict:
        command = [sys.executable, "-m", "corpusmill.cli", "cutoffs", str(demo_build), "--json", *options]
        return json.loads(subprocess.run(command, cwd=REPO, check=True, capture_output=True, text=True).stdout)

    unchanged = run()
    assert unchanged["cutoff"] == {"min_count": 2, "max_size": None, "coverage": None}
    assert unchanged["proposed"] == unchanged["current"]
    assert round(unchanged["current"]["dev_oov_rate"], 6) == stats["splits"]["dev"]["unknown_rate"]
    assert unchanged["entering"]["words"] == unchanged["leaving"]["words"] == 0
    changed = run("--min-count", "off", "--max-size", "250")
    assert changed["cutoff"] == {"min_count": None, "max_size": 250, "coverage": None}
    expected = shares(per_split, set(reference_words(per_split["train"], None, 250, None)))
    assert changed["proposed"]["dev_oov_rate"] == pytest.approx(expected["dev_oov_rate"], abs=1e-12)


def test_cutoffs_command_names_the_missing_file(tmp_path: Path) -> None:
    """Error messages name the file and the fix (project convention)."""
    result = subprocess.run([sys.executable, "-m", "corpusmill.cli", "cutoffs", str(tmp_path)], cwd=REPO, capture_output=True, text=True)
    assert result.returncode != 0
    assert "token_counts.parquet: not found" in result.stderr and "Run the workflow" in result.stderr


def test_the_word_list_is_the_words_of_the_vocabulary_file(demo_build: Path, tmp_path: Path) -> None:
    """The rows of kind 'word', read by splitting vocabulary.tsv's lines at tabs (word tokens are
    never escaped); a wrong id is reported with its line number, a piece vocabulary is refused."""
    rows = [line.split("\t") for line in (demo_build / "vocabulary.tsv").read_text(encoding="utf-8").split("\n")[1:-1]]
    words = WordList.read(demo_build / "vocabulary.tsv")
    assert words.reserved == sum(1 for row in rows if row[3] != "word") == 9
    assert words.words.to_pylist() == [row[1] for row in rows if row[3] == "word"]
    broken = tmp_path / "vocabulary.tsv"
    broken.write_text("id\ttoken\tcount\tkind\n0\t<pad>\t0\treserved\n2\t<unk>\t0\treserved\n", encoding="utf-8")
    with pytest.raises(SystemExit, match=r"^corpusmill: .*vocabulary\.tsv: line 3: expected '1<TAB>token<TAB>count<TAB>kind', got '2"):
        WordList.read(broken)
    pieces = tmp_path / "pieces.tsv"
    pieces.write_text(Vocabulary(["<pad>", "<unk>", "<s>", "</s>", "\u2581a"], [0] * 5, ["control"] * 4 + ["piece"]).to_tsv(), encoding="utf-8")
    with pytest.raises(SystemExit, match=r"pieces\.tsv: a subword vocabulary; cutoffs apply to word vocabularies \(units: word\)"):
        WordList.read(pieces)


def test_words_of_a_frozen_vocabulary_unseen_in_the_counts_leave_with_count_zero() -> None:
    """Hand computation on three counted tokens: train a=6 b=3 c=1 (10), dev a=1 c=1 (2), test b=2 (2)."""
    counts = pa.table({"token": ["a", "b", "c"], "train": [6, 3, 1], "dev": [1, 0, 1], "test": [0, 2, 0]})
    frozen = WordList(reserved=9, words=pa.array(["b", "zz"]))
    answer = what_if(counts, frozen, Cutoff(min_count=3), show=5)
    assert answer.current == Figures(ids=11, words=2, train_coverage=0.3, dev_oov_rate=1.0, test_oov_rate=0.0)
    assert answer.proposed == Figures(ids=11, words=2, train_coverage=0.9, dev_oov_rate=0.5, test_oov_rate=0.0)
    assert (answer.entering, answer.leaving) == ([("a", 6)], [("zz", 0)])
