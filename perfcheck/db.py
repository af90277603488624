"""The one place that opens DuckDB and loads SQL from ``sql/*.sql``.

The SQL files live in the project's top-level ``sql/`` folder and are shipped inside the wheel
as ``perfcheck/sql``; an editable checkout reads them from the folder beside the package.
"""

from __future__ import annotations

import concurrent.futures
import contextlib
import functools
import hashlib
import importlib.resources
import time
from collections.abc import Callable, Iterator, Sequence
from pathlib import Path
from typing import TypeVar

import duckdb

from perfcheck.errors import DatabaseBusy, DataError

K = TypeVar("K")
R = TypeVar("R")


def _sql_dir() -> Path:
    packaged = importlib.resources.files("perfcheck") / "sql"
    if packaged.is_dir():
        return Path(str(packaged))
    return Path(__file__).resolve().parent.parent / "sql"


@functools.cache
def sql(name: str) -> str:
    """The text of ``sql/<name>.sql``."""
    path = _sql_dir() / f"{name}.sql"
    return path.read_text(encoding="utf-8")


# DuckDB's buffer pool (its default is 80 % of the machine's memory): larger sorts, joins and
# aggregates spill to a temporary folder beside the database instead. The pool keeps what it
# once held, on top of the Python side (about 200 MB of imports and the analysis's series), so
# it is sized for a whole command of a site-year of 1-minute rows within 600 MB; the numbers do
# not depend on it (common practice for an embedded database on a shared machine).
MEMORY_LIMIT = "320MB"
# The analysis holds the whole history's series in Python while DuckDB stores its results and
# sums them per day: DuckDB works in less beside it (measured on a 1-minute site-year: the
# analysis's peak 562 MB at 256 MB, 536 MB at 192 MB, 526 MB at 128 MB, the same CPU time and
# the same numbers; the re-run of verify, which follows ingest and model in one process,
# within 600 MB).
ANALYSIS_MEMORY_LIMIT = "128MB"


@contextlib.contextmanager
def memory_limit(con: duckdb.DuckDBPyConnection, limit: str) -> Iterator[None]:
    """DuckDB's buffer pool at ``limit`` inside the block, at :data:`MEMORY_LIMIT` after it."""
    con.execute(f"SET memory_limit = '{limit}'")
    try:
        yield
    finally:
        con.execute(f"SET memory_limit = '{MEMORY_LIMIT}'")


def default_db_path(site_path: str | Path) -> Path:
    """The database beside the site file: ``site.toml`` -> ``site.duckdb``."""
    return Path(site_path).with_suffix(".duckdb")


def connect(path: str | Path, read_only: bool = False, wait_s: float = 0.0,
            poll_s: float = 0.25) -> duckdb.DuckDBPyConnection:
    """Open (creating if needed) a site database and make sure its schema exists.

    While another process holds the database (DuckDB's file lock), try again every
    ``poll_s`` for up to ``wait_s`` seconds, then raise DatabaseBusy."""
    path = Path(path)
    if read_only and not path.exists():
        raise DataError(f"{path}: no database yet (run 'perfcheck ingest' first)")
    deadline = time.monotonic() + wait_s
    while True:
        try:
            con = duckdb.connect(str(path), read_only=read_only)
            break
        except duckdb.IOException as exc:
            if "lock" not in str(exc).lower():
                raise DataError(f"{path}: cannot open database ({exc})") from None
            if time.monotonic() >= deadline:
                raise DatabaseBusy(f"{path}: another process holds the database; gave up "
                                   f"after {wait_s:g} s") from None
            time.sleep(poll_s)
        except duckdb.Error as exc:
            raise DataError(f"{path}: cannot open database ({exc})") from None
    _session(con)
    con.execute(f"SET memory_limit = '{MEMORY_LIMIT}'")
    if not read_only:
        _schema(con)
    return con


def _schema(con: duckdb.DuckDBPyConnection) -> None:
    """Run the schema files, unless the database holds the digest of their text from when
    they last ran (``schema_state``): a command on an up-to-date database then skips their
    statements and a commit (about a tenth of a second of each command on a busy machine)."""
    try:
        stored = con.execute("SELECT digest FROM schema_state").fetchall()
    except duckdb.CatalogException:  # a new database, or one made before the digest
        stored = []
    if stored == [(schema_digest(),)]:
        return
    with transaction(con):  # one commit, not one per statement (a new database: 4x faster)
        for name in schema_names():
            con.execute(sql(name))
        con.execute("DELETE FROM schema_state")
        con.execute("INSERT INTO schema_state VALUES (?)", [schema_digest()])


@contextlib.contextmanager
def transaction(con: duckdb.DuckDBPyConnection) -> Iterator[None]:
    """The block as one transaction: committed at its end, rolled back when it raises."""
    con.execute("BEGIN TRANSACTION")
    try:
        yield
        con.execute("COMMIT")
    except BaseException:
        con.execute("ROLLBACK")
        raise


@contextlib.contextmanager
def registered(con: duckdb.DuckDBPyConnection, **frames: object) -> Iterator[None]:
    """The frames (pandas objects) readable under their names inside the block.

    When the block fails inside a transaction, DuckDB has aborted the transaction and refuses
    to unregister them ("Current transaction is aborted"); the rollback drops them anyway, so
    the block's own error is raised (an out-of-memory error, say), not that one.
    """
    for name, frame in frames.items():
        con.register(name, frame)
    try:
        yield
    except BaseException:
        for name in frames:
            with contextlib.suppress(duckdb.Error):
                con.unregister(name)
        raise
    for name in frames:
        con.unregister(name)


# DuckDB stores a table in row groups of this many rows. An INSERT of a row group or more
# writes its full groups straight to the file and leaves its remainder as a short group of its
# own; the checkpoint when the database closes merges those short groups and writes them
# again. Inserts of fewer rows are appended to one growing group instead. Measured on the
# expected rows of a 1-minute site-year (525,600 rows, 25 columns) inserted in one transaction:
# in pieces of 131,040 rows 0.46 s of CPU and 0.31 s more in the checkpoint at close, the
# database 76 MB; in pieces of 122,400 rows 0.51 s, 0.01 s at close, 52 MB.
ROW_GROUP_ROWS = 122_880


def insert_frame(con: duckdb.DuckDBPyConnection, table: str, frame: object) -> None:
    """Insert the pandas ``frame`` into ``table`` by column name, in slices of fewer rows than
    a row group (:data:`ROW_GROUP_ROWS`) of about equal size.

    Each slice is scanned as a relation, not registered as a view: a view dropped inside a
    transaction keeps its frame alive until the commit."""
    n = len(frame)
    slices = max(1, -(-n // (ROW_GROUP_ROWS - 1)))  # rounded up
    size = max(1, -(-n // slices))
    for start in range(0, n, size):
        con.from_df(frame.iloc[start:start + size]).query(
            "_new", f"INSERT INTO {quote_ident(table)} BY NAME SELECT * FROM _new")


def _session(con: duckdb.DuckDBPyConnection) -> None:
    """The settings of each connection (a cursor does not inherit them)."""
    con.execute("SET TimeZone = 'UTC'")
    con.execute("SET enable_progress_bar = false")


def read_ahead(con: duckdb.DuckDBPyConnection,
               read: Callable[[duckdb.DuckDBPyConnection, K], R], keys: Sequence[K]
               ) -> Iterator[R]:
    """``read(cursor, key)`` for each of ``keys`` in order, each read while the caller works
    on the result before it.

    The reads run in a worker thread on a second connection to the same database: DuckDB
    works outside Python's global lock, so a query there runs beside the caller's numpy and
    pandas work. That connection sees only what is committed: read only tables that the
    caller's open transaction does not write.
    """
    if not keys:
        return
    cur = con.cursor()
    try:
        _session(cur)
        with concurrent.futures.ThreadPoolExecutor(max_workers=1) as pool:
            ahead = pool.submit(read, cur, keys[0])
            for key in keys[1:]:
                done = ahead.result()
                ahead = pool.submit(read, cur, key)
                yield done
            yield ahead.result()
    finally:
        cur.close()


def schema_names() -> list[str]:
    """The schema files, one per stage (``sql/schema_<stage>.sql``), in a fixed order."""
    return sorted(p.stem for p in _sql_dir().glob("schema_*.sql"))


@functools.cache
def schema_digest() -> str:
    """SHA-256 of the schema files' text, in their order (stored in ``schema_state``)."""
    return hashlib.sha256("\0".join(sql(n) for n in schema_names()).encode()).hexdigest()


def quote_ident(name: str) -> str:
    """A DuckDB identifier in double quotes, for names that come from a user's file."""
    if "\x00" in name:
        raise ValueError("identifier contains a NUL byte")
    return '"' + name.replace('"', '""') + '"'
