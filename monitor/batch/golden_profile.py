"""The golden profile of a recipe as a plain record: bands, alert limits, calibration.

Built by `monitor.fleet.golden` from the hindsight trajectories of good batches,
kept versioned by the store, read by the golden alert rules
(`monitor.batch.alert_rules`). Everything is plain data (floats, lists, dicts)
so the record serialises to JSON and back without loss of meaning.

Grids: ``step_s`` is the spacing of the time-since-start grid (index ``i`` is
``i * step_s``); ``x_levels`` the conversion levels of the time-to-reach-X
bands. Each band holds a display band (the golden batches' ``band_quantiles``,
what a person is told "good batches were") and the alert limit the calibration
chose (quantile level, widened beyond the band where needed).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np

from .episodes import Persistence

PROFILE_FORMAT = 1
RULES = ("behind_profile", "late_finish", "temperature_off_profile", "low_activity")


def _arr(v) -> np.ndarray:
    return np.asarray([np.nan if x is None else x for x in v], dtype=float)


def _list(a, digits: int) -> list:
    return [None if not np.isfinite(x) else round(float(x), digits) for x in np.asarray(a)]


def on_grid(values: np.ndarray, step_s: float, t_rel_s) -> np.ndarray:
    """A per-grid-point array at times since start [s]; held beyond the ends, NaN stays."""
    t = np.asarray(t_rel_s, dtype=float)
    if len(values) == 0:
        return np.full(t.shape, np.nan)
    return np.interp(t, np.arange(len(values)) * step_s, values)


@dataclass(frozen=True)
class BehindLimits:
    """Conversion against time since start, and time to reach X against X.

    Per time grid point: ``x_median``, ``x_band_lo``/``x_band_hi`` (display band) and
    ``x_limit`` (below it a batch is behind). Per ``x_levels``: ``t_median`` and
    ``t_band_hi`` (time to reach X) [s] and ``lag_limit_s`` (largest allowed
    ``t(X) - t_median(X)``) [s].
    """

    step_s: float
    x_median: np.ndarray
    x_band_lo: np.ndarray
    x_band_hi: np.ndarray
    x_limit: np.ndarray
    x_levels: np.ndarray
    t_median: np.ndarray
    t_band_hi: np.ndarray
    lag_limit_s: np.ndarray

    @property
    def horizon_s(self) -> float:
        return (len(self.x_median) - 1) * self.step_s

    def t_median_at(self, x) -> np.ndarray:
        """Median time since start at which good batches reached conversion ``x`` [s]
        (NaN outside the levels)."""
        x = np.asarray(x, dtype=float)
        out = np.interp(x, self.x_levels, self.t_median)
        return np.where((x >= self.x_levels[0]) & (x <= self.x_levels[-1]), out, np.nan)

    def lag_limit_at(self, x) -> np.ndarray:
        return np.interp(np.asarray(x, dtype=float), self.x_levels, self.lag_limit_s)


@dataclass(frozen=True)
class TemperatureLimits:
    """Measured temperature against time since start [K]: display band and limits;
    ``recipe_limits_k`` are the recipe's own (None: none configured)."""

    step_s: float
    median: np.ndarray
    band_lo: np.ndarray
    band_hi: np.ndarray
    limit_lo: np.ndarray
    limit_hi: np.ndarray
    recipe_limits_k: tuple | None = None


@dataclass(frozen=True)
class FinishLimits:
    """Time to target of good batches [s]: median, display band top, alert limit."""

    median_s: float
    band_hi_s: float
    limit_s: float


@dataclass(frozen=True)
class ActivityLimits:
    """Activity of good batches [-]: median, display band bottom, alert limit; a batch
    is low when ``mean + z * sd`` of its posterior is below the limit."""

    median: float
    band_lo: float
    limit: float
    z: float = 1.0


@dataclass(frozen=True)
class RuleLevel:
    """What the calibration chose for one rule: the limit is the good batches' quantile
    ``p`` on its side (0: the extreme good batch) moved outward by ``fence``
    interquartile ranges; persistence, and the hysteresis margin (rule units)."""

    p: float
    fence: float
    persistence: Persistence
    clear_persistence: Persistence
    hysteresis: float

    def to_dict(self) -> dict:
        return {
            "p": self.p,
            "fence": self.fence,
            "persistence": self.persistence.to_dict(),
            "clear_persistence": self.clear_persistence.to_dict(),
            "hysteresis": self.hysteresis,
        }

    @classmethod
    def from_dict(cls, d: dict) -> RuleLevel:
        return cls(
            float(d["p"]),
            float(d["fence"]),
            Persistence.from_dict(d["persistence"]),
            Persistence.from_dict(d["clear_persistence"]),
            float(d["hysteresis"]),
        )


@dataclass(frozen=True)
class GoldenProfile:
    """A recipe's golden profile (see the module docstring).

    ``calibration`` holds, per rule and for all rules together, the leave-one-
    batch-out figures (``n``, ``n_flagged``, ``rate``, ``ci``, ``flagged``) and the
    target rate; ``trajectories`` each golden batch's conversion and temperature on
    the time grid (for the chart); ``selection`` the candidates left out and why.
    """

    recipe: str
    batches: tuple
    kinetics_version: str
    created_at_s: float
    settings: dict
    behind: BehindLimits
    temperature: TemperatureLimits
    finish: FinishLimits
    activity: ActivityLimits
    rules: dict  # rule name -> RuleLevel
    activities: dict  # batch -> activity [-]
    times_to_target_s: dict  # batch -> time to target [s]
    calibration: dict = field(default_factory=dict)
    trajectories: dict = field(default_factory=dict)
    selection: dict = field(default_factory=dict)
    version: int = 0  # set by the store when saved
    format: int = PROFILE_FORMAT

    def to_dict(self) -> dict:
        def arrays(obj, digits):
            d = asdict(obj)
            return {k: _list(v, digits) if isinstance(v, np.ndarray) else v for k, v in d.items()}

        return {
            "format": self.format,
            "version": self.version,
            "recipe": self.recipe,
            "batches": list(self.batches),
            "kinetics_version": self.kinetics_version,
            "created_at_s": self.created_at_s,
            "settings": self.settings,
            "behind": arrays(self.behind, 6),
            "temperature": {
                **arrays(self.temperature, 3),
                "recipe_limits_k": (
                    list(self.temperature.recipe_limits_k)
                    if self.temperature.recipe_limits_k
                    else None
                ),
            },
            "finish": asdict(self.finish),
            "activity": asdict(self.activity),
            "rules": {k: v.to_dict() for k, v in self.rules.items()},
            "activities": dict(self.activities),
            "times_to_target_s": dict(self.times_to_target_s),
            "calibration": self.calibration,
            "trajectories": self.trajectories,
            "selection": self.selection,
        }

    @classmethod
    def from_dict(cls, d: dict) -> GoldenProfile:
        if d.get("format") != PROFILE_FORMAT:
            raise ValueError(
                f"golden profile format {d.get('format')!r}, expected {PROFILE_FORMAT}"
            )
        b, t = d["behind"], d["temperature"]
        arr = {k for k, v in b.items() if isinstance(v, list)}
        behind = BehindLimits(**{k: _arr(v) if k in arr else v for k, v in b.items()})
        rl = t.get("recipe_limits_k")
        temperature = TemperatureLimits(
            **{
                k: (_arr(v) if isinstance(v, list) else v)
                for k, v in t.items()
                if k != "recipe_limits_k"
            },
            recipe_limits_k=tuple(rl) if rl else None,
        )
        return cls(
            recipe=d["recipe"],
            batches=tuple(d["batches"]),
            kinetics_version=d["kinetics_version"],
            created_at_s=float(d["created_at_s"]),
            settings=d["settings"],
            behind=behind,
            temperature=temperature,
            finish=FinishLimits(**d["finish"]),
            activity=ActivityLimits(**d["activity"]),
            rules={k: RuleLevel.from_dict(v) for k, v in d["rules"].items()},
            activities=dict(d["activities"]),
            times_to_target_s=dict(d["times_to_target_s"]),
            calibration=d.get("calibration", {}),
            trajectories=d.get("trajectories", {}),
            selection=d.get("selection", {}),
            version=int(d.get("version", 0)),
            format=int(d["format"]),
        )
