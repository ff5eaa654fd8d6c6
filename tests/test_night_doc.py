"""docs/night.md is the night-summary catalogue, word for word: a change to either fails here.

Regenerate the document after changing the catalogue::

    python tests/test_night_doc.py
"""

from __future__ import annotations

import re
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
DOC = ROOT / "docs" / "night.md"
REGENERATE = "python tests/test_night_doc.py"

if __name__ == "__main__":  # pragma: no cover - the regeneration script
    sys.path.insert(0, str(ROOT))

from features.night import NIGHT_MEASURES, night_catalogue_markdown  # noqa: E402


def test_document_lists_every_measure_in_catalogue_order() -> None:
    names = re.findall(r"^### \d+\. `([a-z0-9_]+)`$", DOC.read_text(encoding="utf-8"),
                       flags=re.MULTILINE)
    assert names == [m.name for m in NIGHT_MEASURES], f"run `{REGENERATE}`"


def test_document_matches_the_catalogue_exactly() -> None:
    assert DOC.read_text(encoding="utf-8") == night_catalogue_markdown(), (
        f"docs/night.md differs from the catalogue; run `{REGENERATE}` and commit it")


if __name__ == "__main__":  # pragma: no cover
    DOC.write_text(night_catalogue_markdown(), encoding="utf-8")
    print(f"wrote {DOC.relative_to(ROOT)} ({len(NIGHT_MEASURES)} measures)")
