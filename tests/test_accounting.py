"""Accounting: every document read is kept or recorded as dropped with its reason, per file;
every file under the corpus root is read or listed as not read; problems name every bad file."""

from __future__ import annotations

import bz2
import gzip
import json
import lzma
import re
import subprocess
import sys
import zlib
from collections import Counter
from pathlib import Path

import pyarrow.parquet as pq
import pytest
import zstandard

from conftest import REPO, run_workflow, scenario
from corpusmill.accounting import FileTally, Tally, merge, problems_message
from corpusmill.ingest import Chunk, CorpusError, ReadOptions, chunk_key, foreign_encoding, read_documents
from corpusmill.progress import Progress, running_jobs
from corpusmill.tidy import stale_files

# --- the tally of a chunk ----------------------------------------------------------------------


def test_a_tally_keeps_counts_and_drops_per_file_and_the_totals_add_up():
    tally = Tally()
    tally.start("a.txt")
    tally.file.read += 3
    tally.file.kept += 2
    tally.drop("too_short", 40)
    tally.start("b.txt")
    tally.file.read += 1
    tally.drop("invalid_utf8", 0)
    assert tally.read == 4 and tally.kept == 2 and dict(tally.dropped) == {"too_short": 1, "invalid_utf8": 1}
    assert {s: f["dropped"] for s, f in tally.as_dict()["files"].items()} == {"a.txt": {"too_short": 1}, "b.txt": {"invalid_utf8": 1}}
    assert tally.drops.table().to_pylist() == [
        {"source": "a.txt", "offset": 40, "reason": "too_short"},
        {"source": "b.txt", "offset": 0, "reason": "invalid_utf8"},
    ]


def test_merging_counts_each_file_over_its_chunks_and_its_removed_duplicates():
    """A file cut into two chunks is summed; removed duplicates move from kept to dropped."""
    first = {"files": {"big.txt": FileTally(read=5, kept=5).as_dict()}}
    second = {"files": {"big.txt": FileTally(read=4, kept=3, dropped={"empty": 1}).as_dict(), "s.txt": FileTally(read=1, kept=1).as_dict()}}
    merged = merge([first, second], {"big.txt": 2})
    assert merged["files"]["big.txt"] == FileTally(read=9, kept=6, dropped={"empty": 1, "duplicate": 2}).as_dict()
    assert (merged["read"], merged["kept"], merged["dropped"], merged["balanced"]) == (10, 7, {"duplicate": 2, "empty": 1}, True)
    assert merge([{"files": {"x": FileTally(read=2, kept=1).as_dict()}}], {})["balanced"] is False


def test_problems_of_every_chunk_are_named_in_one_message():
    tallies = [
        {"problems": [{"source": "a.txt", "message": "a.txt: invalid UTF-8"}]},
        {"problems": []},
        {"problems": [{"source": "b", "message": "b: damaged"}]},
    ]
    message = problems_message(tallies)
    assert message.startswith("corpusmill: 2 input file(s) cannot be read as configured:") and "a.txt: invalid UTF-8" in message and "b: damaged" in message
    assert problems_message([{"problems": []}]) is None


# --- reading: foreign encodings, damaged compressed files, every bad file ----------------------


TEXT = "The lantern keeper wrote a note about the fog.\n\nThe second paragraph follows here.\n" * 40


@pytest.mark.parametrize("encoding", ["utf-16-le", "utf-16-be", "utf-32-le", "utf-32-be", "utf-16", "utf-32"])
def test_utf16_and_utf32_text_is_recognised_with_or_without_a_byte_order_mark(encoding: str):
    """Python's codecs as the reference encoder ("utf-16" and "utf-32" write a byte order mark)."""
    data = TEXT.encode(encoding)
    expected = encoding.upper().replace("-", "").replace("UTF16", "UTF-16").replace("UTF32", "UTF-32")
    found = foreign_encoding(data, file_start=True)
    assert found is not None and found.startswith(expected[:6])
    if encoding.endswith(("le", "be")):
        assert found == expected.replace("LE", "LE").replace("BE", "BE")
    assert foreign_encoding(TEXT.encode("utf-8"), file_start=True) is None
    assert foreign_encoding(b"a\x00b and a NUL in ordinary text", file_start=True) is None


def _read_all(root: Path, name: str, **options) -> list:
    return list(read_documents(root, Chunk(chunk_key(name, 0), (name,)), 1 << 30, ReadOptions(**options), Tally()))


def test_utf16_text_stops_with_advice_to_convert_or_is_dropped(tmp_path: Path):
    (tmp_path / "wide.txt").write_bytes(TEXT.encode("utf-16"))
    with pytest.raises(CorpusError, match=r"wide\.txt: looks like UTF-16LE text, not UTF-8 .*iconv -f UTF-16LE -t UTF-8"):
        _read_all(tmp_path, "wide.txt")
    tally = Tally()
    assert list(read_documents(tmp_path, Chunk("k", ("wide.txt",)), 1 << 30, ReadOptions(invalid_utf8="replace"), tally)) == []
    assert dict(tally.dropped) == {"invalid_utf8": tally.read}


def _compress(data: bytes, codec: str) -> bytes:
    return {".gz": gzip.compress, ".bz2": bz2.compress, ".xz": lzma.compress, ".zst": zstandard.ZstdCompressor().compress}[codec](data)


def _recoverable(packed: bytes, codec: str) -> int:
    """What the codec's own streaming decompressor yields from the damaged bytes: the text
    that can be read before the damage (the outside reference for the message)."""
    decoder = {
        ".gz": lambda: zlib.decompressobj(wbits=31), ".bz2": bz2.BZ2Decompressor, ".xz": lzma.LZMADecompressor,
        ".zst": lambda: zstandard.ZstdDecompressor().decompressobj(),
    }[codec]()  # fmt: skip
    return len(decoder.decompress(packed))


@pytest.mark.parametrize("codec", [".gz", ".bz2", ".xz", ".zst"])
def test_a_truncated_compressed_file_says_how_much_text_was_read_before_the_damage(tmp_path: Path, codec: str):
    data = "".join(f"Paragraph {n} of the harbour log tells of tides and of ships that came in late.\n\n" for n in range(30_000)).encode()
    packed = _compress(data, codec)
    cut = packed[: len(packed) * 3 // 5]
    expected = _recoverable(cut, codec)
    assert 0 < expected < len(data)
    (tmp_path / f"log.txt{codec}").write_bytes(cut)
    with pytest.raises(CorpusError) as caught:
        _read_all(tmp_path, f"log.txt{codec}")
    assert f"compressed data is damaged or truncated after {expected} bytes of text" in str(caught.value)


def test_every_bad_file_of_a_run_is_named_and_the_message_comes_last(tmp_path: Path):
    """Two bad files in two jobs (pack_mb 0) beside good ones: the run stops naming both, and
    the last lines before Snakemake's own final four are the step's message."""
    root = tmp_path / "raw"
    root.mkdir()
    (root / "a_good.txt").write_text("A good paragraph of ordinary text.\n")
    (root / "b_latin1.txt").write_bytes("Caf\xe9 cr\xe8me and more text.\n".encode("latin-1"))
    (root / "c_wide.txt").write_bytes("Some text written wide.\n".encode("utf-16"))
    (root / "d_good.txt").write_text("Another good paragraph of text.\n")
    run = run_workflow(tmp_path / "run", scenario("one-chunk-per-file", {"corpus": {"root": str(root)}}), check=False)
    assert run.returncode != 0
    assert "2 input file(s) cannot be read as configured" in run.stderr
    tail = run.stderr.strip().splitlines()[-9:]
    assert any("b_latin1.txt: invalid UTF-8 at byte offset 3" in line for line in tail), tail
    assert any("c_wide.txt: looks like UTF-16LE text" in line for line in tail), tail


# --- the build's record --------------------------------------------------------------------------


def paragraphs(text: str) -> list[tuple[int, str]]:
    """(byte offset, text) of each blank-line-separated paragraph: a recount by hand."""
    found, offset = [], 0
    for block in re.split(r"(\n\s*\n)", text):
        if block.strip() and not re.fullmatch(r"\n\s*\n", block):
            lead = len(block) - len(block.lstrip())
            found.append((len(text[: offset + lead].encode()), block.strip()))
        offset += len(block)
    return found


def test_every_document_read_is_kept_or_recorded_as_dropped_with_its_reason(tmp_path: Path):
    """Each paragraph (a recount of blank-line-separated blocks) is a kept document (its id is
    path:offset in a stream shard) or a row of stats/dropped.parquet with the right reason; the
    per-file accounting matches; files the patterns skip are listed in the manifest and the
    end-of-run summary."""
    root = tmp_path / "raw"
    (root / "sub").mkdir(parents=True)
    notes = "The first note is long enough to keep.\n\nx\n\n12 34 56 78 90\n\nThe first note is long enough to keep.\n\nA last note about gulls and tides.\n"
    (root / "notes.txt").write_text(notes)
    (root / "sub" / "log.txt").write_text("One more paragraph of the log.\n\nAnd a final one that differs.\n")
    (root / "UPPER.TXT").write_text("Not selected: the pattern is lowercase.\n")
    (root / "readme.md").write_text("Not a corpus file.\n")
    (root / "sub" / "draft.txt").write_text("Excluded draft text.\n")
    run = run_workflow(tmp_path / "run", {"corpus": {"root": str(root), "exclude": ["sub/draft.txt"]}})
    build = tmp_path / "run" / "build"
    kept = {d for p in build.glob("shards/*/stream-*.parquet") for d in pq.read_table(p)["doc_id"].to_pylist()}
    dropped = {(r["source"], r["offset"]): r["reason"] for r in pq.read_table(build / "stats" / "dropped.parquet").to_pylist()}
    expected_drops = {("notes.txt", paragraphs(notes)[1][0]): "too_short", ("notes.txt", paragraphs(notes)[2][0]): "too_short",
                      ("notes.txt", paragraphs(notes)[3][0]): "duplicate"}  # fmt: skip
    assert dropped == expected_drops
    for source in ("notes.txt", "sub/log.txt"):
        for offset, _ in paragraphs((root / source).read_text()):
            assert (f"{source}:{offset}" in kept) != ((source, offset) in dropped), (source, offset)
    manifest = json.loads((build / "manifest.json").read_text())
    files = manifest["accounting"]["files"]
    assert files["notes.txt"]["dropped"] == {"duplicate": 1, "too_short": 2} and files["notes.txt"]["kept"] == 2
    assert files["sub/log.txt"]["kept"] == 2 and manifest["accounting"]["balanced"]
    assert manifest["not_read"] == {"unselected": ["UPPER.TXT", "readme.md"], "excluded": ["sub/draft.txt"], "refused": []}
    assert "not matched by corpus.include (UPPER.TXT, readme.md)" in run.stderr and "1 excluded (sub/draft.txt)" in run.stderr
    assert "notes.txt: dropped duplicate 1, dropped too_short 2 (of 5 read)" in run.stderr
    page = (build / "report" / "index.html").read_text(encoding="utf-8")
    section = re.search(r'<section id="accounting">(.*?)</section>', page, re.S).group(1)
    assert re.search(r'<td class="file">notes\.txt</td><td class="n">5</td><td class="n">1</td><td class="n">2</td>', section)
    for name, why in (("UPPER.TXT", "matched by no corpus.include"), ("readme.md", "matched by no"), ("sub/draft.txt", "removed by a corpus.exclude")):
        assert f'<td class="file">{name}</td><td>{why}' in section


def test_files_of_jobs_that_no_longer_exist_are_removed_after_a_full_run(tmp_path: Path):
    """Removing an input leaves its chunk's table, tally, counts, removed list, shard files of
    every split and kind, and logs behind; turning the n-gram windows off leaves every chunk's
    n-gram shard files and their provenance tables behind, and turning the baseline off its kept
    train totals. The next run removes them (and `corpusmill audit` passes, which fails on a
    shard file not in the manifest) but keeps deduplicate's kept counts, while a dry run removes
    nothing."""
    root = tmp_path / "raw"
    root.mkdir()
    for name in ("a", "b", "c"):
        (root / f"{name}.txt").write_text(f"File {name} has a paragraph of its own text.\n\nAnd {name} has a second one.\n")
    (root / "a.txt").write_text("A paragraph said twice.\n\nA paragraph said twice.\n", encoding="utf-8")
    options = scenario("one-chunk-per-file", {"corpus": {"root": str(root)}})
    run_workflow(tmp_path / "run", options)
    build = tmp_path / "run" / "build"
    old = {p for p in build.rglob("*") if p.is_file() and ("c.txt" in p.name or p.name.startswith("ngram-"))}
    assert len({p for p in old if "c.txt" in p.name}) >= 9 + 6 and len({p for p in old if p.name.startswith("ngram-")}) == 2 * 3 * 3
    totals = build / "interim" / "baseline" / "train-ngram-totals.arrow"
    assert totals.is_file()  # kept for the next run while the baseline is on
    old.add(totals)
    (root / "c.txt").unlink()
    options["windows"] = {"ngram": {"enabled": False}}
    options["baseline"] = {"enabled": False}
    run_workflow(tmp_path / "run", options, "-n")
    assert all(p.exists() for p in old)
    run = run_workflow(tmp_path / "run", options)
    assert not any(p.exists() for p in old) and "file(s) of earlier runs that no current job uses" in run.stderr
    assert (build / "interim" / "deduplicate" / "removed-counts-by-chunk.parquet").is_file()  # kept for the next run: a.txt repeats itself
    audit = subprocess.run([sys.executable, "-m", "corpusmill.cli", "audit", str(build)], capture_output=True, text=True, cwd=REPO)
    assert audit.returncode == 0, audit.stderr
    assert stale_files(build, [p for p in build.rglob("*") if p.is_file()]) == []


# --- progress and pipes --------------------------------------------------------------------------


def test_progress_lines_say_documents_bytes_and_rate_and_mark_running_jobs(tmp_path: Path):
    log = tmp_path / "logs" / "prepare" / "x.log"
    log.parent.mkdir(parents=True)
    with open(log, "w") as stream:
        progress = Progress("x (chunk 1 of 1)", total_bytes=4_000_000, every=0.0, stream=stream)
        progress.add(10, 1_000_000)
    line = log.read_text().strip()
    assert re.fullmatch(r"progress: x \(chunk 1 of 1\): 10 documents, 1\.0 MB of 4\.0 MB \(25%\) in \d+ s \([\d.,]+ MB/s\)", line)
    assert [job for job, _, _ in running_jobs(tmp_path, 60)] == ["prepare/x.log"]
    with open(log, "a") as stream:
        stream.write('{"kept": 10}\n')  # the job's last line once it ends
    assert running_jobs(tmp_path, 60) == []


def test_a_closed_pipe_ends_a_command_without_a_traceback(demo_build: Path):
    """POSIX pipes: `head` closing its end early sends SIGPIPE / EPIPE to the writer."""
    command = f"{sys.executable} -m corpusmill.cli cutoffs {demo_build} --json --show-changes 5000 | head -n 1"
    run = subprocess.run(["bash", "-c", command], capture_output=True, text=True, cwd=REPO)
    assert run.stdout.strip() == "{" and "Traceback" not in run.stderr and "BrokenPipe" not in run.stderr


# --- merging the chunks' tallies (collections.Counter sums of the fields as the reference) -----


def tally(read: int, kept: int, dropped: dict[str, int], pieces_added: int = 0, truncated: int = 0, replaced: int = 0, source: str = "f.txt") -> dict:
    """One chunk's tally as the prepare step writes it (steps.accounting.Tally.as_dict): its
    figures per input file, here one file."""
    figures = {"read": read, "pieces_added": pieces_added, "truncated": truncated, "replaced_sequences": replaced, "kept": kept, "dropped": dropped}
    return {"files": {source: figures}}


def accounting(tallies: list[dict], duplicates: int) -> dict:
    """The merge with `duplicates` removed documents, all of file f.txt; totals only."""
    result = merge(tallies, {"f.txt": duplicates} if duplicates else {})
    del result["files"]
    return result


TALLIES = [
    tally(10, 6, {"too_short": 3, "empty": 1}, truncated=1, replaced=2),
    tally(1, 4, {}, pieces_added=3),  # one oversize document split into four pieces
    tally(7, 6, {"few_letters": 1, "empty": 1}, pieces_added=1, truncated=2, replaced=5),
]


def test_every_figure_is_the_sum_over_the_chunk_tallies():
    """A Counter over the tallies' numeric fields and one over their drop reasons."""
    fields = Counter()
    reasons = Counter()
    for figures in TALLIES:
        (only,) = figures["files"].values()
        fields.update({k: v for k, v in only.items() if k != "dropped"})
        reasons.update(only["dropped"])
    result = accounting(TALLIES, duplicates=0)
    assert {k: result[k] for k in ("read", "pieces_added", "kept", "truncated", "replaced_sequences")} == dict(fields)
    assert result["dropped"] == dict(reasons)
    assert (result["read"], result["pieces_added"], result["kept"]) == (18, 4, 16)


def test_pieces_added_by_splitting_documents_keep_the_identity_balanced():
    """read + pieces_added = kept + sum(dropped): 18 + 4 = 16 + 6 here; without the pieces the
    split documents' extra rows would be unaccounted for."""
    result = accounting(TALLIES, duplicates=0)
    assert result["read"] + result["pieces_added"] == result["kept"] + sum(result["dropped"].values()) == 22
    assert result["balanced"] is True
    assert accounting([tally(1, 4, {}, pieces_added=3)], 0)["balanced"] is True
    assert accounting([tally(1, 4, {}, pieces_added=2)], 0)["balanced"] is False


def test_removed_duplicates_move_from_kept_to_dropped():
    """The deduplication step's count: kept loses them, dropped gains a "duplicate" reason."""
    result = accounting(TALLIES, duplicates=4)
    assert result["kept"] == 12 and result["dropped"]["duplicate"] == 4
    assert result["balanced"] is True
    assert "duplicate" not in accounting(TALLIES, duplicates=0)["dropped"]
    one = accounting([tally(3, 3, {}), tally(2, 2, {})], duplicates=1)
    assert (one["kept"], one["dropped"]) == (4, {"duplicate": 1})


def test_a_lost_document_shows_as_unbalanced():
    """A tally that read a document it neither kept nor dropped breaks the identity."""
    assert accounting([tally(5, 3, {"empty": 1})], duplicates=0)["balanced"] is False
    assert accounting([tally(5, 3, {"empty": 2})], duplicates=0)["balanced"] is True


def test_a_file_off_balance_makes_the_build_unbalanced_even_when_the_totals_agree():
    """One file lost a document and another gained one: the totals balance, the files do not."""
    lost = {"files": {"a.txt": FileTally(read=2, kept=1).as_dict()}}
    gained = {"files": {"b.txt": FileTally(read=1, kept=2).as_dict()}}
    merged = merge([lost, gained], {})
    assert merged["read"] + merged["pieces_added"] == merged["kept"] + sum(merged["dropped"].values())
    assert merged["balanced"] is False


def test_drop_reasons_are_listed_in_name_order():
    """Deterministic manifest bytes: reasons sorted by name whatever order the tallies give."""
    result = accounting([tally(3, 0, {"too_short": 1, "empty": 1}), tally(2, 0, {"bad_json": 1, "empty": 1})], duplicates=1)
    assert list(result["dropped"]) == ["bad_json", "duplicate", "empty", "too_short"]
    assert result["dropped"] == {"bad_json": 1, "duplicate": 1, "empty": 2, "too_short": 1}


def test_no_tallies_give_an_empty_balanced_accounting():
    """An empty corpus: every figure zero, nothing dropped, balanced."""
    assert accounting([], duplicates=0) == {
        "read": 0,
        "pieces_added": 0,
        "kept": 0,
        "dropped": {},
        "truncated": 0,
        "replaced_sequences": 0,
        "balanced": True,
    }
