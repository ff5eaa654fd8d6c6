"""A wall-clock limit on the work of one request, enforced inside the worker.

:func:`run_with_deadline` arms a one-shot timer; when it expires while the
guarded block still runs, the timer thread raises an exception *in the
request's own thread* (CPython's ``PyThreadState_SetAsyncExc``), which
unwinds the engine at its next Python step and surfaces as
:class:`ComputeTimeExceeded`. This works in any thread (gunicorn's gthread
workers run requests outside the main thread, where ``SIGALRM`` cannot
reach), and it truly stops the work: the engine keeps no global state, so an
abandoned analysis leaves nothing behind but garbage.

The interruption lands between Python bytecodes, so a single numerical call
already running (one FFT, one convolution) finishes first; at the sample cap
such a call lasts well under a second. The injected exception derives from
``BaseException`` so that no ``except Exception`` on the way swallows it.
"""

from __future__ import annotations

import ctypes
import threading
import time
from collections.abc import Callable
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
    1. A daemon timer thread is started; ``work`` runs in the caller's thread.
    2. On expiry, under a lock, if ``work`` has not finished, the timer
       schedules :class:`_Interrupt` in the caller's thread (once).
    3. On leaving ``work``, under the same lock, it is marked finished and an
       interrupt scheduled but not yet delivered is cancelled, so that it can
       never fire later in unrelated code.
    4. An interrupt delivered anywhere in steps 1-3 becomes
       :class:`ComputeTimeExceeded`. (A plain function, not a context manager:
       an interrupt landing in ``__exit__`` would escape it.)
    """
    target = threading.get_ident()
    lock = threading.Lock()
    state = {"running": True, "fired": False}

    def expire() -> None:
        with lock:
            if state["running"]:
                state["fired"] = True
                _set_async_exc(target, _Interrupt)

    timer = threading.Timer(limit_s, expire)
    timer.daemon = True
    started = time.monotonic()
    try:
        timer.start()
        try:
            return work()
        finally:
            with lock:
                state["running"] = False
                if state["fired"]:
                    _set_async_exc(target, None)
            timer.cancel()
    except _Interrupt:
        raise ComputeTimeExceeded(limit_s, time.monotonic() - started) from None
