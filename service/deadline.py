"""A wall-clock limit on the work of one request, enforced inside the worker.

:func:`run_with_deadline` registers the guarded call with the process's one
watchdog thread; when its deadline passes while the guarded block still runs,
the watchdog raises an exception *in the request's own thread* (CPython's
``PyThreadState_SetAsyncExc``), which unwinds the engine at its next Python
step and surfaces as :class:`ComputeTimeExceeded`. This works in any thread
(gunicorn's gthread workers run requests outside the main thread, where
``SIGALRM`` cannot reach), and it truly stops the work: the engine keeps no
global state, so an abandoned analysis leaves nothing behind but garbage.

One watchdog serves every request of the process (started on first use, and
again in a forked child): a thread started and cancelled per request cost a
thread start, and a wake-up competing for the interpreter lock, on every call.
The watchdog sleeps until the earliest deadline it holds; a request that ends
in time only marks its entry finished, which the watchdog drops when it wakes.

The interruption lands between Python bytecodes, so a single numerical call
already running (one FFT, one convolution) finishes first; at the sample cap
such a call lasts well under a second. The injected exception derives from
``BaseException`` so that no ``except Exception`` on the way swallows it.
"""

from __future__ import annotations

import ctypes
import heapq
import itertools
import os
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TypeVar

T = TypeVar("T")


class ComputeTimeExceeded(Exception):
    """The guarded work ran past its limit and was stopped.

    Parameters
    ----------
    limit_s
        The limit in seconds.
    elapsed_s
        Seconds from arming to the interruption.
    """

    def __init__(self, limit_s: float, elapsed_s: float) -> None:
        super().__init__(f"stopped after {elapsed_s:.3f} s (limit {limit_s:g} s)")
        self.limit_s = limit_s
        self.elapsed_s = elapsed_s


class _Interrupt(BaseException):
    """Raised asynchronously in the guarded thread; never leaves :func:`run_with_deadline`."""


def _set_async_exc(thread_id: int, exc: type[BaseException] | None) -> int:
    # NULL clears a pending asynchronous exception (CPython C API).
    argument = None if exc is None else ctypes.py_object(exc)
    return int(ctypes.pythonapi.PyThreadState_SetAsyncExc(ctypes.c_ulong(thread_id), argument))


@dataclass(order=True)
class _Entry:
    """One guarded call: its deadline (monotonic seconds) and the thread to interrupt."""

    deadline: float
    order: int
    thread_id: int = field(compare=False)
    running: bool = field(default=True, compare=False)
    fired: bool = field(default=False, compare=False)


class _Watchdog:
    """The one thread that interrupts guarded calls past their deadline."""

    def __init__(self) -> None:
        self._cond = threading.Condition()
        self._heap: list[_Entry] = []
        self._order = itertools.count()
        self._wake_at: float | None = None  # None: asleep until notified
        self._thread: threading.Thread | None = None

    def arm(self, limit_s: float) -> _Entry:
        """Register the calling thread's guarded call, due ``limit_s`` from now."""
        entry = _Entry(time.monotonic() + limit_s, next(self._order), threading.get_ident())
        with self._cond:
            if self._thread is None or not self._thread.is_alive():
                self._thread = threading.Thread(target=self._run, name="heartsway-deadline",
                                                daemon=True)
                self._thread.start()
            heapq.heappush(self._heap, entry)
            if self._wake_at is None or entry.deadline < self._wake_at:
                self._cond.notify()
        return entry

    def disarm(self, entry: _Entry) -> None:
        """Mark ``entry`` finished; cancel its interrupt if scheduled but not delivered."""
        with self._cond:
            entry.running = False
            if entry.fired:
                _set_async_exc(entry.thread_id, None)

    def _run(self) -> None:
        with self._cond:
            while True:
                now = time.monotonic()
                while self._heap and (not self._heap[0].running or
                                      self._heap[0].deadline <= now):
                    entry = heapq.heappop(self._heap)
                    if entry.running:
                        entry.fired = True
                        _set_async_exc(entry.thread_id, _Interrupt)
                self._wake_at = self._heap[0].deadline if self._heap else None
                self._cond.wait(None if self._wake_at is None else self._wake_at - now)


_WATCHDOG = _Watchdog()


def _new_watchdog_after_fork() -> None:
    # The parent's watchdog thread does not exist in a forked child, and its lock may
    # have been held by another thread at the fork.
    global _WATCHDOG
    _WATCHDOG = _Watchdog()


os.register_at_fork(after_in_child=_new_watchdog_after_fork)


def run_with_deadline(limit_s: float, work: Callable[[], T]) -> T:
    """Run ``work()`` and stop it after ``limit_s`` seconds of wall-clock time.

    Parameters
    ----------
    limit_s
        Seconds, > 0.
    work
        The guarded call, run in the caller's thread.

    Returns
    -------
    Whatever ``work()`` returns.

    Raises
    ------
    ComputeTimeExceeded
        When ``work`` was interrupted at its deadline.

    Notes
    -----
    1. The call is registered with the watchdog thread; ``work`` runs in the
       caller's thread.
    2. At the deadline, under the watchdog's lock, if ``work`` has not
       finished, the watchdog schedules :class:`_Interrupt` in the caller's
       thread (once).
    3. On leaving ``work``, under the same lock, it is marked finished and an
       interrupt scheduled but not yet delivered is cancelled, so that it can
       never fire later in unrelated code.
    4. An interrupt delivered anywhere in steps 1-3 becomes
       :class:`ComputeTimeExceeded`. (A plain function, not a context manager:
       an interrupt landing in ``__exit__`` would escape it.)
    """
    started = time.monotonic()
    watchdog = _WATCHDOG
    try:
        entry = watchdog.arm(limit_s)
        try:
            return work()
        finally:
            watchdog.disarm(entry)
    except _Interrupt:
        raise ComputeTimeExceeded(limit_s, time.monotonic() - started) from None
