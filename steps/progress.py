"""Progress lines for long jobs: what a job has done so far, written to its log every so often.

A prepare job on a large file runs for minutes (on a cluster for hours) and would otherwise
print nothing until it ends. `Progress` writes one line to
standard error (the job's log) at most every `every` seconds, so `corpusmill progress BUILD`
or `tail -f` on a log shows where each running job is.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path
from typing import TextIO

from .layout import Layout

PREFIX = "progress: "


class Progress:
    """Counts documents and bytes done and reports them at most every `every` seconds."""

    def __init__(self, label: str, total_bytes: int | None = None, every: float = 10.0, stream: TextIO | None = None) -> None:
        self.label, self.total_bytes, self.every = label, total_bytes, every
        self.stream = stream or sys.stderr
        self.started = self.reported = time.monotonic()
        self.documents = self.bytes = 0

    def add(self, documents: int, size: int) -> None:
        self.documents += documents
        self.bytes += size
        now = time.monotonic()
        if now - self.reported >= self.every:
            self.reported = now
            self.report(now)

    def report(self, now: float | None = None) -> None:
        elapsed = max((now or time.monotonic()) - self.started, 1e-9)
        share = f" of {self.total_bytes / 1e6:,.1f} MB ({self.bytes / self.total_bytes:.0%})" if self.total_bytes else ""
        print(
            f"{PREFIX}{self.label}: {self.documents:,} documents, {self.bytes / 1e6:,.1f} MB{share} in {elapsed:,.0f} s "
            f"({self.bytes / 1e6 / elapsed:,.1f} MB/s)",
            file=self.stream,
            flush=True,
        )


def running_jobs(build: Path, within_seconds: float, now: float | None = None) -> list[tuple[str, str, float]]:
    """(job log relative to the build, its last progress line, seconds since it was written) for
    each log whose last line is a progress line written within `within_seconds`: jobs still at
    work (a job that finished or failed ends its log with another line)."""
    now = time.time() if now is None else now
    found = []
    logs = Path(Layout(str(build)).logs_dir)
    for log in sorted(logs.rglob("*.log")):
        age = now - log.stat().st_mtime
        if age > within_seconds:
            continue
        with open(log, "rb") as handle:
            handle.seek(max(0, log.stat().st_size - 4096))
            lines = [line for line in handle.read().decode("utf-8", "replace").splitlines() if line.strip()]
        if lines and lines[-1].startswith(PREFIX):
            found.append((log.relative_to(logs).as_posix(), lines[-1].removeprefix(PREFIX), age))
    return found


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(prog="corpusmill progress", description="Where each running job of a build is, from its log.")
    parser.add_argument("build", type=Path, help="the build folder")
    parser.add_argument("--minutes", type=float, default=60.0, help="only logs written within this many minutes")
    args = parser.parse_args(argv)
    logs = Layout(str(args.build)).logs_dir
    if not Path(logs).is_dir():
        raise SystemExit(f"corpusmill: {logs}: not found; is {args.build} a build folder?")
    jobs = running_jobs(args.build, args.minutes * 60)
    if not jobs:
        print(f"no job of {args.build} reported progress in the last {args.minutes:g} minutes")
    for log, line, age in jobs:
        print(f"{log}: {line} ({age:,.0f} s ago)")


if __name__ == "__main__":
    main()
