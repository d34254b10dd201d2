"""service.persistence.shared_read.SharedRead: a caller only ever gets a read that began after it arrived."""

from __future__ import annotations

import threading
import time
from concurrent.futures import ThreadPoolExecutor

import pytest

from service.persistence.shared_read import SharedRead


class Source:
    """A value that callers read; ``hold`` makes the next read wait until released."""

    def __init__(self) -> None:
        self.started = 0  # reads begun so far; a read returns the number it had when it began
        self.hold: threading.Event | None = None
        self.failing: set[int] = set()  # the reads (by number) that raise
        self.begun = threading.Event()

    def read(self) -> int:
        self.started += 1
        number = self.started
        self.begun.set()
        if self.hold is not None:
            hold, self.hold = self.hold, None
            assert hold.wait(5)
        if number in self.failing:
            raise ConnectionError(f"read {number} failed")
        return number


def wait_for_arrivals(shared: SharedRead, count: int) -> None:
    # Polls the ticket counter (private): the only sign that a thread is inside the call.
    deadline = time.monotonic() + 5
    while shared._arrivals < count:
        assert time.monotonic() < deadline, "callers did not arrive"
        time.sleep(0.001)


def test_a_lone_caller_reads_every_time():
    shared, source = SharedRead(), Source()
    assert [shared(source.read) for _ in range(3)] == [1, 2, 3]


def test_a_caller_arriving_during_a_read_gets_the_next_one_and_late_callers_share_it():
    shared, source = SharedRead(), Source()
    source.hold = release = threading.Event()
    with ThreadPoolExecutor(4) as pool:
        early = pool.submit(shared, source.read)
        assert source.begun.wait(5)  # read 1 is in flight
        late = [pool.submit(shared, source.read) for _ in range(3)]
        wait_for_arrivals(shared, 4)
        release.set()
        assert early.result(5) == 1
        # Read 1 may have begun before their callers' commits were visible: none of them gets it.
        assert [f.result(5) for f in late] == [2, 2, 2]
    assert source.started == 2  # three callers, one round trip


def test_a_failed_read_reaches_the_callers_it_served_and_the_next_caller_reads_again():
    shared, source = SharedRead(), Source()
    source.hold = release = threading.Event()
    with ThreadPoolExecutor(3) as pool:
        early = pool.submit(shared, source.read)
        assert source.begun.wait(5)
        source.failing = {2}  # read 1 succeeds; read 2, shared by the late callers, fails
        late = [pool.submit(shared, source.read) for _ in range(2)]
        wait_for_arrivals(shared, 3)
        release.set()
        assert early.result(5) == 1
        for future in late:
            with pytest.raises(ConnectionError, match="read 2 failed"):
                future.result(5)
    assert source.started == 2  # the second caller did not queue a read of its own behind the failure
    assert shared(source.read) == 3
