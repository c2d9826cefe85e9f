"""Single stored values: equality, canonical text and the Python scalar DuckDB binds.

Shared by the importer (is a re-imported record the same as the stored one?) and the corrections (what the history
records, and what an UPDATE binds). Values come from checked tables (numpy scalars, NaN for an empty number) or
from DuckDB rows (Python scalars, None for NULL).
"""

from __future__ import annotations

import math
from datetime import datetime

import numpy as np


def is_missing(value) -> bool:
    """None, NaN or NaT; an empty string is a value."""
    if value is None:
        return True
    if isinstance(value, (float, np.floating)):
        return math.isnan(value)
    return isinstance(value, np.datetime64) and bool(np.isnat(value))


def same_value(a, b) -> bool:
    """Equal as stored: both missing, floats within 1e-12 relative (one unit conversion's rounding), or equal."""
    a_missing, b_missing = is_missing(a), is_missing(b)
    if a_missing or b_missing:
        return a_missing and b_missing
    if isinstance(a, (float, np.floating)) or isinstance(b, (float, np.floating)):
        return bool(np.isclose(float(a), float(b), rtol=1e-12, atol=0.0))
    return bool(a == b)


def as_text(value) -> str | None:
    """Canonical text of a stored value: shortest round-trip float, ISO 8601 time, true/false; None when missing."""
    if is_missing(value):
        return None
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if isinstance(value, (float, np.floating)):
        return repr(float(value))
    if isinstance(value, datetime):
        return value.isoformat()
    return str(value)


def bound(value):
    """A checked value as DuckDB binds it: a Python scalar, None for missing."""
    if is_missing(value):
        return None
    if isinstance(value, np.generic):
        return value.item()
    return value
