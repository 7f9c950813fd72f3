"""steps.concurrency: work done one item ahead in a second thread, the items taken in the
caller's thread, results in order."""

import threading

import pytest

from corpusmill.concurrency import one_ahead


def test_results_come_in_the_order_of_the_items():
    assert list(one_ahead(range(50), lambda n: n * n)) == [n * n for n in range(50)]


def test_no_items_no_results():
    assert list(one_ahead([], lambda n: n)) == []


def test_the_next_item_is_worked_on_while_the_caller_holds_the_current_result():
    started = []

    def work(item):
        started.append(item)
        return item

    results = one_ahead(range(3), work)
    assert next(results) == 0
    # The caller has result 0 only; item 1 is being (or has been) worked on already.
    for _ in range(1000):
        if 1 in started:
            break
        threading.Event().wait(0.001)
    assert started[:2] == [0, 1]
    assert list(results) == [1, 2]


def test_the_work_runs_outside_the_callers_thread():
    threads = set(one_ahead(range(4), lambda _: threading.get_ident()))
    assert threading.get_ident() not in threads


def test_an_error_in_the_work_reaches_the_caller_at_its_item():
    def work(item):
        if item == 2:
            raise ValueError("item 2 is bad")
        return item

    results = one_ahead(range(5), work)
    assert [next(results), next(results)] == [0, 1]
    with pytest.raises(ValueError, match="item 2 is bad"):
        next(results)


def test_the_items_are_taken_in_the_callers_thread_while_the_work_goes_on():
    """A generator of items (a band read from disk) runs in the caller's thread, and item 1 is
    taken while item 0 is worked on."""
    caller, taken, item_one_taken = threading.get_ident(), [], threading.Event()

    def items():
        for item in range(3):
            taken.append(threading.get_ident())
            if item == 1:
                item_one_taken.set()
            yield item

    def work(item):
        if item == 0:
            assert item_one_taken.wait(5)
        return item

    assert list(one_ahead(items(), work)) == [0, 1, 2]
    assert taken == [caller] * 3
