"""The golden profiles the poll cycle judges running batches against.

Each cycle asks the store for the latest profile of each recipe; a new or
rebuilt profile is used from that cycle on, for every running batch, whether
or not it brought new data (the rules are re-evaluated every cycle; only the
batch's past, which does not depend on the profile, is reused while its data
are unchanged). A profile built with other kinetics than the recipe's current
ones is not applied (its activities and bands would not be comparable): the
monitor says so once and the profile must be rebuilt.
"""

from __future__ import annotations

import logging

from ..batch.alert_rules import GOLDEN_KINDS, GoldenInput
from ..batch.estimator import posterior_for
from ..batch.golden_profile import GoldenProfile
from ..batch.golden_signals import BatchPast, batch_past
from ..batch.paths import activity_path
from ..batch.settings import EstimatorSettings
from ..batch.state import BatchState

log = logging.getLogger(__name__)


class GoldenWatch:
    """Latest profile per recipe, and each running batch's past (cached on its data)."""

    def __init__(self, store, settings: EstimatorSettings):
        self.store = store
        self.settings = settings
        self.profiles: dict[str, GoldenProfile] = {}
        self._paths: dict[str, tuple] = {}
        self._past: dict[str, tuple] = {}
        self._refused: set[tuple[str, int]] = set()

    def refresh(self) -> None:
        """The latest profile of each recipe: one small query a cycle, a profile read only
        when its version changed."""
        versions = self.store.golden_versions()
        for recipe, version in versions.items():
            have = self.profiles.get(recipe)
            if have is None or have.version != version:
                self.profiles[recipe] = self.store.golden_profile(recipe, version)
        for recipe in set(self.profiles) - set(versions):
            del self.profiles[recipe]

    def profile_for(self, recipe: str, kinetics_version: str) -> GoldenProfile | None:
        p = self.profiles.get(recipe)
        if p is None:
            return None
        if p.kinetics_version and kinetics_version and p.kinetics_version != kinetics_version:
            if (recipe, p.version) not in self._refused:
                self._refused.add((recipe, p.version))
                log.warning(
                    "golden profile %s v%d was built with kinetics %s, the recipe now uses %s: "
                    "not applied; rebuild it (convmon golden build --recipe %s)",
                    recipe,
                    p.version,
                    p.kinetics_version,
                    kinetics_version,
                    recipe,
                )
            return None
        return p

    def past(self, state: BatchState, at_s: float, key, step_s: float) -> BatchPast:
        """The batch's past at ``at_s`` (reused while ``key``, its data, is unchanged)."""
        cached = self._past.get(state.batch)
        if cached is not None and cached[0] == (key, step_s):
            return cached[1]
        post, _, _ = posterior_for(state, at_s, self.settings)
        known = self._paths.get(state.batch, ())
        path = activity_path(state, at_s, self.settings, known)
        self._paths[state.batch] = path
        past = batch_past(state, post, at_s, step_s, path, self.settings.horizon_h * 3600.0)
        self._past[state.batch] = ((key, step_s), past)
        return past

    def golden_input(
        self, state: BatchState, at_s: float, key, open_kinds, temperature_unit: str
    ) -> GoldenInput | None:
        """What the golden rules need for this batch now (None: no usable profile)."""
        profile = self.profile_for(state.recipe.name, state.kinetics.version)
        if profile is None:
            return None
        step = float(profile.settings.get("step_s", 120.0))
        past = self.past(state, at_s, key, step)
        return GoldenInput(past, profile, frozenset(open_kinds), temperature_unit)

    def forget(self, batch: str) -> None:
        self._paths.pop(batch, None)
        self._past.pop(batch, None)

    def clear(self) -> None:
        self._paths.clear()
        self._past.clear()


def band_summary(golden: GoldenInput, conditions) -> dict:
    """How far the batch is from the golden band now, for the status document."""
    behind = next((c for c in conditions if c.kind == "behind_profile"), None)
    d = behind.data if behind is not None else {}
    lag = d.get("lag_s")
    return {
        "profile_version": golden.profile.version,
        "conversion_band": d.get("band"),
        "conversion_limit": d.get("x_limit"),
        "lag_min": None if lag is None else round(lag / 60.0, 1),
        "lag_limit_min": (
            None if d.get("lag_limit_s") is None else round(d["lag_limit_s"] / 60.0, 1)
        ),
        "off_profile": sorted(c.kind for c in conditions if c.active and c.kind in GOLDEN_KINDS),
    }
