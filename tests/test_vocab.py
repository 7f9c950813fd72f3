"""Vocabulary: cutoffs, deterministic ids, reserved symbols, unknown classes, the file format."""

from __future__ import annotations

from collections import Counter

import numpy as np
import pyarrow as pa
import pytest

from steps.vocab import (
    HEADER, RESERVED, UNK, Cutoff, Lookup, build_vocabulary, choose_size, read_vocabulary, sort_by_frequency, unknown_class,
)


def counts_table(train: dict[str, int], dev: dict[str, int] | None = None) -> pa.Table:
    tokens = sorted(set(train) | set(dev or {}))
    dev = dev or {}
    return sort_by_frequency(pa.table({
        "token": tokens, "train": [train.get(t, 0) for t in tokens], "dev": [dev.get(t, 0) for t in tokens], "test": [0] * len(tokens),
    }))


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


def test_rows_carry_their_kind_and_reserved_symbols_count_zero():
    """vocabulary.tsv's kind column: reserved, unknown, word; <pad>, <s> and </s> never occur
    in the text (count 0), <unk> and the classes count the train tokens they stand for."""
    vocabulary = build_vocabulary(counts_table(TRAIN), Cutoff(min_count=2), "shape")
    assert vocabulary.kinds == ["reserved"] * 4 + ["unknown"] * 5 + ["word"] * 4
    assert [vocabulary.counts[i] for i in (0, 2, 3)] == [0, 0, 0]
    assert sum(vocabulary.counts[1:9]) == sum(c for c in TRAIN.values() if c < 2)


def test_shape_classes_for_rare_words():
    assert [unknown_class(t) for t in ["1,200", "ice-cold", "NASA", "Tüvvik", "!!", "rare"]] == [
        "<unk-digits>", "<unk-hyphenated>", "<unk-upper>", "<unk-title>", "<unk-symbol>", UNK,
    ]


def test_lookup_maps_known_words_and_classes_unknown_ones():
    vocabulary = build_vocabulary(counts_table(TRAIN), Cutoff(min_count=2), "shape")
    ids = Lookup(vocabulary, "shape").ids(pa.array(["the", "Oréla", "1,200", "Zed", "unseen", "!!"]))
    names = [vocabulary.tokens[i] for i in ids]
    assert names == ["the", "Oréla", "<unk-digits>", "<unk-title>", "<unk>", "<unk-symbol>"]
    single = build_vocabulary(counts_table(TRAIN), Cutoff(min_count=2), "single")
    assert Lookup(single, "single").ids(pa.array(["Zed", "the"])).tolist() == [1, 4]


def test_lookup_follows_the_configured_unknown_mode_whatever_the_vocabulary_holds():
    """A vocabulary made under the other mode (a frozen file reused): with unknown = single
    every OOV word maps to <unk> even when shape classes exist; with unknown = shape, classes
    the vocabulary lacks fall back to <unk>."""
    shaped = build_vocabulary(counts_table(TRAIN), Cutoff(min_count=2), "shape")
    words = pa.array(["1,200", "Zed", "the", "unseen", "!!"])
    assert [shaped.tokens[i] for i in Lookup(shaped, "single").ids(words)] == ["<unk>", "<unk>", "the", "<unk>", "<unk>"]
    single = build_vocabulary(counts_table(TRAIN), Cutoff(min_count=2), "single")
    assert [single.tokens[i] for i in Lookup(single, "shape").ids(words)] == ["<unk>", "<unk>", "the", "<unk>", "<unk>"]
    assert Lookup(shaped, "shape").ids(pa.array(["the", "the"])).tolist() == [9, 9]


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
    assert again == vocabulary and again.digest() == vocabulary.digest()
    assert path.read_text(encoding="utf-8").splitlines()[0] == HEADER
    (tmp_path / "bad.tsv").write_text(HEADER + "\n0\t<pad>\t0\treserved\n2\tx\t1\tword\n")
    with pytest.raises(ValueError, match=r"bad\.tsv: line 3"):
        read_vocabulary(tmp_path / "bad.tsv")
    (tmp_path / "wide.tsv").write_text(HEADER + "\n0\t<pad>\t0\treserved\n1\tx\t1\tword\textra\n")
    with pytest.raises(ValueError, match=r"wide\.tsv: line 3"):
        read_vocabulary(tmp_path / "wide.tsv")
    (tmp_path / "count.tsv").write_text(HEADER + "\n0\t<pad>\t0\treserved\n1\tx\tmany\tword\n")
    with pytest.raises(ValueError, match=r"count\.tsv: line 3"):
        read_vocabulary(tmp_path / "count.tsv")
    (tmp_path / "huge.tsv").write_text(HEADER + "\n0\t<pad>\t99999999999999999999999\treserved\n")
    with pytest.raises(ValueError, match=r"huge\.tsv: cannot be read as a vocabulary file \(.*Row #2.*99999999999999999999999"):
        read_vocabulary(tmp_path / "huge.tsv")


def test_file_keeps_tokens_that_look_like_csv_syntax(tmp_path):
    """Quotes, commas, 'null' and 'NA' are ordinary word tokens, read back unchanged."""
    odd = ['"', '""', "'quoted'", "a,b", "null", "NA", "nan", "#", "\\"]
    vocabulary = build_vocabulary(counts_table({token: 5 for token in odd}), Cutoff(min_count=1), "shape")
    path = tmp_path / "vocabulary.tsv"
    path.write_text(vocabulary.to_tsv(), encoding="utf-8")
    assert read_vocabulary(path).tokens == vocabulary.tokens
