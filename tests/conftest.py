"""Shared fixtures: the demo campaign imported once into a real DuckDB file, for tests that only read it."""

from __future__ import annotations

import pytest
from support import import_demo


@pytest.fixture(scope="session")
def demo_db(tmp_path_factory):
    """Path of a DuckDB file holding the demo campaign. Read-only use: tests that write make their own."""
    return import_demo(tmp_path_factory.mktemp("demo_campaign"))
