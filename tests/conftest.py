"""Shared fixtures: the demo campaign imported once into a real DuckDB file, for tests that only read it."""

from __future__ import annotations

import pytest

from catalog import store
from catalog.datasets.demo import demo_campaign
from catalog.datasets.synth import write_campaign
from catalog.ingest import sources


@pytest.fixture(scope="session")
def demo_db(tmp_path_factory):
    """Path of a DuckDB file holding the demo campaign. Read-only use: tests that write make their own."""
    folder = tmp_path_factory.mktemp("demo_campaign")
    write_campaign(demo_campaign(), folder)
    db = folder / "demo.duckdb"
    store.import_campaign(db, sources.read_source(folder))
    return db
