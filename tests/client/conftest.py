"""The client tests use the service tests' gunicorn helper (tests/service/gunicorn_run.py)."""

from __future__ import annotations

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "service"))
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "fileformats"))
