"""Shared fixtures: the demo plant, ingested and modelled once per test session."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pytest

from perfcheck import db, ingest, pipeline
from perfcheck.scenario import demo_dir
from perfcheck.site import Site, load_site


@dataclass(frozen=True)
class DemoDB:
    site: Site
    db_path: Path
    logs: Path

    def connect(self):
        return db.connect(self.db_path)


@pytest.fixture(scope="session")
def demo_db(tmp_path_factory) -> DemoDB:
    """The shipped demo plant, ingested, flagged and modelled into a session database.

    Tests may read it and add their own tables; they must not delete readings.
    """
    logs = demo_dir()
    site = load_site(logs / "site.toml")
    path = tmp_path_factory.mktemp("demo") / "demo.duckdb"
    con = db.connect(path)
    try:
        pipeline.update(con, site, ingest.logger_files(site, logs))
    finally:
        con.close()
    return DemoDB(site, path, logs)
