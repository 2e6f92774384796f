"""One error hierarchy; each error carries the facts a user needs to act.

Each class has its exit code; `EXIT_CODES` is the one table of them that the CLI
and the documentation use. The CLI prints the message on one line, never a
traceback for a user's mistake.
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


class NotFoundError(ConfigError):
    """Something the user named does not exist (a batch, an alert)."""


class BatchNotFoundError(NotFoundError):
    """A batch id the export does not have."""


class AlertNotFoundError(NotFoundError):
    """An alert id the store does not have."""


class IntegrityError(MonitorError):
    """An archived report does not match its recorded checksum."""

    exit_code = 4


class KineticsError(ConfigError):
    """A kinetics file that is missing, malformed or physically impossible."""


class LockError(MonitorError):
    """Another monitor already runs on the same store."""

    exit_code = 3


#: Exit code of a command stopped with Ctrl-C (the shell's 128 + SIGINT).
INTERRUPTED = 130

#: Exit codes of the command line, and what each means (README and --help show this).
EXIT_CODES: dict[int, str] = {
    0: "success",
    2: "bad usage or configuration",
    3: "historian or store unreachable or unreadable",
    4: "an integrity check failed",
    INTERRUPTED: "interrupted (Ctrl-C)",
}


def exit_code_summary() -> str:
    """One line for help texts: "0 success, 2 bad usage or configuration, ..."."""
    return ", ".join(f"{code} {what}" for code, what in EXIT_CODES.items())
