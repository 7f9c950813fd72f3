"""Concurrency: work overlapped in a second thread where the work releases the interpreter lock
(numpy's sorts and searches, Parquet reads and decoding), so a corpus-wide job uses the cores
it declares without a second process holding a copy of its data."""

from __future__ import annotations

from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import ThreadPoolExecutor
from typing import TypeVar

Item = TypeVar("Item")
Result = TypeVar("Result")


def one_ahead(items: Iterable[Item], work: Callable[[Item], Result]) -> Iterator[Result]:
    """work(item) for each item in order, in a second thread. While it works on one item, the
    caller's thread takes the next item (so the reading a generator of items does overlaps the
    work) and then uses the result before: memory for two results and an item at a time."""
    with ThreadPoolExecutor(1) as pool:
        pending = None
        for item in items:
            submitted = pool.submit(work, item)
            if pending is not None:
                yield pending.result()
            pending = submitted
        if pending is not None:
            yield pending.result()
