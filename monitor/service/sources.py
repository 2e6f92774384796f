"""The files a running monitor reads its model from, re-read when they change.

The configuration file and each recipe's kinetics file are checked once per cycle by
their signature (modification time, size, inode: one ``stat`` each). A changed file is
read again; what an estimate is computed with then goes by content (the kinetics'
version is their content hash, the configuration's `config_version`), so a file
touched without a change re-estimates nothing. A new file that does not load (a typo,
an impossible value, half written) is not used: the monitor keeps what it had and logs
the error once per version of the file, until the file loads again.

Sections only read at start (``[historian]``, ``[store]``, ``[poll]``, ``[writeback]``)
cannot change under a running monitor: a new configuration that changes one of them is
refused with a logged error (the old one stays in use) and applies at the next start.
"""

from __future__ import annotations

import logging
import os
from pathlib import Path

from ..batch.kinetics import Kinetics
from ..batch.state import RecipeModel
from ..config import Config, load_config, load_kinetics
from ..config.models import recipe_model
from ..config.versions import config_version
from ..errors import MonitorError

log = logging.getLogger(__name__)

#: Tables read once when the monitor starts; a change needs a restart.
RESTART_ONLY = ("historian", "store", "poll", "writeback")


def _signature(path: Path) -> tuple | None:
    try:
        st = os.stat(path)
    except OSError:
        return None  # missing or unreadable: seen as a change when it comes back
    return (st.st_mtime_ns, st.st_size, st.st_ino)


class Sources:
    """The configuration in use and each recipe's kinetics, kept current."""

    def __init__(self, cfg: Config):
        self.cfg = cfg
        self._config_seen = _signature(cfg.path) if cfg.path else None
        self._kinetics: dict[Path, tuple[tuple | None, Kinetics]] = {}
        self._seen: dict[Path, tuple | None] = {}  # signature last looked at, loaded or not
        self._config_versions: dict[tuple[str, str], str] = {}  # of the configuration in use

    def refresh(self) -> bool:
        """Re-read the files that changed since the last call; True if the configuration
        in use was replaced. (Changed kinetics show in `basis`.)"""
        replaced = self._refresh_config()
        for rc in self.cfg.recipes.values():
            if rc.kinetics in self._kinetics:
                self._refresh_kinetics(rc.kinetics)
        return replaced

    def _refresh_config(self) -> bool:
        path = self.cfg.path
        if path is None:
            return False
        sig = _signature(path)
        if sig == self._config_seen:
            return False
        self._config_seen = sig
        try:
            new = load_config(path)
        except MonitorError as exc:
            log.error("configuration changed but not loaded (the previous one stays): %s", exc)
            return False
        changed = [t for t in RESTART_ONLY if getattr(new, t) != getattr(self.cfg, t)]
        if changed:
            log.error(
                "configuration %s changed [%s], which applies only when the monitor starts: "
                "the new file is not used until then (the previous one stays)",
                path,
                "], [".join(changed),
            )
            return False
        if new == self.cfg:
            return False
        log.warning("configuration %s changed: running batches it concerns are re-estimated", path)
        self.cfg = new
        self._config_versions.clear()
        return True

    def _refresh_kinetics(self, path: Path) -> None:
        sig = _signature(path)
        if sig == self._seen.get(path):
            return
        self._seen[path] = sig
        old = self._kinetics[path][1]
        try:
            kin = load_kinetics(path)
        except MonitorError as exc:
            log.error(
                "kinetics file changed but not loaded (version %s stays in use): %s",
                old.version,
                exc,
            )
            return
        self._kinetics[path] = (sig, kin)
        if kin.version != old.version:
            log.warning(
                "kinetics file %s changed (version %s -> %s): running batches that use it "
                "are re-estimated",
                path,
                old.version,
                kin.version,
            )

    def kinetics(self, recipe: str) -> Kinetics:
        """The recipe's kinetics in use (read on first use; errors raise)."""
        rc = self.cfg.recipe(recipe)
        path = rc.kinetics if rc is not None else None
        if path is None:
            return recipe_model(self.cfg, recipe).kinetics  # raises: not configured
        if path not in self._kinetics:
            sig = _signature(path)
            self._kinetics[path] = (sig, load_kinetics(path))
            self._seen[path] = sig
        return self._kinetics[path][1]

    def model(self, recipe: str) -> RecipeModel:
        """The recipe's model with its kinetics in use."""
        return recipe_model(self.cfg, recipe, self.kinetics(recipe))

    def basis(self, recipe: str, unit: str) -> tuple[str, str]:
        """What an estimate of ``recipe`` on ``unit`` is computed with now:
        (kinetics version, configuration version)."""
        key = (recipe, unit)
        if key not in self._config_versions:
            self._config_versions[key] = config_version(self.cfg, recipe, unit)
        return self.kinetics(recipe).version, self._config_versions[key]
