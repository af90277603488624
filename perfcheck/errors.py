"""Exceptions of the library; the CLI turns each into one line and exit code 2."""


class PerfcheckError(Exception):
    """Base class: a problem with the user's input that the user can fix."""


class SiteFileError(PerfcheckError):
    """The site file is missing, unreadable, or has a missing, unknown or mistyped key."""


class LoggerFileError(PerfcheckError):
    """A logger file cannot be read as the site file describes it."""


class DataError(PerfcheckError):
    """The database does not hold what a stage needs (e.g. no readings yet)."""


class DatabaseBusy(DataError):
    """Another process holds the site database (DuckDB's file lock) for longer than we wait."""


class OutputError(PerfcheckError):
    """An output (report folder, bundle, JSON file) cannot be written; nothing partial is left."""
