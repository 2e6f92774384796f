"""One monitor per store."""

from __future__ import annotations

import fcntl
import hashlib
import os
from pathlib import Path

from ..config import Config
from ..errors import LockError


class StoreLock:
    """One monitor per store: an exclusive lock file beside (or named after) the store."""

    def __init__(self, cfg: Config):
        digest = hashlib.sha256(cfg.store.url.encode()).hexdigest()[:16]
        base = Path(os.environ.get("CONVMON_LOCK_DIR", cfg.base_dir / "var"))
        self.path = base / f"convmon-{digest}.lock"
        self._fh = None

    def __enter__(self):
        self.path.parent.mkdir(parents=True, exist_ok=True)
        self._fh = open(self.path, "a+")  # noqa: SIM115 - held for the life of the service
        try:
            fcntl.flock(self._fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            self._fh.close()
            raise LockError(
                f"another convmon run is already using this store (lock {self.path}); stop it first"
            ) from None
        self._fh.seek(0)
        self._fh.truncate()
        self._fh.write(str(os.getpid()))
        self._fh.flush()
        return self

    def __exit__(self, *exc):
        self._fh.close()
