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
    """work(item) for each item in order, the next item taken and worked on in a second thread
    while the caller uses the current result: memory for two results at a time."""
    iterator = iter(items)
    end = object()

    def following() -> object:
        item = next(iterator, end)
        return end if item is end else work(item)  # type: ignore[arg-type]

    with ThreadPoolExecutor(1) as pool:
        pending = pool.submit(following)
        while (result := pending.result()) is not end:
            pending = pool.submit(following)
            yield result  # type: ignore[misc]
