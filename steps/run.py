"""The entry the workflow's rules call: `python -m steps.run MODULE [ARGS…]` runs that step module's main.

Why not `python -m steps.MODULE` directly: pyarrow imports pandas on its first array
conversion whenever pandas is installed, about 0.45 CPU-seconds and 35 MB per job, although no
step uses it. Hiding pandas here keeps short jobs short; nothing else changes.

For the same reason numpy's BLAS runs on one thread: no step does linear algebra, and starting
OpenBLAS' thread pool costs about 0.15 CPU-seconds per job on import (measured with
`/usr/bin/time python -m steps.run encode --help`). Arrow allocates from the system allocator:
pyarrow's default (mimalloc) kept jobs 15-45 % larger at their peak (e.g. the vocabulary job
of 300k words 365-435 MiB against 265-282 MiB, measured with `/usr/bin/time`). Both are
defaults: a value already in the environment wins.
"""

from __future__ import annotations

import importlib
import importlib.abc
import os
import sys


class _WithoutPandas(importlib.abc.MetaPathFinder):
    """Makes `import pandas` fail, as if it were not installed."""

    def find_spec(self, name: str, path: object = None, target: object = None) -> None:
        if name == "pandas" or name.startswith("pandas."):
            raise ModuleNotFoundError(f"No module named {name!r} (hidden by steps.run)", name=name)
        return None


def main(argv: list[str] | None = None) -> None:
    args = sys.argv[1:] if argv is None else argv
    if not args:
        raise SystemExit("usage: python -m steps.run MODULE [ARGS…]")
    sys.meta_path.insert(0, _WithoutPandas())
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    os.environ.setdefault("ARROW_DEFAULT_MEMORY_POOL", "system")
    importlib.import_module(f"{__package__}.{args[0]}").main(args[1:])


if __name__ == "__main__":
    main()
