"""Tidy: which files of earlier runs are stale and removed, and what is always kept.

The expected sets are recounted with pathlib's rglob and Python set difference."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from corpusmill.layout import Layout
from corpusmill.tidy import remove, stale_files


def build_with(root: Path, names: list[str]) -> list[Path]:
    paths = []
    for name in names:
        path = root / name
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(name)
        paths.append(path)
    return paths


def test_files_no_current_job_names_are_stale_and_current_ones_are_kept(tmp_path: Path) -> None:
    build = tmp_path / "build"
    current = build_with(build, ["manifest.json", "shards/train/ngram-a.parquet", "logs/shards/a.log"])
    old = build_with(build, ["shards/train/ngram-gone.parquet", "logs/shards/gone.log", "interim/chunks/gone.parquet"])
    assert stale_files(build, current) == sorted(old)
    assert set(stale_files(build, current)) == {p for p in build.rglob("*") if p.is_file()} - set(current)


def test_a_current_file_is_kept_however_its_path_is_spelt(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Snakemake names files relative to the working folder; the same file given absolutely,
    with './' or a doubled '/' is the same current file."""
    monkeypatch.chdir(tmp_path)
    build_with(tmp_path / "build", ["a.json", "b.json", "c.json", "d.json"])
    current = ["build/a.json", str(tmp_path / "build" / "b.json"), "./build/c.json", "build//d.json"]
    assert stale_files("build", current) == []
    assert stale_files(tmp_path / "build", current) == []
    assert stale_files("build", current[1:]) == [Path("build/a.json")]


def test_learned_subword_models_are_kept_although_no_current_job_names_them(tmp_path: Path) -> None:
    """A setting changed back reuses its cached model; a file merely beside the cache is stale."""
    build = tmp_path / "build"
    models = Path(Layout(str(build)).subword_models)
    build_with(models, ["k1.model", "old/k0.model"])
    beside = build_with(models.parent, ["models.txt", "train_sample.jsonl"])
    assert stale_files(build, []) == sorted(beside)


def test_nothing_outside_the_build_folder_is_listed_not_even_through_a_link(tmp_path: Path) -> None:
    build = tmp_path / "build"
    current = build_with(build, ["manifest.json"])
    outside = build_with(tmp_path / "elsewhere", ["keep.txt"])
    build_with(tmp_path, ["build.txt", "build-old/x.json"])
    (build / "linked").symlink_to(tmp_path / "elsewhere", target_is_directory=True)
    assert stale_files(build, current) == []
    remove(stale_files(build, []), build)
    assert all(p.exists() for p in outside) and (tmp_path / "build.txt").exists() and (tmp_path / "build-old" / "x.json").exists()


def test_removing_deletes_the_files_and_the_folders_they_leave_empty_and_says_so(tmp_path: Path) -> None:
    build = tmp_path / "build"
    kept = build_with(build, ["shards/train/ngram-a.parquet"])
    old = build_with(build, ["shards/train/ngram-b.parquet", "shards/dev/ngram-b.parquet", "logs/shards/b.log", "logs/shards/c.log"])
    for path, size in zip(old, (100_000, 200_000, 0, 0)):
        path.write_bytes(b"x" * size)
    message = remove(stale_files(build, kept), build)
    shown = ", ".join(str(p) for p in sorted(old)[:3])
    assert message == f"removed 4 file(s) of earlier runs that no current job uses (0.3 MB): {shown}, +1 more"
    assert sorted(p.relative_to(build).as_posix() for p in build.rglob("*")) == ["shards", "shards/train", "shards/train/ngram-a.parquet"]


def test_files_already_gone_are_not_counted_as_removed(tmp_path: Path) -> None:
    """Between listing and removing, a file can vanish (deleted by hand, or by another run):
    the line counts, sizes and names only the files this call removed."""
    build = tmp_path / "build"
    old = build_with(build, ["logs/shards/a.log", "logs/shards/b.log", "logs/shards/c.log"])
    old[2].write_bytes(b"x" * 200_000)
    stale = stale_files(build, [])
    old[0].unlink()
    old[1].unlink()
    assert remove(stale, build) == f"removed 1 file(s) of earlier runs that no current job uses (0.2 MB): {old[2]}"
    assert remove(stale, build) == ""


def test_removing_every_file_keeps_the_build_folder_and_every_folder_above_it(tmp_path: Path) -> None:
    """Emptied folders are removed up to, not including, the build folder: a build folder with
    nothing current in it is still the build folder, and its parents are not ours."""
    build = tmp_path / "work" / "build"
    build_with(build, ["interim/chunks/a.parquet"])
    remove(stale_files(build, []), build)
    assert build.is_dir() and list(build.iterdir()) == [] and sorted(os.listdir(tmp_path)) == ["work"]


def test_nothing_stale_removes_nothing_and_says_nothing(tmp_path: Path) -> None:
    current = build_with(tmp_path / "build", ["manifest.json"])
    assert remove(stale_files(tmp_path / "build", current), tmp_path / "build") == ""
    assert current[0].exists()


def test_a_file_already_gone_is_skipped(tmp_path: Path) -> None:
    build = tmp_path / "build"
    old = build_with(build, ["a.log", "b.log"])
    old[0].unlink()
    assert remove(old, build).startswith("removed ") and not old[1].exists()
