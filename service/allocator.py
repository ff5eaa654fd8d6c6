"""The memory allocator of a process that analyses long recordings.

An 8-hour recording at 250 Hz makes arrays of 29-58 MB, and the engine makes dozens of
them and frees them again. glibc's ``malloc`` serves a request above its mapping threshold
(at most 32 MB, adjusted as blocks are freed) with a fresh ``mmap`` and returns it to the
system on ``free``; it also gives back the free top of its heap once that passes the trim
threshold. Either way the next array of that size starts from pages the kernel must fault
in and clear again.

Measured on this project's 2-core machine (numpy 2.4, glibc; an 8-hour, 250 Hz recording,
the engine and the floor of ``benchmarks.floor`` alternating in one process): by default
the engine took 47 000-64 000 page faults and 1.25-1.60 s a call, the floor 0.67-0.71 s;
with the thresholds below, set after the imports and before any long array, under 1000
faults (none from the third call) and 0.98-1.06 s, the floor 0.60-0.61 s. With a trim
threshold of 256 MiB the top of the heap still went back between calls (25 000 faults a
call), and the floor's own passes slowed to 0.86-1.05 s in one run of the suite. Set
later, after long arrays had been made and freed, the faults fell only to 22 000 in one
run: a process sets them at its start. Recordings up to an hour make no faults either way.

:func:`tune_allocator` raises the mapping threshold to :data:`MMAP_THRESHOLD_MB` (arrays of
up to that size come from the heap and are reused) and the trim threshold to
:data:`TRIM_THRESHOLD_MB`. The cost is memory: a process that analysed a long recording
keeps the memory of its largest analysis (at most :data:`TRIM_THRESHOLD_MB` of it free) for
the next one. The service's requests are capped at ``HEARTSWAY_MAX_SAMPLES`` (4 million
samples by default), and gunicorn's ``max_requests`` recycles its workers. The same
settings as environment variables, for a process started by other means::

    MALLOC_MMAP_THRESHOLD_=67108864 MALLOC_TRIM_THRESHOLD_=536870912

The service's workers, the job worker, the command line and batch workers call
:func:`tune_allocator`; a value the operator set in those variables is left as it is.
Elsewhere than glibc (musl, macOS, Windows) it does nothing.
"""

from __future__ import annotations

import ctypes
import os
import platform

MMAP_THRESHOLD_MB = 64
"""Arrays up to this size (MiB) come from the heap: an 8-hour, 250 Hz trace is 58 MB."""
TRIM_THRESHOLD_MB = 512
"""Free memory (MiB) kept at the top of the heap before it is given back to the system: more
than the engine's working memory for an 8-hour, 250 Hz recording (about 460 MB)."""

_M_TRIM_THRESHOLD = -1  # glibc <malloc.h> parameter numbers
_M_MMAP_THRESHOLD = -3
_ENV = {_M_MMAP_THRESHOLD: "MALLOC_MMAP_THRESHOLD_", _M_TRIM_THRESHOLD: "MALLOC_TRIM_THRESHOLD_"}

_applied: bool | None = None


def tune_allocator() -> bool:
    """Set glibc's mapping and trim thresholds for long recordings (see the module), once
    per process; True when the process's allocator carries them (set here or by the
    operator's environment), False where the C library is not glibc."""
    global _applied
    if _applied is None:
        _applied = _apply()
    return _applied


def _apply() -> bool:
    if platform.system() != "Linux" or platform.libc_ver()[0] != "glibc":
        return False
    try:
        mallopt = ctypes.CDLL(None).mallopt
    except (OSError, AttributeError):
        return False
    mallopt.argtypes = (ctypes.c_int, ctypes.c_int)
    mallopt.restype = ctypes.c_int
    done = True
    for param, mib in ((_M_MMAP_THRESHOLD, MMAP_THRESHOLD_MB),
                       (_M_TRIM_THRESHOLD, TRIM_THRESHOLD_MB)):
        if _ENV[param] not in os.environ:  # the operator's own value stands
            done = bool(mallopt(param, mib * 2**20)) and done
    return done
