"""The workflow runs through SLURM and builds the same bytes as a local run.

A single-node SLURM cluster on loopback (cluster/start_local_slurm.sh) takes
the jobs, submitted by Snakemake's SLURM executor with profiles/slurm. The
same tiny corpus is built once locally and once through SLURM; the shards and
the manifest must be byte-identical.

Needs root, Debian's slurmctld, slurmd, slurm-client and munge packages and
the snakemake-executor-plugin-slurm Python package; without them the tests
are skipped, or fail when CI=true.
"""

from __future__ import annotations

import hashlib
import importlib.util
import os
import resource
import shutil
import subprocess
import sys
import time
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

import pytest
import yaml

from conftest import scenario
from corpusmill import worker

REPO = Path(__file__).resolve().parents[1]
CLUSTER = REPO / "cluster"
PROFILE = REPO / "profiles" / "slurm"

# Bounds: the SLURM build is stopped with SIGINT after SLURM_RUN_S seconds
# (the executor ignores SIGTERM), then killed KILL_AFTER_S later.
SLURM_RUN_S = 600
KILL_AFTER_S = 30
LOCAL_RUN_S = 300

# Invented text: three small files of blank-line-separated paragraphs, with
# enough repeated words that the vocabulary keeps some of them.
CORPUS = {
    "harbour/tides.txt": """\
The harbour master rang the bell at six. The boats came in slowly with the tide.
Fishermen carried nets up the stone steps, and the gulls followed them.

The tide was low by noon. Children walked on the wet sand and looked for crabs.
A small boat lay on its side near the old wall.

At dusk the bell rang again. The harbour master wrote the tide times in his book.
He closed the book and walked home along the wall.
""",
    "garden/notes.txt": """\
The garden was quiet in the morning. Bees moved from one flower to the next.
Rain had fallen in the night, and the paths were still wet.

Mara planted beans along the north wall. She watered them twice a day.
By the end of the month the beans had climbed the wall.

The old apple tree gave more fruit than ever. Mara carried the apples home in a basket.
Some of the apples went to the market on Saturday.
""",
    "station/timetable.txt": """\
The morning train left the station at seven. It was late again on Monday.
The station master wrote the delay in his book and rang the bell.

Passengers waited on the platform with their bags. A boy sold apples from a basket.
The train came in slowly, and the passengers climbed on board.

On Saturday the last train left at nine. The platform was empty by ten.
The station master closed the door and walked home in the rain.
""",
}


# The daemons live in /usr/sbin, which a non-login shell may leave out of PATH.
SEARCH_PATH = os.pathsep.join([os.environ.get("PATH", ""), "/usr/sbin", "/sbin"])


def _missing_requirements() -> list[str]:
    tools = ("munged", "mungekey", "slurmctld", "slurmd", "sbatch", "squeue", "sinfo", "timeout")
    missing = [tool for tool in tools if shutil.which(tool, path=SEARCH_PATH) is None]
    if importlib.util.find_spec("snakemake_executor_plugin_slurm") is None:
        missing.append("snakemake-executor-plugin-slurm (pip)")
    if os.geteuid() != 0:
        missing.append("root")
    return missing


def _require_cluster_tools() -> None:
    missing = _missing_requirements()
    if not missing:
        return
    message = (
        "SLURM test cluster unavailable, missing: " + ", ".join(missing) + ". Install with "
        "'apt-get install -y --no-install-recommends slurmctld slurmd slurm-client munge' and "
        "'pip install \"snakemake-executor-plugin-slurm>=2.8,<3\"', as root."
    )
    if os.environ.get("CI") == "true":
        pytest.fail(message, pytrace=False)
    pytest.skip(message)


def _tail(text: str, lines: int = 60) -> str:
    return "\n".join(text.splitlines()[-lines:])


@pytest.fixture(scope="module")
def slurm_env(tmp_path_factory):
    """A running test cluster; the daemons are stopped whatever happens."""
    _require_cluster_tools()
    state = tmp_path_factory.mktemp("slurm-state")
    # The jobs spend most of their time starting Python: offer 6 CPUs on this
    # 2-core machine so that each stage's jobs run side by side.
    env = dict(os.environ, PATH=SEARCH_PATH, SLURM_CONF=str(state / "slurm.conf"), SLURM_TEST_CPUS="6")
    try:
        started = subprocess.run(
            ["bash", str(CLUSTER / "start_local_slurm.sh"), str(state)],
            capture_output=True,
            text=True,
            timeout=180,
            env=env,
        )
        assert started.returncode == 0, f"cluster did not start:\n{started.stdout}\n{started.stderr}"
        yield env
    finally:
        subprocess.run(["bash", str(CLUSTER / "stop_local_slurm.sh"), str(state)], timeout=120, env=env)


@dataclass
class Builds:
    local: Path
    slurm: Path


def _run(command: list[str], env: dict[str, str], timeout: float, what: str, files: int | None = None) -> None:
    """Run to the end; `files`: the open-files limit (soft and hard) of the command's process."""
    limit = None if files is None else (lambda: resource.setrlimit(resource.RLIMIT_NOFILE, (files, files)))
    done = subprocess.run(command, capture_output=True, text=True, env=env, timeout=timeout, preexec_fn=limit)
    assert done.returncode == 0, f"{what} failed ({done.returncode}):\n{_tail(done.stdout)}\n{_tail(done.stderr)}"


@pytest.fixture(scope="module")
def builds(slurm_env, tmp_path_factory) -> Builds:
    work = tmp_path_factory.mktemp("slurm-build")
    corpus = work / "corpus"
    for name, text in CORPUS.items():
        (corpus / name).parent.mkdir(parents=True, exist_ok=True)
        (corpus / name).write_text(text, encoding="utf-8")
    override = work / "override.yaml"
    # One chunk per file: three prepare and three shard jobs, so the shards of several chunks
    # are written on the cluster.
    override.write_text(yaml.safe_dump(scenario("one-chunk-per-file", {"corpus": {"root": str(corpus)}})), encoding="utf-8")

    snakemake = [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--configfile", str(override)]

    local = work / "local"
    _run([*snakemake, "--directory", str(local), "--cores", "2"], slurm_env, LOCAL_RUN_S, "local build")

    slurm = work / "slurm"
    command = [
        "timeout",
        "-s",
        "INT",
        "-k",
        str(KILL_AFTER_S),
        str(SLURM_RUN_S),
        *snakemake,
        "--directory",
        str(slurm),
        "--profile",
        str(PROFILE),
        # The test cluster has no accounts, and its jobs take about 20 s:
        # poll from 8 s on (then 18 s, 28 s later ...) instead of the
        # profile's 40 s, and keep every job's SLURM log.
        "--slurm-no-account",
        "--slurm-init-seconds-before-status-checks",
        "8",
        "--slurm-keep-successful-logs",
    ]
    started = time.monotonic()
    # The submitting process may hold fewer files than a local deduplicate job of these chunks
    # would need: the nodes' own limits are what count, and the job checks them there.
    _run(command, slurm_env, SLURM_RUN_S + KILL_AFTER_S + 30, "SLURM build", files=len(CORPUS) + worker.SPARE_FILES - 1)
    print(f"SLURM build took {time.monotonic() - started:.0f} s")
    return Builds(local=local, slurm=slurm)


def test_every_job_ran_as_a_slurm_job(builds, slurm_env):
    # Every job of the workflow writes one log under build/logs/<rule>/; the
    # executor keeps one SLURM log per job, slurm_logs/rule_<rule>/.../<job id>.log.
    rule_logs = builds.slurm / "build" / "logs"
    jobs_per_rule = Counter(log.relative_to(rule_logs).parts[0] for log in rule_logs.glob("**/*.log"))
    slurm_logs = {folder.name.removeprefix("rule_"): sorted(folder.glob("**/*.log")) for folder in (builds.slurm / ".snakemake" / "slurm_logs").glob("rule_*")}
    assert jobs_per_rule, "the SLURM build wrote no job log"
    assert {rule: len(logs) for rule, logs in slurm_logs.items()} == dict(jobs_per_rule)

    states = {job_id: state for job_id, (state, _) in _queue(slurm_env).items()}
    job_ids = [log.stem for logs in slurm_logs.values() for log in logs]
    assert {job_id: states.get(job_id) for job_id in job_ids} == dict.fromkeys(job_ids, "COMPLETED")


def _queue(slurm_env: dict[str, str]) -> dict[str, tuple[str, int]]:
    """Every job SLURM knows (squeue): its state and the CPUs it was given."""
    queue = subprocess.run(
        ["squeue", "--states=all", "--noheader", "--format=%i|%T|%C"],
        capture_output=True,
        text=True,
        env=slurm_env,
        timeout=30,
        check=True,
    ).stdout
    return {job_id: (state, int(cpus)) for job_id, state, cpus in (line.split("|") for line in queue.split())}


def test_the_jobs_that_run_two_threads_ask_slurm_for_two_cpus(builds, slurm_env):
    """On a cluster the baseline reserves the two cores its threads use (on one machine it
    reserves one, so that it starts beside a one-core job); so does the deduplicate job."""
    queue = _queue(slurm_env)
    folders = (builds.slurm / ".snakemake" / "slurm_logs").glob("rule_*")
    cpus = {folder.name.removeprefix("rule_"): {queue[log.stem][1] for log in folder.glob("**/*.log")} for folder in folders}
    assert cpus["baseline"] == cpus["deduplicate"] == {2}
    assert cpus["prepare"] == cpus["shards"] == {1}


def _digests(build: Path) -> dict[str, str]:
    files = sorted((build / "build" / "shards").glob("**/*.parquet")) + [build / "build" / name for name in ("vocabulary.tsv", "manifest.json")]
    return {str(f.relative_to(build)): hashlib.sha256(f.read_bytes()).hexdigest() for f in files}


def test_slurm_build_matches_local_build(builds):
    local = _digests(builds.local)
    assert len([name for name in local if name.endswith(".parquet")]) == 3 * 3 * 3, "a shard per split, kind and chunk"
    assert _digests(builds.slurm) == local
