"""One error hierarchy; each error carries the facts a user needs to act.

The CLI maps each class to an exit code (see ``EXIT_CODES``) and prints the
message on one line, never a traceback for a user's mistake.
"""

from __future__ import annotations


class MonitorError(Exception):
    """Base of every error convmon raises on purpose."""

    exit_code = 1


class ConfigError(MonitorError):
    """Bad configuration or usage: names the file, the key and what was expected."""

    exit_code = 2

    def __init__(self, message: str, *, path: object = None, key: str | None = None):
        self.path = path
        self.key = key
        where = ""
        if path is not None:
            where += f"{path}: "
        if key:
            where += f"[{key}] "
        super().__init__(f"{where}{message}")


class UsageError(ConfigError):
    """A command-line argument that cannot be used."""


class SchemaError(ConfigError):
    """A table or column named in the configuration is not in the database."""


class HistorianError(MonitorError):
    """The historian export cannot be reached or read."""

    exit_code = 3


class StoreError(MonitorError):
    """The monitor's own database cannot be reached, read or upgraded."""

    exit_code = 3


class DataQualityError(MonitorError):
    """The data cannot support the requested result (names tag, window or batch)."""

    exit_code = 3


class BatchNotFoundError(UsageError):
    """A batch id the export does not have."""


class IntegrityError(MonitorError):
    """An archived report does not match its recorded checksum."""

    exit_code = 4


class KineticsError(ConfigError):
    """A kinetics file that is missing, malformed or physically impossible."""


class LockError(MonitorError):
    """Another monitor already runs on the same store."""

    exit_code = 3
