"""The engine stays a pure library: importing it loads neither flask nor marshmallow."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

PROBE = """
import sys
import features
import features.engine
import features.simulation
leaked = sorted(
    name for name in sys.modules
    if name.split(".")[0] in {"flask", "marshmallow", "werkzeug", "apispec", "gunicorn"}
)
print(",".join(leaked))
"""


def test_importing_features_pulls_in_no_web_or_schema_library():
    # A fresh interpreter: the test process itself has flask loaded already.
    done = subprocess.run(
        [sys.executable, "-c", PROBE], cwd=ROOT, capture_output=True, text=True, timeout=60
    )
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == ""
