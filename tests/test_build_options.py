"""Options off the default path, end to end: a salted content split with exact duplicates kept,
oversize documents split into pieces, and blocks that span the corpus with a padded last block.

One real workflow run (snakemake) on a generated corpus; the references are recomputed from
the build's own intermediate files: steps.split.assign_split over the stored fingerprints,
collections.Counter sums of the chunk tallies, and blocks cut in plain Python from the stream
shards (tests/test_windows.py's reference).
"""

from __future__ import annotations

import json
import random
import subprocess
import sys
from collections import Counter, defaultdict
from pathlib import Path

import pyarrow.parquet as pq
import pytest

from conftest import REPO, run_workflow, scenario
from corpusmill.split import assign_split
from tests.test_windows import reference_blocks

BLOCK_ROWS = scenario("block-rows")
SALT, FRACTIONS = BLOCK_ROWS["split"]["salt"], BLOCK_ROWS["split"]["fractions"]
LENGTH, STRIDE = BLOCK_ROWS["windows"]["blocks"]["length"], BLOCK_ROWS["windows"]["blocks"]["stride"]
PAD = 0
WORDS = "harbour ferry lantern copper meadow river signal winter kettle stone tide quay barrel clerk ledger rope gull".split()


def paragraph(rng: random.Random) -> str:
    sentences = [" ".join(rng.choice(WORDS) for _ in range(rng.randint(4, 11))).capitalize() + "." for _ in range(rng.randint(1, 4))]
    return " ".join(sentences)


def write_corpus(root: Path) -> None:
    """Three files sharing 50 paragraphs word for word (under other ids), and one paragraph of
    about 9 KB, which corpus.max_document_bytes = 2048 cuts into pieces."""
    rng = random.Random(2026)
    own = [paragraph(rng) for _ in range(150)]
    shared = own[:50]
    long = " ".join(paragraph(rng) for _ in range(120))
    root.mkdir(parents=True)
    (root / "a.txt").write_text("\n\n".join(own[:100] + [long]) + "\n", encoding="utf-8")
    (root / "b.txt").write_text("\n\n".join(shared[:35] + own[100:]) + "\n", encoding="utf-8")
    records = [{"text": text} for text in shared[35:]] + [{"text": paragraph(rng)} for _ in range(20)]
    (root / "c.jsonl").write_text("".join(json.dumps(r) + "\n" for r in records), encoding="utf-8")


@pytest.fixture(scope="module")
def build(tmp_path_factory: pytest.TempPathFactory) -> Path:
    directory = tmp_path_factory.mktemp("options")
    write_corpus(directory / "corpus")
    run_workflow(directory, scenario("block-rows", {"corpus": {"root": str(directory / "corpus")}}))
    return directory / "build"


def prepared_rows(build: Path) -> list[dict]:
    return [row for path in sorted((build / "interim" / "prepared").glob("*.parquet"))
            for row in pq.read_table(path, columns=["doc_id", "split", "fingerprint"]).to_pylist()]  # fmt: skip


def stream_rows(build: Path, split: str) -> list[tuple[str, list[int]]]:
    """(doc_id, ids) of a split's stream shards, file by file in manifest order."""
    manifest = json.loads((build / "manifest.json").read_text())
    rows = []
    for entry in manifest["splits"][split]["shards"]:
        if entry["kind"] == "stream":
            table = pq.read_table(build / entry["file"])
            rows += list(zip(table["doc_id"].to_pylist(), table["ids"].to_pylist()))
    return rows


def test_every_document_is_in_the_split_its_text_and_the_salt_draw(build: Path) -> None:
    """assign_split(fingerprint, configured salt) for every prepared row, and the stream shards
    hold each document in that split; the default salt would have put many elsewhere."""
    rows = prepared_rows(build)
    assert len(rows) > 200
    assert all(row["split"] == assign_split(row["fingerprint"], SALT, FRACTIONS) for row in rows)
    moved = sum(row["split"] != assign_split(row["fingerprint"], "corpusmill-split-v1", FRACTIONS) for row in rows)
    assert moved > len(rows) // 5
    expected = {row["doc_id"]: row["split"] for row in rows}
    shards = {doc_id: split for split in ("train", "dev", "test") for doc_id, _ in stream_rows(build, split)}
    assert shards == expected


def test_exact_duplicates_share_one_split_and_all_reach_it_when_kept(build: Path) -> None:
    """split.key = content: equal cleaned texts (equal fingerprints) land together, so no text
    is both trained on and held out; with deduplicate = false every copy is in the shards."""
    groups: dict[bytes, set[str]] = defaultdict(set)
    ids: dict[bytes, list[str]] = defaultdict(list)
    for row in prepared_rows(build):
        groups[row["fingerprint"]].add(row["split"])
        ids[row["fingerprint"]].append(row["doc_id"])
    repeated = [fp for fp, members in ids.items() if len(members) > 1]
    assert len(repeated) == 50
    assert all(len(groups[fp]) == 1 for fp in repeated)
    assert len({next(iter(groups[fp])) for fp in repeated}) == 3  # the groups themselves spread over the splits
    streamed = Counter(doc_id for split in ("train", "dev", "test") for doc_id, _ in stream_rows(build, split))
    assert all(streamed[doc_id] == 1 for fp in repeated for doc_id in ids[fp])
    assert json.loads((build / "manifest.json").read_text())["accounting"]["dropped"].get("duplicate", 0) == 0


def test_pieces_of_split_documents_are_accounted_for(build: Path) -> None:
    """collections.Counter over the chunk tallies (interim/prepared/*.tally.json) equals the
    manifest's accounting; pieces_added > 0 keeps it balanced, and kept equals the documents
    in the stream shards."""
    fields, dropped = Counter(), Counter()
    for path in (build / "interim" / "prepared").glob("*.tally.json"):
        tally = json.loads(path.read_text())
        fields.update({k: tally[k] for k in ("read", "pieces_added", "kept", "truncated", "replaced_sequences")})
        dropped.update(tally["dropped"])
    accounting = json.loads((build / "manifest.json").read_text())["accounting"]
    assert fields["pieces_added"] >= 3
    assert {k: accounting[k] for k in fields} == dict(fields) and accounting["dropped"] == dict(dropped)
    assert accounting["read"] + accounting["pieces_added"] == accounting["kept"] + sum(accounting["dropped"].values())
    assert accounting["balanced"] is True
    assert accounting["kept"] == sum(len(stream_rows(build, split)) for split in ("train", "dev", "test"))
    audit = subprocess.run([sys.executable, "-m", "corpusmill.cli", "audit", str(build)], cwd=REPO, capture_output=True, text=True)
    assert audit.returncode == 0, audit.stdout + audit.stderr


def test_corpus_blocks_are_the_joined_streams_cut_with_a_padded_last_block(build: Path) -> None:
    """Blocks across documents: each chunk's stream shard (one chunk per input file here),
    documents joined in file order, cut every STRIDE ids into L+1 ids with the last partial
    block padded (the plain-Python reference); dev and test keep the order, a chunk's train
    blocks are the same blocks shuffled."""
    manifest = json.loads((build / "manifest.json").read_text())
    padded = 0
    for split, figures in manifest["splits"].items():
        files = {(e["kind"], e["chunk"]): build / e["file"] for e in figures["shards"]}
        chunks = sorted({c for _, c in files})
        assert len(chunks) == 3, split
        for chunk in chunks:
            stream = [i for ids in pq.read_table(files[("stream", chunk)])["ids"].to_pylist() for i in ids]
            expected = reference_blocks(stream, LENGTH, STRIDE, "pad", PAD)
            got = pq.read_table(files[("block", chunk)])["ids"].to_pylist()
            if split == "train":
                assert Counter(map(tuple, got)) == Counter(map(tuple, expected)), (split, chunk)
            else:
                assert got == expected, (split, chunk)
            padded += bool(expected) and expected[-1][-1] == PAD
    assert padded >= 1  # at least one chunk ends in a padded block
