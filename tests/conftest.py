"""Shared fixtures: running the real workflow in a temporary folder, and a built demo corpus."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

# Before numpy loads: one BLAS thread. The tests' matrices are small, and OpenBLAS threads that
# spin on a busy 2-core machine made the readiness training ~20x slower (41 s vs 2 s measured).
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import pytest
import yaml
from hypothesis import settings

# Property tests: a few dozen examples per test locally, many more in CI (CI=true); a fixed
# sequence of examples for the mutation check, so a mutant is killed or not the same way on
# every run. HYPOTHESIS_PROFILE names one of them explicitly.
settings.register_profile("dev", max_examples=60, deadline=None)
settings.register_profile("ci", max_examples=200, deadline=None)
settings.register_profile("mutation", max_examples=60, deadline=None, derandomize=True, database=None)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE") or ("ci" if os.environ.get("CI") == "true" else "dev"))

REPO = Path(__file__).resolve().parent.parent
DEMO = REPO / "demo_raw"
SCENARIOS = REPO / "tests" / "scenarios"


def pytest_collection_modifyitems(items: list[pytest.Item]) -> None:
    """Mark the tests that need the demo corpus built by the real workflow, so that quick runs
    (the mutation check among them) can leave them out with `-m "not demo_build"`."""
    for item in items:
        if {"demo_build", "demo_chunks_build"} & set(getattr(item, "fixturenames", ())):
            item.add_marker(pytest.mark.demo_build)


def run_workflow(directory: Path, overrides: dict | None = None, *extra: str, cores: int = 2, check: bool = True) -> subprocess.CompletedProcess:
    """Run the workflow in `directory` with an override config file; returns the finished process."""
    directory.mkdir(parents=True, exist_ok=True)
    override = directory / "override.yaml"
    override.write_text(yaml.safe_dump(overrides or {}), encoding="utf-8")
    command = [
        sys.executable,
        "-m",
        "snakemake",
        "--snakefile",
        str(REPO / "Snakefile"),
        "--directory",
        str(directory),
        "--cores",
        str(cores),
        "--configfile",
        str(override),
        *extra,
    ]
    result = subprocess.run(command, capture_output=True, text=True, env={**os.environ, "PYTHONHASHSEED": "0"})
    if check and result.returncode != 0:
        raise AssertionError(f"workflow failed ({result.returncode}):\n{result.stdout[-3000:]}\n{result.stderr[-6000:]}")
    return result


def scenario(name: str, overrides: dict | None = None) -> dict:
    """The override config of tests/scenarios/<name>.yaml with `overrides` merged in (mappings
    key by key, any other value replaced). A relative corpus.root in the file is made absolute
    against the repository: the file reads as a user running from the repository passes it with
    --configfile, while tests run the workflow in other folders."""
    config = yaml.safe_load((SCENARIOS / f"{name}.yaml").read_text(encoding="utf-8")) or {}
    root = config.get("corpus", {}).get("root")
    if root is not None and not Path(root).is_absolute():
        config["corpus"]["root"] = str(REPO / root)
    return _merged(config, overrides or {})


def _merged(base: dict, overrides: dict) -> dict:
    merged = dict(base)
    for key, value in overrides.items():
        merged[key] = _merged(merged[key], value) if isinstance(value, dict) and isinstance(merged.get(key), dict) else value
    return merged


def require_file(path: str | Path, package: str) -> Path:
    """Return an outside reference file; skip outside CI when missing, fail in CI."""
    candidate = Path(path)
    if candidate.exists():
        return candidate
    message = f"{candidate} is missing: install Debian's {package} package (apt-get install -y {package})"
    if os.environ.get("CI") == "true":
        pytest.fail(message)
    pytest.skip(message)


@pytest.fixture(scope="session")
def demo_build(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The demo corpus built once with the default configuration; returns the build folder."""
    directory = tmp_path_factory.mktemp("demo")
    run_workflow(directory, scenario("demo"))
    return directory / "build"


@pytest.fixture(scope="session")
def demo_chunks_build(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The demo corpus built with one chunk per file (corpus.pack_mb: 0), so every split has a
    shard file per chunk; returns the build folder."""
    directory = tmp_path_factory.mktemp("demo-chunks")
    run_workflow(directory, scenario("one-chunk-per-file"))
    return directory / "build"
