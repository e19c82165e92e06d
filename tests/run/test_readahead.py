"""Reading one part ahead (obsprep.run.readahead): the same items in the same order, at most
one item ahead of the consumer, a file's failure kept to that file, and a build whose result
does not change."""

from __future__ import annotations

import threading

import pytest

from obsprep.run.readahead import FilesReadAhead, read_ahead


class CountingItems:
    """An iterator of 0..n-1 that records how far it was advanced and in which thread."""

    def __init__(self, n):
        self.n, self.produced, self.threads = n, 0, []

    def __iter__(self):
        for k in range(self.n):
            self.produced += 1
            self.threads.append(threading.get_ident())
            yield k


def test_items_come_in_order_and_at_most_one_ahead():
    items = CountingItems(6)
    seen = []
    for item in read_ahead(items):
        # the consumer holds `item`; the thread may have produced the next one, no more
        assert items.produced <= item + 2
        seen.append(item)
    assert seen == list(range(6))
    # the first in the caller's thread (nothing to overlap it with), the others in another
    assert items.threads[0] == threading.get_ident()
    assert threading.get_ident() not in items.threads[1:]


def test_an_exception_reaches_the_consumer_at_its_place():
    def failing():
        yield 1
        yield 2
        raise ValueError("part 3 unreadable")

    got = []
    with pytest.raises(ValueError, match="part 3 unreadable"):
        for item in read_ahead(failing()):
            got.append(item)
    assert got == [1, 2]


def test_a_failing_file_does_not_stop_the_next_one():
    def read(task):
        if task == "bad":
            yield "bad-1"
            raise OSError("truncated")
        yield f"{task}-1"
        yield f"{task}-2"

    tasks = ["a", "bad", "c"]
    files = FilesReadAhead(read, tasks)
    assert list(files.parts_of("a")) == ["a-1", "a-2"]
    got = []
    with pytest.raises(OSError, match="truncated"):
        for part in files.parts_of("bad"):
            got.append(part)
    assert got == ["bad-1"]
    assert list(files.parts_of("c")) == ["c-1", "c-2"]
    files.close()


def test_parts_a_consumer_leaves_are_skipped():
    def read(task):
        yield from (f"{task}-{k}" for k in range(3))

    files = FilesReadAhead(read, ["a", "b"])
    first = files.parts_of("a")
    assert next(first) == "a-0"  # the consumer stops after one part (an error, say)
    assert list(files.parts_of("b")) == ["b-0", "b-1", "b-2"]
    files.close()


def test_the_lock_is_held_while_each_part_is_read():
    lock = threading.Lock()
    held = []

    def read(task):
        for k in range(2):
            held.append(lock.locked())
            yield f"{task}-{k}"

    files = FilesReadAhead(read, ["a", "b"], lock=lock)
    assert list(files.parts_of("a")) == ["a-0", "a-1"]
    assert list(files.parts_of("b")) == ["b-0", "b-1"]
    files.close()
    assert held == [True] * 4
