"""The stages in order, for the commands that run them all (monthly job, bundle verification).

``update`` ingests logger files, brings the expected and aligned series up to date and
re-analyses the whole history if any input changed; ``view`` then returns the ``perfcheck check``
document of a period, clipped from the stored analysis.
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path
from typing import Any

import duckdb
import pandas as pd

from perfcheck import analysis, ingest, model, progress, quality
from perfcheck.site import Site


def update(con: duckdb.DuckDBPyConnection, site: Site, paths: Iterable[str | Path],
           quiet: bool = True) -> list[ingest.FileResult]:
    """Ingest ``paths`` (in this order), run the quality checks, the model and the analysis;
    return the ingest accounting per file."""
    paths = list(paths)
    with progress.bar("ingest", len(paths), quiet) as b:
        results = ingest.ingest_files(con, site, paths, progress=lambda r: b.step(
            Path(r.path).name))
    _flags_and_model(con, site, quiet)
    with progress.bar("analysis", None, quiet) as b:
        analysis.update(con, site, progress=b.step)
    return results


def _flags_and_model(con: duckdb.DuckDBPyConnection, site: Site, quiet: bool) -> None:
    """The quality checks and the model, sharing one sun; it is freed before the analysis,
    which loads the whole aligned series."""
    sun = quality.sun_positions(site)  # computed once, for the flags and the model
    quality.run(con, site, sun)
    with progress.bar("model", None, quiet) as b:
        model.run(con, site, progress=b.step, sun=sun)


def view(con: duckdb.DuckDBPyConnection, site: Site, start: pd.Timestamp,
         end: pd.Timestamp) -> dict[str, Any]:
    """The check document for [start, end), from the analysis brought up to date."""
    return analysis.view(con, site, start, end, analysis.update(con, site))
