"""The configuration file's model: one frozen pydantic model per TOML table.

Each model holds its table's keys with their one set of defaults and constraints;
an unknown key is refused (``extra="forbid"``). `monitor.config.load` validates a
file with its folder in the validation context (relative paths resolve against
it); Python code may build a model directly by attribute name, values in SI.
The units and recipes are in `monitor.config.plant`; `monitor.config.models` builds
the batch layer's models from them.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Any

from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Field,
    PrivateAttr,
    Strict,
    ValidationInfo,
    field_validator,
    model_validator,
)
from pydantic.dataclasses import dataclass as pydantic_dataclass

from ..batch.settings import EstimatorSettings
from . import limits
from .fields import (
    FROZEN,
    Flag,
    Integer,
    Number,
    OptionalColumn,
    Positive,
    QualityCode,
    Seconds,
    SecondsOrZero,
    Text,
    Url,
    Zone,
    in_range,
)
from .plant import RecipeConfig, UnitConfig
from .reading import located, shown
from .urls import same_database, without_password


def _some_codes(codes: tuple) -> tuple:
    if not codes:
        raise ValueError("expected at least one code that marks a usable sample")
    return codes


class SamplesColumns(BaseModel):
    """Columns of the samples table; ``seq`` and ``quality`` are None when the site has none."""

    model_config = FROZEN
    tag: Text = "tag"
    time: Text = "ts"
    value: Text = "value"
    seq: OptionalColumn = "seq"
    quality: OptionalColumn = "quality"


class EventsColumns(BaseModel):
    """Columns of the batch-event table; ``seq`` is None when the site has none."""

    model_config = FROZEN
    batch: Text = "batch_id"
    unit: Text = "unit"
    recipe: Text = "recipe"
    event: Text = "event"
    time: Text = "ts"
    seq: OptionalColumn = "seq"


class HistorianConfig(BaseModel):
    """``[historian]``: where the export is and how its tables are named."""

    model_config = FROZEN
    url: Url
    samples_table: Text = "tag_samples"
    samples_columns: SamplesColumns = SamplesColumns()
    good_quality: Annotated[tuple[QualityCode, ...], AfterValidator(_some_codes)] = (0,)
    naive_timezone: Zone = "UTC"
    events_table: Text = "batch_events"
    events_columns: EventsColumns = EventsColumns()
    start_event: Text = "start"
    end_event: Text = "end"
    connect_timeout_s: Seconds = 10.0
    statement_timeout_s: Seconds = 120.0
    fetch_rows: Annotated[Integer, in_range("a row count", 100)] = 50_000
    late_window_s: SecondsOrZero = 3600.0
    late_window_rows: Annotated[Integer, in_range("a row count", 0)] = 5000
    safety_lag_s: SecondsOrZero = 5.0
    retries: Annotated[Integer, in_range("a number of retries", 0, 100)] = 3


class StoreConfig(BaseModel):
    """``[store]``: the monitor's own database (never the historian's)."""

    model_config = FROZEN
    url: Url = Field("sqlite:///var/convmon.db", validate_default=True)


class PollConfig(BaseModel):
    """``[poll]``: how often the live monitor reads the export."""

    model_config = FROZEN
    interval_s: Seconds = 30.0
    misfire_grace_s: Seconds = 60.0


@pydantic_dataclass(frozen=True, config=ConfigDict(extra="forbid"))
class EstimatorConfig(EstimatorSettings):
    """``[estimator]``: the estimator's settings, checked (defaults: `EstimatorSettings`)."""

    max_gap_s: Seconds = EstimatorSettings.max_gap_s
    monte_carlo_draws: Annotated[
        Integer, in_range("a number of draws", *limits.MONTE_CARLO_DRAWS)
    ] = EstimatorSettings.monte_carlo_draws
    seed: Annotated[Integer, in_range("a random seed", 0)] = EstimatorSettings.seed
    mismatch_sigma: Positive = EstimatorSettings.mismatch_sigma
    horizon_h: Annotated[Number, in_range("a horizon [h]", 0.0, low_open=True)] = (
        EstimatorSettings.horizon_h
    )


class WritebackConfig(BaseModel):
    """``[writeback]``: calculated tags written to a site database (may be the historian's)."""

    model_config = FROZEN
    enabled: Flag = False
    url: Url | None = Field(None, validate_default=True)
    table: Text = "calc_samples"
    tag_prefix: Text = "CONVMON"

    @field_validator("url")
    @classmethod
    def _needed_when_enabled(cls, url: str | None, info: ValidationInfo) -> str | None:
        if url is None and info.data.get("enabled"):
            raise ValueError("write-back is enabled but has no url")
        return url


class GoldenConfig(BaseModel):
    """``[golden]``: how golden profiles are calibrated (`convmon golden build`)."""

    model_config = FROZEN
    # the largest share of golden batches that would have raised an alert, each judged
    # leave-one-batch-out against a profile built without it
    false_alarm_rate: Annotated[
        Number, in_range("a share of batches", 0.0, 1.0, low_open=True, high_open=True)
    ] = 0.05
    min_batches: Annotated[Integer, in_range("a number of batches", 3)] = 5


class SiteConfig(BaseModel):
    """``[site]``: the plant's name and the zone of local times shown to people."""

    model_config = FROZEN
    name: Annotated[str, Strict()] = ""  # may be empty
    timezone: Zone = "UTC"


class Config(BaseModel):
    """A whole configuration file; ``path`` is the file it came from (None when built in code)."""

    model_config = FROZEN
    historian: HistorianConfig
    store: StoreConfig = Field(default_factory=dict, validate_default=True)
    units: tuple[UnitConfig, ...] = ()
    recipes: dict[Text, RecipeConfig] = {}
    poll: PollConfig = PollConfig()
    estimator: EstimatorConfig = EstimatorConfig()
    writeback: WritebackConfig = WritebackConfig()
    golden: GoldenConfig = GoldenConfig()
    site: SiteConfig = SiteConfig()
    _path: Path | None = PrivateAttr(None)

    @model_validator(mode="before")
    @classmethod
    def _site_zone_defaults_to_the_historian(cls, data: Any) -> Any:
        if isinstance(data, dict):
            hist, site = data.get("historian"), data.get("site", {})
            local = isinstance(site, dict) and "timezone" not in site
            if local and isinstance(hist, dict) and "naive_timezone" in hist:
                data = {**data, "site": {**site, "timezone": hist["naive_timezone"]}}
        return data

    @field_validator("store")
    @classmethod
    def _store_is_not_the_historian(cls, store: StoreConfig, info: ValidationInfo) -> StoreConfig:
        hist = info.data.get("historian")
        if hist is not None and same_database(store.url, hist.url):
            raise located(
                ("url",),
                f"the store must not be the historian's database ({without_password(hist.url)}): "
                "convmon only reads the historian; give the store its own database",
                without_password(store.url),
            )
        return store

    @field_validator("units")
    @classmethod
    def _unit_names_unique(cls, units: tuple[UnitConfig, ...]) -> tuple[UnitConfig, ...]:
        seen: set[str] = set()
        for i, u in enumerate(units):
            if u.name in seen:
                raise located((i, "name"), f"unit {shown(u.name)} is configured twice", u.name)
            seen.add(u.name)
        return units

    def model_post_init(self, context: Any) -> None:
        if isinstance(context, dict):
            self._path = context.get("path")
        for name, recipe in self.recipes.items():
            recipe._name = name

    @property
    def path(self) -> Path | None:
        return self._path

    @property
    def base_dir(self) -> Path:
        """The folder relative paths resolve against."""
        return self.path.parent if self.path else Path.cwd()

    def unit(self, name: str) -> UnitConfig | None:
        return next((u for u in self.units if u.name == name), None)

    def recipe(self, name: str) -> RecipeConfig | None:
        return self.recipes.get(name)
