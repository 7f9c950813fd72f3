"""The entry the workflow's rules call: `python -m steps.run MODULE [ARGS…]` runs that step module's main.

Why not `python -m steps.MODULE` directly: pyarrow imports pandas on its first array
conversion whenever pandas is installed, a large share of a short job's time and memory,
although no step uses it. Hiding pandas here keeps short jobs short; nothing else changes.

For the same reason numpy's BLAS runs on one thread: no step does linear algebra, and starting
OpenBLAS' thread pool costs CPU time on every import. Arrow allocates from the system
allocator: pyarrow's default (mimalloc) kept jobs larger at their peak (measured with
`/usr/bin/time`; bench/README.md). The system allocator keeps one arena for all threads, for
the same reason (steps.worker.use_process_defaults). All are defaults: a value already in the
environment wins.

In a local run a pre-started worker (steps.worker) runs the job with its imports already done;
without one (on a cluster node, or when it cannot be reached) the job runs here.
"""

from __future__ import annotations

import importlib
import importlib.abc
import sys

from .worker import end_like, run_through_worker, use_process_defaults


class _WithoutPandas(importlib.abc.MetaPathFinder):
    """Makes `import pandas` fail, as if it were not installed."""

    def find_spec(self, name: str, path: object = None, target: object = None) -> None:
        if name == "pandas" or name.startswith("pandas."):
            raise ModuleNotFoundError(f"No module named {name!r} (hidden by steps.run)", name=name)
        return None


def hide_pandas() -> None:
    if not any(isinstance(finder, _WithoutPandas) for finder in sys.meta_path):
        sys.meta_path.insert(0, _WithoutPandas())


def main(argv: list[str] | None = None) -> None:
    args = sys.argv[1:] if argv is None else argv
    if not args:
        raise SystemExit("usage: python -m steps.run MODULE [ARGS…]")
    status = run_through_worker(args)
    if status is not None:
        end_like(status)
    hide_pandas()
    use_process_defaults()
    importlib.import_module(f"{__package__}.{args[0]}").main(args[1:])


if __name__ == "__main__":
    main()
