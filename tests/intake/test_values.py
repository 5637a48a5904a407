"""Intake, value normalisation: one canonical text per categorical value, whatever its source type."""
from __future__ import annotations

from pocketforest.intake import category_text

def test_category_text_canonical_forms():
    """CSV text, Parquet integers and floats of the same value agree; codes with leading zeros stay."""
    assert [category_text(v) for v in (3, 3.0, 2.5, "4.0", "1e3", True, None, "0042")] == [
        "3", "3", "2.5", "4", "1000", "True", "", "0042"
    ]
