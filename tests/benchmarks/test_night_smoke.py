"""benchmarks.night runs end to end on its quick night and prints its verdict and the notice.

No timing is asserted: the benchmark is a separate command and its numbers depend on the
machine. The exit and mean heart-rate checks are those of issue 11's acceptance.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]


def test_quick_night_benchmark_passes_its_checks() -> None:
    done = subprocess.run([sys.executable, "-m", "benchmarks.night", "--quick"], cwd=REPO,
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stdout[-2000:] + done.stderr[-2000:]
    rows = [line.split() for line in done.stdout.splitlines() if line.strip().startswith("100")]
    assert len(rows) == 1 and rows[0][1] == "window" and rows[0][-1] == "yes", done.stdout
    assert "Caution: heartsway is not a medical device" in done.stdout
