"""`corpusmill compare OLD NEW` accounts for what a rebuild changed, on real edits built by the
real workflow: the demo corpus with a file added (Debian's fortunes text), a document edited
and a file removed; another vocabulary cutoff; a frozen vocabulary; another split salt; subword
units; and a rebuild with nothing changed.

Outside references, read without corpusmill code: document ids and their splits from the
stream shards (pyarrow), the two vocabulary.tsv files (csv module, collections.Counter),
shard files hashed with hashlib.sha256, and the raw text's byte offsets.
"""

from __future__ import annotations

import csv
import hashlib
import json
import shutil
import subprocess
import sys
from collections import Counter
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
import yaml

from conftest import DEMO, REPO, require_file, run_workflow, scenario
from corpusmill.chunks import IDENTITY_SCHEMA
from corpusmill.clean import CleanOptions, clean_text
from corpusmill.compare import EDITED, ID_CHANGED, SETTINGS, UNEXPLAINED, DocumentChanges, SplitSettings, compare_builds, render, split_reason
from corpusmill.split import assign_split, fingerprint

EDITED_FILE = "journals/weather_journal.txt"
ADDED_FILE = "fortunes/computers.txt"
REMOVED_FILE = "minutes/council_minutes.txt.zst"
DEFAULTS = yaml.safe_load((REPO / "workflow_config" / "config.yaml").read_text(encoding="utf-8"))


def build(directory: Path, root: Path, **sections: dict) -> Path:
    """The real workflow on `root`, one chunk per input file (so one shard file per file, split
    and kind)."""
    run_workflow(directory, scenario("one-chunk-per-file", {"corpus": {"root": str(root)}, **sections}))
    return directory / "build"


def edit_second_paragraph(root: Path) -> tuple[str, str]:
    """Append a sentence to the second paragraph of EDITED_FILE, chosen so that the edited text
    draws another split than the original (a lengthened paragraph also shifts the byte offset,
    hence the path:offset id, of every later paragraph). Returns the edited document's id and
    its new split."""
    path = root / EDITED_FILE
    raw = path.read_text(encoding="utf-8")
    paragraphs = raw.split("\n\n")
    original = paragraphs[1]
    options, split = CleanOptions.from_config(DEFAULTS["clean"]), DEFAULTS["split"]

    def draw(text: str) -> str:
        return assign_split(fingerprint(clean_text(text, options)), split["salt"], split["fractions"])

    edited = next(f"{original} A note added on day {day}." for day in range(1000) if draw(f"{original} A note added on day {day}.") != draw(original))
    paragraphs[1] = edited
    path.write_text("\n\n".join(paragraphs), encoding="utf-8")
    offset = len((paragraphs[0] + "\n\n").encode("utf-8"))
    return f"{EDITED_FILE}:{offset}", draw(edited)


@pytest.fixture(scope="module")
def corpora(tmp_path_factory: pytest.TempPathFactory) -> dict:
    """The demo corpus and an edited copy (a fortunes file added, one paragraph edited, the
    council minutes removed), with the edited document's id and new split."""
    base = tmp_path_factory.mktemp("compare")
    fortunes = require_file("/usr/share/games/fortunes/computers", "fortunes")
    old, new = DEMO, base / "raw-new"
    shutil.copytree(DEMO, new)
    (new / REMOVED_FILE).unlink()
    (new / ADDED_FILE).parent.mkdir()
    shutil.copyfile(fortunes, new / ADDED_FILE)
    edited_id, edited_split = edit_second_paragraph(new)
    return {"base": base, "old": old, "new": new, "edited_id": edited_id, "edited_split": edited_split}


@pytest.fixture(scope="module")
def base_build(demo_chunks_build: Path) -> Path:
    """The demo corpus, one chunk per file (shared with other tests)."""
    return demo_chunks_build


@pytest.fixture(scope="module")
def edited_build(corpora: dict) -> Path:
    return build(corpora["base"] / "edited", corpora["new"])


def stream_documents(build_dir: Path) -> dict[str, tuple[str, str]]:
    """doc_id → (split, input file name), read from the stream shards with pyarrow; with one
    chunk per file, a shard's name starts with its kind and its file's name
    (stream-weather_journal.txt-6c8b3ed0-0000.parquet)."""
    found = {}
    for split in ("train", "dev", "test"):
        for path in sorted((build_dir / "shards" / split).glob("stream-*.parquet")):
            name = path.name.removeprefix("stream-").rsplit("-", 2)[0]
            for doc_id in pq.read_table(path, columns=["doc_id"])["doc_id"].to_pylist():
                found[doc_id] = (split, name)
    return found


def splits_of(documents: dict[str, tuple[str, str]]) -> dict[str, str]:
    return {doc_id: split for doc_id, (split, _) in documents.items()}


def vocabulary_rows(build_dir: Path) -> list[str]:
    """The tokens of vocabulary.tsv in id order, read with the csv module."""
    with open(build_dir / "vocabulary.tsv", encoding="utf-8", newline="") as handle:
        rows = list(csv.reader(handle, delimiter="\t", quoting=csv.QUOTE_NONE))
    assert rows[0] == ["id", "token", "count", "kind"]
    return [row[1] for row in rows[1:]]


def shard_hashes(build_dir: Path) -> dict[str, str]:
    return {p.relative_to(build_dir).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest() for p in (build_dir / "shards").rglob("*.parquet")}


def compare_command(old: Path, new: Path, *options: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "corpusmill.cli", "compare", str(old), str(new), *options], capture_output=True, text=True)


def test_added_edited_and_removed_files_are_counted_per_file_as_the_stream_shards_recount_them(base_build: Path, edited_build: Path, corpora: dict) -> None:
    """Document ids per file from the two builds' stream shards (pyarrow): the added file's
    documents all added, the removed file's all removed; in the edited file the same number of
    documents, one changed (same id, new text) and every id after it moved (same text, new
    offset); every other file the same."""
    report = compare_builds(base_build, edited_build)
    before, after = stream_documents(base_build), stream_documents(edited_build)
    paths = {Path(p).name: p.relative_to(root).as_posix() for root in (corpora["old"], corpora["new"]) for p in root.rglob("*.*")}
    ids_before: dict[str, set[str]] = {path: set() for path in paths.values()}
    ids_after: dict[str, set[str]] = {path: set() for path in paths.values()}
    for documents, ids in ((before, ids_before), (after, ids_after)):
        for doc_id, (_, name) in documents.items():
            ids[paths[name]].add(doc_id)
    files = report["documents"]["files"]
    assert files[ADDED_FILE]["added"] == len(ids_after[ADDED_FILE]) > 0 and not ids_before[ADDED_FILE]
    assert files[REMOVED_FILE]["removed"] == len(ids_before[REMOVED_FILE]) > 0 and not ids_after[REMOVED_FILE]
    assert "added_ids" not in files[ADDED_FILE] and "removed_ids" not in files[REMOVED_FILE]  # whole files: counted, not listed
    edited = files[EDITED_FILE]
    old_ids, new_ids = ids_before[EDITED_FILE], ids_after[EDITED_FILE]
    assert edited["changed_ids"] == [corpora["edited_id"]]
    assert edited["moved"] == len(old_ids - new_ids) == len(new_ids - old_ids) > 0
    assert edited["added"] == edited["removed"] == 0
    assert edited["changed"] + edited["unchanged"] == len(old_ids & new_ids)
    others = set(paths.values()) - {ADDED_FILE, REMOVED_FILE, EDITED_FILE}
    assert len(others) == 5
    for source in others:
        assert ids_before[source] == ids_after[source]
        counted = files[source]
        assert counted["unchanged"] == len(ids_before[source]) > 0
        assert counted["added"] == counted["removed"] == counted["changed"] == counted["moved"] == 0
    totals = report["documents"]["totals"]
    assert totals["unchanged"] + totals["changed"] + totals["moved"] + totals["removed"] == len(before)
    assert totals["unchanged"] + totals["changed"] + totals["moved"] + totals["added"] == len(after)
    assert report["inputs"] == {"added": [ADDED_FILE], "removed": [REMOVED_FILE], "edited": [EDITED_FILE], "unchanged": len(others)}


def test_an_edited_document_that_changed_split_is_given_the_edit_as_reason(base_build: Path, edited_build: Path, corpora: dict) -> None:
    """The splits of every document in both builds, read from the stream shards (pyarrow): the
    only document found in another split is the edited one, and the comparison names it with
    the reason 'text edited'; nothing is unexplained."""
    before, after = splits_of(stream_documents(base_build)), splits_of(stream_documents(edited_build))
    edited_id = corpora["edited_id"]
    moved_split = {d for d in before.keys() & after.keys() if before[d] != after[d]}
    assert moved_split == {edited_id} and after[edited_id] == corpora["edited_split"]
    changes = compare_builds(base_build, edited_build)["documents"]["split_changes"]
    assert changes["by_reason"] == {EDITED: 1}
    assert [(c["doc_id"], c["old"], c["new"]) for c in changes["documents"]] == [(edited_id, before[edited_id], after[edited_id])]


def vocabulary_recount(old: Path, new: Path) -> dict:
    """Words in and out, moved and remapped ids, from the two vocabulary.tsv files (csv, Counter)."""
    a, b = vocabulary_rows(old), vocabulary_rows(new)
    ids_a, ids_b = {t: i for i, t in enumerate(a)}, {t: i for i, t in enumerate(b)}
    return {
        "entered": Counter(b) - Counter(a),
        "left": Counter(a) - Counter(b),
        "moved": sum(1 for t in ids_a.keys() & ids_b.keys() if ids_a[t] != ids_b[t]),
        "remapped": sum(1 for i in range(max(len(a), len(b))) if i >= len(a) or i >= len(b) or a[i] != b[i]),
    }


@pytest.fixture(scope="module")
def cutoff_build(corpora: dict) -> Path:
    return build(corpora["base"] / "cutoff", corpora["old"], vocabulary={"min_count": 3})


@pytest.mark.parametrize("pair", ["edited", "cutoff"])
def test_words_entering_and_leaving_and_ids_moved_equal_a_recount_of_the_vocabulary_files(
    pair: str, base_build: Path, edited_build: Path, cutoff_build: Path
) -> None:
    """Against the two vocabulary.tsv files read with csv and Counter: the edited corpus (new
    words from the fortunes file reorder the ids) and a higher min_count on the same corpus
    (words only leave, and the remaining words keep their ids, being the most frequent)."""
    new = edited_build if pair == "edited" else cutoff_build
    vocabulary = compare_builds(base_build, new)["vocabulary"]
    recount = vocabulary_recount(base_build, new)
    assert set(vocabulary["entered"]) == set(recount["entered"])
    assert set(vocabulary["left"]) == set(recount["left"])
    assert (vocabulary["moved"], vocabulary["remapped"]) == (recount["moved"], recount["remapped"])
    assert recount["left"] and recount["remapped"]
    if pair == "edited":
        assert recount["entered"] and recount["moved"]
    else:
        assert not recount["entered"] and not recount["moved"]
        assert compare_builds(base_build, new)["documents"]["totals"]["unchanged"] == len(stream_documents(base_build))


@pytest.fixture(scope="module")
def frozen_build(corpora: dict, base_build: Path) -> Path:
    frozen = shutil.copyfile(base_build / "vocabulary.tsv", corpora["base"] / "frozen-vocabulary.tsv")
    return build(corpora["base"] / "frozen", corpora["new"], vocabulary={"frozen": str(frozen)})


def test_with_a_frozen_vocabulary_no_id_moves_and_only_the_edited_files_shards_change(base_build: Path, frozen_build: Path) -> None:
    """The edited corpus built with the base build's vocabulary frozen: no word enters or leaves
    and no id moves; shard files, hashed with hashlib, keep their bytes for every untouched
    input file, and the comparison lists exactly the changed, added and removed ones."""
    report = compare_builds(base_build, frozen_build)
    vocabulary = report["vocabulary"]
    assert vocabulary["frozen"] == [False, True] and vocabulary["same_ids"]
    assert (vocabulary["entered"], vocabulary["left"], vocabulary["moved"], vocabulary["remapped"]) == ([], [], 0, 0)
    before, after = shard_hashes(base_build), shard_hashes(frozen_build)
    listed = {kind: {w: [] for w in ("changed", "added", "removed")} for kind in ("ngram", "block", "stream")}
    unchanged = 0
    for kinds in report["shards"].values():
        for kind, files in kinds.items():
            unchanged += files["unchanged"]
            for what in ("changed", "added", "removed"):
                listed[kind][what] += files[what]
    assert unchanged == sum(1 for f in before.keys() & after.keys() if before[f] == after[f]) > 0
    assert sorted(f for k in listed.values() for f in k["changed"]) == sorted(f for f in before.keys() & after.keys() if before[f] != after[f])
    assert sorted(f for k in listed.values() for f in k["added"]) == sorted(after.keys() - before.keys())
    assert sorted(f for k in listed.values() for f in k["removed"]) == sorted(before.keys() - after.keys())
    changed_stems = {Path(f).stem.split("-", 1)[1] for k in listed.values() for f in k["changed"]}
    assert changed_stems and all(stem.startswith("weather_journal.txt") for stem in changed_stems)


def test_a_new_split_salt_moves_documents_with_the_salt_as_their_reason(base_build: Path, corpora: dict) -> None:
    """The same corpus with another split.salt: the documents found in another split in the
    stream shards (pyarrow) are exactly those the comparison lists, each with the reason
    'split settings changed (split.salt)'."""
    salted = build(corpora["base"] / "salted", corpora["old"], split={"salt": "another-salt"})
    before, after = splits_of(stream_documents(base_build)), splits_of(stream_documents(salted))
    moved = {d for d in before.keys() & after.keys() if before[d] != after[d]}
    changes = compare_builds(base_build, salted)["documents"]["split_changes"]
    assert moved and {c["doc_id"] for c in changes["documents"]} == moved
    assert changes["by_reason"] == {f"{SETTINGS} (split.salt)": len(moved)}
    assert all((c["old"], c["new"]) == (before[c["doc_id"]], after[c["doc_id"]]) for c in changes["documents"])


def test_a_rebuild_with_nothing_changed_says_so_in_one_line(cutoff_build: Path, tmp_path: Path) -> None:
    """A build copied, then the workflow run again in its folder: one line, status 0."""
    kept = shutil.copytree(cutoff_build, tmp_path / "before")
    run_workflow(cutoff_build.parent, yaml.safe_load((cutoff_build.parent / "override.yaml").read_text(encoding="utf-8")))
    result = compare_command(kept, cutoff_build)
    assert result.returncode == 0, result.stderr
    assert result.stdout.count("\n") == 1 and result.stdout.startswith("no change:")


def test_json_holds_what_the_text_shows(base_build: Path, edited_build: Path, tmp_path: Path) -> None:
    """--json PATH writes the comparison (the same as compare_builds) and prints the text;
    --json - prints only the JSON."""
    written = tmp_path / "diff.json"
    result = compare_command(base_build, edited_build, "--json", str(written))
    assert result.returncode == 0, result.stderr
    report = json.loads(written.read_text(encoding="utf-8"))
    assert report == json.loads(json.dumps(compare_builds(base_build, edited_build)))
    assert result.stdout.strip() == render(report)
    printed = compare_command(base_build, edited_build, "--json", "-")
    assert json.loads(printed.stdout) == report


def test_a_split_no_reason_explains_is_reported_as_a_bug(base_build: Path, tmp_path: Path) -> None:
    """A copy of the build whose prepared tables put one document in another split than its
    draw (what a bug in the split would do): the comparison calls it unexplained, says so on
    stderr and exits with status 3."""
    copy = Path(shutil.copytree(base_build, tmp_path / "bugged"))
    table_path = sorted((copy / "interim" / "prepared").glob("*.parquet"))[0]
    table = pq.read_table(table_path)
    splits = table["split"].to_pylist()
    splits[0] = "dev" if splits[0] != "dev" else "test"
    pq.write_table(table.set_column(table.schema.get_field_index("split"), "split", pa.array(splits, pa.string())), table_path)
    result = compare_command(base_build, copy)
    assert result.returncode == 3
    assert "BUG" in result.stderr and f"({UNEXPLAINED})" in result.stdout


def test_a_build_without_its_interim_tables_is_compared_without_documents(base_build: Path, edited_build: Path, tmp_path: Path) -> None:
    """Per-document records live in interim/: without them the comparison says which file is
    missing and what to do, and still compares everything else."""
    copy = Path(shutil.copytree(base_build, tmp_path / "public-only"))
    shutil.rmtree(copy / "interim")
    report = compare_builds(copy, edited_build)
    assert not report["documents"]["compared"]
    assert "interim/prepared/" in report["documents"]["reason"] and "keep the whole build folder" in report["documents"]["reason"]
    assert report["vocabulary"]["compared"] and report["coverage"]["compared"]
    assert "documents: not compared:" in render(report)


def test_a_manifest_naming_a_vocabulary_outside_the_build_is_refused(base_build: Path, tmp_path: Path) -> None:
    """A manifest entry leading outside its build folder is never opened: the message names
    the entry and exits with 'corpusmill: '."""
    copy = Path(shutil.copytree(base_build, tmp_path / "hostile"))
    manifest = json.loads((copy / "manifest.json").read_text(encoding="utf-8"))
    manifest["vocabulary"]["file"] = "../../outside.tsv"
    (copy / "manifest.json").write_text(json.dumps(manifest), encoding="utf-8")
    result = compare_command(base_build, copy)
    assert result.returncode == 1
    assert result.stderr.startswith("corpusmill: ") and 'vocabulary.file "../../outside.tsv" leads outside the build folder' in result.stderr


def test_word_and_subword_builds_compare_documents_but_not_ids(base_build: Path, corpora: dict) -> None:
    """Subword units on the same corpus: documents and splits match one for one (units do not
    draw splits), coverage is compared, and the vocabularies are not compared id by id."""
    pieces = build(corpora["base"] / "subword", corpora["old"], units="subword", subword={"vocab_size": 400})
    report = compare_builds(base_build, pieces)
    assert report["documents"]["totals"]["unchanged"] == len(stream_documents(base_build)) == len(stream_documents(pieces))
    assert report["documents"]["split_changes"]["total"] == 0
    assert report["vocabulary"]["compared"] is False and "units differ" in report["vocabulary"]["reason"]
    assert report["coverage"]["compared"] and "vocabulary" in report["changed"]


def blake2b_split(key: bytes, salt: str, fractions: dict[str, float]) -> str:
    """The split draw as README describes it, written out with hashlib: a 64-bit BLAKE2b of the
    key, keyed by the salt, as a share of 2**64 against the cumulative fractions."""
    position = int.from_bytes(hashlib.blake2b(key, digest_size=8, key=salt.encode("utf-8")).digest(), "big") / 2**64
    bound = 0.0
    for name in ("train", "dev", "test"):
        bound += fractions[name]
        if position < bound:
            return name
    return "test"


def test_split_reasons_follow_from_drawing_each_document_again() -> None:
    """Each reason checked against draws computed with hashlib (blake2b_split): an edit that
    alone moves the document, a salt change that alone moves it, both needed together, a new
    path:offset id under split.key: id, and a recorded split that is not its build's own draw
    (unexplained)."""
    fractions = {"train": 0.5, "dev": 0.25, "test": 0.25}
    old, new = SplitSettings("content", "salt-a", tuple(sorted(fractions.items()))), SplitSettings("content", "salt-b", tuple(sorted(fractions.items())))
    keys = [hashlib.blake2b(str(n).encode(), digest_size=16).digest() for n in range(400)]

    def pick(condition) -> bytes:
        return next(k for k in keys if condition(k))

    def draws(key: bytes) -> tuple[str, str]:
        return blake2b_split(key, "salt-a", fractions), blake2b_split(key, "salt-b", fractions)

    same = pick(lambda k: draws(k)[0] == draws(k)[1])
    moved_by_edit = pick(lambda k: draws(k)[0] != draws(same)[0] and draws(k)[0] == draws(k)[1])
    assert split_reason(("d", same, draws(same)[0]), ("d", moved_by_edit, draws(moved_by_edit)[0]), old, old) == EDITED
    salted = pick(lambda k: draws(k)[0] != draws(k)[1])
    assert split_reason(("d", salted, draws(salted)[0]), ("d", salted, draws(salted)[1]), old, new) == f"{SETTINGS} (split.salt)"
    both = pick(lambda k: draws(k)[1] not in (draws(same)[0], draws(k)[0]))
    assert split_reason(("d", same, draws(same)[0]), ("d", both, draws(both)[1]), old, new) == f"{EDITED} and {SETTINGS} (split.salt)"
    by_id = SplitSettings("id", "salt-a", tuple(sorted(fractions.items())))
    ids = [f"notes.txt:{offset}" for offset in range(400)]
    shifted = next(i for i in ids[1:] if blake2b_split(i.encode(), "salt-a", fractions) != blake2b_split(ids[0].encode(), "salt-a", fractions))
    first, later = (blake2b_split(i.encode(), "salt-a", fractions) for i in (ids[0], shifted))
    assert split_reason((ids[0], same, first), (shifted, same, later), by_id, by_id) == ID_CHANGED
    wrong = next(s for s in fractions if s != draws(same)[0])
    assert split_reason(("d", same, draws(same)[0]), ("d", same, wrong), old, old) == UNEXPLAINED
    assert split_reason(("d", same, wrong), ("d", same, draws(same)[0]), old, old) == UNEXPLAINED
    not_drawn = next(s for s in fractions if s not in draws(salted))
    assert split_reason(("d", salted, not_drawn), ("d", salted, draws(salted)[1]), old, new) == UNEXPLAINED


def test_a_damaged_prepared_table_is_named_and_no_change_is_not_claimed(base_build: Path, tmp_path: Path) -> None:
    """A copy of the build with one prepared chunk table truncated: the documents are not
    compared, the reason names that file, and the account is not the one-line 'no change'
    although every other part is equal."""
    copy = Path(shutil.copytree(base_build, tmp_path / "damaged"))
    victim = sorted((copy / "interim" / "prepared").glob("*.parquet"))[0]
    victim.write_bytes(victim.read_bytes()[:100])
    report = compare_builds(base_build, copy)
    assert not report["documents"]["compared"] and str(victim) in report["documents"]["reason"]
    assert report["changed"] == ["documents (not compared)"]
    assert not render(report).startswith("no change")


def identities(rows: list[tuple[str, int, str, bytes]]) -> pa.Table:
    """Identity rows (file, offset, split, content hash) with path:offset ids, as a prepared
    chunk table holds them."""
    columns = {
        "doc_id": [f"{source}:{offset}" for source, offset, _, _ in rows],
        "source": [r[0] for r in rows], "offset": [r[1] for r in rows], "split": [r[2] for r in rows], "fingerprint": [r[3] for r in rows],
    }  # fmt: skip
    return pa.Table.from_pydict(columns, schema=IDENTITY_SCHEMA)


def test_equal_texts_in_one_file_pair_in_offset_order_when_their_offsets_shift() -> None:
    """A hand-worked example: a file holding texts P, A, A, B, C at offsets 0, 10, 20, 30, 40;
    the new build has a longer first paragraph P' at 0 (changed), then A, A, B at 15, 25, 35
    (moved: the k-th A gone pairs with the k-th A come), C gone and D new at 45; another file
    unchanged."""
    p, p2, a, b, c, d = (bytes([n]) * 16 for n in range(6))
    settings = SplitSettings("id", "s", (("dev", 0.0), ("test", 0.0), ("train", 1.0)))
    old = identities([("f.txt", 0, "train", p), ("f.txt", 10, "train", a), ("f.txt", 20, "train", a), ("f.txt", 30, "train", b),
                      ("f.txt", 40, "train", c), ("g.txt", 0, "train", d)])  # fmt: skip
    new = identities([("f.txt", 0, "train", p2), ("f.txt", 15, "train", a), ("f.txt", 25, "train", a), ("f.txt", 35, "train", b),
                      ("f.txt", 45, "train", d), ("g.txt", 0, "train", d)])  # fmt: skip
    changes = DocumentChanges(frozenset({"f.txt", "g.txt"}), settings, settings)
    changes.add_group(old, new)
    report = changes.to_json()
    assert report["files"]["f.txt"] == {
        "added": 1, "removed": 1, "changed": 1, "moved": 3, "unchanged": 0,
        "added_ids": ["f.txt:45"], "removed_ids": ["f.txt:40"], "changed_ids": ["f.txt:0"],
        "moved_ids": [["f.txt:10", "f.txt:15"], ["f.txt:20", "f.txt:25"], ["f.txt:30", "f.txt:35"]],
    }  # fmt: skip
    assert report["files"]["g.txt"]["unchanged"] == 1 and report["split_changes"]["total"] == 0
