"""`corpusmill audit BUILD` finds every kind of damage to a finished build and passes a good one.

Outside reference: hashlib.sha256 over the files and pyarrow's Parquet reader, against the
figures the manifest recorded when the build was made.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from conftest import scenario
from corpusmill.audit import audit_build
from corpusmill.reader import BuildError, open_build
from tests import hostile

REPO = Path(__file__).resolve().parent.parent


def build(workdir: Path, raw: Path, cores: int = 2, **sections: dict) -> Path:
    """Run the real workflow on `raw` into workdir/build, one chunk (so one shard file of each
    split and kind) per input file."""
    override = workdir / "over.json"
    workdir.mkdir(parents=True, exist_ok=True)
    override.write_text(json.dumps(scenario("one-chunk-per-file", {"corpus": {"root": str(raw)}, **sections})))
    run = subprocess.run(
        [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory", str(workdir),
         "--cores", str(cores), "--configfile", str(override), "--quiet"],
        capture_output=True, text=True, timeout=600,
    )  # fmt: skip
    assert run.returncode == 0, run.stderr[-3000:]
    return workdir / "build"


@pytest.fixture(scope="module")
def builds(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    """A good build, and a second build of the same corpus with another vocabulary cutoff."""
    base = tmp_path_factory.mktemp("audit")
    hostile.write_small_corpus(base / "raw")
    good = build(base / "good", base / "raw")
    other = build(base / "other", base / "raw", vocabulary={"min_count": 1})
    return good, other


@pytest.fixture
def copy(builds: tuple[Path, Path], tmp_path: Path) -> Path:
    """A private copy of the good build to damage."""
    return Path(shutil.copytree(builds[0], tmp_path / "build"))


def audit(build_dir: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "corpusmill.cli", "audit", str(build_dir)], cwd=REPO, capture_output=True, text=True)


def first_shard(build_dir: Path, kind: str = "ngram") -> Path:
    return sorted((build_dir / "shards" / "train").glob(f"{kind}-*.parquet"))[0]


def test_a_good_build_passes_with_a_short_summary(builds: tuple[Path, Path]) -> None:
    """The manifest's own figures, recomputed: every check holds on an untouched build."""
    run = audit(builds[0])
    assert run.returncode == 0, run.stderr
    assert "OK:" in run.stdout and "shard files" in run.stdout and "vocabulary" in run.stdout
    assert len(run.stdout.strip().splitlines()) == 1


def test_a_flipped_byte_in_a_shard_is_reported_by_file(copy: Path) -> None:
    """hashlib.sha256: one changed byte changes the digest."""
    shard = first_shard(copy)
    data = bytearray(shard.read_bytes())
    data[len(data) // 2] ^= 0x01
    shard.write_bytes(bytes(data))
    run = audit(copy)
    assert run.returncode != 0
    assert f"{shard.relative_to(copy).as_posix()}: SHA-256 differs from manifest.json" in run.stderr


def test_a_truncated_shard_is_reported_as_damaged(copy: Path) -> None:
    """Parquet format: a file without its footer (magic "PAR1" at the end) cannot be opened."""
    shard = first_shard(copy, "block")
    shard.write_bytes(shard.read_bytes()[: shard.stat().st_size // 2])
    run = audit(copy)
    assert run.returncode != 0
    name = shard.relative_to(copy).as_posix()
    assert f"{name}: SHA-256 differs" in run.stderr and f"{name}: not readable as Parquet" in run.stderr


def test_a_missing_shard_is_reported(copy: Path) -> None:
    """The manifest lists every shard; one absent from disk is named."""
    shard = first_shard(copy, "stream")
    shard.unlink()
    run = audit(copy)
    assert run.returncode != 0
    assert f"{shard.relative_to(copy).as_posix()}: listed in manifest.json but missing" in run.stderr


def test_an_extra_file_under_shards_is_reported(copy: Path) -> None:
    """A leftover (a .partial, a shard of another build) would be read by a glob over shards/."""
    extra = copy / "shards" / "train" / "ngram-gone.txt-00000000-0000.parquet"
    shutil.copy(first_shard(copy), extra)
    partial = f".{first_shard(copy).name}.partial"
    (copy / "shards" / "dev" / partial).write_bytes(b"half")
    run = audit(copy)
    assert run.returncode != 0
    assert "shards/train/ngram-gone.txt-00000000-0000.parquet: is not listed in manifest.json" in run.stderr
    assert f"shards/dev/{partial}: is not listed in manifest.json" in run.stderr


def test_a_vocabulary_swapped_for_another_builds_is_reported(copy: Path, builds: tuple[Path, Path]) -> None:
    """vocabulary.tsv's SHA-256 in the manifest ties the file to the build."""
    shutil.copy(builds[1] / "vocabulary.tsv", copy / "vocabulary.tsv")
    run = audit(copy)
    assert run.returncode != 0
    assert "vocabulary.tsv: SHA-256" in run.stderr and "differs from manifest.json" in run.stderr


def test_shards_mixed_from_another_build_are_reported_by_their_ids_hash(copy: Path, builds: tuple[Path, Path]) -> None:
    """A shard and its manifest entry copied from another build: ids_sha256 in its metadata
    (the digest of the ids it was written with) differs from this vocabulary's ids."""
    manifest = json.loads((copy / "manifest.json").read_text())
    other = json.loads((builds[1] / "manifest.json").read_text())
    entry = next(e for e in other["splits"]["dev"]["shards"] if e["kind"] == "ngram")
    shutil.copy(builds[1] / entry["file"], copy / entry["file"])
    mine = next(e for e in manifest["splits"]["dev"]["shards"] if e["file"] == entry["file"])
    manifest["splits"]["dev"]["rows"]["ngram"] += entry["rows"] - mine["rows"]
    mine.update(sha256=entry["sha256"], rows=entry["rows"], bytes=entry["bytes"])
    (copy / "manifest.json").write_text(json.dumps(manifest))
    problems = audit_build(copy).problems
    assert any(p.startswith(f"{entry['file']}: its metadata ids_sha256 differs from the ids of vocabulary.tsv") for p in problems), problems


def test_an_unbalanced_accounting_is_reported(copy: Path) -> None:
    """The identity read + pieces_added = kept + sum(dropped) (manifest 'accounting')."""
    manifest = json.loads((copy / "manifest.json").read_text())
    manifest["accounting"]["kept"] += 1
    (copy / "manifest.json").write_text(json.dumps(manifest))
    run = audit(copy)
    assert run.returncode != 0 and "accounting does not balance" in run.stderr


def test_a_build_without_manifest_is_reported_as_unfinished(tmp_path: Path) -> None:
    """No manifest.json means the manifest job never finished."""
    run = audit(tmp_path)
    assert run.returncode != 0 and "manifest.json: missing; the build is not finished" in run.stderr


def load(build_dir: Path) -> dict:
    return json.loads((build_dir / "manifest.json").read_text(encoding="utf-8"))


def save(build_dir: Path, manifest: dict) -> None:
    (build_dir / "manifest.json").write_text(json.dumps(manifest), encoding="utf-8")


def problem_lines(run: subprocess.CompletedProcess[str]) -> list[str]:
    """Audit's problem lines, without the closing count line."""
    return [line for line in run.stderr.splitlines() if " problem(s) in " not in line]


@pytest.mark.parametrize("route", ["dot-dot", "absolute", "symlink"])
def test_a_shard_moved_outside_the_build_is_refused_naming_the_manifest_entry(copy: Path, route: str) -> None:
    """A shard moved out of the build folder, named by `..`, by an absolute path or through a symlink inside the build, is not read."""
    manifest = load(copy)
    entry = manifest["splits"]["train"]["shards"][0]
    inside = copy / entry["file"]
    outside = copy.parent / "elsewhere" / inside.name
    outside.parent.mkdir()
    inside.rename(outside)
    if route == "symlink":
        inside.symlink_to(outside)
    else:
        entry["file"] = os.path.relpath(outside, copy) if route == "dot-dot" else str(outside)
    save(copy, manifest)
    run = audit(copy)
    assert run.returncode != 0
    assert f"corpusmill: manifest.json: splits.train.shards[0].file {json.dumps(entry['file'])} " in run.stderr
    assert "outside the build folder" in run.stderr or "is an absolute path" in run.stderr


def test_vocabulary_and_files_entries_outside_the_build_are_refused(copy: Path) -> None:
    """The vocabulary moved to a sibling folder and a `files` entry naming /etc/passwd (its real hashlib.sha256): neither is read."""
    manifest = load(copy)
    elsewhere = copy.parent / "elsewhere"
    elsewhere.mkdir()
    (copy / "vocabulary.tsv").rename(elsewhere / "vocabulary.tsv")
    manifest["vocabulary"]["file"] = "../elsewhere/vocabulary.tsv"
    manifest["files"] = {"/etc/passwd": hashlib.sha256(Path("/etc/passwd").read_bytes()).hexdigest()}
    save(copy, manifest)
    run = audit(copy)
    assert run.returncode != 0
    assert 'manifest.json: vocabulary.file "../elsewhere/vocabulary.tsv" leads outside the build folder' in run.stderr
    assert 'manifest.json: files key "/etc/passwd" is an absolute path' in run.stderr


def test_a_symlink_to_dev_zero_as_vocabulary_is_refused_without_reading_it(copy: Path) -> None:
    """/dev/zero never ends: the vocabulary named by the manifest must resolve to a file inside the build."""
    (copy / "vocabulary.tsv").unlink()
    (copy / "vocabulary.tsv").symlink_to("/dev/zero")
    run = subprocess.run([sys.executable, "-m", "corpusmill.cli", "audit", str(copy)], cwd=REPO, capture_output=True, text=True, timeout=60)
    assert run.returncode != 0
    assert 'manifest.json: vocabulary.file "vocabulary.tsv" leads outside the build folder (to /dev/zero)' in run.stderr


@pytest.mark.parametrize("victim", ["vocabulary.tsv", "manifest.json", "shard", "files"])
def test_a_fifo_in_place_of_a_build_file_is_refused_without_opening_it(copy: Path, victim: str) -> None:
    """POSIX: opening a FIFO for reading blocks until a writer comes; audit must name it and finish."""
    name = {"shard": first_shard(copy).relative_to(copy).as_posix(), "files": next(iter(load(copy)["files"]))}.get(victim, victim)
    (copy / name).unlink()
    os.mkfifo(copy / name)
    run = subprocess.run([sys.executable, "-m", "corpusmill.cli", "audit", str(copy)], cwd=REPO, capture_output=True, text=True, timeout=60)
    assert run.returncode != 0
    assert f"corpusmill: {name}: " in run.stderr and "not a regular file (a FIFO)" in run.stderr


def test_an_unlisted_fifo_under_shards_is_reported(copy: Path) -> None:
    """A glob over shards/ would pick up any entry there, so every non-directory entry must be listed."""
    os.mkfifo(copy / "shards" / "dev" / "ngram-gone.txt-00000000-0000.parquet")
    run = audit(copy)
    assert run.returncode != 0 and "shards/dev/ngram-gone.txt-00000000-0000.parquet: is not listed in manifest.json" in run.stderr


def test_a_vocabulary_over_the_size_limit_is_refused_before_reading(copy: Path) -> None:
    """A sparse file one byte over 1 GiB (no disk used): refused by its size, never read."""
    with open(copy / "vocabulary.tsv", "r+b") as handle:
        handle.truncate((1 << 30) + 1)
    run = subprocess.run([sys.executable, "-m", "corpusmill.cli", "audit", str(copy)], cwd=REPO, capture_output=True, text=True, timeout=60)
    assert run.returncode != 0
    assert "vocabulary.tsv: listed in manifest.json but over the 1 GiB size limit (1,073,741,825 bytes)" in run.stderr


@pytest.mark.parametrize("case", sorted(hostile.HOSTILE_MANIFESTS))
def test_a_malformed_manifest_gives_one_line_naming_the_key_path(copy: Path, case: str) -> None:
    """Wrong types, missing keys, deep nesting, huge numbers and non-UTF-8 bytes: one problem line, no traceback."""
    make, expected = hostile.HOSTILE_MANIFESTS[case]
    (copy / "manifest.json").write_bytes(make(load(copy)))
    run = audit(copy)
    assert run.returncode == 1 and "Traceback" not in run.stderr, run.stderr
    lines = problem_lines(run)
    assert len(lines) == 1 and lines[0].startswith("corpusmill: manifest.json: ") and expected in lines[0], run.stderr


def test_a_shard_listed_twice_is_reported(copy: Path) -> None:
    """Listing one shard twice (rows added up to match) would train on its rows twice."""
    manifest = load(copy)
    shards = manifest["splits"]["train"]["shards"]
    shards.append(dict(shards[0], file="shards/train/./" + Path(shards[0]["file"]).name))
    manifest["splits"]["train"]["rows"][shards[0]["kind"]] += shards[0]["rows"]
    save(copy, manifest)
    run = audit(copy)
    assert run.returncode != 0
    assert f"splits.train.shards[{len(shards) - 1}].file" in run.stderr and "names the same file as splits.train.shards[0].file" in run.stderr


FOOTER_EDITS = {"file-total": (1000, {}), "row-group": (1000, {0: 1000}), "moved-between-groups": (0, {0: 1000, 1: -1000})}


@pytest.mark.parametrize("edit", sorted(FOOTER_EDITS))
def test_footer_row_counts_edited_together_with_the_manifest_are_caught_by_decoding(copy: Path, edit: str) -> None:
    """Parquet footer (Thrift compact protocol) edited, the manifest's rows and hash to match: the rows
    decoded from each row group's data pages decide, also when the file's total stays right."""
    shard = first_shard(copy)
    pq.write_table(pq.read_table(shard), shard, row_group_size=pq.ParquetFile(shard).metadata.num_rows // 2 + 1)
    extra, groups = FOOTER_EDITS[edit]
    hostile.inflate_parquet_rows(shard, extra, groups)
    manifest = load(copy)
    name = shard.relative_to(copy).as_posix()
    entry = next(e for e in manifest["splits"]["train"]["shards"] if e["file"] == name)
    entry.update(rows=entry["rows"] + extra, sha256=hashlib.sha256(shard.read_bytes()).hexdigest(), bytes=shard.stat().st_size)
    manifest["splits"]["train"]["rows"]["ngram"] += extra
    save(copy, manifest)
    run = audit(copy)
    assert run.returncode != 0
    where = "row group 0 holds" if groups else "holds"
    assert f"corpusmill: {name}: {where} " in run.stderr and "rows in its data pages, but its footer says" in run.stderr


def test_problem_lines_name_files_relative_to_the_build_and_say_what_to_do(copy: Path) -> None:
    """Every printed problem starts with the file relative to the build folder and ends with a fix."""
    first_shard(copy).write_bytes(b"not parquet")
    (copy / "shards" / "dev" / "stray.parquet").write_bytes(b"x")
    run = audit(copy)
    lines = problem_lines(run)
    assert len(lines) >= 3, run.stderr
    for line in lines:
        assert line.startswith("corpusmill: shards/"), line
        assert any(fix in line for fix in ("restore", "rerun snakemake", "remove it")), line


JSON_VALUES = st.recursive(
    st.none() | st.booleans() | st.integers(-(2**70), 2**70) | st.floats() | st.text(max_size=12),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=8), inner, max_size=3),
    max_leaves=6,
)
DEPTHS = [2, 50, 990, 5000, 100_000]  # around CPython's recursion limit (1000) and far beyond
RAW_TEXT = [b'"\xff"', b'"\xed\xa0\x80"', b"1e400", b"-1e400", b"NaN", b"Infinity", b"-0", b"1.5", b"9" * 5000, b"18446744073709551616"]


def key_paths(value: object, keys: tuple = ()) -> list[tuple]:
    """Every key path below the top level of a JSON value, objects and arrays alike."""
    children = value.items() if isinstance(value, dict) else enumerate(value) if isinstance(value, list) else ()
    return [path for key, child in children for path in [keys + (key,), *key_paths(child, keys + (key,))]]


def mutate(manifest: dict, mutations: list[tuple[int, str, object]]) -> bytes:
    """The manifest's bytes after each (pick, action, value): the picked key path deleted, replaced by a
    JSON value, wrapped in deep nesting, or replaced by raw text (bad UTF-8, huge or non-finite numbers)."""
    data, raw = json.loads(json.dumps(manifest)), []
    for pick, action, value in mutations:
        paths = key_paths(data)
        if not paths:
            break
        *parents, last = paths[pick % len(paths)]
        parent = data
        for key in parents:
            parent = parent[key]
        if action == "delete":
            del parent[last]
        elif action == "replace":
            parent[last] = value
        else:
            depth = DEPTHS[pick % len(DEPTHS)]
            text = b"[" * depth + json.dumps(value).encode() + b"]" * depth if action == "nest" else RAW_TEXT[pick % len(RAW_TEXT)]
            parent[last] = f"{hostile.RAW}{len(raw)}"
            raw.append(text)
    encoded = json.dumps(data).encode("utf-8")
    for number, text in enumerate(raw):
        encoded = encoded.replace(json.dumps(f"{hostile.RAW}{number}").encode(), text)
    return encoded


@pytest.fixture(scope="module")
def fuzz_build(builds: tuple[Path, Path], tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict]:
    """A copy of the good build whose manifest.json each example overwrites, and the original manifest."""
    target = Path(shutil.copytree(builds[0], tmp_path_factory.mktemp("fuzz") / "build"))
    return target, load(target)


@given(mutations=st.lists(st.tuples(st.integers(0, 10**6), st.sampled_from(["delete", "replace", "nest", "raw"]), JSON_VALUES), min_size=1, max_size=3))
@settings(max_examples=120, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
def test_mutated_manifests_give_audit_problems_and_reader_build_errors_only(fuzz_build: tuple[Path, dict], mutations: list) -> None:
    """Random deletions, type changes, deep nesting and bad bytes in a real manifest: audit reports problems
    (never a traceback), the reader raises only BuildError, and a manifest audit passes opens in the reader."""
    build_dir, manifest = fuzz_build
    (build_dir / "manifest.json").write_bytes(mutate(manifest, mutations))
    try:
        problems = audit_build(build_dir).problems
    except Exception as error:
        pytest.fail(f"audit raised {error!r}")
    try:
        build = open_build(build_dir)
        for split in build.splits:
            for kind in build.kinds(split):
                build.rows(split, kind)
                next(build.batches(split, kind, 64), None)
    except BuildError:
        assert problems, "audit passed a manifest the reader refuses"


@pytest.mark.parametrize("metadata", [b'["not", "an object"]', b"[1, 2"], ids=["array", "broken-json"])
def test_shard_metadata_that_is_not_a_json_object_is_reported(copy: Path, metadata: bytes) -> None:
    """The `corpusmill` key-value metadata must be a JSON object; anything else is not this workflow's shard."""
    shard = first_shard(copy, "block")
    table = pq.read_table(shard)
    pq.write_table(table.replace_schema_metadata({b"corpusmill": metadata}), shard)
    problems = audit_build(copy).problems
    name = shard.relative_to(copy).as_posix()
    assert any(p.startswith(f"{name}: no 'corpusmill' key-value metadata holding a JSON object") for p in problems), problems
