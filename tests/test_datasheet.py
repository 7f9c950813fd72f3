"""datasheet.md: the questions of Gebru et al., "Datasheets for Datasets" (Communications of the ACM
64(12), 2021), answered from the build where it can and left as marked blanks elsewhere. The
Markdown is read back with markdown-it-py (CommonMark with GFM tables), so the checks see the
figures a reader sees; they are compared with the manifest and stats/coverage.json."""

from __future__ import annotations

import copy
import json
from pathlib import Path

import pytest

from corpusmill import datasheet
from corpusmill.datasheet import BLANK, build_datasheet

markdown_it = pytest.importorskip("markdown_it")

# The blank mark as a reader sees it (bold).
SEEN_BLANK = BLANK.removeprefix("**").removesuffix("**")

# The seven sections of the paper, in its order.
PAPER_SECTIONS = [
    "Motivation", "Composition", "Collection process", "Preprocessing, cleaning, labeling", "Uses", "Distribution",
    "Maintenance",
]  # fmt: skip
# Questions of the paper, as it words them up to its examples in parentheses.
PAPER_QUESTIONS = [
    "For what purpose was the dataset created?",
    "Who funded the creation of the dataset?",
    "What do the instances that comprise the dataset represent",
    "How many instances are there in total",
    "Is there a label or target associated with each instance?",
    "Are there recommended data splits",
    "Are there any errors, sources of noise, or redundancies in the dataset?",
    "How was the data associated with each instance acquired?",
    "Over what timeframe was the data collected?",
    "Were any ethical review processes conducted",
    "Has the dataset been used for any tasks already?",
    "Are there tasks for which the dataset should not be used?",
    "When will the dataset be distributed?",
    "Will the dataset be updated",
]


def plain(token: object) -> str:
    """The text a reader sees in an inline token: text and code spans without their marks."""
    parts = {"text": lambda c: c.content, "code_inline": lambda c: c.content, "softbreak": lambda c: "\n", "hardbreak": lambda c: "\n"}
    return "".join(parts[child.type](child) for child in token.children if child.type in parts)


class Sheet:
    """A datasheet as a reader sees it: headings, and per question its tables and text."""

    def __init__(self, text: str) -> None:
        parser = markdown_it.MarkdownIt("commonmark").enable("table")
        self.sections: list[str] = []
        self.questions: dict[str, list[str]] = {}
        self.text: dict[str, str] = {}
        self.tables: dict[str, list[list[list[str]]]] = {}
        level, question = "", "(header)"
        row: list[str] | None = None
        for token in parser.parse(text):
            if token.type == "heading_open":
                level = token.tag
            elif token.type == "inline" and level:
                if level == "h2":
                    self.sections.append(token.content)
                    self.questions[token.content] = []
                elif level == "h3":
                    question = token.content
                    self.questions[self.sections[-1]].append(question)
                level = ""
            elif token.type == "table_open":
                self.tables.setdefault(question, []).append([])
            elif token.type == "tr_open":
                row = []
            elif token.type == "tr_close":
                self.tables[question][-1].append(row)
                row = None
            elif token.type == "inline" and row is not None:
                row.append(plain(token))
            elif token.type == "inline":
                self.text[question] = self.text.get(question, "") + plain(token) + "\n"

    def table(self, question: str, index: int = 0) -> list[dict[str, str]]:
        header, *rows = self.tables[question][index]
        return [dict(zip(header, row)) for row in rows]


def number(text: str) -> int:
    return int(text.replace(",", ""))


@pytest.fixture(scope="module")
def manifest(demo_build: Path) -> dict:
    return json.loads((demo_build / "manifest.json").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def coverage(demo_build: Path) -> dict:
    return json.loads((demo_build / "stats" / "coverage.json").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def sheet(manifest: dict, coverage: dict) -> Sheet:
    return Sheet(build_datasheet(manifest, coverage))


def test_the_datasheet_asks_the_questions_of_gebru_et_al_under_their_seven_sections(sheet: Sheet) -> None:
    assert sheet.sections == PAPER_SECTIONS
    asked = [question for section in PAPER_SECTIONS for question in sheet.questions[section]]
    assert asked == [question for _, questions in datasheet.QUESTIONS for question, _ in questions]
    for question in PAPER_QUESTIONS:
        assert any(heading.startswith(question) for heading in asked), question


def test_questions_the_build_cannot_answer_are_marked_for_the_maintainers(sheet: Sheet) -> None:
    blank = SEEN_BLANK
    for _section, questions in datasheet.QUESTIONS:
        for question, answer in questions:
            if answer is None:
                assert sheet.text[question].strip() == blank, question
    assert "For what purpose was the dataset created?" in sheet.text and blank in sheet.text["Who funded the creation of the dataset?"]


def test_the_counts_table_holds_each_split_s_figures_from_the_manifest(sheet: Sheet, manifest: dict) -> None:
    rows = {row["split"]: row for row in sheet.table("How many instances are there in total?")}
    assert list(rows) == ["train", "dev", "test"]
    for split, row in rows.items():
        figures = manifest["splits"][split]
        for key in ("documents", "sentences", "tokens"):
            assert number(row[key]) == figures[key], (split, key)
        for kind, count in figures["rows"].items():
            assert number(row[f"{kind} rows"]) == count, (split, kind)
        assert number(row["shard files"]) == len(figures["shards"])
        assert number(row["shard bytes"]) == sum(entry["bytes"] for entry in figures["shards"])


def test_sources_their_sizes_and_what_was_dropped_and_why_match_the_manifest_accounting(sheet: Sheet, manifest: dict) -> None:
    accounting = manifest["accounting"]
    sources = sheet.table("How was the data associated with each instance acquired?")
    largest_first = sorted(manifest["inputs"], key=lambda entry: (-entry["bytes"], entry["path"]))
    assert [row["file"] for row in sources] == [entry["path"] for entry in largest_first]
    total = f"Sources: {len(manifest['inputs'])} files, {sum(entry['bytes'] for entry in manifest['inputs']):,} bytes"
    assert total in sheet.text["How was the data associated with each instance acquired?"]
    for row, entry in zip(sources, largest_first):
        assert number(row["bytes"]) == entry["bytes"]
        assert entry["sha256"].startswith(row["SHA-256 (first 16)"])
        tally = accounting["files"][entry["path"]]
        assert (number(row["documents read"]), number(row["kept"])) == (tally["read"], tally["kept"])
    question = "Was any preprocessing, cleaning or labeling of the data done?"
    reasons = {row["reason"]: number(row["documents"]) for row in sheet.table(question, 0)}
    assert reasons == accounting["dropped"] and reasons["duplicate"] == 6 and reasons["few_letters"] == 1
    per_file = {row["file"]: row for row in sheet.table(question, 1)}
    assert set(per_file) == {path for path, tally in accounting["files"].items() if tally["dropped"]}
    for path, row in per_file.items():
        tally = accounting["files"][path]
        dropped = ", ".join(f"{reason} {count}" for reason, count in sorted(tally["dropped"].items()))
        assert (number(row["read"]), number(row["kept"]), row["dropped"]) == (tally["read"], tally["kept"], dropped)
    assert (
        f"Exact duplicates (same cleaned text) were removed: {accounting['dropped']['duplicate']} documents."
        in sheet.text["Are there any errors, sources of noise, or redundancies in the dataset?"]
    )


def test_vocabulary_and_out_of_vocabulary_figures_match_the_manifest_and_coverage(sheet: Sheet, manifest: dict, coverage: dict) -> None:
    vocabulary = manifest["vocabulary"]
    text = sheet.text["How was the vocabulary chosen?"]
    ids = f"{vocabulary['size']:,} ids: {len(vocabulary['reserved'])} reserved or unknown-class symbols"
    assert f"{ids} and {vocabulary['words']:,} tokens" in text
    assert "min_count 2" in text
    chosen = next(row for row in coverage["sizes"] if row["chosen"])
    assert f"covers {100 * chosen['train_coverage']:.2f} % of train tokens" in text
    missing = sheet.text["Is any information missing from individual instances?"]
    for split in ("train", "dev", "test"):
        assert f"{split} {100 * coverage['splits'][split]['unknown_rate']:.2f} %" in missing


def test_near_duplicate_and_contamination_figures_appear_when_the_manifest_has_them(manifest: dict) -> None:
    question = "Are there any errors, sources of noise, or redundancies in the dataset?"
    unmeasured = {key: value for key, value in manifest.items() if key not in ("near_duplicates", "contamination")}
    without = Sheet(build_datasheet(unmeasured)).text[question]
    assert "Near-duplicates: not measured by this build." in without and "Contamination: not measured by this build." in without
    measured = copy.deepcopy(manifest)
    measured["near_duplicates"] = {"documents": 1234, "threshold": 0.8}
    measured["contamination"] = {"dev": {"documents": 7}, "test": {"documents": 3}}
    text = Sheet(build_datasheet(measured)).text[question]
    for line in ("near_duplicates.documents: 1,234", "near_duplicates.threshold: 0.8", "contamination.dev.documents: 7",
                 "contamination.test.documents: 3"):  # fmt: skip
        assert line in text, line
    assert "not measured" not in text


def test_filled_in_metadata_answers_its_questions_instead_of_blanks(manifest: dict) -> None:
    filled = copy.deepcopy(manifest)
    filled["config"]["metadata"] = {
        "name": "harbour-town", "description": "Letters and logs of a harbour town.", "license": "CC-BY-4.0",
        "citation": "@misc{harbour,\n  title = {~~~ Harbour town}\n}", "url": "https://example.org/harbour", "version": "1.0.0",
        "date_published": "2024-05-01", "creators": [{"name": "Ada Lovelace", "email": "ada@example.org"}],
    }  # fmt: skip
    text = build_datasheet(filled)
    sheet = Sheet(text)
    assert text.startswith("# Datasheet: harbour-town\n\nLetters and logs of a harbour town.\n")
    assert "~~~~\n@misc{harbour,\n  title = {~~~ Harbour town}\n}\n~~~~\n" in text
    assert sheet.text["When will the dataset be distributed?"].startswith("Published 2024-05-01")
    assert (
        "https://spdx.org/licenses/CC-BY-4.0.html"
        in sheet.text["Will the dataset be distributed under a copyright or other intellectual property license, and/or under applicable terms of use?"]
    )
    assert "Ada Lovelace: ada@example.org" in sheet.text["How can the owner, curator or manager of the dataset be contacted?"]
    assert SEEN_BLANK not in sheet.text["Who created the dataset and on behalf of which entity?"]
    blank = Sheet(build_datasheet(manifest)).text
    assert blank["When will the dataset be distributed?"].startswith(SEEN_BLANK)


def test_files_not_read_are_counted_and_named_up_to_a_limit(manifest: dict) -> None:
    skipped = copy.deepcopy(manifest)
    skipped["not_read"] = {
        "unselected": [f"notes/{i:02d}.md" for i in range(25)], "excluded": ["drafts/a.txt"],
        "refused": [{"path": "link.txt", "reason": "symbolic link leading outside the corpus folder"}],
    }  # fmt: skip
    text = Sheet(build_datasheet(skipped)).text["Does the dataset contain all possible instances or is it a sample of instances from a larger set?"]
    assert "25 matched by no corpus.include pattern, 1 removed by a corpus.exclude pattern, 1 refused" in text
    assert "notes/19.md: unselected" in text and "notes/20.md" not in text
    assert f"… and {27 - datasheet.LISTED_FILES} more (manifest.json, key not_read)." in text


def test_a_corpus_of_many_files_keeps_its_tables_short_naming_the_largest_and_the_most_dropped(manifest: dict) -> None:
    many = copy.deepcopy(manifest)
    many["inputs"] = [{"path": f"part/{i:02d}.txt", "bytes": 1000 + i % 7, "sha256": "ab" * 32} for i in range(30)]
    many["accounting"]["files"] = {
        f"part/{i:02d}.txt": {"read": 10, "kept": 10 - i % 4, "pieces_added": 0, "truncated": 0, "replaced_sequences": 0,
                              "dropped": {"too_short": i % 4} if i % 4 else {}}
        for i in range(30)
    }  # fmt: skip
    sheet = Sheet(build_datasheet(many))
    sources = sheet.table("How was the data associated with each instance acquired?")
    expected = sorted(many["inputs"], key=lambda entry: (-entry["bytes"], entry["path"]))[: datasheet.LISTED_FILES]
    assert [row["file"] for row in sources] == [entry["path"] for entry in expected]
    assert (
        f"… and {30 - datasheet.LISTED_FILES} more (manifest.json, keys inputs and accounting.files)."
        in sheet.text["How was the data associated with each instance acquired?"]
    )
    question = "Was any preprocessing, cleaning or labeling of the data done?"
    losing = [row["file"] for row in sheet.table(question, 1)]
    ranked = sorted((path for path, tally in many["accounting"]["files"].items() if tally["dropped"]),
                    key=lambda path: (-sum(many["accounting"]["files"][path]["dropped"].values()), path))  # fmt: skip
    assert losing == ranked[: datasheet.LISTED_FILES] and len(ranked) == 22
    assert "Input files that lost documents (22 of 30), most first:" in sheet.text[question]
    assert f"… and {22 - datasheet.LISTED_FILES} more (manifest.json, key accounting.files)." in sheet.text[question]


@pytest.mark.parametrize("path", ["a|b.txt", "tick`s.txt", "``two``.txt", "`edge.txt", "tab\there.txt"])
def test_a_source_path_reads_back_unchanged_from_its_table_cell_and_list_item(manifest: dict, path: str) -> None:
    """A path with pipes or backticks stays one cell and one code span, in a table and in a list;
    a control character is shown escaped (Python's unicode_escape)."""
    odd = copy.deepcopy(manifest)
    odd["inputs"] = [{"path": path, "bytes": 10, "sha256": "ab" * 32}]
    odd["not_read"]["excluded"] = [path]
    sheet = Sheet(build_datasheet(odd))
    rows = sheet.table("How was the data associated with each instance acquired?")
    assert [row["file"] for row in rows] == [path.replace("\t", "\\t")]
    listed = sheet.text["Does the dataset contain all possible instances or is it a sample of instances from a larger set?"]
    assert f"\n{path.replace(chr(9), chr(92) + 't')}: excluded\n" in listed


def test_a_subword_build_says_how_its_pieces_were_learned(manifest: dict) -> None:
    subword = copy.deepcopy(manifest)
    subword["config"]["units"] = "subword"
    text = Sheet(build_datasheet(subword)).text
    assert "sentencepiece unigram model learned on at most 200,000 train sentences" in text["How was the vocabulary chosen?"]
    assert "encoded as UTF-8 byte pieces" in text["Is any information missing from individual instances?"]


def test_the_workflow_writes_the_datasheet_of_its_manifest_and_coverage(demo_build: Path, manifest: dict, coverage: dict) -> None:
    written = (demo_build / "report" / "datasheet.md").read_text(encoding="utf-8")
    assert written == build_datasheet(manifest, coverage) != build_datasheet(manifest)
