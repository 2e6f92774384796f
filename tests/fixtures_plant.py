"""The invented sample plant as test fixtures, generated once per test session.

``sample_plant`` is the full export (28 days, about 60 batches, a few seconds to
generate); ``small_plant`` is a 7-day history for tests that need a fresh or a
second generation. Each comes with a configuration file next to the database
whose historian and store URLs point into the session's temporary folder and
whose kinetics paths are absolute (the repository's ``config/kinetics``).
"""

from __future__ import annotations

import time
import tomllib
from dataclasses import dataclass
from pathlib import Path

import pytest
import tomli_w

from sample_historian.generate import DEFAULT_SEED, generate, truth_path_for

REPO = Path(__file__).resolve().parents[1]
PLANT_CONFIG = REPO / "config" / "sample_plant.toml"
SMALL_PLANT_DAYS = 7


@dataclass(frozen=True)
class SamplePlant:
    """A generated plant: the export, its truth and a configuration that reads it."""

    db_path: Path
    truth: dict
    config_path: Path
    truth_path: Path
    seed: int
    generation_s: float  # wall time of generate() [s]


def write_config(template: Path, db_path: Path, out: Path, *, store_db: Path | None = None) -> Path:
    """Copy a configuration to ``out``, its historian pointed at the SQLite ``db_path``.

    The store goes to ``store_db`` (default: ``convmon.db`` beside ``out``); kinetics
    paths are resolved against the template's folder, so the copy works from anywhere.
    """
    data = tomllib.loads(Path(template).read_text(encoding="utf-8"))
    data["historian"]["url"] = f"sqlite:///{Path(db_path).resolve()}"
    store = Path(store_db) if store_db else Path(out).parent / "convmon.db"
    data["store"]["url"] = f"sqlite:///{store.resolve()}"
    for recipe in data["recipes"].values():
        recipe["kinetics"] = str((Path(template).parent / recipe["kinetics"]).resolve())
    Path(out).write_text(tomli_w.dumps(data), encoding="utf-8")
    return Path(out)


def write_plant_config(db_path: Path, folder: Path) -> Path:
    """Copy ``config/sample_plant.toml`` into ``folder``, pointed at ``db_path``."""
    return write_config(PLANT_CONFIG, db_path, folder / "sample_plant.toml")


def build_plant(folder: Path, seed: int = DEFAULT_SEED, days: float | None = None) -> SamplePlant:
    """Generate a plant into ``folder`` and write its configuration beside it."""
    folder.mkdir(parents=True, exist_ok=True)
    db_path = folder / "plant.db"
    t = time.perf_counter()
    truth = generate(db_path, seed, days=days)
    elapsed = time.perf_counter() - t
    return SamplePlant(
        db_path=db_path,
        truth=truth,
        config_path=write_plant_config(db_path, folder),
        truth_path=truth_path_for(db_path),
        seed=seed,
        generation_s=elapsed,
    )


@pytest.fixture(scope="session")
def sample_plant(tmp_path_factory) -> SamplePlant:
    """The full sample plant (default seed, 28 days)."""
    return build_plant(tmp_path_factory.mktemp("sample_plant"))


@pytest.fixture(scope="session")
def small_plant(tmp_path_factory) -> SamplePlant:
    """A 7-day sample plant (default seed): fewer batches, about a second to generate."""
    return build_plant(tmp_path_factory.mktemp("small_plant"), days=SMALL_PLANT_DAYS)
