"""The allocator settings of the service's processes (service/allocator.py), on the real
C library: arrays freed and made again are served from memory already in the process."""

from __future__ import annotations

import json
import os
import platform
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]

pytestmark = pytest.mark.skipif(
    platform.system() != "Linux" or platform.libc_ver()[0] != "glibc",
    reason="the settings are glibc's; elsewhere tune_allocator does nothing")

# A fresh interpreter makes and frees a 48 MB array (between glibc's largest automatic
# mapping threshold, 32 MB, and the 64 MB set here) five times, writing every page, and
# counts the page faults of the last four rounds. numpy's huge-page advice is turned off
# so that a fault is one 4 KiB page whatever the machine's transparent huge pages.
_ROUNDS = """
import json, resource, sys
import numpy as np
np._core.multiarray._set_madvise_hugepage(False)
if sys.argv[1] == "tuned":
    from service.allocator import tune_allocator
    assert tune_allocator()
faults = []
for _ in range(5):
    before = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
    a = np.empty(6 * 2**20)
    a.fill(1.0)
    del a
    faults.append(resource.getrusage(resource.RUSAGE_SELF).ru_minflt - before)
print(json.dumps(faults[1:]))
"""


def _faults(kind: str) -> list[int]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("MALLOC_")}
    env["PYTHONPATH"] = str(REPO)
    done = subprocess.run([sys.executable, "-c", _ROUNDS, kind], capture_output=True,
                          text=True, env=env, cwd=REPO, check=True)
    return list(json.loads(done.stdout.strip().splitlines()[-1]))


def test_a_freed_long_array_is_reused_instead_of_faulted_in_again() -> None:
    untuned, tuned = _faults("default"), _faults("tuned")
    # 48 MB is 12 288 pages of 4 KiB: glibc maps a fresh block each round and the kernel
    # faults every page in again (common practice: glibc's documented mmap threshold);
    # with the threshold at 64 MB the heap's pages stay in the process and no round
    # faults more than a few dozen pages (Python's own small allocations).
    assert min(untuned) > 10_000, untuned
    assert max(tuned) < 200, tuned


def test_tune_allocator_reports_the_settings_applied_once() -> None:
    from service.allocator import tune_allocator

    assert tune_allocator() is True
    assert tune_allocator() is True  # idempotent
