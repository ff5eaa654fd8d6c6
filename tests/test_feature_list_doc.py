"""docs/features.md is the catalogue, word for word: a change to either fails here.

Regenerate the document after changing the catalogue::

    python tests/test_feature_list_doc.py
"""

from __future__ import annotations

import re
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
DOC = ROOT / "docs" / "features.md"
REGENERATE = "python tests/test_feature_list_doc.py"

if __name__ == "__main__":  # pragma: no cover - the regeneration script
    sys.path.insert(0, str(ROOT))

from features.feature_vector import FEATURE_NAMES, FEATURES, catalogue_markdown  # noqa: E402


def _entries(text: str) -> dict[str, str]:
    """Feature name -> its section of the document."""
    parts = re.split(r"^### \d+\. `([a-z0-9_]+)`$", text, flags=re.MULTILINE)
    return dict(zip(parts[1::2], parts[2::2], strict=True))


def test_document_lists_every_feature_in_catalogue_order() -> None:
    entries = _entries(DOC.read_text(encoding="utf-8"))
    missing = sorted(set(FEATURE_NAMES) - set(entries))
    extra = sorted(set(entries) - set(FEATURE_NAMES))
    assert not missing and not extra, f"missing {missing}, not in the catalogue {extra}; "\
        f"run `{REGENERATE}`"
    assert tuple(entries) == FEATURE_NAMES


def test_each_entry_has_definition_unit_range_and_reference() -> None:
    entries = _entries(DOC.read_text(encoding="utf-8"))
    for d in FEATURES:
        body = entries[d.name]
        for label in ("Definition:", "Unit:", "Valid range:", "Reference:"):
            assert f"- {label}" in body, (d.name, label)
        assert d.definition in body and d.reference in body, d.name


def test_document_matches_the_catalogue_exactly() -> None:
    assert DOC.read_text(encoding="utf-8") == catalogue_markdown(), (
        f"docs/features.md differs from the catalogue; run `{REGENERATE}` and commit it")


if __name__ == "__main__":  # pragma: no cover
    DOC.write_text(catalogue_markdown(), encoding="utf-8")
    print(f"wrote {DOC.relative_to(ROOT)} ({len(FEATURES)} features)")
