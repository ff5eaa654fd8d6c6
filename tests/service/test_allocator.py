"""The allocator settings of the service's processes (service/allocator.py), on the real
C library: a long array comes from the heap and, freed and made again, is served from
memory already in the process."""

from __future__ import annotations

import json
import os
import platform
import subprocess
import sys
from pathlib import Path
from typing import Any

import pytest

REPO = Path(__file__).resolve().parents[2]

pytestmark = pytest.mark.skipif(
    platform.system() != "Linux" or platform.libc_ver()[0] != "glibc",
    reason="the settings are glibc's; elsewhere tune_allocator does nothing")

# A fresh interpreter makes and frees a 48 MB array (between glibc's largest automatic
# mapping threshold, 32 MB, and the 64 MB set here) five times, writing every page. It
# reports, while the first array is alive, the bytes glibc holds in separate mappings
# (mallinfo2's hblkhd, glibc 2.33 and later; -1 before), and the page faults of the last
# four rounds. numpy's huge-page advice is turned off, so that on a machine whose
# transparent huge pages are not "always" a fault is one 4 KiB page.
_ROUNDS = """
import ctypes, json, resource, sys
import numpy as np
np._core.multiarray._set_madvise_hugepage(False)
if sys.argv[1] == "tuned":
    from service.allocator import tune_allocator
    assert tune_allocator()

class Info(ctypes.Structure):
    _fields_ = [(name, ctypes.c_size_t) for name in (
        "arena", "ordblks", "smblks", "hblks", "hblkhd", "usmblks", "fsmblks", "uordblks",
        "fordblks", "keepcost")]

libc = ctypes.CDLL(None)
mapped = -1
faults = []
for k in range(5):
    before = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
    a = np.empty(6 * 2**20)
    a.fill(1.0)
    if k == 0 and hasattr(libc, "mallinfo2"):
        libc.mallinfo2.restype = Info
        mapped = int(libc.mallinfo2().hblkhd)
    del a
    faults.append(resource.getrusage(resource.RUSAGE_SELF).ru_minflt - before)
print(json.dumps({"mapped": mapped, "faults": faults[1:]}))
"""


def _rounds(kind: str) -> dict[str, Any]:
    env = {k: v for k, v in os.environ.items()
           if not k.startswith("MALLOC_") and k != "GLIBC_TUNABLES"}
    env["PYTHONPATH"] = str(REPO)
    done = subprocess.run([sys.executable, "-c", _ROUNDS, kind], capture_output=True,
                          text=True, env=env, cwd=REPO, check=True)
    return dict(json.loads(done.stdout.strip().splitlines()[-1]))


def test_a_long_array_comes_from_the_heap_and_is_reused() -> None:
    untuned, tuned = _rounds("default"), _rounds("tuned")
    size = 6 * 2**20 * 8
    if untuned["mapped"] != -1:  # glibc's own account of its separate mappings
        assert untuned["mapped"] >= size  # above 32 MB: a mapping of its own by default
        assert tuned["mapped"] < size  # under 64 MB: from the heap
    # Freed and made again: by default a fresh mapping each round, every page faulted in
    # again (12 288 pages of 4 KiB; fewer where the kernel backs it with huge pages
    # anyway); with the settings the heap's pages stay in the process, and the rounds
    # fault at most a tenth as often (Python's own small allocations).
    faults_untuned, faults_tuned = sum(untuned["faults"]), sum(tuned["faults"])
    assert faults_untuned > 0, untuned
    assert 10 * faults_tuned <= faults_untuned, (tuned, untuned)


def test_tune_allocator_reports_the_settings_applied_once() -> None:
    from service.allocator import tune_allocator

    assert tune_allocator() is True
    assert tune_allocator() is True  # idempotent
