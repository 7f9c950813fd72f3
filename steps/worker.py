"""A pre-started worker for the jobs of one local run: jobs start with their imports done.

Every job of the workflow is `python -m steps.run MODULE …`, and a fresh interpreter spends a
good part of a CPU-second importing numpy, Arrow, regex and the step modules before any work,
more than many jobs then do (bench/README.md). The Snakefile starts this worker as it is read
(`launch`), so its imports overlap Snakemake's planning, and a run on this machine waits for it
before the first job (`ready`, in `onstart`); it imports every step module, then listens on an
abstract Unix socket whose name the jobs find in the environment (CORPUSMILL_WORKER).
`steps.run` connects, hands over its command line, working folder, environment and its
standard streams (file descriptors passed over the socket, so the job writes to its own log),
and waits. For each job the worker forks a supervisor, which forks the job (copy-on-write: the
imports are already in memory), waits for it and sends its exit status back; `steps.run` then
ends the same way the job did (the same exit code, or killed by the same signal). When the
job's `steps.run` goes away (Snakemake cancels the job), the supervisor kills the job.

Only the user who started the worker may use it (the socket's peer credentials are checked).
It ends when the run ends (`onsuccess`/`onerror`, or the exit handler of the process that
started it) or when that process is gone. A cluster run ends it before its first job; jobs on a
cluster never see it (the variable is not passed to other machines) and start as plain
processes, as does any job when the worker cannot be reached.
"""

from __future__ import annotations

import array
import ctypes
import importlib
import json
import os
import resource
import select
import signal
import socket
import struct
import sys
import traceback
from typing import IO, TYPE_CHECKING, NamedTuple, cast

if TYPE_CHECKING:
    import subprocess

ENV = "CORPUSMILL_WORKER"
# The step modules every rule runs, imported once by the worker.
PRELOAD = (
    "abbreviations", "prepare", "deduplicate", "subword", "vocabulary", "shards", "accounting", "growth", "coverage", "baseline",
    "manifest", "croissant", "datasheet", "report",
)  # fmt: skip
_STREAMS = 3  # stdin, stdout, stderr
_M_ARENA_MAX = -8  # glibc's mallopt parameter for the number of allocator arenas
# Files a job may need open beside one per chunk: the interpreter's, Arrow's, the log (a margin
# with room to spare, common practice rather than a measured figure).
SPARE_FILES = 64
_MAX_MESSAGE = 1 << 22


def _peer_uid(connection: socket.socket) -> int:
    credentials = connection.getsockopt(socket.SOL_SOCKET, socket.SO_PEERCRED, struct.calcsize("3i"))
    return struct.unpack("3i", credentials)[2]


def _name_process(text: str) -> None:
    """Name this process (ps, /proc/PID/comm) after the job it runs: Linux prctl(PR_SET_NAME)."""
    try:
        ctypes.CDLL(None).prctl(15, text.encode()[:15], 0, 0, 0)
    except (OSError, AttributeError):
        pass


def _receive(connection: socket.socket) -> tuple[dict, list[int]]:
    """One request: a JSON message and the job's standard streams as file descriptors."""
    descriptors = array.array("i")
    message, ancillary, _, _ = connection.recvmsg(_MAX_MESSAGE, socket.CMSG_LEN(_STREAMS * descriptors.itemsize))
    for level, kind, data in ancillary:
        if level == socket.SOL_SOCKET and kind == socket.SCM_RIGHTS:
            descriptors.frombytes(data[: len(data) - (len(data) % descriptors.itemsize)])
    return json.loads(message.decode("utf-8")), list(descriptors)


def _run_job(request: dict, streams: list[int]) -> None:
    """In the forked job: become the requested command and run it; never returns."""
    code = 1
    try:
        os.chdir(request["cwd"])
        os.environ.clear()
        os.environ.update(request["env"])
        for target, descriptor in enumerate(streams):
            os.dup2(descriptor, target)
        sys.stdin = open(0, closefd=False)
        sys.stdout = open(1, "w", closefd=False, buffering=1)
        sys.stderr = open(2, "w", closefd=False, buffering=1)
        argv = request["argv"]
        _name_process("cm-" + "_".join(word for word in argv[:2] if not word.startswith("-")))
        sys.argv = ["steps.run", *argv]
        try:
            importlib.import_module(f"{__package__}.{argv[0]}").main(argv[1:])
            code = 0
        except SystemExit as exit:
            if exit.code is None or isinstance(exit.code, int):
                code = exit.code or 0
            else:
                print(exit.code, file=sys.stderr)
                code = 1
        except BaseException:
            traceback.print_exc()
            code = 1
        finally:
            sys.stdout.flush()
            sys.stderr.flush()
    finally:
        os._exit(code)


def _supervise(connection: socket.socket) -> None:
    """In the forked supervisor of one job: fork it, wait for it, report its status; kill it if
    the client goes away. Never returns."""
    try:
        request, streams = _receive(connection)
        job = os.fork()
        if job == 0:
            connection.close()
            _run_job(request, streams)
        for descriptor in streams:
            os.close(descriptor)
        while True:
            done, status = os.waitpid(job, os.WNOHANG)
            if done:
                connection.sendall(json.dumps({"status": status}).encode())
                break
            readable, _, _ = select.select([connection], [], [], 0.05)
            if readable and not connection.recv(1):  # the client is gone: the job was cancelled
                os.kill(job, signal.SIGTERM)
                os.waitpid(job, 0)
                break
    finally:
        os._exit(0)


def use_process_defaults() -> None:
    """Set what every job runs with (steps.run says why), before the step modules are imported;
    a value already in the environment wins: numpy's BLAS on one thread, Arrow on the system
    allocator, and that allocator (glibc's) with one arena for all threads. By default each
    thread of a job gets its own arena, and memory one thread freed is kept in its arena rather
    than reused by the others, which raised the peaks of the jobs that run threads. And as many
    open files as the hard limit allows."""
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    os.environ.setdefault("ARROW_DEFAULT_MEMORY_POOL", "system")
    if "MALLOC_ARENA_MAX" not in os.environ:
        try:
            mallopt = getattr(ctypes.CDLL(None), "mallopt", None)
        except OSError:  # no C library to load here: the job runs with its allocator's defaults
            mallopt = None
        if mallopt is not None:
            mallopt(_M_ARENA_MAX, 1)
    # The deduplicate job maps every chunk's verification slots at once, and each map keeps its
    # file open: a corpus of many chunks needs more than the common soft limit of 1,024 files.
    soft, hard = resource.getrlimit(resource.RLIMIT_NOFILE)
    if soft != hard:
        try:
            resource.setrlimit(resource.RLIMIT_NOFILE, (hard, hard))
        except (ValueError, OSError):  # a hard limit the kernel will not grant as soft: keep soft
            pass


def open_files_limit(hard: bool = False) -> int:
    """The files this process may hold open: its soft limit, or with `hard` what a job gets once
    use_process_defaults raised it (sys.maxsize when unlimited)."""
    limits = resource.getrlimit(resource.RLIMIT_NOFILE)
    limit = limits[1] if hard else limits[0]
    return sys.maxsize if limit == resource.RLIM_INFINITY else limit


def too_few_open_files(chunks: int, limit: int) -> str | None:
    """What the user reads when `limit` open files are too few for the deduplicate job, which
    holds one per chunk; None when they suffice."""
    needed = chunks + SPARE_FILES
    if needed <= limit:
        return None
    return (
        f"{chunks:,} chunks: the deduplicate job holds a file open for each (and up to {SPARE_FILES} more), but a process here "
        f"may hold {limit:,}; raise the open-files limit to at least {needed:,} (`ulimit -Hn` shows it; it is set in "
        "/etc/security/limits.conf, or with LimitNOFILE for a service), or use fewer, larger chunks (corpus.chunk_mb, or "
        "corpus.pack_mb for many small files)"
    )


def serve(name: str, owner: int) -> None:
    """Import every step, then run each job asked for until `owner` (the process that started
    the worker) is gone or the socket is closed."""
    use_process_defaults()
    from .run import hide_pandas

    hide_pandas()
    for module in PRELOAD:
        importlib.import_module(f"{__package__}.{module}")
    from . import near_duplicates

    near_duplicates.warm()  # a table every prepare job builds on first use, shared by the forks
    listener = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
    listener.bind("\0" + name)
    listener.listen(64)
    _name_process("cm-worker")
    print("ready", flush=True)
    uid = os.getuid()
    while True:
        readable, _, _ = select.select([listener], [], [], 1.0)
        while True:  # reap finished supervisors
            try:
                if os.waitpid(-1, os.WNOHANG)[0] == 0:
                    break
            except ChildProcessError:
                break
        if not _alive(owner):
            return
        if not readable:
            continue
        connection, _ = listener.accept()
        if _peer_uid(connection) != uid:
            connection.close()
            continue
        if os.fork() == 0:
            listener.close()
            _supervise(connection)
        connection.close()


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def run_through_worker(argv: list[str]) -> int | None:
    """Run a job through the worker named in the environment; its wait status, or None when
    there is no worker to run it (the caller then runs the job itself)."""
    name = os.environ.get(ENV)
    if not name:
        return None
    connection = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
    try:
        connection.connect("\0" + name)
    except OSError:
        return None
    request = json.dumps({"argv": argv, "cwd": os.getcwd(), "env": dict(os.environ)}).encode("utf-8")
    descriptors = array.array("i", range(_STREAMS))
    connection.sendmsg([request], [(socket.SOL_SOCKET, socket.SCM_RIGHTS, descriptors)])
    reply = b""
    while chunk := connection.recv(4096):
        reply += chunk
    if not reply:  # the worker ended before the job did
        return 1 << 8
    return int(json.loads(reply.decode("utf-8"))["status"])


class Launched(NamedTuple):
    """A worker started for this run, not yet known to be ready."""

    process: subprocess.Popen
    name: str


def launch() -> Launched:
    """Start the worker for this run. It imports while the caller goes on (Snakemake reading the
    workflow and planning the jobs); `ready` then waits for it. (subprocess is imported here: every
    job's client imports this module.)"""
    import subprocess

    name = f"corpusmill-{os.getpid()}-{os.urandom(6).hex()}"
    package = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    environment = {**os.environ, "PYTHONPATH": os.pathsep.join(filter(None, [package, os.environ.get("PYTHONPATH")]))}
    process = subprocess.Popen(
        [sys.executable, "-m", f"{__package__}.worker", name, str(os.getpid())],
        stdout=subprocess.PIPE, env=environment, start_new_session=True,
    )  # fmt: skip
    return Launched(process, name)


def ready(launched: Launched) -> bool:
    """Wait for a launched worker and point this process's environment (which its jobs inherit)
    at it; False, the worker ended, when it does not come up (the jobs then start as plain
    processes)."""
    announcements = cast(IO[bytes], launched.process.stdout)  # a pipe: stdout=PIPE
    if not (select.select([announcements], [], [], 30)[0] and announcements.readline().strip() == b"ready"):
        stop(launched.process)
        return False
    os.environ[ENV] = launched.name
    return True


def stop(process: subprocess.Popen) -> None:
    """End the worker of this run (its running jobs are done: the run is over); nothing when it
    has ended already."""
    os.environ.pop(ENV, None)
    process.terminate()
    process.wait()


def end_like(status: int) -> None:
    """End this process as the job ended: its exit code, or the signal that killed it."""
    if os.WIFSIGNALED(status):
        number = os.WTERMSIG(status)
        signal.signal(number, signal.SIG_DFL)
        os.kill(os.getpid(), number)
    raise SystemExit(os.WEXITSTATUS(status))


if __name__ == "__main__":
    serve(sys.argv[1], int(sys.argv[2]))
