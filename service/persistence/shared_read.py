"""One read shared by every caller that arrived before it started (a freshness barrier).

A caller needs a value at least as new as every commit acknowledged before it arrived. Any read
that *starts* after the caller arrived gives that, so concurrent callers can share one: a caller
joins no read already in flight (it may have started before the caller's commit was visible); it
waits for that read to end and shares the next, which starts after its arrival. Under load one
round trip serves every caller that arrived during the previous one; alone, a caller reads at once.
(Batching behind a barrier like this is what group commit does for log writes: common practice.)

A failed read's error reaches the callers it was to serve (each answers 503 at once instead of
queuing behind the next connection timeout); the next caller reads again.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from typing import Any


class SharedRead:
    """Run ``read`` for a caller, sharing one run among callers that all arrived before it began."""

    def __init__(self) -> None:
        self._changed = threading.Condition()
        self._arrivals = 0  # tickets handed out, in arrival order
        self._reading = False
        self._served = 0  # the newest finished read began after ticket ``_served`` arrived
        self._outcome: tuple[bool, Any] = (True, None)

    def __call__(self, read: Callable[[], Any]) -> Any:
        with self._changed:
            self._arrivals += 1
            ticket = self._arrivals
            while self._served < ticket:
                if not self._reading:
                    self._reading = True
                    covers = self._arrivals
                    break
                self._changed.wait()
            else:
                return self._result(self._outcome)
        outcome = None
        try:
            outcome = (True, read())
        except Exception as exc:  # noqa: BLE001 - handed to every caller this read serves
            outcome = (False, exc)
        finally:
            with self._changed:
                self._reading = False
                if outcome is not None:
                    self._served, self._outcome = covers, outcome
                self._changed.notify_all()
        return self._result(outcome)

    @staticmethod
    def _result(outcome: tuple[bool, Any]) -> Any:
        ok, value = outcome
        if ok:
            return value
        raise value
