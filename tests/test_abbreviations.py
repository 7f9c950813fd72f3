"""Abbreviations learned from the corpus (segment.learn_abbreviations): the type-based method of
Kiss & Strunk (2006), its linear-time patterns against the former backtracking ones on real
Debian text, its bounded memory, the sample read from the start of each file, and the job that
hands the list to every prepare job."""

from __future__ import annotations

import gzip
import random
import re
from collections import Counter
from pathlib import Path

import pyarrow.parquet as pq
import pytest
import regex

from conftest import require_file
from corpusmill import abbreviations, prepare
from corpusmill.abbreviations import learn_abbreviations, learned_abbreviations
from corpusmill.settings import resolve
from corpusmill.unicode_breaks import sentence_segments
from tests.test_prepare import planned_build


def synthetic_corpus() -> list[str]:
    """Documents where "approx." recurs before lowercase words and numbers."""
    rng = random.Random(7)
    nouns = ["box", "crate", "river", "road", "table", "garden", "engine", "letter"]
    verbs = ["weighs", "measures", "holds", "spans", "needs", "costs"]
    docs = []
    for _ in range(400):
        noun, verb, other = rng.choice(nouns), rng.choice(verbs), rng.choice(nouns)
        docs.append(
            f"The {noun} {verb} approx. {rng.randint(2, 90)} units and the {other} {verb} approx. "
            f"twice the {noun}. Dr. Ames saw the {other} near the {noun}. The {other} left the {noun}."
        )
    return docs


def test_learn_abbreviations_finds_recurring_period_words() -> None:
    """Kiss & Strunk (2006) type-based stage: words nearly always followed by a period.

    Source: Kiss & Strunk, "Unsupervised Multilingual Sentence Boundary Detection",
    Computational Linguistics 32(4), 2006 — log-likelihood with P(period | abbreviation) =
    0.99, length, inner-period and no-period penalty factors, threshold 0.3.
    """
    learned = learn_abbreviations(synthetic_corpus())
    assert {"approx", "dr"} <= learned
    # Sentence-final words also occur without a period and are penalized.
    assert not learned & {"box", "crate", "river", "ames", "units"}
    text = "Dr. Ames weighs approx. 5 kg."
    assert sentence_segments(text, learned) == [text]


def test_learn_abbreviations_needs_evidence() -> None:
    """A word seen with a period fewer than min_count times is not learned (Kiss & Strunk's
    counts are unreliable for rare types); no periods at all give nothing."""
    assert learn_abbreviations(["I saw Dr. Who once. And then nothing"], min_count=2) == frozenset()
    assert learn_abbreviations(["no periods here at all"]) == frozenset()
    # Pruning to a small table drops rare entries, not the frequent abbreviations.
    assert {"approx", "dr"} <= learn_abbreviations(iter(synthetic_corpus()), max_types=30)


# The learner's patterns before they were made linear: each match was tried from every position,
# so "a.a.a…a" took time worse than quadratic in its length. Kept only as the reference for the
# tests below.
FORMER_PERIOD_THEN_WORD = regex.compile(r"(\w+(?:\.\w+)*)\.(?:\s+(\w)|\s*+$)", regex.V1)
FORMER_LEARNER_WORD = regex.compile(r"(\w+(?:\.\w+)*)(\.?)", regex.V1)
FORMER_LETTERS_AND_PERIODS = regex.compile(r"[^\W\d_]+(?:\.[^\W\d_]+)*", regex.V1)
FORTUNES = Path("/usr/share/games/fortunes")
# English collections of Debian's `fortunes` package (the art, Chinese and bilingual files left out).
ENGLISH_FORTUNES = (
    "computers cookie definitions drugs education ethnic food humorists kids law linux literature love magic "
    "medicine men-women miscellaneous news people pets platitudes politics riddles science songs-poems sports "
    "startrek wisdom work zippy"
).split()
GCIDE = Path("/usr/share/dictd/gcide.dict.dz")


def real_documents() -> dict[str, list[str]]:
    """Debian's English fortunes (one document per record between `%` lines) and the first 3 MB
    of dict-gcide (one per paragraph)."""
    fortunes = []
    for name in ENGLISH_FORTUNES:
        text = require_file(FORTUNES / name, "fortunes").read_text(encoding="utf-8", errors="replace")
        fortunes += re.split(r"(?m)^%\n", text)
    with gzip.open(require_file(GCIDE, "dict-gcide"), "rb") as file:
        gcide = file.read(3_000_000).decode("utf-8", errors="ignore").split("\n\n")
    return {"fortunes": fortunes, "gcide": gcide}


def test_learned_abbreviations_of_real_text_equal_those_of_the_former_patterns(monkeypatch: pytest.MonkeyPatch) -> None:
    """Differential, reference kept in this file: the backtracking patterns the learner used
    before (FORMER_*). On Debian's English fortunes and dict-gcide every match and the learned
    set are the same; the sets are not empty (gcide abbreviates "e.g", "obs", "fr", …)."""
    learned = {}
    for name, documents in real_documents().items():
        learned[name] = learn_abbreviations(documents)
        for document in documents:
            assert abbreviations._PERIOD_THEN_WORD.findall(document) == FORMER_PERIOD_THEN_WORD.findall(document)
            assert abbreviations._LEARNER_WORD.findall(document) == FORMER_LEARNER_WORD.findall(document)
        with monkeypatch.context() as former:
            former.setattr(abbreviations, "_PERIOD_THEN_WORD", FORMER_PERIOD_THEN_WORD)
            former.setattr(abbreviations, "_LEARNER_WORD", FORMER_LEARNER_WORD)
            former.setattr(abbreviations, "_LETTERS_AND_PERIODS", FORMER_LETTERS_AND_PERIODS)
            assert learn_abbreviations(documents) == learned[name], name
        assert len(learned[name]) >= 5, (name, learned[name])
    assert {"e.g", "obs", "fr"} <= learned["gcide"]


def test_learner_patterns_match_as_the_former_ones_on_random_strings() -> None:
    """Differential against FORMER_* on 100,000 seeded strings of word characters, periods,
    blanks, marks and closing punctuation: the same matches, groups and full matches."""
    rng = random.Random(11)
    alphabet = ["a", "b", "A", "1", "_", ".", ".", " ", "\n", "\t", '"', ")", "\u00e9", "\u0301", "-", "\u00a0"]
    failures = []
    for _ in range(100_000):
        s = "".join(rng.choice(alphabet) for _ in range(rng.randint(0, 14)))
        if (
            abbreviations._PERIOD_THEN_WORD.findall(s) != FORMER_PERIOD_THEN_WORD.findall(s)
            or abbreviations._LEARNER_WORD.findall(s) != FORMER_LEARNER_WORD.findall(s)
            or bool(abbreviations._LETTERS_AND_PERIODS.fullmatch(s)) != bool(FORMER_LETTERS_AND_PERIODS.fullmatch(s))
        ):
            failures.append(s)
    assert not failures, failures[:10]


class CountedWalks(Counter):
    """A Counter that counts how often its entries are walked."""

    walks = 0

    def items(self):  # type: ignore[override]
        self.walks += 1
        return super().items()

    def values(self):  # type: ignore[override]
        self.walks += 1
        return super().values()


def test_pruning_drops_the_rarest_entries_by_the_lowest_sufficient_cutoff_in_two_walks() -> None:
    """The rule of learn_abbreviations' docstring restated: raise a cut-off from 1 until at most
    `target` entries have a higher count, and drop the rest. Pruning a table whose counts are
    all near 1,000 reads it twice (one walk per cut-off value would be about 1,000 walks)."""
    rng = random.Random(12)
    for _ in range(2000):
        counts = Counter({(str(k), ""): rng.randint(1, 12) for k in range(rng.randint(0, 30))})
        target = rng.randint(0, 32)
        cutoff = 0
        while sum(count > cutoff for count in counts.values()) > target:
            cutoff += 1
        expected = Counter({key: count for key, count in counts.items() if count > cutoff})
        abbreviations._prune(counts, target)
        assert counts == expected
    table = CountedWalks({(str(k), ""): 1000 + k % 7 for k in range(10_000)})
    abbreviations._prune(table, 100)
    assert table.walks <= 2 and len(table) == 0


def test_abbreviations_are_learned_from_the_start_of_each_file(tmp_path):
    """Only the first `sample_bytes` of text of each file are read: "approx." recurring past
    that point of b.txt is not learned from b.txt alone, while the same text at the start of
    a.txt is."""
    text = "".join(f"The crate weighs approx. {i} stone and the barge carries it. Lamps burn all night long.\n\n" for i in range(40))
    filler = "".join(f"Entry {i} of the log says the sea was calm. The keeper slept.\n\n" for i in range(200))
    (tmp_path / "a.txt").write_text(text)
    (tmp_path / "b.txt").write_text(filler + text)
    config = resolve({"corpus": {"root": str(tmp_path)}})
    found = learned_abbreviations(str(tmp_path), ["a.txt"], config, sample_bytes=1 << 20)
    assert "approx" in found
    assert not found & {"it", "long", "night"}  # sentence ends before a capital are not abbreviations
    assert "approx" in learned_abbreviations(str(tmp_path), ["b.txt"], config, sample_bytes=1 << 20)
    assert "approx" not in learned_abbreviations(str(tmp_path), ["b.txt"], config, sample_bytes=len(filler) // 2)


def test_the_job_writes_the_learned_list_and_every_prepare_job_reads_it(tmp_path, monkeypatch):
    """The abbreviations job writes what learned_abbreviations finds in every file of the plan
    (two files, one chunk each, two abbreviations learned from each), sorted, one a line.
    UAX #29 (SB11) ends a sentence at "wgt. Ten" ("wgt" is in no built-in list); a prepare job
    of a build with segment.learn_abbreviations reads the list and keeps that document one
    sentence, while a build without it splits the sentence there."""
    first = "".join(f"The crate holds a qty. of {i} boxes and a ctn. of {i + 1} jars.\n\n" for i in range(40))
    second = "".join(f"The barge has a wgt. of {i} stone and its dpt. is {i % 5} feet.\n\n" for i in range(40))
    files = {"a.txt": first.encode(), "b.txt": (second + "The last crate has a wgt. Ten stone, the keeper said.\n").encode()}
    sentences = {}
    for learn in (True, False):
        (tmp_path / str(learn)).mkdir()
        layout, keys = planned_build(tmp_path / str(learn), monkeypatch, files, segment={"learn_abbreviations": learn}, corpus={"pack_mb": 0})
        if learn:
            abbreviations.main(["--build", "build"])
            listed = Path(layout.abbreviations).read_text(encoding="utf-8")
            config = resolve({"corpus": {"root": str(tmp_path / str(learn) / "raw")}})
            expected = learned_abbreviations(config["corpus"]["root"], ["a.txt", "b.txt"], config, abbreviations.SAMPLE_BYTES)
            assert listed == "".join(f"{word}\n" for word in sorted(expected)) and {"ctn", "dpt", "qty", "wgt"} <= expected
        for key in keys:
            prepare.main(["--build", "build", "--chunk", key])
        (row,) = [r for key in keys for r in pq.read_table(layout.prepared(key)).to_pylist() if "last crate" in " ".join(r["tokens"][0])]
        sentences[learn] = len(row["tokens"])
    assert sentences == {True: 1, False: 2}
