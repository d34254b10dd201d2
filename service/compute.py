"""Heavy work in a few low-priority child processes, each of which can be stopped on its own.

Why not the request thread: a gunicorn ``gthread`` worker runs its threads under one GIL, so a
planning computation or a long replay in one thread slows every other request of that worker,
the weekly trips call included, and nothing can stop a Python computation from outside short of
ending its process. Why not ``concurrent.futures.ProcessPoolExecutor``: it cannot end one task;
killing one of its processes breaks the whole pool, and a cancelled future keeps running.

So each gunicorn worker keeps its own :class:`Pool` (made on first use, after gunicorn's fork):

* ``processes`` children from the ``forkserver`` context. The fork server is a fresh interpreter
  that imports ``preload`` once; each child is a fork of it (milliseconds), never of a gunicorn
  worker with its threads, locks and database connections. A child serves one task at a time and
  is reused; its niceness is raised to :data:`NICENESS` (``os.nice``), so the request workers win
  the CPU whenever they want it and planning gets the rest.
* a task runs under a hard wall-clock ``limit``: when it passes, or when ``cancelled()`` says the
  client left, the child is killed (SIGKILL) and replaced on the next use. :class:`Overrun`,
  :class:`Cancelled` are raised.
* at most ``processes + queue`` tasks are admitted at once; a task that finds no free child waits
  at most ``wait`` seconds. Beyond either, :class:`Busy`. Admitted requests each hold a gunicorn
  thread while they wait, so ``processes + queue`` below the threads per worker keeps a thread
  free for every other call (README, configuration).

Tasks and results cross a pipe pickled; a function is sent by reference (module and name), so it
must be a module-level function. An exception raised by a task is raised again in the caller, with
its attributes. A daemonic ``multiprocessing`` process cannot host a pool (it may not have children);
gunicorn's workers are not such processes. This module uses the standard library only: it is imported by the fork server.
"""

from __future__ import annotations

import contextlib
import math
import multiprocessing
import os
import signal
import threading
import time
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from multiprocessing.connection import Connection
from queue import Empty, Queue
from typing import Any

#: Niceness of the children (19 is the lowest priority: CFS weight 15 against 1 024 at niceness 0).
NICENESS = 19
#: How often a waiting caller checks whether its client has left, in seconds.
POLL_SECONDS = 0.1


class Busy(Exception):
    """Every child is taken and the waiting room is full (or the wait ran out)."""


class Overrun(Exception):
    """The task passed its hard wall-clock limit; its child was killed."""


class Cancelled(Exception):
    """The caller gave up (its client left); the child was killed."""


class Crashed(Exception):
    """The child died during the task (killed from outside, out of memory)."""


def _serve(conn: Connection, niceness: int) -> None:
    """A child's loop: run each task it receives and send back ``(ok, value)``.

    Each task also arms ``SIGALRM`` one second past its limit, whose default action ends the
    process: should its gunicorn worker die without killing it, the child still stops.
    """
    with contextlib.suppress(OSError):
        os.nice(max(0, niceness - os.nice(0)))
    while True:
        try:
            fn, args, kwargs, limit = conn.recv()
        except (EOFError, OSError):  # the parent (a gunicorn worker) is gone
            return
        signal.alarm(math.ceil(limit) + 1)
        try:
            reply: tuple[bool, Any] = (True, fn(*args, **kwargs))
        except Exception as exc:  # noqa: BLE001 - raised again in the parent
            reply = (False, (type(exc), exc.args, dict(getattr(exc, "__dict__", {}))))
        finally:
            signal.alarm(0)
        try:
            conn.send(reply)
        except Exception as exc:  # noqa: BLE001 - e.g. a result that cannot be pickled
            conn.send((False, (RuntimeError, (f"task result could not be sent: {exc!r}",), {})))


def _rebuild(kind: type[BaseException], args: tuple[Any, ...], state: dict[str, Any]) -> BaseException:
    """The child's exception again, without calling its ``__init__`` (which may want keywords)."""
    exc = kind.__new__(kind)
    exc.args = args
    exc.__dict__.update(state)
    return exc


@dataclass
class _Slot:
    process: Any = None
    conn: Connection | None = None

    def alive(self) -> bool:
        return self.process is not None and self.process.is_alive()

    def stop(self) -> None:
        if self.process is not None:
            with contextlib.suppress(Exception):
                self.process.kill()
                self.process.join(5)
        if self.conn is not None:
            self.conn.close()
        self.process, self.conn = None, None


@dataclass
class Pool:
    """``processes`` reusable children, at most ``queue`` more tasks waiting for one."""

    processes: int
    queue: int
    preload: Sequence[str] = ()
    niceness: int = NICENESS
    _slots: list[_Slot] = field(init=False, repr=False)
    _free: Queue[_Slot] = field(init=False, repr=False)
    _admitted: int = field(default=0, init=False)
    _lock: threading.Lock = field(default_factory=threading.Lock, init=False, repr=False)
    _context: Any = field(init=False, repr=False)

    def __post_init__(self) -> None:
        self._context = multiprocessing.get_context("forkserver")
        self._context.set_forkserver_preload(list(self.preload))
        self._slots = [_Slot() for _ in range(self.processes)]
        self._free = Queue()
        for slot in self._slots:
            self._free.put(slot)

    @contextlib.contextmanager
    def admitted(self) -> Iterator[None]:
        """A place among the ``processes + queue`` tasks admitted at once, or :class:`Busy` at once.

        A caller may take its place before it does the work that prepares a task (parsing a
        request body), so that a refused request costs nothing more.
        """
        with self._lock:
            if self._admitted >= self.processes + self.queue:
                raise Busy("every planning process is busy and the queue is full")
            self._admitted += 1
        try:
            yield
        finally:
            with self._lock:
                self._admitted -= 1

    def run(
        self,
        fn: Callable[..., Any],
        args: Sequence[Any] = (),
        kwargs: dict[str, Any] | None = None,
        *,
        limit: float,
        wait: float,
        cancelled: Callable[[], bool] = lambda: False,
    ) -> Any:
        """``fn(*args, **kwargs)`` in a child, within ``limit`` seconds of starting there.

        Call it inside :meth:`admitted`.
        """
        try:
            slot = self._free.get(timeout=wait)
        except Empty:
            raise Busy(f"no planning process became free within {wait:g} s") from None
        try:
            return self._run_on(slot, fn, args, kwargs or {}, limit, cancelled)
        finally:
            self._free.put(slot)

    def start(self) -> None:
        """Start the fork server and every child now (gunicorn does it as a worker starts)."""
        for slot in list(self._free.queue):
            self._ensure(slot)

    def _ensure(self, slot: _Slot) -> None:
        if not slot.alive():
            slot.stop()
            parent, child = self._context.Pipe()
            slot.process = self._context.Process(target=_serve, args=(child, self.niceness), daemon=True)
            slot.process.start()
            child.close()
            slot.conn = parent

    def _run_on(self, slot: _Slot, fn, args, kwargs, limit: float, cancelled) -> Any:  # type: ignore[no-untyped-def]
        self._ensure(slot)
        assert slot.conn is not None
        deadline = time.monotonic() + limit
        try:
            slot.conn.send((fn, tuple(args), kwargs, limit))
            while not slot.conn.poll(max(0.0, min(POLL_SECONDS, deadline - time.monotonic()))):
                if time.monotonic() >= deadline:
                    slot.stop()
                    raise Overrun(f"stopped after {limit:g} s")
                if cancelled():
                    slot.stop()
                    raise Cancelled("the client left")
            ok, value = slot.conn.recv()
        except (EOFError, OSError) as exc:
            slot.stop()
            raise Crashed("the planning process ended during the task") from exc
        if ok:
            return value
        raise _rebuild(*value)

    def pids(self) -> list[int]:
        """The children's process ids (for tests and diagnostics)."""
        return [s.process.pid for s in self._slots if s.alive()]


_pools: dict[tuple[int, int, int, tuple[str, ...]], Pool] = {}
_pools_lock = threading.Lock()


def pool(processes: int, waiting: int, preload: Sequence[str] = ()) -> Pool:
    """This process's pool of that shape (made on first use; a forked child never reuses its parent's)."""
    key = (os.getpid(), processes, waiting, tuple(preload))
    with _pools_lock:
        found = _pools.get(key)
        if found is None:
            found = _pools[key] = Pool(processes, waiting, tuple(preload))
        return found
