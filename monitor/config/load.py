"""Configuration: TOML loaded once into frozen dataclasses, validated at load.

Every problem names the file, the key and what was expected, and raises
`ConfigError` (exit code 2). Relative paths resolve against the config
file's folder; ``${VAR}`` in URLs is expanded from the environment.
"""

from __future__ import annotations

import os
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from ..batch.settings import EstimatorSettings
from ..errors import ConfigError
from ..units import TEMPERATURE_UNITS, parse_quantity, to_kelvin

ENV_VAR = "CONVMON_CONFIG"
DEFAULT_CONFIG = "convmon.toml"
ASSAY_KINDS = ("concentration", "conversion")
_VAR = re.compile(r"\$\{([A-Za-z_][A-Za-z0-9_]*)\}")


@dataclass(frozen=True)
class SamplesColumns:
    tag: str = "tag"
    time: str = "ts"
    value: str = "value"
    seq: str | None = "seq"
    quality: str | None = "quality"


@dataclass(frozen=True)
class EventsColumns:
    batch: str = "batch_id"
    unit: str = "unit"
    recipe: str = "recipe"
    event: str = "event"
    time: str = "ts"
    seq: str | None = "seq"


@dataclass(frozen=True)
class HistorianConfig:
    url: str
    samples_table: str = "tag_samples"
    samples_columns: SamplesColumns = field(default_factory=SamplesColumns)
    good_quality: tuple = (0,)
    naive_timezone: str = "UTC"
    events_table: str = "batch_events"
    events_columns: EventsColumns = field(default_factory=EventsColumns)
    start_event: str = "start"
    end_event: str = "end"
    connect_timeout_s: float = 10.0
    statement_timeout_s: float = 120.0
    fetch_rows: int = 50_000
    late_window_s: float = 3600.0
    late_window_rows: int = 5000
    safety_lag_s: float = 5.0
    retries: int = 3


@dataclass(frozen=True)
class StoreConfig:
    url: str


@dataclass(frozen=True)
class PollConfig:
    interval_s: float = 30.0
    misfire_grace_s: float = 60.0


#: The ``[estimator]`` table is the estimator's own settings.
EstimatorConfig = EstimatorSettings


@dataclass(frozen=True)
class UnitConfig:
    name: str
    temperature_tag: str
    temperature_unit: str = "degC"
    assay_tag: str | None = None
    charge_tag: str | None = None
    temperature_limits_k: tuple[float, float] = (173.15, 773.15)


@dataclass(frozen=True)
class SafetyConfig:
    heat_of_reaction_j_per_mol: float
    heat_capacity_j_per_kg_k: float
    density_kg_per_m3: float
    mtt_k: float
    t_d24_k: float
    assessed_class: int | None = None


@dataclass(frozen=True)
class RecipeConfig:
    name: str
    kinetics: Path
    assay_kind: str = "concentration"
    assay_sd: float = 0.02
    initial_concentration: float | None = None
    target_conversion: float = 0.95
    temperature_plan: tuple[tuple[float, float], ...] = ()
    safety: SafetyConfig | None = None


@dataclass(frozen=True)
class WritebackConfig:
    enabled: bool = False
    url: str | None = None
    table: str = "calc_samples"
    tag_prefix: str = "CONVMON"


@dataclass(frozen=True)
class SiteConfig:
    name: str = ""
    timezone: str = "UTC"


@dataclass(frozen=True)
class Config:
    path: Path | None
    historian: HistorianConfig
    store: StoreConfig
    units: tuple[UnitConfig, ...]
    recipes: dict[str, RecipeConfig]
    poll: PollConfig = field(default_factory=PollConfig)
    estimator: EstimatorConfig = field(default_factory=EstimatorConfig)
    writeback: WritebackConfig = field(default_factory=WritebackConfig)
    site: SiteConfig = field(default_factory=SiteConfig)

    @property
    def base_dir(self) -> Path:
        return self.path.parent if self.path else Path.cwd()

    def unit(self, name: str) -> UnitConfig | None:
        return next((u for u in self.units if u.name == name), None)

    def recipe(self, name: str) -> RecipeConfig | None:
        return self.recipes.get(name)


# ---------------------------------------------------------------- validation
class _Section:
    """A TOML table being read: tracks its keys so unknown ones can be refused."""

    def __init__(self, data: Any, path: Path | None, key: str):
        if not isinstance(data, dict):
            raise ConfigError(f"expected a table, got {type(data).__name__}", path=path, key=key)
        self.data, self.path, self.key = data, path, key
        self.used: set[str] = set()

    def _k(self, name: str) -> str:
        return f"{self.key}.{name}" if self.key else name

    def get(self, name: str, types: type | tuple, default: Any = ..., *, none_ok=False):
        self.used.add(name)
        if name not in self.data:
            if default is ...:
                raise ConfigError("missing required key", path=self.path, key=self._k(name))
            return default
        value = self.data[name]
        if none_ok and value == "":
            return None
        # bool is an int in Python; refuse true/false where a number is expected
        bad_bool = isinstance(value, bool) and bool not in _as_tuple(types)
        if bad_bool or not isinstance(value, types):
            raise ConfigError(
                f"expected {_type_names(types)}, got {value!r}", path=self.path, key=self._k(name)
            )
        return value

    def number(self, name: str, default: Any = ..., *, positive=False, low=None, high=None):
        value = self.get(name, (int, float), default)
        if value is None or value is default and default is not ...:
            return value
        value = float(value)
        if positive and not value > 0:
            raise ConfigError(
                f"expected a positive number, got {value!r}", path=self.path, key=self._k(name)
            )
        if (low is not None and value < low) or (high is not None and value > high):
            raise ConfigError(
                f"expected a number in [{low}, {high}], got {value!r}",
                path=self.path,
                key=self._k(name),
            )
        return value

    def sub(self, name: str, required=False) -> _Section | None:
        self.used.add(name)
        if name not in self.data:
            if required:
                raise ConfigError("missing required table", path=self.path, key=self._k(name))
            return None
        return _Section(self.data[name], self.path, self._k(name))

    def finish(self) -> None:
        unknown = sorted(set(self.data) - self.used)
        if unknown:
            raise ConfigError(
                f"unknown key {unknown[0]!r} (expected one of: {', '.join(sorted(self.used))})",
                path=self.path,
                key=self._k(unknown[0]),
            )


def _as_tuple(types) -> tuple:
    return types if isinstance(types, tuple) else (types,)


def _type_names(types) -> str:
    names = {
        str: "a string",
        int: "an integer",
        float: "a number",
        bool: "true or false",
        list: "a list",
        dict: "a table",
    }
    return " or ".join(dict.fromkeys(names.get(t, t.__name__) for t in _as_tuple(types)))


def expand_env(text: str, *, path=None, key=None) -> str:
    """Expand ``${VAR}`` from the environment; an unset variable is an error."""

    def repl(m: re.Match) -> str:
        name = m.group(1)
        if name not in os.environ:
            raise ConfigError(f"environment variable {name} is not set", path=path, key=key)
        return os.environ[name]

    return _VAR.sub(repl, text)


def _resolve_sqlite(url: str, base: Path) -> str:
    """Make a relative SQLite file path absolute against the config's folder."""
    m = re.match(r"^(sqlite(?:\+\w+)?):///(?!/)(.+)$", url)
    if not m or m.group(2).startswith(":memory:") or m.group(2).startswith("file:"):
        return url
    return f"{m.group(1)}:///{(base / m.group(2)).resolve()}"


def _url(sec: _Section, name: str, base: Path, default: Any = ...) -> str | None:
    raw = sec.get(name, str, default)
    if raw is None:
        return None
    url = expand_env(raw, path=sec.path, key=sec._k(name))
    if "://" not in url:
        raise ConfigError(
            f"expected an SQLAlchemy URL such as 'sqlite:///plant.db', got {raw!r}",
            path=sec.path,
            key=sec._k(name),
        )
    return _resolve_sqlite(url, base)


def _zone(sec: _Section, name: str, default: str) -> str:
    zone = sec.get(name, str, default)
    try:
        ZoneInfo(zone)
    except (ZoneInfoNotFoundError, ValueError):
        raise ConfigError(
            f"unknown IANA time zone {zone!r} (e.g. 'Europe/Berlin')",
            path=sec.path,
            key=sec._k(name),
        ) from None
    return zone


def _columns(sec: _Section | None, cls, required: tuple[str, ...], optional: tuple[str, ...]):
    if sec is None:
        return cls()
    values = {}
    for name in required:
        values[name] = sec.get(name, str, getattr(cls(), name))
    for name in optional:
        values[name] = sec.get(name, (str, bool), getattr(cls(), name))
        if values[name] is False or values[name] == "":
            values[name] = None  # the site's export has no such column
        elif values[name] is True:
            raise ConfigError(
                "expected a column name, or false when there is none",
                path=sec.path,
                key=sec._k(name),
            )
    sec.finish()
    return cls(**values)


def _temperature_unit(sec: _Section, name: str, default: str) -> str:
    unit = sec.get(name, str, default)
    if unit not in TEMPERATURE_UNITS:
        raise ConfigError(
            f"unknown temperature unit {unit!r}; expected one of {', '.join(TEMPERATURE_UNITS)}",
            path=sec.path,
            key=sec._k(name),
        )
    return unit


def _historian(sec: _Section, base: Path) -> HistorianConfig:
    h = HistorianConfig(
        url=_url(sec, "url", base),
        samples_table=sec.get("samples_table", str, "tag_samples"),
        samples_columns=_columns(
            sec.sub("samples_columns"), SamplesColumns, ("tag", "time", "value"), ("seq", "quality")
        ),
        good_quality=tuple(_good_quality(sec)),
        naive_timezone=_zone(sec, "naive_timezone", "UTC"),
        events_table=sec.get("events_table", str, "batch_events"),
        events_columns=_columns(
            sec.sub("events_columns"),
            EventsColumns,
            ("batch", "unit", "recipe", "event", "time"),
            ("seq",),
        ),
        start_event=sec.get("start_event", str, "start"),
        end_event=sec.get("end_event", str, "end"),
        connect_timeout_s=sec.number("connect_timeout_s", 10.0, positive=True),
        statement_timeout_s=sec.number("statement_timeout_s", 120.0, positive=True),
        fetch_rows=int(sec.number("fetch_rows", 50_000, low=100)),
        late_window_s=sec.number("late_window_s", 3600.0, low=0),
        late_window_rows=int(sec.number("late_window_rows", 5000, low=0)),
        safety_lag_s=sec.number("safety_lag_s", 5.0, low=0),
        retries=int(sec.number("retries", 3, low=0, high=100)),
    )
    sec.finish()
    return h


def _good_quality(sec: _Section) -> list:
    codes = sec.get("good_quality", list, [0])
    for c in codes:
        if isinstance(c, bool) or not isinstance(c, int | str):
            raise ConfigError(
                f"expected a list of integer or string codes, got {c!r}",
                path=sec.path,
                key=sec._k("good_quality"),
            )
    return codes


def _unit(sec: _Section) -> UnitConfig:
    name = sec.get("name", str)
    t_unit = _temperature_unit(sec, "temperature_unit", "degC")
    limits = sec.get("temperature_limits", list, None)
    if limits is not None:
        if (
            len(limits) != 2
            or not all(isinstance(v, int | float) for v in limits)
            or not limits[0] < limits[1]
        ):
            raise ConfigError(
                f"expected [low, high] in {t_unit}, got {limits!r}",
                path=sec.path,
                key=sec._k("temperature_limits"),
            )
        limits_k = (float(to_kelvin(limits[0], t_unit)), float(to_kelvin(limits[1], t_unit)))
    else:
        limits_k = UnitConfig.__dataclass_fields__["temperature_limits_k"].default
    u = UnitConfig(
        name=name,
        temperature_tag=sec.get("temperature_tag", str),
        temperature_unit=t_unit,
        assay_tag=sec.get("assay_tag", str, None),
        charge_tag=sec.get("charge_tag", str, None),
        temperature_limits_k=limits_k,
    )
    sec.finish()
    return u


def _safety(sec: _Section) -> SafetyConfig:
    def q(name: str, si: str) -> float:
        return parse_quantity(sec.get(name, str), si, path=sec.path, key=sec._k(name))

    s = SafetyConfig(
        heat_of_reaction_j_per_mol=q("heat_of_reaction", "J/mol"),
        heat_capacity_j_per_kg_k=q("heat_capacity", "J/(kg*K)"),
        density_kg_per_m3=q("density", "kg/m^3"),
        mtt_k=q("mtt", "K"),
        t_d24_k=q("t_d24", "K"),
        assessed_class=(
            int(sec.number("assessed_class", None, low=1, high=5))
            if "assessed_class" in sec.data
            else None
        ),
    )
    sec.used.add("assessed_class")
    if s.heat_capacity_j_per_kg_k <= 0 or s.density_kg_per_m3 <= 0:
        raise ConfigError("heat capacity and density must be positive", path=sec.path, key=sec.key)
    sec.finish()
    return s


def _recipe(name: str, sec: _Section, base: Path) -> RecipeConfig:
    kin = sec.get("kinetics", str)
    kind = sec.get("assay_kind", str, "concentration")
    if kind not in ASSAY_KINDS:
        raise ConfigError(
            f"expected one of {', '.join(ASSAY_KINDS)}, got {kind!r}",
            path=sec.path,
            key=sec._k("assay_kind"),
        )
    plan_unit = _temperature_unit(sec, "plan_unit", "degC")
    plan_raw = sec.get("temperature_plan", list, [])
    plan = []
    for point in plan_raw:
        if not (
            isinstance(point, list)
            and len(point) == 2
            and all(isinstance(v, int | float) and not isinstance(v, bool) for v in point)
        ):
            raise ConfigError(
                f"expected [[minutes, setpoint], ...], got {point!r}",
                path=sec.path,
                key=sec._k("temperature_plan"),
            )
        plan.append((float(point[0]) * 60.0, float(to_kelvin(point[1], plan_unit))))
    if any(b[0] < a[0] for a, b in zip(plan, plan[1:], strict=False)):
        raise ConfigError(
            "plan times must not decrease", path=sec.path, key=sec._k("temperature_plan")
        )
    safety = sec.sub("safety")
    r = RecipeConfig(
        name=name,
        kinetics=(base / kin).resolve(),
        assay_kind=kind,
        assay_sd=sec.number("assay_sd", 0.02, positive=True),
        initial_concentration=sec.number("initial_concentration", None, positive=True),
        target_conversion=sec.number("target_conversion", 0.95, low=1e-6, high=0.999999),
        temperature_plan=tuple(plan),
        safety=_safety(safety) if safety else None,
    )
    sec.finish()
    return r


def load_config(path: str | os.PathLike | None = None) -> Config:
    """Load and validate a configuration file.

    ``path`` defaults to ``$CONVMON_CONFIG``, else ``./convmon.toml``.
    """
    p = Path(path or os.environ.get(ENV_VAR) or DEFAULT_CONFIG)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError(
            f"configuration file not found (give --config PATH or set ${ENV_VAR})", path=p
        ) from None
    except OSError as exc:
        raise ConfigError(f"cannot read configuration: {exc.strerror}", path=p) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"not valid TOML: {exc}", path=p) from None
    return config_from_dict(data, p.resolve())


def config_from_dict(data: dict, path: Path | None = None) -> Config:
    """Validate an already parsed configuration (``path`` is used in messages and for paths)."""
    base = path.parent if path else Path.cwd()
    root = _Section(data, path, "")
    hist = _historian(root.sub("historian", required=True), base)
    store_sec = root.sub("store")
    if store_sec:
        store = StoreConfig(url=_url(store_sec, "url", base, "sqlite:///var/convmon.db"))
        store_sec.finish()
    else:
        store = StoreConfig(url=_resolve_sqlite("sqlite:///var/convmon.db", base))

    poll_sec = root.sub("poll")
    poll = PollConfig()
    if poll_sec:
        poll = PollConfig(
            interval_s=poll_sec.number("interval_s", 30.0, positive=True),
            misfire_grace_s=poll_sec.number("misfire_grace_s", 60.0, positive=True),
        )
        poll_sec.finish()

    est_sec = root.sub("estimator")
    est = EstimatorConfig()
    if est_sec:
        est = EstimatorConfig(
            max_gap_s=est_sec.number("max_gap_s", 300.0, positive=True),
            monte_carlo_draws=int(est_sec.number("monte_carlo_draws", 1000, low=10, high=1e6)),
            seed=int(est_sec.number("seed", 20261201)),
            mismatch_sigma=est_sec.number("mismatch_sigma", 4.0, positive=True),
            horizon_h=est_sec.number("horizon_h", 72.0, positive=True),
        )
        est_sec.finish()

    wb_sec = root.sub("writeback")
    wb = WritebackConfig()
    if wb_sec:
        wb = WritebackConfig(
            enabled=wb_sec.get("enabled", bool, False),
            url=_url(wb_sec, "url", base, None),
            table=wb_sec.get("table", str, "calc_samples"),
            tag_prefix=wb_sec.get("tag_prefix", str, "CONVMON"),
        )
        if wb.enabled and not wb.url:
            raise ConfigError(
                "write-back is enabled but has no url", path=path, key="writeback.url"
            )
        wb_sec.finish()

    site_sec = root.sub("site")
    site = SiteConfig(timezone=hist.naive_timezone)
    if site_sec:
        site = SiteConfig(
            name=site_sec.get("name", str, ""),
            timezone=_zone(site_sec, "timezone", hist.naive_timezone),
        )
        site_sec.finish()

    root.used.add("units")
    units_raw = data.get("units", [])
    if not isinstance(units_raw, list):
        raise ConfigError("expected [[units]] tables", path=path, key="units")
    units = tuple(_unit(_Section(u, path, f"units[{i}]")) for i, u in enumerate(units_raw))
    names = [u.name for u in units]
    if len(set(names)) != len(names):
        raise ConfigError("a unit name appears twice", path=path, key="units")

    recipes_sec = root.sub("recipes")
    recipes: dict[str, RecipeConfig] = {}
    if recipes_sec:
        for name in list(recipes_sec.data):
            recipes[name] = _recipe(name, recipes_sec.sub(name), base)
        recipes_sec.finish()
    root.finish()
    return Config(
        path=path,
        historian=hist,
        store=store,
        units=units,
        recipes=recipes,
        poll=poll,
        estimator=est,
        writeback=wb,
        site=site,
    )
