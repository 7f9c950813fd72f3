"""Coverage: the figures of stats/coverage.json, recounted on tiny examples.

The reference is a recount of the token lists with collections.Counter (types, OOV types,
singletons, coverage of the k most frequent words), or the rate worked out by hand."""

from __future__ import annotations

from collections import Counter

import pyarrow as pa

from corpusmill.coverage import coverage_statistics, derived, encoded_figures, piece_description, size_table, word_description
from corpusmill.formats import Figures, ShardStats, Vocabulary
from corpusmill.layout import SPLITS

WORD_VOCABULARY = Vocabulary(
    tokens=["<pad>", "<unk>", "<s>", "</s>", "<unk-digits>", "the", "cat", "sat"],
    counts=[0, 3, 0, 0, 1, 3, 2, 1],
    kinds=["reserved"] * 4 + ["unknown"] + ["word"] * 3,
)
TEXT = {"train": "the cat sat the cat the dog dog mat 7".split(), "dev": "the dog cow cow 42".split(), "test": []}
COUNTED = {split: Counter(words) for split, words in TEXT.items()}


def counts_table() -> pa.Table:
    """stats/token_counts.parquet for TEXT: every word, most frequent in train first, ties by token."""
    words = sorted(set().union(*COUNTED.values()), key=lambda word: (-COUNTED["train"][word], word))
    return pa.table({"token": words, **{split: pa.array([COUNTED[split][w] for w in words], pa.int64()) for split in SPLITS}})


def known() -> set[str]:
    return set(WORD_VOCABULARY.tokens[WORD_VOCABULARY.first_word_id :])


def test_rates_are_the_figures_divided_as_named() -> None:
    """By hand: 2 of 8 tokens unknown; 3 byte pieces in 1 run, so 8 - 3 + 1 = 6 tokens without
    byte fallback, of which 2 + 1 unknown."""
    rates = derived(Figures(documents=1, sentences=2, tokens=8, unknown=2, words=4, byte_pieces=3, byte_runs=1))
    assert rates == {
        "documents": 1,
        "sentences": 2,
        "tokens": 8,
        "unknown_tokens": 2,
        "unknown_rate": 0.25,
        "words": 4,
        "tokens_per_word": 2.0,
        "tokens_per_sentence": 4.0,
        "byte_pieces": 3,
        "byte_runs": 1,
        "byte_piece_rate": 0.375,
        "unknown_rate_without_byte_fallback": 0.5,
    }
    assert derived(Figures(tokens=3, unknown=1))["unknown_rate"] == 0.333333


def test_rates_of_an_empty_split_are_zero_not_an_error() -> None:
    rates = derived(Figures())
    assert {key: value for key, value in rates.items() if value != 0} == {}


def test_figures_are_summed_per_split_and_per_input_file_over_the_chunks() -> None:
    """A file cut into two chunks adds up; a file absent from a split has zero figures there;
    unknown tokens per symbol are named by the symbol. Reference: Counter sums of the fields."""
    first, second = ShardStats(chunk="c1"), ShardStats(chunk="c2")
    first.sources["b.txt"] = {"train": Figures(documents=2, tokens=10, unknown=1, by_unknown={"1": 1})}
    first.sources["a.txt"] = {"dev": Figures(documents=1, tokens=4, unknown=2, by_unknown={"4": 2})}
    second.sources["b.txt"] = {"train": Figures(documents=1, tokens=5, unknown=2, by_unknown={"1": 1, "4": 1}), "test": Figures(tokens=3)}
    result = encoded_figures([first, second], WORD_VOCABULARY)
    parts = [(source, split, figures) for chunk in (first, second) for source, per in chunk.sources.items() for split, figures in per.items()]
    for split in SPLITS:
        expected = Counter()
        for _, part_split, figures in parts:
            if part_split == split:
                expected.update({"documents": figures.documents, "tokens": figures.tokens, "unknown_tokens": figures.unknown})
        assert {key: result["splits"][split][key] for key in ("documents", "tokens", "unknown_tokens")} == {
            key: expected[key] for key in ("documents", "tokens", "unknown_tokens")
        }
    assert list(result["sources"]) == ["a.txt", "b.txt"]
    assert result["sources"]["b.txt"]["train"]["tokens"] == 15 and result["sources"]["b.txt"]["train"]["unknown_rate"] == 0.2
    assert result["sources"]["a.txt"]["train"] == derived(Figures()) and result["sources"]["b.txt"]["dev"] == derived(Figures())
    assert result["unknown_classes"] == {"train": {"<unk-digits>": 1, "<unk>": 2}, "dev": {"<unk-digits>": 2}, "test": {}}


def test_word_types_oov_types_top_oov_words_and_train_singletons_equal_a_counter_recount() -> None:
    per_split, description = word_description(counts_table(), WORD_VOCABULARY, top=2)
    for split in SPLITS:
        present = set(COUNTED[split])
        assert (per_split[split]["types"], per_split[split]["oov_types"]) == (len(present), len(present - known()))
    # cow twice; dog and 42 once each, dog first as the table has it (more frequent in train).
    assert per_split["dev"]["top_oov"] == [["cow", 2], ["dog", 1]]
    assert per_split["test"]["top_oov"] == [] and "top_oov" not in per_split["train"]
    singletons = [word for word, n in COUNTED["train"].items() if n == 1]
    assert description["words"] == 3
    assert description["train_singletons"] == {
        "types_share": round(len(singletons) / len(COUNTED["train"]), 6),
        "tokens_share": round(len(singletons) / COUNTED["train"].total(), 6),
    }


def test_ties_among_the_top_oov_words_keep_the_table_order() -> None:
    """Deterministic output: 40 dev OOV words seen once, twice or three times are listed by dev
    count, ties as the counts table orders them (train count, then token), the order
    Counter.most_common keeps for ties."""
    words = [f"w{n:02d}" for n in range(40)]
    dev = Counter({word: 1 + n * 7 % 3 for n, word in enumerate(words)} | {"cat": 3})
    table = pa.table({"token": words + ["cat"], "train": [0] * 40 + [2], "dev": [dev[w] for w in words] + [3], "test": [0] * 41})
    table = table.sort_by([("train", "descending"), ("token", "ascending")])
    per_split, _ = word_description(table, WORD_VOCABULARY, top=30)
    assert per_split["dev"]["top_oov"] == [[word, n] for word, n in dev.most_common() if word not in known()][:30]


def recount(words: set[str]) -> dict:
    """Train coverage and dev/test OOV rate of a vocabulary of `words`, from the Counters."""
    figures = {"train_coverage": round(sum(COUNTED["train"][w] for w in words) / COUNTED["train"].total(), 6)}
    for split in ("dev", "test"):
        total = COUNTED[split].total()
        figures[f"{split}_oov_rate"] = round(sum(n for w, n in COUNTED[split].items() if w not in words) / total, 6) if total else 0.0
    return figures


def test_size_table_rows_equal_a_counter_recount_of_the_k_most_frequent_words_and_of_the_chosen_words() -> None:
    """Sizes at or above the 6 distinct train words collapse to one row of 6; the chosen row
    is the vocabulary's own 3 words, not the 3 most frequent (cat and dog tie, sat is rarer)."""
    table = counts_table()
    in_vocabulary = [token in known() for token in table["token"].to_pylist()]
    rows = size_table(table, (1, 2, 4, 10, 50), pa.array(in_vocabulary).to_numpy(zero_copy_only=False), words=3)
    ranked = [w for w, _ in sorted(COUNTED["train"].items(), key=lambda item: (-item[1], item[0]))]
    expected = [{"size": k, "chosen": False, **recount(set(ranked[:k]))} for k in (1, 2, 4, 6)]
    expected.insert(2, {"size": 3, "chosen": True, **recount(known())})
    assert rows == expected
    assert [row["train_coverage"] for row in rows] == [0.3, 0.5, 0.6, 0.8, 1.0]


def test_the_chosen_size_replaces_the_plain_row_of_the_same_size() -> None:
    table = counts_table()
    in_vocabulary = pa.array([token in known() for token in table["token"].to_pylist()]).to_numpy(zero_copy_only=False)
    assert [(row["size"], row["chosen"]) for row in size_table(table, (3,), in_vocabulary, words=3)] == [(3, True), (6, False)]


def test_an_empty_corpus_gives_one_chosen_row_of_zero_rates() -> None:
    empty = pa.table({"token": pa.array([], pa.string()), **{split: pa.array([], pa.int64()) for split in SPLITS}})
    rows = size_table(empty, (100,), pa.array([], pa.bool_()).to_numpy(zero_copy_only=False), words=0)
    assert rows == [{"size": 0, "chosen": True, "train_coverage": 0.0, "dev_oov_rate": 0.0, "test_oov_rate": 0.0}]


PIECE_VOCABULARY = Vocabulary(
    tokens=["<unk>", "<s>", "</s>", "<0x00>", "<0x01>", "▁a", "▁b", "c"],
    counts=[0, 0, 0, 0, 2, 9, 0, 1],
    kinds=["control"] * 3 + ["byte"] * 2 + ["piece"] * 3,
)


def test_a_piece_model_is_described_by_its_ids_by_kind_the_unused_ones_and_the_most_frequent() -> None:
    """Unused: byte <0x00> and piece ▁b (control ids are never counted in train)."""
    counts = pa.table({"token": ["▁a", "<0x01>", "c"], "train": [9, 2, 1], "dev": [1, 0, 0], "test": [0, 0, 0]})
    assert piece_description(counts, PIECE_VOCABULARY) == {
        "piece_ids": 3,
        "byte_ids": 2,
        "unused_in_train": 2,
        "most_frequent_train_pieces": [["▁a", 9], ["<0x01>", 2], ["c", 1]],
    }


def test_the_statistics_join_the_encoded_figures_with_the_description_of_the_units() -> None:
    chunk = ShardStats(chunk="c1")
    chunk.sources["a.txt"] = {"train": Figures(tokens=10, unknown=1), "dev": Figures(tokens=5, unknown=4)}
    words = coverage_statistics([chunk], counts_table(), WORD_VOCABULARY, top=1, frozen="frozen.tsv")
    assert (words["units"], words["vocabulary_size"], words["frozen"], words["words"]) == ("word", 8, "frozen.tsv", 3)
    assert words["splits"]["dev"]["unknown_rate"] == 0.8 and words["splits"]["dev"]["top_oov"] == [["cow", 2]]
    assert [row["size"] for row in words["sizes"]] == [3, 6]
    counts = pa.table({"token": ["▁a"], "train": [9], "dev": [0], "test": [0]})
    pieces = coverage_statistics([chunk], counts, PIECE_VOCABULARY, top=1, frozen=None)
    assert pieces["units"] == "subword" and pieces["piece_ids"] == 3 and "sizes" not in pieces and "types" not in pieces["splits"]["train"]
