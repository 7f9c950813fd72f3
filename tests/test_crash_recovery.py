"""Crash recovery: a workflow killed with SIGKILL at any moment and rerun as README says
(`snakemake --unlock`, then `snakemake --cores 2 --rerun-incomplete`) ends byte-identical to a
clean build; nothing half-written is ever taken as finished.

Outside reference: hashlib.sha256 of a clean build's files; pyarrow's Parquet reader and
json.loads for "is this file whole".
"""

from __future__ import annotations

import hashlib
import json
import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import pyarrow.parquet as pq
import pytest

from conftest import scenario
from tests import hostile

REPO = Path(__file__).resolve().parent.parent
TRIALS = 10


def digests(build_dir: Path) -> dict[str, str]:
    """SHA-256 of every shard, the vocabulary, the token counts, coverage and the manifest."""
    chosen = [*sorted((build_dir / "shards").rglob("*.parquet")), build_dir / "vocabulary.tsv", build_dir / "manifest.json",
              build_dir / "stats" / "token_counts.parquet", build_dir / "stats" / "coverage.json"]  # fmt: skip
    return {p.relative_to(build_dir).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest() for p in chosen}


def snakemake(workdir: Path, override: Path, *extra: str) -> list[str]:
    return [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory", str(workdir),
            "--configfile", str(override), *extra]  # fmt: skip


@pytest.fixture(scope="module")
def reference(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict[str, str], float]:
    """The small corpus's override file, a clean build's digests and how long that build took."""
    base = tmp_path_factory.mktemp("crash")
    hostile.write_small_corpus(base / "raw")
    override = base / "over.json"
    override.write_text(json.dumps(scenario("one-chunk-per-file", {"corpus": {"root": str(base / "raw")}})))
    start = time.monotonic()
    subprocess.run(snakemake(base / "clean", override, "--cores", "2", "--quiet"), check=True, capture_output=True, timeout=600)
    return override, digests(base / "clean" / "build"), time.monotonic() - start


def assert_nothing_half_written(build_dir: Path) -> None:
    """Every file under its final name is whole: Parquet footers read, JSON parses."""
    for path in build_dir.rglob("*"):
        if path.name.startswith(".") or not path.is_file():
            continue
        if path.suffix == ".parquet":
            assert pq.ParquetFile(path).metadata is not None  # raises on a truncated file
        elif path.suffix == ".json":
            json.loads(path.read_text(encoding="utf-8"))


def test_sigkill_at_random_moments_then_rerun_gives_the_clean_build(reference: tuple[Path, dict[str, str], float], tmp_path: Path) -> None:
    """Seeded random kill times over the length of a clean build; each trial resumes in place."""
    override, clean, duration = reference
    rng = random.Random(20240611)
    killed = 0
    for trial in range(TRIALS):
        workdir = tmp_path / f"trial{trial}"
        process = subprocess.Popen(
            snakemake(workdir, override, "--cores", "2", "--quiet"),
            start_new_session=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
        )  # fmt: skip
        delay = rng.uniform(0.5, duration)
        try:
            process.wait(timeout=delay)
        except subprocess.TimeoutExpired:
            # The whole group: snakemake and its jobs' steps.run processes; a job the worker runs (its
            # own session) is ended by the worker once its steps.run is gone (tests/test_worker.py).
            os.killpg(process.pid, signal.SIGKILL)
            process.wait()
            killed += 1
        if (workdir / "build").exists():
            assert_nothing_half_written(workdir / "build")
        subprocess.run(snakemake(workdir, override, "--unlock"), check=True, capture_output=True, timeout=300)
        rerun = subprocess.run(snakemake(workdir, override, "--cores", "2", "--rerun-incomplete", "--quiet"), capture_output=True, text=True, timeout=600)
        assert rerun.returncode == 0, f"trial {trial}: {rerun.stderr[-2000:]}"
        rebuilt = digests(workdir / "build")
        differing = sorted(name for name in clean.keys() | rebuilt.keys() if rebuilt.get(name) != clean.get(name))
        assert not differing, f"trial {trial} (killed after {delay:.2f} s) differs from the clean build in {differing}; kept in {workdir}"
        assert not list((workdir / "build").rglob("*.partial")), f"trial {trial} left temporary files"
    assert killed >= TRIALS // 2, f"only {killed} of {TRIALS} runs were still running when the kill came"


def test_a_failing_job_leaves_no_manifest_and_no_half_written_output(tmp_path: Path) -> None:
    """Invalid UTF-8 under corpus.invalid_utf8 = stop (RFC 3629): the prepare job records the file
    as a problem and the deduplicate job, which follows every prepare job, fails naming it; that
    job leaves no output, and nothing after it runs."""
    raw = tmp_path / "raw"
    hostile.write_small_corpus(raw)
    data, offset = hostile.invalid_utf8_text("stray_continuation")
    (raw / "bad.txt").write_bytes(data)
    override = tmp_path / "over.json"
    override.write_text(json.dumps({"corpus": {"root": str(raw), "invalid_utf8": "stop"}}))
    run = subprocess.run(snakemake(tmp_path, override, "--cores", "2"), capture_output=True, text=True, timeout=600)
    assert run.returncode != 0
    assert f"bad.txt: invalid UTF-8 at byte offset {offset}" in run.stdout + run.stderr
    build_dir = tmp_path / "build"
    assert not (build_dir / "manifest.json").exists() and not (build_dir / "shards").exists()
    tallies = [json.loads(p.read_text()) for p in (build_dir / "interim" / "prepared").glob("bad.txt-*.tally.json")]
    assert [problem["source"] for tally in tallies for problem in tally["problems"]] == ["bad.txt"]
    assert not (build_dir / "interim" / "duplicates.parquet").exists() and not (build_dir / "vocabulary.tsv").exists()
    assert not list(build_dir.rglob("*.partial"))
    assert_nothing_half_written(build_dir)
