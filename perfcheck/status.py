"""Status channels: the codes a logger wrote for an inverter (or the plant), read back and named
in our words.

The ingest stores each code as written (table ``status_texts``, quantity ``status_code``); the
site file's ``states`` table of the status column says what each code means, one of
:data:`perfcheck.site.STATES`. The mapping is applied here, when the codes are used, so a
mapping corrected in the site file applies without ingesting again.
"""

from __future__ import annotations

import duckdb
import pandas as pd

from perfcheck import db
from perfcheck.site import Site


def mapping(site: Site) -> dict[str, dict[str, str]]:
    """device -> {code as written -> state}, from every status column of the site file."""
    out: dict[str, dict[str, str]] = {}
    for lg in site.loggers:
        for col in lg.columns:
            if col.quantity == "status":
                out.setdefault(col.device, {}).update(col.states)
    return out


def named(codes: pd.DataFrame, states: dict[str, dict[str, str]]) -> pd.DataFrame:
    """``codes`` (ts, device, code) with ``state``: the code's state by ``states``, or, for a
    code the site file does not map, "code '<code>' (not in the site file's states)"."""
    state = [states.get(d, {}).get(c, f"code {c!r} (not in the site file's states)")
             for d, c in zip(codes["device"], codes["code"], strict=True)]
    return codes.assign(state=pd.Series(state, index=codes.index, dtype=object))


def reported(con: duckdb.DuckDBPyConnection, site: Site) -> pd.DataFrame:
    """Every stored status reading, named: ts (UTC), device, code, state (see :func:`named`)."""
    codes = con.execute(db.sql("status_reported")).df()
    codes["ts"] = pd.to_datetime(codes["ts"], utc=True)
    return named(codes, mapping(site))
