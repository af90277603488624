"""Ingest: logger CSV files into the site database, nothing lost, nothing invented.

Every non-blank data line of a file ends up in exactly one place:

* **loaded**: its new values are stored, with the file id and line number, and seen through
  the views ``channel_values`` (ts, channel_id, value, file_id, line) and ``readings`` (ts,
  quantity, device, value, file_id, line), one row per (instant, channel) with a value;
* **duplicate**: every value it holds is stored already (an overlapping export, a file ingested
  under another name, or a line repeating an earlier line of the same file);
* **quarantined**: kept in ``quarantine`` with line number, raw text and reason. This includes
  a line that disagrees with a value stored for the same instant and channel: the stored value
  is never overwritten, each differing value goes to ``conflicts`` and the whole line to
  quarantine, so a user can see and settle it.

So ``rows_read = rows_loaded + rows_duplicate + rows_quarantined`` for every file; the counts
are stored in ``source_files`` with the file's sha256, size, time span and the tool version.
A file whose sha256 is already stored is reported as already ingested and changes nothing.

Conventions: instants are UTC and label the **start** of the logger interval (a logger that
labels the end has its times moved back by one interval). Values are converted once, here, to
SI units: W, Wh, W/m2, C, m/s, mm. Empty fields and the logger's sentinels are missing values
and are not stored; ``NaN`` is always missing. An infinite value (``inf``, ``Infinity``,
``1e309``) and an instant outside the years 1678 to 2261 (a two-digit year read with ``%Y``, a
logger clock reset) quarantine their line with the reason.

Storage: values are kept as the logger writes them, one wide table per logger
(``logger_rows_<id>``: ts, file_id, line and one column per channel, NULL where a value is
missing or was stored already), and ``channel_values`` unpivots them (together with the long
table ``reading_values``, for values written directly, without a logger file). A site-year of
1-minute data is then one row per minute instead of one per value, which makes storing it
several times faster than appending to a long table (tests/benchmark.py), while later stages
read the same long views.

A line whose time repeats an earlier line of the same file (after time-zone resolution) is a
duplicate when all its values equal that line's, else it is quarantined as a conflict. Naive
local times are resolved by the order of the lines in the autumn hour that repeats; a local
time in the skipped spring hour is quarantined ("does not exist"), never shifted.

Parsing is done by DuckDB over the file's lines (split, quote handling, typing, time zones,
comparison with stored values), so there is no Python loop over data rows; Python checks only
what must hold for the whole file before any of it is read: it exists, is not empty, has a
UTF-8 header it can split with the mapped columns in it, and a units row that agrees with the
site file. A line cut short anywhere, the last line included (a file still being written), or
holding bytes that are not UTF-8 (DuckDB then reads the text with them replaced) is
quarantined with its reason. DuckDB reads the bytes that were hashed (bound as a parameter),
not the file again. Each file is stored in one transaction: an error or a kill mid-file
leaves the database as it was before that file.
"""

from __future__ import annotations

import csv
import datetime as dt
import glob
import gzip
import hashlib
import io
import re
import zipfile
import zlib
from collections.abc import Callable, Iterable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import duckdb

from perfcheck import __version__, db
from perfcheck.errors import LoggerFileError, SiteFileError
from perfcheck.site import Column, Logger, Site, name_matches

if TYPE_CHECKING:  # the summaries return frames; storing a file needs no pandas
    import pandas as pd

_NOT_BLANK = re.compile(rb"[^\s\xef\xbb\xbf]")
_ESCAPED = re.compile("[\udc80-\udcff]")  # bytes that are not UTF-8, decoded surrogateescape

# Factor and offset to SI for every unit the site file accepts: si = value * factor + offset.
UNIT_TO_SI: dict[str, tuple[float, float]] = {
    "W": (1.0, 0.0),
    "kW": (1e3, 0.0),
    "MW": (1e6, 0.0),
    "Wh": (1.0, 0.0),
    "kWh": (1e3, 0.0),
    "MWh": (1e6, 0.0),
    "W/m2": (1.0, 0.0),
    "C": (1.0, 0.0),
    "K": (1.0, -273.15),
    "m/s": (1.0, 0.0),
    "km/h": (1.0 / 3.6, 0.0),
    "mm": (1.0, 0.0),
    "deg": (1.0, 0.0),
}


@dataclass(frozen=True)
class FileResult:
    """What happened to one file. For a loaded file rows_read = loaded + duplicate + quarantined;
    a file already ingested reports its earlier file id and zero counts."""

    path: str
    file_id: int
    status: str  # 'loaded' or 'already ingested'
    rows_read: int
    rows_loaded: int
    rows_duplicate: int
    rows_quarantined: int
    conflicts: int
    first_ts: dt.datetime | None
    last_ts: dt.datetime | None


@dataclass(frozen=True)
class _Checked:
    """A file that passed the whole-file checks, with what the SQL needs to read it."""

    path: Path
    given: str
    logger: Logger
    sha256: str
    size_bytes: int
    n_fields: int
    positions: tuple[int, ...]  # 1-based field position of each mapped column
    time_positions: tuple[int, ...]
    device_position: int | None  # a tall file's device column
    point_position: int | None  # a historian file's point column
    header_end: int  # last line number that is not data (preamble, header, units row)
    crlf: bool  # the file holds CRLF line ends
    open_line: int  # number of a last line without a line end (0: the file ends in one)
    not_utf8: dict[int, str]  # data lines holding bytes that are not UTF-8, with the reason
    compressed: bool  # a .gz or .zip file: DuckDB reads its decompressed copy


def expand_paths(patterns: Iterable[str | Path]) -> list[Path]:
    """Expand shell-style globs, in sorted order; a pattern without glob characters is kept
    as it is (a missing file is reported when it is read). Raises LoggerFileError for a glob
    that matches nothing."""
    out: list[Path] = []
    for pattern in patterns:
        text = str(pattern)
        if glob.has_magic(text) and not Path(text).exists():
            found = sorted(glob.glob(text, recursive=True))
            if not found:
                raise LoggerFileError(f"{text}: no file matches this pattern")
            out.extend(Path(p) for p in found)
        else:
            out.append(Path(text))
    return out


def logger_files(site: Site, folder: str | Path) -> list[Path]:
    """The files directly in ``folder`` whose name a ``[[loggers]]`` entry of the site matches
    (its ``match`` glob), sorted by name."""
    out = []
    for path in sorted(Path(folder).iterdir()):
        if path.is_file() and any(name_matches(path.name, lg.match) for lg in site.loggers):
            out.append(path)
    return out


# --------------------------------------------------------------------------------------------
# whole-file checks (Python, before any SQL)


def _read_bytes(path: Path) -> bytes:
    try:
        return path.read_bytes()
    except FileNotFoundError:
        raise LoggerFileError(f"{path}: file not found") from None
    except IsADirectoryError:
        raise LoggerFileError(f"{path}: is a directory, not a logger file") from None
    except OSError as exc:
        raise LoggerFileError(f"{path}: cannot read file ({exc.strerror})") from None


def _content(path: Path, data: bytes) -> bytes:
    """The text bytes of a logger file as it is: a ``.gz`` file decompressed, a ``.zip`` file's
    one member; any other file unchanged. A compressed file that cannot be opened, or a zip
    archive without exactly one file, is a one-line LoggerFileError."""
    suffix = path.suffix.lower()
    try:
        if suffix == ".gz":
            return gzip.decompress(data)
        if suffix == ".zip":
            with zipfile.ZipFile(io.BytesIO(data)) as z:
                names = [i.filename for i in z.infolist() if not i.is_dir()]
                if len(names) != 1:
                    raise LoggerFileError(f"{path}: a zip archive of a logger file must hold "
                                          f"one file; this one holds {len(names)}")
                return z.read(names[0])
    except (OSError, EOFError, zipfile.BadZipFile, zlib.error) as exc:
        raise LoggerFileError(f"{path}: cannot be decompressed ({exc})") from None
    return data


def _not_utf8(path: Path, data: bytes, header_end: int) -> dict[int, str]:
    """The lines holding bytes that are not UTF-8, each with the reason naming its first such
    byte. In the preamble, header or units row (up to line ``header_end``) such a byte refuses
    the file (LoggerFileError); a data line with one is quarantined. One pass: the bad bytes
    are decoded as lone surrogates (U+DC80-U+DCFF) and looked for."""
    bad: dict[int, str] = {}
    if data.isascii():
        return bad
    text = data.decode("utf-8", errors="surrogateescape")
    line, counted = 1, 0
    found = _ESCAPED.search(text)
    while found is not None:
        at = found.start()
        line += text.count("\n", counted, at)
        counted = at
        begin = text.rfind("\n", 0, at) + 1
        col = len(text[begin:at].encode("utf-8", errors="surrogateescape")) + 1
        reason = f"byte 0x{ord(text[at]) - 0xDC00:02x} at column {col} is not UTF-8"
        if line <= header_end:
            raise LoggerFileError(f"{path}: line {line}: {reason} (save the file as UTF-8)")
        bad[line] = reason
        end = text.find("\n", at)
        found = None if end < 0 else _ESCAPED.search(text, end)
    return bad


def _split_fields(path: Path, number: int, line: str, delimiter: str) -> list[str]:
    """The fields of header line ``number``; a line the csv module cannot split (a carriage
    return inside it, a field over its 128 kB limit) is a one-line LoggerFileError."""
    try:
        return next(csv.reader([line], delimiter=delimiter, quotechar='"'), [])
    except csv.Error as exc:
        if "\r" in line:
            raise LoggerFileError(
                f"{path}: line {number}: holds a carriage return (CR) not followed by a line "
                "feed; save the file with LF or CRLF line ends") from None
        raise LoggerFileError(f"{path}: line {number}: cannot be split into fields ({exc})"
                              ) from None


def _line_at(data: bytes, number: int) -> tuple[str | None, int]:
    """Line ``number`` (1-based) as text without its line end (None past the end of the
    file), and the offset just after it. Only the lines up to ``number`` are looked at."""
    start = 0
    for _ in range(number - 1):
        start = data.find(b"\n", start) + 1
        if start == 0:
            return None, len(data)
    if start >= len(data):
        return None, len(data)
    end = data.find(b"\n", start)
    end = len(data) if end < 0 else end
    return data[start:end].decode("utf-8").removeprefix("\ufeff").rstrip("\r"), end + 1


def _column_positions(path: Path, lg: Logger, header: list[str], line: int) -> dict[str, int]:
    names = [h.strip() for h in header]
    if lg.point_column is not None:  # historian: the mapped names are points, not columns
        wanted = [*lg.time.columns, lg.device_column, lg.point_column, lg.value_column]
    else:
        wanted = list(lg.time.columns) + [c.name for c in lg.columns] + (
            [lg.device_column] if lg.device_column else [])
    positions: dict[str, int] = {}
    for name in wanted:
        if names.count(name) > 1:
            raise LoggerFileError(f"{path}: line {line}: column {name!r} appears twice in the "
                                  "header; the mapping cannot tell which one is meant")
        if name not in names:
            shown = ", ".join(repr(n) for n in names[:12]) + (" ..." if len(names) > 12 else "")
            hint = ""
            others = [d for d in (",", ";", "\t", "|") if d != lg.delimiter and d in header[0]]
            if len(names) == 1 and others:
                hint = f"; the header holds {others[0]!r}: is delimiter {lg.delimiter!r} right?"
            raise LoggerFileError(
                f"{path}: line {line}: no column {name!r} (mapped in [[loggers]] {lg.name!r}); "
                f"found {len(names)} column(s) with delimiter {lg.delimiter!r}: {shown}{hint}"
            )
        positions[name] = names.index(name) + 1
    return positions


def _written_unit(text: str) -> str:
    """A unit as a units row writes it, in the site file's spelling: brackets and spaces
    dropped, ``²``/``^2`` as ``2``, ``°C``/``degC`` as ``C``."""
    unit = text.strip().strip("[](){}").replace(" ", "").replace("°", "")
    unit = unit.replace("²", "2").replace("^2", "2")
    return "C" if unit.lower() == "degc" else unit


def _check_units_row(path: Path, lg: Logger, units: str | None, positions: dict[str, int],
                     line: int) -> None:
    """The units row against the site file: it must not hold numbers where values are mapped
    (that is a data row, and reading it as units would lose it), and a unit it gives for a
    mapped column must be the one [[loggers]] declares (letter case aside: ``KW`` is kW)."""
    fields = _split_fields(path, line, units or "", lg.delimiter)
    for col in lg.columns:
        text = fields[positions[col.name] - 1].strip() if len(fields) >= positions[col.name] else ""
        try:
            float(text.replace(",", "."))
        except ValueError:
            written = _written_unit(text)
            if written and written.lower() != col.unit.lower():
                raise LoggerFileError(
                    f"{path}: line {line}: column {col.name!r} is in {text!r} by the units row "
                    f"but in {col.unit!r} by [[loggers]] {lg.name!r}; correct the unit in the "
                    "site file (or, for one file, add a [[loggers]] entry whose match names it)"
                ) from None
            continue
        raise LoggerFileError(
            f"{path}: line {line}: expected the units row (units_row = true in [[loggers]] "
            f"{lg.name!r}) but column {col.name!r} holds the number {text!r}"
        )


def check_file(site: Site, path: str | Path) -> _Checked:
    """Whole-file checks; raises LoggerFileError (one line, naming file and line) on failure."""
    return _check(site, path)[0]


def _check(site: Site, path: str | Path) -> tuple[_Checked, bytes]:
    """:func:`check_file`, and the bytes it checked."""
    path = Path(path)
    lg = site.logger_for(str(path))
    raw = _read_bytes(path)
    data = _content(path, raw)
    if _NOT_BLANK.search(data) is None:
        raise LoggerFileError(f"{path}: empty file ({len(data)} bytes, no lines)")
    header_no = lg.preamble_lines + 1
    not_utf8 = _not_utf8(path, data, header_no + (1 if lg.units_row else 0))
    header, after = _line_at(data, header_no)
    if header is None:
        raise LoggerFileError(
            f"{path}: line {header_no}: file ends before the header "
            f"(preamble_lines = {lg.preamble_lines} in [[loggers]] {lg.name!r})"
        )
    fields = _split_fields(path, header_no, header, lg.delimiter)
    positions = _column_positions(path, lg, fields, header_no)
    header_end = header_no + (1 if lg.units_row else 0)
    if lg.units_row:
        units, after = _line_at(data, header_end)
        _check_units_row(path, lg, units, positions, header_end)
    if _NOT_BLANK.search(data, after) is None:
        raise LoggerFileError(f"{path}: empty file (no data lines after the header, "
                              f"line {header_end})")
    return _Checked(
        path=path,
        given=str(path),
        logger=lg,
        sha256=hashlib.sha256(raw).hexdigest(),  # of the file as it is (compressed or not)
        size_bytes=len(raw),
        n_fields=len(fields),
        positions=tuple(positions[lg.value_column or c.name] for c in lg.columns),
        time_positions=tuple(positions[c] for c in lg.time.columns),
        device_position=positions[lg.device_column] if lg.device_column else None,
        point_position=positions[lg.point_column] if lg.point_column else None,
        header_end=header_end,
        crlf=b"\r" in data,  # one byte: a fast scan; a lone CR is harmless
        open_line=0 if data.endswith(b"\n") else data.count(b"\n") + 1,
        not_utf8=not_utf8,
        compressed=data is not raw,
    ), raw


# --------------------------------------------------------------------------------------------
# SQL building: only integers and fixed unit factors are put into the SQL text


def _one(con: duckdb.DuckDBPyConnection, query: str, params: object = None) -> tuple | None:
    """The first row of a query (all rows are fetched, so the connection is free again)."""
    rows = con.execute(query, params).fetchall()
    return rows[0] if rows else None


def _channel_ids(con: duckdb.DuckDBPyConnection, lg: Logger) -> list[int]:
    ids = []
    for col in lg.columns:
        row = _one(
            con,
            "SELECT channel_id FROM channels WHERE quantity = ? AND device = ?",
            [col.stored, col.device],
        )
        if row is None:
            row = _one(
                con,
                "INSERT INTO channels SELECT coalesce(max(channel_id), 0) + 1, ?, ? "
                "FROM channels RETURNING channel_id",
                [col.stored, col.device],
            )
        ids.append(int(row[0]))
    return ids


def _logger_table(con: duckdb.DuckDBPyConnection, lg: Logger, channels: list[int]) -> int:
    """The id of the logger's wide table, created or widened for ``channels``, with its
    interval stored; when that adds a channel, the view channel_values is rebuilt over all
    logger tables."""
    row = _one(con, "SELECT logger_id FROM loggers WHERE name = ?", [lg.name])
    if row is None:
        row = _one(con, "INSERT INTO loggers (logger_id, name, interval_min) "
                        "SELECT coalesce(max(logger_id), 0) + 1, ?, ? FROM loggers "
                        "RETURNING logger_id", [lg.name, lg.interval_min])
    logger_id = int(row[0])
    con.execute("UPDATE loggers SET interval_min = ? WHERE logger_id = ? "
                "AND interval_min IS DISTINCT FROM ?", [lg.interval_min, logger_id,
                                                         lg.interval_min])
    known = {int(r[0]) for r in con.execute(
        "SELECT channel_id FROM logger_channels WHERE logger_id = ?", [logger_id]).fetchall()}
    new = [ch for ch in channels if ch not in known]
    if not new:
        return logger_id
    add = "\n;\n".join(f"ALTER TABLE logger_rows_{logger_id} ADD COLUMN IF NOT EXISTS "
                        f"c{ch} DOUBLE" for ch in new)
    for stmt in db.sql("ingest_logger_table").format(logger_id=logger_id,
                                                      add_columns=add).split("\n;\n"):
        con.execute(stmt)
    con.executemany("INSERT INTO logger_channels VALUES (?, ?)", [[logger_id, ch] for ch in new])
    pairs = con.execute("SELECT logger_id, channel_id FROM logger_channels "
                        "ORDER BY logger_id, channel_id").fetchall()
    unions = " UNION ALL ".join(
        f"SELECT ts, {ch}::SMALLINT AS channel_id, c{ch} AS value, file_id, line "
        f"FROM logger_rows_{lid} WHERE c{ch} IS NOT NULL" for lid, ch in pairs)
    con.execute(db.sql("ingest_view").format(unions=unions))
    return logger_id


def _check_loggers(con: duckdb.DuckDBPyConnection, site: Site) -> None:
    """What the site file's own validation cannot see: one channel mapped twice in a logger,
    a time format DuckDB cannot use."""
    for i, lg in enumerate(site.loggers):
        seen: dict[tuple[str, str], str] = {}
        for col in lg.columns:
            key = (col.stored, col.device)
            if key in seen:
                raise SiteFileError(
                    f"{site.path}: loggers[{i}].columns: {seen[key]!r} and {col.name!r} both "
                    f"map to {col.quantity} of {col.device!r}"
                )
            seen[key] = col.name
        if lg.time.kind in ("utc", "local"):
            try:
                _one(con, "SELECT try_strptime('2000-01-01', $f)", {"f": lg.time.format})
            except duckdb.Error as exc:
                reason = str(exc).splitlines()[0].split("Error: ", 1)[-1]
                raise SiteFileError(f"{site.path}: loggers[{i}].time.format: "
                                    f"{lg.time.format!r} is not a usable format ({reason})"
                                    ) from None


def _value_sql(k: int, col: Column, decimal: str, numeric_sentinels: bool) -> tuple[str, ...]:
    """SQL for mapped column k: its number (and field text), its SI value, its error, and a
    quick test whether it may have one. A value that is infinite in SI units (``inf``,
    ``1e309``, or a finite number that overflows on conversion) is an error, not a reading;
    NaN is a missing value. A status column keeps its code as text (t<k>, trimmed; a sentinel
    is missing) and never fails; its value is the code's id (sql/ingest_status_codes.sql)."""
    text = f"s{k}"
    if col.quantity == "status":
        code = (f"CASE WHEN list_contains($sentinels, trim({text})) THEN NULL "
                f"ELSE nullif(trim({text}), '') END AS t{k}")
        return f"NULL::DOUBLE AS n{k}, {text}", f"NULL::DOUBLE AS v{k}, {code}", "NULL", "false"
    factor, offset = UNIT_TO_SI[col.unit]
    num = f"replace({text}, ',', '.')" if decimal == "," else text
    missing = f"isnan(n{k})"
    if numeric_sentinels:
        missing += f" OR list_contains($num_sentinels, n{k})"
    number = f"TRY_CAST({num} AS DOUBLE) AS n{k}, {text}"
    si = f"n{k} * {factor!r} + {offset!r}"
    value = f"CASE WHEN {missing} THEN NULL ELSE {si} END AS v{k}"
    error = (
        f"CASE WHEN n{k} IS NULL AND trim({text}) <> '' "
        f"AND NOT list_contains($sentinels, trim({text})) "
        f"THEN 'column ' || $names[{k}] || ': ''' || {text} || ''' is not a number' "
        f"WHEN isinf({si}) AND NOT ({missing}) "
        f"THEN 'column ' || $names[{k}] || ': ''' || {text} || ''' is infinite or out of "
        "range' "
        "END"
    )
    bad = f"(n{k} IS NULL AND s{k} <> '') OR isinf({si})"
    return number, value, error, bad


def _rows_sql(chk: _Checked, one_pass: bool = False) -> str:
    """sql/ingest_rows.sql for one file. Naive local times of a tall file are resolved with
    each device's lines apart, or with all lines as one pass (``one_pass``: the file is in
    time order, sql/ingest_time_local_order.sql)."""
    lg = chk.logger
    numeric = bool(_numeric(lg.sentinels))
    parts = [_value_sql(k, c, lg.decimal, numeric) for k, c in enumerate(lg.columns, start=1)]
    time_text = " || ' ' || ".join(f"f[{p}]" for p in chk.time_positions)
    texts = [f"f[{p}] AS s{k}" for k, p in enumerate(chk.positions, start=1)]
    texts.append("NULL::VARCHAR AS dev")  # the row's device: only a tall file has one
    tall = ""
    any_bad = " OR ".join(p[3] for p in parts)
    errors = ", ".join(p[2] for p in parts)
    if chk.device_position is not None:  # a tall file: column k is read from its devices' rows
        dp, pp = chk.device_position, chk.point_position
        point = "" if pp is None else f" AND trim(f[{pp}]) = $names[{{k}}]"
        texts = [f"CASE WHEN list_contains($when[{k}], trim(f[{dp}])){point.format(k=k)} "
                 f"THEN f[{p}] END AS s{k}" for k, p in enumerate(chk.positions, start=1)]
        texts.append(f"trim(f[{dp}]) AS dev")
        tall = ", dev"  # kept: the outcome tells lines apart by time and device (and point)
        if pp is not None:
            texts.append(f"trim(f[{pp}]) AS point")
            tall += ", point"
        any_bad += " OR NOT list_contains($device_names, dev)"
        errors = ("CASE WHEN NOT list_contains($device_names, dev) THEN 'device ''' || dev || "
                  "''' is not in the devices of [[loggers]] ' || $logger_name END, " + errors)
    time_ctes = db.sql(f"ingest_time_{lg.time.kind}")
    if lg.time.kind == "local":
        time_ctes = time_ctes.format(pass_dev="NULL::VARCHAR" if one_pass else "dev")
        if tall:
            tall += ", ambiguous"  # read by sql/ingest_time_local_order.sql
    return db.sql("ingest_rows").format(
        lines=db.sql("ingest_lines"),
        time_text=time_text,
        field_texts=", ".join(texts),
        numbers=", ".join(p[0] for p in parts) + ", dev" + (
            ", point" if chk.point_position is not None else ""),
        time_ctes=time_ctes,
        values=", ".join(p[1] for p in parts) + tall,
        any_bad=any_bad,
        value_errors=errors,
    )


def _long_sql(channels: list[int]) -> str:
    """The readable rows of ``_ingest_rows`` in long form: (line, ts, channel_id, value),
    missing values left out."""
    return " UNION ALL ".join(
        f"SELECT line, ts, {ch}::SMALLINT AS channel_id, v{k} AS value FROM _ingest_rows "
        f"WHERE reason IS NULL AND v{k} IS NOT NULL"
        for k, ch in enumerate(channels, start=1)
    )


def _numeric(sentinels: tuple[str, ...]) -> list[float]:
    out = []
    for s in sentinels:
        try:
            out.append(float(s.replace(",", ".")))
        except ValueError:
            continue
    return [v for v in out if v == v]


def _quoted_patterns(delimiter: str) -> tuple[str, str]:
    d = re.escape(delimiter)
    field = f'"(?:[^"]|"")*"|[^{d}"]*'
    return f"(?:{field})(?:{d}(?:{field}))*", f"(?:^|{d})({field})"


# --------------------------------------------------------------------------------------------
# one file, one transaction


def _text(chk: _Checked, data: bytes) -> bytes:
    """The text DuckDB reads for a checked file, made from ``data`` (the file's bytes as
    checked): decompressed when the file is compressed (``.gz``, ``.zip``), and with bytes
    that are not UTF-8 replaced by U+FFFD when data lines hold any (those lines are
    quarantined; the others can then be read). It is bound as a parameter, so DuckDB reads
    the very bytes that were hashed, never the file on disk, which may change meanwhile."""
    text = _content(chk.path, data)
    if chk.not_utf8:
        text = text.decode("utf-8", errors="replace").encode("utf-8")
    return text


def _checked_bytes(chk: _Checked) -> bytes:
    """The file's bytes, read again for storing: they must be those checked (same sha256)."""
    data = _read_bytes(chk.path)
    if hashlib.sha256(data).hexdigest() != chk.sha256:
        raise LoggerFileError(f"{chk.given}: changed while being ingested; nothing of this file "
                              "was stored")
    return data


def _read_params(site: Site, chk: _Checked, text: bytes) -> dict[str, object]:
    """The bound parameters of sql/ingest_rows.sql (and its time fragment) for one file whose
    text is ``text`` (see :func:`_text`)."""
    lg = chk.logger
    quoted_line, quoted_field = _quoted_patterns(lg.delimiter)
    params: dict[str, object] = {
        "text": text,
        # line 0 is never a data line: it keeps the lists typed when no line is bad
        "not_utf8_lines": [0, *chk.not_utf8],
        "not_utf8_reasons": ["", *chk.not_utf8.values()],
        "header_end": chk.header_end,
        "crlf": chk.crlf,
        "delim": lg.delimiter,
        "quoted_line": quoted_line,
        "quoted_field": quoted_field,
        "n_fields": chk.n_fields,
        "open_line": chk.open_line,
        "sentinels": list(lg.sentinels),
        "names": [c.name for c in lg.columns],
        "label_shift_min": lg.interval_min if lg.time.label == "end" else 0,
    }
    if _numeric(lg.sentinels):
        params["num_sentinels"] = _numeric(lg.sentinels)
    if lg.device_column is not None:
        params["when"] = [list(c.when_device) for c in lg.columns]
        params["device_names"] = [name for name, _ in lg.devices]
        params["logger_name"] = repr(lg.name)
    if lg.time.kind in ("utc", "local"):
        params["time_format"] = lg.time.format
    if lg.time.kind == "local":
        params["tz"] = site.timezone
    return params


def _ingest_one(con: duckdb.DuckDBPyConnection, site: Site, chk: _Checked,
                kept: bytes | None) -> FileResult:
    """Store one checked file; ``kept`` is the bytes that were checked, when they were kept
    (else the file is read again and must still hash to them)."""
    known = _one(con, "SELECT file_id FROM source_files WHERE sha256 = ?", [chk.sha256])
    if known is not None:
        return FileResult(chk.given, int(known[0]), "already ingested", 0, 0, 0, 0, 0, None, None)
    data = _checked_bytes(chk) if kept is None else kept
    try:
        with db.transaction(con):
            # the ingested version's bytes, so that it stays verifiable when the file on disk
            # later grows or changes under the same name (level 1: fast, about 4x on CSV),
            # compressed in a thread while DuckDB reads them (both release the GIL)
            with ThreadPoolExecutor(1) as pool:
                packed = pool.submit(zlib.compress, data, 1)
                row = _store_file(con, site, chk, _read_params(site, chk, _text(chk, data)))
                if _one(con, "SELECT 1 FROM source_copies WHERE sha256 = ?", [chk.sha256]) is None:
                    con.execute(db.sql("ingest_copy"), {"sha256": chk.sha256,
                                                        "zlib_bytes": packed.result()})
    except duckdb.Error as exc:
        reason = str(exc).splitlines()[0]
        raise LoggerFileError(f"{chk.given}: cannot be read ({reason}); nothing of this "
                              "file was stored") from None
    return FileResult(chk.given, int(row[0]), "loaded", *(int(v) for v in row[1:6]),
                      row[6], row[7])


def _store_file(con: duckdb.DuckDBPyConnection, site: Site, chk: _Checked,
                params: dict[str, object]) -> tuple:
    """Read (with the parameters of :func:`_read_params`), compare and store one file inside
    the caller's transaction; returns its source_files row (file_id, rows_read, loaded,
    duplicate, quarantined, conflicts, first_ts, last_ts)."""
    channels = _channel_ids(con, chk.logger)
    logger_id = _logger_table(con, chk.logger, channels)
    con.execute(_rows_sql(chk), params)
    if chk.logger.time.kind == "local" and chk.device_position is not None and \
            _one(con, db.sql("ingest_time_local_order"))[0]:
        con.execute(_rows_sql(chk, one_pass=True), params)
    for k, col in enumerate(chk.logger.columns, start=1):
        if col.quantity == "status":
            for stmt in db.sql("ingest_status_codes").format(k=k).split("\n;\n"):
                con.execute(stmt)
    lo, hi = _one(con, "SELECT min(ts), max(ts) FROM _ingest_rows WHERE reason IS NULL")
    unions = _long_sql(channels)
    con.execute(db.sql("ingest_compare").format(unions=unions),
                {"lo": lo, "hi": hi, "channels": channels})
    ks = range(1, len(channels) + 1)
    con.execute(db.sql("ingest_outcome").format(
        key="ts" + (", dev" if chk.device_position is not None else "")
            + (", point" if chk.point_position is not None else ""),
        same=" AND ".join(f"c.v{k} IS NOT DISTINCT FROM f.v{k}" for k in ks),
        n_values=" + ".join(f"(c.v{k} IS NOT NULL)::INTEGER" for k in ks),
    ))
    missing_raw = _one(con, "SELECT count(*) FROM _ingest_outcome JOIN _ingest_rows USING (line) "
                            "WHERE outcome = 'quarantined' AND raw IS NULL")[0]
    if missing_raw:
        con.execute(db.sql("ingest_raw").format(lines=db.sql("ingest_lines")),
                    {k: params[k] for k in ("text", "header_end", "crlf")})
    file_id = int(_one(con, "SELECT nextval('source_file_id')")[0])
    store = db.sql("ingest_store").format(
        unions=unions,
        logger_id=logger_id,
        value_columns=", ".join(f"c{ch}" for ch in channels),
        values=", ".join(f"v{k}" for k in ks),
        null_dups=", ".join(f"c{ch} = CASE WHEN list_contains(d.dup, {ch}) THEN NULL "
                            f"ELSE t.c{ch} END" for ch in channels),
    )
    for stmt in store.split("\n;\n"):
        con.execute(stmt, {"file_id": file_id} if "$file_id" in stmt else None)
    row = _one(con, db.sql("ingest_source_file"), {
        "file_id": file_id,
        "path": chk.given,
        "logger": chk.logger.name,
        "sha256": chk.sha256,
        "size_bytes": chk.size_bytes,
        "tool_version": __version__,
    })
    for table in ("_ingest_rows", "_ingest_match", "_ingest_outcome"):
        con.execute(f"DROP TABLE {table}")
    return row


def _check_all(site: Site, paths: Iterable[str | Path]) -> tuple[list[_Checked], bytes | None]:
    """Every file checked, and the first one's bytes: it is stored next, so it need not be
    read and hashed again (the others' are not kept, to hold one file in memory at most)."""
    checked, first = [], None
    for p in paths:
        chk, raw = _check(site, p)
        checked.append(chk)
        first = raw if first is None else first
    return checked, first


def ingest_files(
    con: duckdb.DuckDBPyConnection,
    site: Site,
    paths: Iterable[str | Path],
    progress: Callable[[FileResult], None] | None = None,
) -> list[FileResult]:
    """Ingest logger files into the site database, one transaction per file.

    Every file is checked first (exists, UTF-8, not empty, mapped columns present), so a bad
    file stops the run before anything is stored. ``progress`` is called
    with each file's result as soon as it is committed.
    """
    _check_loggers(con, site)
    for lg in site.loggers:  # a database written before intervals were stored
        con.execute("UPDATE loggers SET interval_min = ? WHERE name = ? AND interval_min IS NULL",
                    [lg.interval_min, lg.name])
    checked, kept = _check_all(site, paths)
    results = []
    for chk in checked:
        res = _ingest_one(con, site, chk, kept)
        kept = None
        results.append(res)
        if progress is not None:
            progress(res)
    return results


# --------------------------------------------------------------------------------------------
# summaries


def channel_intervals(con: duckdb.DuckDBPyConnection) -> dict[tuple[str, str], int]:
    """The logging interval [s] of each stored (quantity, device), as stored at ingest (the
    shortest of the loggers that carry it). Later stages read intervals here, never from the
    site file."""
    rows = con.execute("SELECT quantity, device, interval_min FROM channel_intervals").fetchall()
    return {(q, d): int(m) * 60 for q, d, m in rows}


def channel_instants(con: duckdb.DuckDBPyConnection, ids: list[int]) -> pd.DatetimeIndex:
    """The instants (UTC) with a stored value of any of the channels ``ids``, once each, in
    time order: those of the view channel_values (not the carried values), read from the
    wide logger tables a row per line rather than from the view a row per value."""
    tables: dict[int, list[int]] = {}
    for lid, ch in con.execute("SELECT logger_id, channel_id FROM logger_channels WHERE "
                               "list_contains($ids, channel_id) ORDER BY ALL",
                               {"ids": ids}).fetchall():
        tables.setdefault(int(lid), []).append(int(ch))
    unions = "".join(
        f" UNION ALL SELECT ts FROM logger_rows_{lid} WHERE "
        + " OR ".join(f"c{ch} IS NOT NULL" for ch in chs) for lid, chs in tables.items())
    found = con.execute(db.sql("ingest_instants").format(unions=unions), {"ids": ids}).df()
    return found.set_index("ts").index


def aged(con: duckdb.DuckDBPyConnection, site: Site) -> Site:
    """The site with its age reference (:meth:`Site.aged`) from the site-local day of the
    first stored reading; the site itself when it states ``commissioned``."""
    if site.commissioned is not None:
        return site
    first = _one(con, "SELECT min(ts) FROM readings")[0]
    return site.aged(None if first is None else first.astimezone(site.tz).date())


def quarantined(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    """Every quarantined line: ``file`` (as given when ingested), ``line``, ``ts`` (its instant,
    or that of the nearest readable line before it), ``reason``, ``reason_kind`` (the reason
    with its quoted values left out, for counts) and ``raw`` (the line as written)."""
    return con.execute(db.sql("ingest_quarantine")).df()


def coverage_summary(con: duckdb.DuckDBPyConnection, site: Site) -> pd.DataFrame:
    """Data coverage per channel and site-local month.

    Columns: ``month`` (YYYY-MM in the site's zone), ``quantity``, ``device``, ``expected``
    (intervals between the channel's first and last reading within the month, at the shortest
    stored interval of the loggers that carry it), ``present`` (intervals with a value),
    ``share`` (present / expected) and ``quarantined`` (quarantined lines of those loggers'
    files, by the month of the line's instant).
    """
    return con.execute(db.sql("ingest_coverage"), {"tz": site.timezone}).df()


__all__ = [
    "FileResult",
    "UNIT_TO_SI",
    "aged",
    "channel_instants",
    "channel_intervals",
    "check_file",
    "coverage_summary",
    "expand_paths",
    "ingest_files",
    "logger_files",
    "quarantined",
]
