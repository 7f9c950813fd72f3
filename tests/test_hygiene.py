"""Near-duplicates and contamination in the real workflow (steps/hygiene.py, wired into prepare
and deduplicate), on real text.

Outside references: Debian's fortunes (/usr/share/games/fortunes, documents separated by "%"
lines), whose copies altered only in case, punctuation or spacing are what a held-out split must
not share with train; and an exact recount of shared 13-word n-grams with Python sets of tuples
(words found with the `regex` module's Unicode classes, independently of the vectorised code).
"""

from __future__ import annotations

import json
import random
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import pytest
import regex
import yaml

from conftest import REPO, require_file, run_workflow, scenario
from corpusmill import hygiene, settings
from corpusmill.layout import Layout

FORTUNES = Path("/usr/share/games/fortunes")
FILES = ("computers", "science", "work", "literature")
HYGIENE_REASONS = {"near_duplicate", "near_duplicate_other_split", "contaminated"}


def fortunes(name: str, low: int = 25, high: int = 200) -> list[str]:
    """The fortunes of one Debian file with low..high words, as single paragraphs (no blank
    lines inside; fortunes with overstriking left out)."""
    text = require_file(FORTUNES / name, "fortunes").read_text(encoding="utf-8", errors="replace")
    found = []
    for entry in regex.split(r"(?m)^%\n", text):
        entry = "\n".join(line for line in entry.splitlines() if line.strip())
        if "\b" not in entry and low <= len(entry.split()) <= high:
            found.append(entry)
    return found


def altered(text: str, rng: random.Random) -> str:
    """The same words, differing in case, punctuation and spacing."""
    words = text.split()
    out = []
    for word in words:
        word = word.upper() if rng.random() < 0.3 else word.lower() if rng.random() < 0.3 else word
        word = word.rstrip(",.;:!?") if rng.random() < 0.5 else word
        out.append(word + ("," if rng.random() < 0.1 else ""))
    return "  ".join(out[: len(out) // 2]) + "\n" + " ".join(out[len(out) // 2 :]) + "!"


def write_corpus(root: Path, originals: dict[str, list[str]], copies: list[str]) -> None:
    root.mkdir(parents=True, exist_ok=True)
    for name, texts in originals.items():
        (root / f"{name}.txt").write_text("\n\n".join(texts) + "\n", encoding="utf-8")
    if copies:
        (root / "copies.txt").write_text("\n\n".join(copies) + "\n", encoding="utf-8")


def paragraph_offsets(path: Path) -> list[int]:
    """Byte offset of each paragraph of a file written by write_corpus."""
    data = path.read_bytes()
    offsets, position = [], 0
    for block in data.split(b"\n\n"):
        offsets.append(position)
        position += len(block) + 2
    return offsets


@pytest.fixture(scope="module")
def planted(tmp_path_factory: pytest.TempPathFactory) -> dict:
    """A corpus of real fortunes and, in copies.txt, an altered copy of 24 of them: the corpus
    folder and each copy's (original file, original offset, copy offset)."""
    base = tmp_path_factory.mktemp("fortunes")
    rng = random.Random(19)
    originals = {name: fortunes(name)[:120] for name in FILES}
    chosen = sorted(rng.sample([(name, i) for name in FILES for i in range(len(originals[name]))], 24))
    copies = [altered(originals[name][i], rng) for name, i in chosen]
    root = base / "corpus"
    write_corpus(root, originals, copies)
    offsets = {name: paragraph_offsets(root / f"{name}.txt") for name in FILES}
    copy_offsets = paragraph_offsets(root / "copies.txt")
    pairs = [(f"{name}.txt", offsets[name][i], copy_offsets[k]) for k, (name, i) in enumerate(chosen)]
    return {"base": base, "root": root, "pairs": pairs}


def build(planted: dict, name: str, overrides: dict) -> tuple[Path, subprocess.CompletedProcess]:
    directory = planted["base"] / name
    result = run_workflow(directory, scenario("wide-held-out-splits", {"corpus": {"root": str(planted["root"])}, **overrides}))
    return directory / "build", result


@pytest.fixture(scope="module")
def dropped_build(planted: dict) -> tuple[Path, subprocess.CompletedProcess]:
    return build(planted, "drop", {})


def kept_documents(build_dir: Path) -> dict[tuple[str, int], str]:
    """(source, offset) → split of every document the build kept: the prepared rows less the
    removed lists."""
    layout = Layout(str(build_dir))
    chunks = json.loads(Path(layout.chunk_list).read_text())
    kept = {}
    for chunk in chunks:
        table = pq.read_table(layout.prepared(chunk), columns=["source", "offset", "split"])
        removed = {(r["source"], r["offset"]) for r in pq.read_table(layout.removed(chunk)).to_pylist()}
        kept.update({(r["source"], r["offset"]): r["split"] for r in table.to_pylist() if (r["source"], r["offset"]) not in removed})
    return kept


def test_every_altered_copy_of_a_real_fortune_is_clustered_with_it_and_all_but_the_anchor_dropped(dropped_build, planted) -> None:
    """Each planted pair lies in one cluster; a cluster keeps exactly one member; every other
    member is in stats/dropped.parquet as near_duplicate and counted in the accounting."""
    build_dir, _ = dropped_build
    members = pq.read_table(build_dir / "stats" / "near_duplicates.parquet").to_pylist()
    cluster_of = {(row["source"], row["offset"]): row["cluster"] for row in members}
    for source, original, copy in planted["pairs"]:
        assert cluster_of.get((source, original)) is not None, (source, original)
        assert cluster_of[(source, original)] == cluster_of.get(("copies.txt", copy)), (source, original, copy)
    per_cluster: dict[int, list[dict]] = {}
    for row in members:
        per_cluster.setdefault(row["cluster"], []).append(row)
    assert all(sum(row["kept"] for row in rows) == 1 and sum(row["anchor"] for row in rows) == 1 for rows in per_cluster.values())
    dropped = {(r["source"], r["offset"]) for r in pq.read_table(build_dir / "stats" / "dropped.parquet").to_pylist() if r["reason"] == "near_duplicate"}
    assert dropped == {(row["source"], row["offset"]) for row in members if not row["kept"]}
    assert len(dropped) >= len(planted["pairs"])
    accounting = json.loads((build_dir / "stats" / "accounting.json").read_text())
    assert accounting["dropped"]["near_duplicate"] == len(dropped) and accounting["balanced"]
    kept = kept_documents(build_dir)
    assert not dropped & set(kept)
    assert sum(json.loads((build_dir / "manifest.json").read_text())["splits"][s]["documents"] for s in ("train", "dev", "test")) == len(kept)


def test_the_manifest_summary_report_and_command_show_the_clusters(dropped_build, planted) -> None:
    build_dir, result = dropped_build
    manifest = json.loads((build_dir / "manifest.json").read_text())
    near = manifest["near_duplicates"]
    members = pq.read_table(build_dir / "stats" / "near_duplicates.parquet")
    assert near["documents"] == members.num_rows and near["clusters"] == len(set(members["cluster"].to_pylist()))
    assert near["dropped"] == {"near_duplicate": manifest["accounting"]["dropped"]["near_duplicate"]}
    assert manifest["contamination"]["documents"] == pq.read_table(build_dir / "stats" / "contamination.parquet").num_rows
    assert f"{near['clusters']:,} clusters of {near['documents']:,} documents" in result.stderr
    assert f"dropped near_duplicate {near['dropped']['near_duplicate']:,}" in result.stderr
    page = (build_dir / "report" / "index.html").read_text()
    assert 'id="hygiene"' in page and f'<td>dropped: near duplicate</td><td class="n">{near["dropped"]["near_duplicate"]:,}</td>' in page
    assert "Near-duplicates, as the build recorded them" in (build_dir / "report" / "datasheet.md").read_text()
    shown = subprocess.run(
        [sys.executable, "-m", "steps.cli", "hygiene", str(build_dir), "--clusters", "1000", "--chars", "100000"],
        capture_output=True, text=True, cwd=REPO, check=True,
    ).stdout  # fmt: skip
    source, original, copy = planted["pairs"][0]
    assert f"copies.txt byte {copy}" in shown and f"{source} byte {original}" in shown
    assert shown.count("\ncluster ") == near["clusters"]


def test_same_split_keeps_the_members_in_the_anchors_split_and_drops_the_others(planted) -> None:
    build_dir, _ = build(planted, "same_split", {"near_duplicates": {"policy": "same_split"}})
    members = pq.read_table(build_dir / "stats" / "near_duplicates.parquet").to_pylist()
    anchor_split = {row["cluster"]: row["split"] for row in members if row["anchor"]}
    for row in members:
        assert row["kept"] == (row["split"] == anchor_split[row["cluster"]])
        assert row["reason"] == ("" if row["kept"] else "near_duplicate_other_split")
    accounting = json.loads((build_dir / "stats" / "accounting.json").read_text())
    assert accounting["dropped"].get("near_duplicate_other_split", 0) == sum(not row["kept"] for row in members) > 0
    assert "near_duplicate" not in accounting["dropped"]


def test_policy_off_removes_only_the_exact_duplicates(planted) -> None:
    """The removed lists hold exactly what exact deduplication removes, as before near-duplicates
    were found; the clusters are still reported."""
    build_dir, _ = build(planted, "off", {"near_duplicates": {"policy": "off"}})
    layout = Layout(str(build_dir))
    chunks = json.loads(Path(layout.chunk_list).read_text())
    removed = pa.concat_tables([pq.read_table(layout.removed(chunk)) for chunk in chunks])
    duplicates = pq.read_table(layout.duplicates).select(["source", "offset"])
    assert sorted(removed.to_pylist(), key=str) == sorted(duplicates.to_pylist(), key=str)
    accounting = json.loads((build_dir / "stats" / "accounting.json").read_text())
    assert not HYGIENE_REASONS & set(accounting["dropped"])
    members = pq.read_table(build_dir / "stats" / "near_duplicates.parquet")
    assert members.num_rows >= 2 * len(planted["pairs"]) and pc.all(members["kept"]).as_py()


def words_of(tokens: list[list[str]]) -> list[str]:
    """The normalised words of a prepared document, recomputed: each token lowercased, every
    character but letters, marks, numbers and whitespace deleted, split at whitespace."""
    found = []
    for sentence in tokens:
        for token in sentence:
            found += regex.sub(r"[^\p{L}\p{M}\p{N}\s\p{Z}]", "", token.lower()).split()
    return found


def grams_of(words: list[str], n: int) -> list[tuple[str, ...]]:
    return [tuple(words[i : i + n]) for i in range(len(words) - n + 1)] if len(words) >= n else ([tuple(words)] if words else [])


def test_shared_13_grams_recounted_with_python_sets_agree_with_the_build(planted) -> None:
    """With policy off every document is kept, so the recount's train set is every kept train
    document's 13-grams; each measured dev/test document's gram count and shared count match."""
    build_dir, _ = build(planted, "off", {"near_duplicates": {"policy": "off"}})
    layout = Layout(str(build_dir))
    kept = kept_documents(build_dir)
    tokens = {}
    for chunk in json.loads(Path(layout.chunk_list).read_text()):
        for row in pq.read_table(layout.prepared(chunk), columns=["source", "offset", "tokens"]).to_pylist():
            tokens[(row["source"], row["offset"])] = row["tokens"]
    train = {gram for place, split in kept.items() if split == "train" for gram in grams_of(words_of(tokens[place]), 13)}
    measured = pq.read_table(layout.contamination).to_pylist()
    assert len(measured) == sum(split != "train" for split in kept.values())
    assert any(row["share"] == 1.0 for row in measured)  # the planted copies across splits
    for row in measured:
        grams = grams_of(words_of(tokens[(row["source"], row["offset"])]), 13)
        assert (row["grams"], row["shared"]) == (len(grams), sum(gram in train for gram in grams)), row


def test_contamination_drop_removes_and_counts_the_documents_above_the_threshold(planted) -> None:
    build_dir, result = build(planted, "dirty", {"near_duplicates": {"policy": "off"}, "contamination": {"drop": True}})
    measured = pq.read_table(build_dir / "stats" / "contamination.parquet").to_pylist()
    above = {(row["source"], row["offset"]) for row in measured if row["share"] >= 0.5}
    assert above and all(row["dropped"] == ((row["source"], row["offset"]) in above) for row in measured)
    dropped = {(r["source"], r["offset"]) for r in pq.read_table(build_dir / "stats" / "dropped.parquet").to_pylist() if r["reason"] == "contaminated"}
    assert dropped == above and not above & set(kept_documents(build_dir))
    manifest = json.loads((build_dir / "manifest.json").read_text())
    assert manifest["accounting"]["dropped"]["contaminated"] == manifest["contamination"]["dropped"] == len(above)
    assert f"{len(above):,} of {len(measured):,} dev/test documents at or above 0.5" in result.stderr and f"dropped {len(above):,}" in result.stderr
    page = (build_dir / "report" / "index.html").read_text()
    for row in measured:
        if (row["source"], row["offset"]) in above:
            cells = f'<td class="file">{row["source"]}</td><td class="n">{row["offset"]}</td><td>{row["split"]}</td>'
            assert cells + f'<td class="n">{row["share"]:.3f}</td><td>yes</td>' in page
    assert manifest["contamination"]["at_or_above_threshold"] == len(above) and "<h3>By source file</h3>" in page


def test_growing_the_corpus_never_moves_a_kept_document_and_drops_one_only_for_a_new_anchor(tmp_path: Path) -> None:
    """Three growth steps, each adding a file of new fortunes and altered copies of random
    earlier and new ones, rebuilt in place: a document kept before keeps its split; one kept
    before and dropped now is recorded as a near-duplicate whose cluster's anchor is not itself
    and is not the document that anchored it before; one dropped before is never kept again."""
    rng = random.Random(7)
    pool = [text for name in FILES for text in fortunes(name)[:40]]
    rng.shuffle(pool)
    root, seen = tmp_path / "corpus", []
    root.mkdir()
    before: dict[tuple[str, int], str] = {}
    anchors_before: dict[tuple[str, int], tuple[str, int]] = {}
    dropped_before: set[tuple[str, int]] = set()
    for step in range(3):
        new = pool[step * 40 : (step + 1) * 40]
        copies = [altered(text, rng) for text in rng.sample(seen + new, 8)]
        seen += new
        (root / f"step{step}.txt").write_text("\n\n".join(new + copies) + "\n", encoding="utf-8")
        run_workflow(tmp_path / "work", scenario("wide-held-out-splits", {"corpus": {"root": str(root)}}))
        build_dir = tmp_path / "work" / "build"
        kept = kept_documents(build_dir)
        members = pq.read_table(build_dir / "stats" / "near_duplicates.parquet").to_pylist()
        place = {row["cluster"]: (row["source"], row["offset"]) for row in members if row["anchor"]}
        anchors = {(row["source"], row["offset"]): place[row["cluster"]] for row in members}
        reasons = {(r["source"], r["offset"]): r["reason"] for r in pq.read_table(build_dir / "stats" / "dropped.parquet").to_pylist()}
        for document, split in before.items():
            if document in kept:
                assert kept[document] == split
            else:
                assert reasons[document] == "near_duplicate"
                assert anchors[document] not in (document, anchors_before.get(document, document))
        assert not dropped_before & set(kept)
        before, anchors_before = kept, anchors
        dropped_before = {document for document, reason in reasons.items() if reason in HYGIENE_REASONS}


def test_an_unquoted_off_policy_read_by_yaml_as_false_means_off() -> None:
    """YAML 1.1 (PyYAML, as Snakemake reads config files) turns `policy: off` into false."""
    raw = yaml.safe_load("near_duplicates:\n  policy: off\n")
    assert raw["near_duplicates"]["policy"] is False
    assert settings.resolve(raw)["near_duplicates"]["policy"] == "off"


def test_bands_that_do_not_divide_the_permutations_stop_the_run_naming_both_options() -> None:
    with pytest.raises(settings.ConfigError, match=r"near_duplicates\.bands = 12 does not divide near_duplicates\.permutations = 128"):
        settings.resolve({"near_duplicates": {"bands": 12}})


def test_without_deduplication_an_exact_copy_is_dropped_with_its_first_copy(dropped_build, planted, tmp_path: Path) -> None:
    """split.deduplicate: false keeps exact copies, but a copy of a document dropped as a
    near-duplicate goes with it: its text is the same, so its fate is too."""
    members = pq.read_table(dropped_build[0] / "stats" / "near_duplicates.parquet").to_pylist()
    dropped = {(row["source"], row["offset"]) for row in members if not row["kept"]}
    source, original, _ = next(pair for pair in planted["pairs"] if pair[:2] in dropped)
    root = tmp_path / "corpus"
    shutil.copytree(planted["root"], root)
    text = (root / source).read_bytes()[original:].split(b"\n\n")[0]
    (root / "exact.txt").write_bytes(text + b"\n")
    run_workflow(tmp_path / "work", scenario("wide-held-out-splits", {"corpus": {"root": str(root)}, "split": {"deduplicate": False}}))
    build_dir = tmp_path / "work" / "build"
    rows = {(row["source"], row["offset"]): row for row in pq.read_table(build_dir / "stats" / "near_duplicates.parquet").to_pylist()}
    first, copy = rows[(source, original)], rows[("exact.txt", 0)]
    assert first["cluster"] == copy["cluster"] and not first["kept"] and not copy["kept"] and copy["reason"] == "near_duplicate"
    reasons = {(r["source"], r["offset"]): r["reason"] for r in pq.read_table(build_dir / "stats" / "dropped.parquet").to_pylist()}
    assert reasons[("exact.txt", 0)] == "near_duplicate" and "duplicate" not in reasons.values()


def test_the_cluster_file_lists_members_by_cluster_then_file_and_offset_with_their_own_ids(dropped_build) -> None:
    """Outside references: Arrow's own sort of the file by (cluster, source, offset), and each
    member's id read from the prepared chunk that holds it."""
    build_dir, _ = dropped_build
    members = pq.read_table(build_dir / "stats" / "near_duplicates.parquet")
    assert members.num_rows > 2
    assert members.equals(members.sort_by([("cluster", "ascending"), ("source", "ascending"), ("offset", "ascending")]))
    layout = Layout(str(build_dir))
    ids = {}
    for chunk in set(members["chunk"].to_pylist()):
        for row in pq.read_table(layout.prepared(chunk), columns=["source", "offset", "doc_id"]).to_pylist():
            ids[(row["source"], row["offset"])] = row["doc_id"]
    assert [ids[(row["source"], row["offset"])] for row in members.to_pylist()] == members["doc_id"].to_pylist()


def test_verification_slots_of_rows_across_chunks_are_each_rows_own(dropped_build) -> None:
    """Outside reference: each chunk's slot file read with numpy.fromfile, its rows put in
    corpus order (file, then offset) by Arrow's sort of the signatures file; rows asked in
    shuffled order across every chunk."""
    build_dir, _ = dropped_build
    layout = Layout(str(build_dir))
    chunks = json.loads(Path(layout.chunk_list).read_text())
    signed = hygiene.CorpusSignatures([(layout.signatures(chunk), layout.verification(chunk)) for chunk in chunks])
    expected = []
    for chunk in chunks:
        table = pq.read_table(layout.signatures(chunk), columns=["source", "offset"])
        raw = np.fromfile(layout.verification(chunk), dtype="<u2").reshape(table.num_rows, -1)
        expected.append(raw[pc.sort_indices(table, [("source", "ascending"), ("offset", "ascending")]).to_numpy()])
    expected = np.concatenate(expected)
    rows = np.random.default_rng(3).permutation(len(signed))[: len(signed) // 2]
    assert np.array_equal(signed.slots_of(rows), expected[rows])
    assert np.array_equal(signed.slots_of(rows[::-1]), expected[rows[::-1]])


def mapped_resident_kib(path: str) -> int:
    """Resident KiB of this process's mappings of the file (the kernel's /proc/self/smaps)."""
    target, total, inside = str(Path(path).resolve()), 0, False
    for line in Path("/proc/self/smaps").read_text().splitlines():
        if regex.match(r"[0-9a-f]+-[0-9a-f]+ ", line):
            inside = line.endswith(" " + target)
        elif inside and line.startswith("Rss:"):
            total += int(line.split()[1])
    return total


@pytest.mark.skipif(not Path("/proc/self/smaps").exists(), reason="the kernel's per-mapping figures")
def test_verification_slots_read_leave_no_page_of_their_files_resident(dropped_build) -> None:
    """Outside reference: the kernel's resident size of each mapping. Mapped pages count in a
    job's memory, so the slots of every document read must leave none of them mapped."""
    build_dir, _ = dropped_build
    layout = Layout(str(build_dir))
    chunks = json.loads(Path(layout.chunk_list).read_text())
    signed = hygiene.CorpusSignatures([(layout.signatures(chunk), layout.verification(chunk)) for chunk in chunks])
    assert len(signed.slots_of(np.arange(len(signed)))) == len(signed)
    assert [mapped_resident_kib(layout.verification(chunk)) for chunk in chunks] == [0] * len(chunks)


def test_grams_are_read_a_row_group_at_a_time_and_equal_the_whole_column(dropped_build, tmp_path: Path) -> None:
    """Outside reference: Arrow's read of a signatures file's whole grams column. The file is
    rewritten in row groups of 7 rows, so the rows asked (every third, shuffled) span many."""
    build_dir, _ = dropped_build
    layout = Layout(str(build_dir))
    chunk = json.loads(Path(layout.chunk_list).read_text())[0]
    table = pq.read_table(layout.signatures(chunk))
    pq.write_table(table, tmp_path / "signatures.parquet", row_group_size=7)
    signed = hygiene.CorpusSignatures([(str(tmp_path / "signatures.parquet"), layout.verification(chunk))])
    assert pq.ParquetFile(tmp_path / "signatures.parquet").num_row_groups > 3
    order = pc.sort_indices(table, [("source", "ascending"), ("offset", "ascending")]).to_numpy()
    rows = np.random.default_rng(7).permutation(np.arange(0, len(signed), 3))
    got: dict[int, list[int]] = {}
    batches = 0
    for positions, values, starts in signed.grams(0, rows):
        batches += 1
        for position, low, high in zip(positions, starts[:-1], starts[1:]):
            got[int(rows[position])] = values[low:high].tolist()
    whole = table["grams"].to_pylist()
    assert batches > 3 and got == {int(row): whole[order[row]] for row in rows}
