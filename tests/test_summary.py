"""Summary: the end-of-run text, from the records a build writes.

Each expected line is written out by hand from the record, with the widths and number formats
of Python's format specification mini-language (`.3%`, `:>10`, `:,`); a rate whose
denominator is zero shows a dash, never 0.000%."""

from __future__ import annotations

from pathlib import Path

from corpusmill.summary import (
    DASH,
    block_share,
    failure_message,
    format_accounting,
    format_baseline,
    format_blocks,
    format_failures,
    format_hygiene,
    format_table,
)


def split(tokens: int, unknown: int, **more: object) -> dict:
    return {"tokens": tokens, "unknown_tokens": unknown, "unknown_rate": round(unknown / tokens, 6) if tokens else 0.0, **more}


WORDS = {
    "units": "word",
    "vocabulary_size": 10,
    "words": 6,
    "frozen": "frozen.tsv",
    "splits": {
        "train": split(1000, 25, types=300, oov_types=40),
        "dev": split(200, 9, types=80, oov_types=7, top_oov=[[f"w{i}", 20 - i] for i in range(12)]),
        "test": split(0, 0, types=0, oov_types=0, top_oov=[]),
    },
    "sizes": [
        {"size": 5, "chosen": False, "train_coverage": 0.9, "dev_oov_rate": 0.1, "test_oov_rate": 0.0},
        {"size": 6, "chosen": True, "train_coverage": 0.975, "dev_oov_rate": 0.045, "test_oov_rate": 0.0},
    ],
}


def test_a_word_build_shows_its_vocabulary_a_row_per_split_the_size_table_and_ten_dev_oov_words() -> None:
    assert format_table(WORDS).splitlines() == [
        "vocabulary: 10 ids, 6 words (frozen: frozen.tsv)",
        "split      tokens   unknown     rate    types OOV types",
        "train        1000        25   2.500%      300        40",
        "dev           200         9   4.500%       80         7",
        f"test            0         0        {DASH}        0         0",
        "    size  train coverage  dev OOV",
        "       5          90.00%   10.00%",
        "       6          97.50%    4.50%  <- chosen",
        "most frequent dev OOV words: " + ", ".join(f"w{i} ({20 - i})" for i in range(10)),
    ]


def test_a_word_build_without_tokens_shows_dashes_and_no_oov_words() -> None:
    empty = {name: {**WORDS["splits"]["test"]} for name in ("train", "dev", "test")}
    sizes = [{"size": 0, "chosen": True, "train_coverage": 0.0, "dev_oov_rate": 0.0, "test_oov_rate": 0.0}]
    lines = format_table({**WORDS, "words": 0, "frozen": None, "splits": empty, "sizes": sizes}).splitlines()
    assert lines[0] == "vocabulary: 10 ids, 0 words"
    assert lines[2] == f"train           0         0        {DASH}        0         0"
    assert lines[-1] == f"       0               {DASH}        {DASH}  <- chosen"


def test_a_size_table_without_dev_tokens_shows_train_coverage_and_a_dash_for_dev_oov() -> None:
    splits = {**WORDS["splits"], "dev": {**WORDS["splits"]["test"]}}
    lines = format_table({**WORDS, "splits": splits}).splitlines()
    assert lines[-2:] == [f"       5          90.00%        {DASH}", f"       6          97.50%        {DASH}  <- chosen"]


PIECES = {
    "units": "subword",
    "vocabulary_size": 300,
    "piece_ids": 40,
    "byte_ids": 256,
    "splits": {
        "train": split(500, 5, words=250, tokens_per_word=2.0, byte_piece_rate=0.02, unknown_rate_without_byte_fallback=0.016),
        "dev": split(80, 0, words=30, tokens_per_word=2.666667, byte_piece_rate=0.0, unknown_rate_without_byte_fallback=0.0),
        "test": split(0, 0, words=0, tokens_per_word=0.0, byte_piece_rate=0.0, unknown_rate_without_byte_fallback=0.0),
    },
}


def test_a_piece_build_shows_pieces_per_word_byte_pieces_and_the_rate_without_byte_fallback() -> None:
    assert format_table(PIECES).splitlines() == [
        "vocabulary: 300 ids, 40 pieces, 256 byte pieces",
        "split      tokens   unknown     rate  per word    bytes  unknown w/o fallback",
        "train         500         5   1.000%     2.000   2.000%                1.600%",
        "dev            80         0   0.000%     2.667   0.000%                0.000%",
        f"test            0         0        {DASH}         {DASH}        {DASH}                     {DASH}",
    ]


ACCOUNTING_EMPTY = {"read": 0, "kept": 0, "pieces_added": 0, "dropped": {}, "files": {}}
CORPUS_EMPTY = {"sources": [], "unselected": [], "excluded": [], "refused": []}


def test_accounting_of_an_empty_corpus_is_two_lines_of_zeros() -> None:
    assert format_accounting(ACCOUNTING_EMPTY, CORPUS_EMPTY, "build/dropped.parquet") == "documents: read 0, kept 0, dropped 0\nfiles: 0 read"


def file_figures(read: int, dropped: dict[str, int], replaced: int = 0, truncated: int = 0) -> dict:
    return {"read": read, "kept": read - sum(dropped.values()), "dropped": dropped, "replaced_sequences": replaced, "truncated": truncated}


def test_accounting_names_drops_by_count_files_not_read_and_the_files_with_most_changes() -> None:
    files = {
        "a.txt": file_figures(10, {"too_short": 2, "empty": 1}),
        "b.txt": file_figures(5, {}, replaced=4),
        "c.txt": file_figures(3, {}, truncated=1),
        "d.txt": file_figures(2, {}),
        "e.txt": file_figures(2000, {"too_short": 1000}),
    }
    accounting = {"read": 2020, "kept": 1017, "pieces_added": 3, "dropped": {"empty": 1, "too_short": 1002}, "files": files}
    corpus = {
        "sources": list(files),
        "unselected": ["n1.md", "n2.md", "n3.md", "n4.md"],
        "excluded": ["drafts/x.txt", "drafts/y.txt", "drafts/z.txt"],
        "refused": [{"path": "link.txt", "reason": "a link outside corpus.root"}],
    }
    assert format_accounting(accounting, corpus, "build/dropped.parquet", shown=2).splitlines() == [
        "documents: read 2,020 (+3 pieces of split documents), kept 1,017, dropped 1,003: too_short 1,002, empty 1",
        "files: 5 read; 4 not matched by corpus.include (n1.md, n2.md, n3.md, +1 more); "
        "3 excluded (drafts/x.txt, drafts/y.txt, drafts/z.txt); "
        "1 refused (link.txt: a link outside corpus.root)",
        "  e.txt: dropped too_short 1,000 (of 2,000 read)",
        "  b.txt: 4 byte sequences replaced (of 5 read)",
        "  and 2 more files with drops or replacements (all in the accounting of the build)",
        "every dropped document (file, byte offset, reason): build/dropped.parquet",
    ]


def test_a_failed_job_says_what_its_last_corpusmill_line_says_to_the_end_of_its_log(tmp_path: Path) -> None:
    log = tmp_path / "a.log"
    log.write_text("progress: x\ncorpusmill: first\ncorpusmill: a.txt: byte 12: invalid UTF-8\n\n  set corpus.invalid_utf8\n")
    assert failure_message(str(log)) == "corpusmill: a.txt: byte 12: invalid UTF-8\n  set corpus.invalid_utf8"


def test_a_failed_job_without_a_corpusmill_line_shows_its_last_three_lines_and_a_missing_log_says_so(tmp_path: Path) -> None:
    log = tmp_path / "b.log"
    log.write_text("Traceback (most recent call last):\n  File x\n\n    raise KeyError\nKeyError: 'y'\n")
    assert failure_message(str(log)) == "  File x\n    raise KeyError\nKeyError: 'y'"
    assert failure_message(str(tmp_path / "gone.log")) == "(its log is missing)"


def test_failures_name_each_failed_log_once_with_its_message(tmp_path: Path) -> None:
    (tmp_path / "a.log").write_text("corpusmill: stop here\n")
    listing = tmp_path / "failed-jobs.txt"
    listing.write_text(f"{tmp_path / 'a.log'}\n\n{tmp_path / 'a.log'}\n{tmp_path / 'gone.log'}\n")
    assert format_failures(str(listing)).splitlines() == [
        "corpusmill: 2 job(s) failed; what each said (the whole log is named):",
        f"- {tmp_path / 'a.log'}:",
        "    corpusmill: stop here",
        f"- {tmp_path / 'gone.log'}:",
        "    (its log is missing)",
    ]


def manifest(block_ids: int | None, stream_ids: int) -> dict:
    train = {"stream_ids": stream_ids} | ({} if block_ids is None else {"block_ids": block_ids})
    return {"splits": {"train": train}, "config": {"windows": {"blocks": {"length": 8, "span": "document", "remainder": "drop"}}}}


def test_blocks_holding_less_than_half_of_train_come_with_a_warning_and_half_without() -> None:
    low = format_blocks(manifest(49, 100))
    assert low.startswith("blocks (L=8, span document, remainder drop) hold 49.0% of train ids; warning: 51% of train is in no block")
    assert format_blocks(manifest(50, 100)) == "blocks (L=8, span document, remainder drop) hold 50.0% of train ids"


def test_no_blocks_or_no_stream_ids_give_no_share_and_no_line() -> None:
    assert block_share(manifest(None, 100)["splits"]["train"]) is None and format_blocks(manifest(None, 100)) == ""
    assert block_share(manifest(0, 0)["splits"]["train"]) is None and format_blocks(manifest(0, 0)) == ""
    assert block_share({"block_ids": 3, "stream_ids": 4}) == 0.75


def test_the_baseline_line_gives_the_highest_order_beside_add_one_and_a_dash_for_an_empty_split() -> None:
    baseline = {
        "order": 3,
        "smoothing": "interpolated",
        "splits": {
            "train": {"tokens": 900, "perplexity": {"1": 900.0, "2": 120.0, "3": 1234.5678}, "unigram_perplexity": 2000.0},
            "dev": {"tokens": 0, "perplexity": {"3": 0.0}, "unigram_perplexity": 0.0},
            "test": None,
        },
        "warnings": ["dev is empty"],
    }
    assert format_baseline(baseline).splitlines() == [
        "n-gram baseline (interpolated Kneser-Ney, order 3, counted on train): perplexity train 1,234.57, "
        f"dev {DASH}, test {DASH}; add-one unigram train 2,000.00, dev {DASH}, test {DASH}",
        "warning: dev is empty",
    ]


def hygiene(near_documents: int, above: int, quantiles: dict[str, float], drop: bool) -> dict:
    near = {"policy": "drop", "threshold": 0.8, "clusters": 2, "documents": near_documents, "clusters_across_splits": 1, "dropped": {"near_duplicate": 3}}
    dirty = {"documents": 1200, "at_or_above_threshold": above, "threshold": 0.5, "quantiles": quantiles, "max": 0.9, "drop": drop, "dropped": above}
    return {"ngram_words": 13, "near_duplicates": near, "contamination": dirty}


def test_hygiene_gives_clusters_drops_contamination_quantiles_and_the_command_to_review_them() -> None:
    assert format_hygiene(hygiene(5, 2, {"0.5": 0.01, "0.99": 0.6}, drop=False), "build").splitlines() == [
        "near-duplicates (policy drop, Jaccard >= 0.8): 2 clusters of 5 documents (1 across splits); dropped near_duplicate 3",
        "contamination (13-grams shared with train): 2 of 1,200 dev/test documents at or above 0.5 "
        "(quantiles 50% 0.010, 99% 0.600; max 0.900); kept (contamination.drop: false)",
        "review them with their text: corpusmill hygiene build",
    ]


def test_contaminated_documents_alone_also_get_the_command_to_review_them() -> None:
    found = format_hygiene(hygiene(0, 1, {"0.5": 0.01}, drop=True), "out dir").splitlines()
    assert found[1].endswith("(quantiles 50% 0.010; max 0.900); dropped 1")
    assert found[2] == "review them with their text: corpusmill hygiene out dir"


def test_hygiene_with_nothing_found_and_the_policy_off_says_so_without_a_review_line() -> None:
    found = hygiene(0, 0, {}, drop=True)
    found["near_duplicates"].update(policy="off", clusters=0, clusters_across_splits=0, dropped={})
    assert format_hygiene(found, "build").splitlines() == [
        "near-duplicates (policy off, Jaccard >= 0.8): 0 clusters of 0 documents (0 across splits); dropped none (policy off)",
        "contamination (13-grams shared with train): 0 of 1,200 dev/test documents at or above 0.5; dropped 0",
    ]
