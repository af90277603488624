"""The stages in order, for the commands that run them all (monthly job, bundle verification).

``update`` ingests logger files and brings the expected and aligned series up to date;
``analyse`` then returns the ``perfcheck check`` document for a period.
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path
from typing import Any

import duckdb
import pandas as pd

from perfcheck import ingest, metrics, model, progress, quality
from perfcheck.site import Site


def update(con: duckdb.DuckDBPyConnection, site: Site, paths: Iterable[str | Path],
           quiet: bool = True) -> list[ingest.FileResult]:
    """Ingest ``paths`` (in this order), run the quality checks and the model; return the
    ingest accounting per file."""
    paths = list(paths)
    with progress.bar("ingest", len(paths), quiet) as b:
        results = ingest.ingest_files(con, site, paths, progress=lambda r: b.step(
            Path(r.path).name))
    quality.run(con, site)
    with progress.bar("model", None, quiet) as b:
        model.run(con, site, progress=b.step)
    return results


def analyse(con: duckdb.DuckDBPyConnection, site: Site, start: pd.Timestamp,
            end: pd.Timestamp) -> dict[str, Any]:
    """The check document for [start, end)."""
    return metrics.check(con, site, start, end)
