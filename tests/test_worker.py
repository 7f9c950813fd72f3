"""The pre-started worker: a job run through it ends exactly as a job run by itself would (exit
code, output in its own streams, killed by the same signal), and a cancelled job is stopped.
Every job, through the worker or not, allocates from one arena unless its environment says
otherwise.

The worker is forked from this test process with a stand-in step module registered in
sys.modules, so the jobs can exit, crash or hang on purpose; the rest is the real code."""

from __future__ import annotations

import faulthandler
import os
import select
import signal
import subprocess
import sys
import time
import types
from pathlib import Path

import pytest
import yaml

from conftest import REPO, scenario
from corpusmill import near_duplicates, worker


def stand_in(argv: list[str]) -> None:
    """A step that does what its arguments say."""
    what = argv[0]
    print(f"stdout of {what}", flush=True)
    print(f"stderr of {what}", file=sys.stderr, flush=True)
    if what == "exit":
        raise SystemExit(int(argv[1]))
    if what == "message":
        raise SystemExit("corpusmill: something a user can act on")
    if what == "raise":
        raise ValueError("an unexpected error")
    if what == "signal":
        faulthandler.disable()  # pytest's, inherited through the fork: it would print to the terminal
        os.kill(os.getpid(), getattr(signal, argv[1]))
    if what == "tables":  # whether the job found the code-point class table built
        raise SystemExit(0 if near_duplicates._classes.cache_info().currsize else 3)
    if what == "hang":
        Path(argv[1]).write_text(str(os.getpid()))
        time.sleep(60)


@pytest.fixture()
def running_worker(monkeypatch: pytest.MonkeyPatch):
    sys.modules["corpusmill.standin"] = types.SimpleNamespace(main=stand_in)
    monkeypatch.setattr(worker, "PRELOAD", ())
    near_duplicates._classes.cache_clear()  # the worker, not this process, must build it
    name = f"corpusmill-test-{os.getpid()}"
    server = os.fork()
    if server == 0:
        try:
            worker.serve(name, os.getppid())
        finally:
            os._exit(0)
    monkeypatch.setenv(worker.ENV, name)
    for _ in range(200):  # until the socket exists
        if worker.run_through_worker(["standin", "exit", "0"]) is not None:
            break
        time.sleep(0.02)
    yield name
    os.kill(server, signal.SIGTERM)
    os.waitpid(server, 0)
    del sys.modules["corpusmill.standin"]


def run(argv: list[str], tmp_path: Path) -> tuple[int, str, str]:
    """Run a job through the worker with stdout and stderr going to files, as a job's log does."""
    out, err = tmp_path / "out", tmp_path / "err"
    saved = os.dup(1), os.dup(2)
    with open(out, "w") as o, open(err, "w") as e:
        os.dup2(o.fileno(), 1)
        os.dup2(e.fileno(), 2)
        try:
            status = worker.run_through_worker(argv)
        finally:
            os.dup2(saved[0], 1)
            os.dup2(saved[1], 2)
    return status, out.read_text(), err.read_text()


@pytest.mark.parametrize(("argv", "code"), [(["exit", "0"], 0), (["exit", "3"], 3), (["message"], 1), (["raise"], 1)])
def test_a_job_through_the_worker_exits_with_its_own_code_writing_to_its_own_streams(running_worker, tmp_path: Path, argv, code):
    status, out, err = run(["standin", *argv], tmp_path)
    assert os.WIFEXITED(status) and os.WEXITSTATUS(status) == code
    assert out == f"stdout of {argv[0]}\n" and err.startswith(f"stderr of {argv[0]}\n")
    if argv[0] == "message":
        assert err.endswith("corpusmill: something a user can act on\n")
    if argv[0] == "raise":
        assert "Traceback" in err and err.endswith("ValueError: an unexpected error\n")


def test_jobs_find_the_tables_the_worker_built_before_forking_them(running_worker, tmp_path: Path):
    """The code-point class table of near-duplicate words is built once, in the worker, not in
    every prepare job."""
    status, _, _ = run(["standin", "tables"], tmp_path)
    assert os.WIFEXITED(status) and os.WEXITSTATUS(status) == 0


@pytest.mark.parametrize("name", ["SIGKILL", "SIGSEGV", "SIGTERM"])
def test_a_job_killed_by_a_signal_is_reported_as_killed_by_it(running_worker, tmp_path: Path, name: str):
    """POSIX wait status: WIFSIGNALED with the signal's number, as for a process killed directly."""
    status, _, _ = run(["standin", "signal", name], tmp_path)
    assert os.WIFSIGNALED(status) and os.WTERMSIG(status) == getattr(signal, name)


def test_a_cancelled_client_stops_its_job(running_worker, tmp_path: Path):
    """Snakemake cancels a job by killing its process: the job the worker runs for it must end."""
    marker = tmp_path / "pid"
    client = os.fork()
    if client == 0:
        try:
            worker.run_through_worker(["standin", "hang", str(marker)])
        finally:
            os._exit(0)
    for _ in range(250):
        if marker.exists() and marker.read_text():
            break
        time.sleep(0.02)
    job = int(marker.read_text())
    os.kill(client, signal.SIGKILL)
    os.waitpid(client, 0)
    for _ in range(250):
        try:
            os.kill(job, 0)
        except ProcessLookupError:
            break
        time.sleep(0.02)
    else:
        pytest.fail(f"job {job} still runs after its client was killed")


def test_a_launched_worker_imports_while_its_caller_goes_on_then_runs_jobs(monkeypatch: pytest.MonkeyPatch, tmp_path: Path):
    """launch returns at once (the worker still importing, so Snakemake plans the jobs meanwhile);
    ready waits for it and points the environment at it; stop ends it and the pointer."""
    monkeypatch.delenv(worker.ENV, raising=False)
    launched = worker.launch()
    try:
        assert not select.select([launched.process.stdout], [], [], 0)[0], "launch waited for the worker"
        assert worker.ENV not in os.environ
        assert worker.ready(launched) is True
        assert os.environ[worker.ENV] == launched.name
        status, out, _ = run(["deduplicate", "--help"], tmp_path)
        assert status == 0 and out.startswith("usage:")
    finally:
        worker.stop(launched.process)
    assert launched.process.poll() is not None and worker.ENV not in os.environ


def test_a_run_that_starts_no_job_leaves_no_worker(tmp_path: Path):
    """The Snakefile launches the worker as it is read; a dry run never waits for it, and the
    worker ends with the run, not a poll later."""
    directory = tmp_path / "run"
    directory.mkdir()
    (directory / "override.yaml").write_text(yaml.safe_dump(scenario("demo")), encoding="utf-8")
    command = [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory", str(directory), "--cores", "1"]
    dry = subprocess.Popen([*command, "--configfile", str(directory / "override.yaml"), "--dry-run"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    assert dry.wait(timeout=120) == 0
    owned = []
    for entry in Path("/proc").iterdir():
        try:
            arguments = (entry / "cmdline").read_bytes().split(b"\0")
        except OSError:
            continue
        if any(argument.endswith(b".worker") for argument in arguments) and str(dry.pid).encode() in arguments:
            owned.append(entry.name)
    assert not owned, f"worker processes of the finished run: {owned}"


def test_without_a_worker_a_job_runs_itself(monkeypatch: pytest.MonkeyPatch):
    monkeypatch.delenv(worker.ENV, raising=False)
    assert worker.run_through_worker(["standin", "exit", "0"]) is None
    monkeypatch.setenv(worker.ENV, "corpusmill-nobody-listens-here")
    assert worker.run_through_worker(["standin", "exit", "0"]) is None


def test_end_like_ends_the_client_as_the_job_ended():
    """The client re-raises the job's fate: an exit code as SystemExit, a signal as itself."""
    with pytest.raises(SystemExit) as caught:
        worker.end_like(3 << 8)
    assert caught.value.code == 3
    child = os.fork()
    if child == 0:
        worker.end_like(signal.SIGTERM)
        os._exit(0)
    _, status = os.waitpid(child, 0)
    assert os.WIFSIGNALED(status) and os.WTERMSIG(status) == signal.SIGTERM


ARENAS_PROBE = r"""
import ctypes, sys, threading
from corpusmill import worker
worker.use_process_defaults()
import numpy as np
together = threading.Barrier(4)
def allocate():
    held = [np.ones(5_000) for _ in range(50)]  # 40 kB each: below the allocator's mmap threshold
    together.wait()  # all four threads alive at once, so none can take over another's arena
threads = [threading.Thread(target=allocate) for _ in range(4)]
for thread in threads:
    thread.start()
for thread in threads:
    thread.join()
ctypes.CDLL(None).malloc_stats()
"""


@pytest.mark.skipif(not hasattr(os, "confstr") or "glibc" not in (os.confstr("CS_GNU_LIBC_VERSION") or ""), reason="glibc's malloc_stats")
@pytest.mark.parametrize(("environment", "one_arena"), [({}, True), ({"MALLOC_ARENA_MAX": "8"}, False)])
def test_jobs_allocate_from_one_arena_unless_the_environment_says_otherwise(environment: dict, one_arena: bool):
    """Outside reference: glibc's own malloc_stats, which lists each arena ("Arena N:") on
    stderr, after four threads of a process set up as jobs are allocated at once."""
    env = {"PATH": os.environ.get("PATH", ""), **environment}
    probe = subprocess.run([sys.executable, "-c", ARENAS_PROBE], capture_output=True, text=True, env=env, check=True)
    arenas = probe.stderr.count("Arena ")
    assert arenas == 1 if one_arena else arenas > 1, probe.stderr


def test_a_job_starts_where_the_c_library_cannot_be_loaded(monkeypatch: pytest.MonkeyPatch):
    """Without a C library to set the arenas with, the job runs with the allocator's defaults."""

    def no_library(name: object) -> None:
        raise OSError("no C library here")

    monkeypatch.delenv("MALLOC_ARENA_MAX", raising=False)
    monkeypatch.setenv("OPENBLAS_NUM_THREADS", "1")
    monkeypatch.setenv("ARROW_DEFAULT_MEMORY_POOL", "system")
    monkeypatch.setattr(worker.ctypes, "CDLL", no_library)
    worker.use_process_defaults()


OPEN_FILES_PROBE = r"""
import resource
from corpusmill import worker
hard = resource.getrlimit(resource.RLIMIT_NOFILE)[1]
resource.setrlimit(resource.RLIMIT_NOFILE, (256, hard))
worker.use_process_defaults()
print(*resource.getrlimit(resource.RLIMIT_NOFILE), hard)
"""


def test_a_job_may_hold_as_many_files_open_as_the_hard_limit_allows():
    """A soft limit of 256 open files (the common default is 1,024) is raised to the process's
    hard limit, as the kernel reports it (getrlimit), before a job runs."""
    probe = subprocess.run([sys.executable, "-c", OPEN_FILES_PROBE], capture_output=True, text=True, check=True)
    soft, hard, before = map(int, probe.stdout.split())
    assert soft == hard == before


@pytest.mark.parametrize(("chunks", "limit", "enough"), [(960, 1024, True), (961, 1024, False), (5_000, 1024, False)])
def test_too_few_open_files_names_the_limit_what_is_needed_and_the_fixes(chunks: int, limit: int, enough: bool):
    """The deduplicate job holds a file per chunk and SPARE_FILES more: 960 chunks fit 1,024 open
    files, 961 do not, and the message says how many would."""
    message = worker.too_few_open_files(chunks, limit)
    if enough:
        assert message is None
        return
    assert message is not None
    assert f"{chunks:,} chunks" in message and f"may hold {limit:,}" in message and f"at least {chunks + worker.SPARE_FILES:,}" in message
    assert "ulimit -Hn" in message and "corpus.chunk_mb" in message
