"""The plant's tables: ``[[units]]`` and ``[recipes.NAME]`` with its ``safety`` table.

Values are kept in SI (s, K, J/mol; concentrations in mol/L): a file's
quantities ("-85 kJ/mol"), temperature units and plan minutes are converted
while it is validated; Python code building a model passes SI values by
attribute name. Field order matters where a key is read in the unit another
names (``temperature_unit`` before ``temperature_limits``, ``plan_unit`` before
``temperature_plan``).
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import BaseModel, Field, PrivateAttr, ValidationInfo, field_validator

from ..errors import ConfigError
from ..units import parse_quantity, to_kelvin
from . import limits
from .fields import (
    FROZEN,
    Integer,
    Number,
    TemperatureUnit,
    Text,
    base_dir,
    file_unit,
    from_file,
    in_range,
    is_number,
)
from .limits import check_range
from .reading import shown


class UnitConfig(BaseModel):
    """``[[units]]``: one reactor, its tags and the plausible range of its temperature."""

    model_config = FROZEN
    name: Text
    temperature_tag: Text
    temperature_unit: TemperatureUnit = "degC"
    assay_tag: Text | None = None
    charge_tag: Text | None = None
    temperature_limits_k: tuple[Number, Number] = Field(
        (173.15, 773.15), validation_alias="temperature_limits"
    )

    @field_validator("temperature_limits_k", mode="before")
    @classmethod
    def _limits_to_kelvin(cls, value: Any, info: ValidationInfo) -> Any:
        if from_file(info) is None:
            return value
        unit = file_unit(info, "temperature_unit")
        if not (isinstance(value, list) and len(value) == 2 and all(map(is_number, value))):
            raise ValueError(f"expected [low, high] in {unit}, got {shown(value)}")
        return tuple(float(to_kelvin(v, unit)) for v in value)

    @field_validator("temperature_limits_k")
    @classmethod
    def _limits_ordered(cls, value: tuple[float, float]) -> tuple[float, float]:
        low, high = value
        check_range(low, "a low limit above absolute zero [K]", 0.0)
        if not low < high:
            raise ValueError(f"expected [low, high] with low < high, got {list(value)!r} [K]")
        return value


class SafetyConfig(BaseModel):
    """``[recipes.NAME.safety]``: the thermal-safety overlay's data, in SI.

    A file gives quantities with their units (``heat_of_reaction = "-85 kJ/mol"``).
    """

    model_config = FROZEN
    heat_of_reaction_j_per_mol: Number = Field(validation_alias="heat_of_reaction")
    heat_capacity_j_per_kg_k: Number = Field(validation_alias="heat_capacity")
    density_kg_per_m3: Number = Field(validation_alias="density")
    mtt_k: Number = Field(validation_alias="mtt")
    t_d24_k: Number = Field(validation_alias="t_d24")
    assessed_class: Annotated[Integer, in_range("a class", *limits.CRITICALITY_CLASSES)] | None = (
        None
    )

    @field_validator(
        "heat_of_reaction_j_per_mol",
        "heat_capacity_j_per_kg_k",
        "density_kg_per_m3",
        "mtt_k",
        "t_d24_k",
        mode="before",
    )
    @classmethod
    def _quantity_to_si(cls, value: Any, info: ValidationInfo) -> Any:
        if from_file(info) is None:
            return value
        si = {"heat_of_reaction_j_per_mol": "J/mol", "heat_capacity_j_per_kg_k": "J/(kg*K)"}
        si |= {"density_kg_per_m3": "kg/m^3", "mtt_k": "K", "t_d24_k": "K"}
        try:
            return parse_quantity(value, si[info.field_name])
        except ConfigError as exc:  # its words only: the key is added where it is reported
            raise ValueError(str(exc)) from None

    @field_validator("heat_of_reaction_j_per_mol")
    @classmethod
    def _exothermic(cls, value: float) -> float:
        if not value < 0:
            raise ValueError(
                f"expected a negative (exothermic) heat of reaction, got {value:g} J/mol; "
                "the overlay assesses runaway of exothermic reactions: leave [safety] out "
                "for an endothermic one"
            )
        return value

    @field_validator("heat_capacity_j_per_kg_k", "density_kg_per_m3")
    @classmethod
    def _positive(cls, value: float) -> float:
        return check_range(value, "a positive quantity", 0.0, low_open=True)

    @field_validator("mtt_k", "t_d24_k")
    @classmethod
    def _plausible_temperature(cls, value: float) -> float:
        return check_range(value, "a temperature [K]", *limits.TEMPERATURE_K)


class RecipeConfig(BaseModel):
    """``[recipes.NAME]``: kinetics, assays, target and plan of one recipe (SI: s, K, mol/L).

    ``temperature_plan`` holds (seconds since start, K); a file writes it as
    ``[[minutes since start, setpoint], ...]`` in ``plan_unit``.
    """

    model_config = FROZEN
    kinetics: Path
    assay_kind: Literal["concentration", "conversion"] = "concentration"
    assay_sd: Number = 0.02
    initial_concentration: (
        Annotated[
            Number,
            in_range(
                "a concentration [mol/L]", 0.0, limits.CONCENTRATION_MAX_MOL_PER_L, low_open=True
            ),
        ]
        | None
    ) = None
    target_conversion: Annotated[
        Number, in_range("a conversion", 0.0, 1.0, low_open=True, high_open=True)
    ] = 0.95
    plan_unit: TemperatureUnit = "degC"
    temperature_plan: tuple[tuple[Number, Number], ...] = ()
    # the recipe's own temperature limits (in plan_unit in a file): outside them a batch is
    # off profile whatever its golden band says
    temperature_limits_k: tuple[Number, Number] | None = Field(
        None, validation_alias="temperature_limits"
    )
    safety: SafetyConfig | None = None
    _name: str = PrivateAttr("")

    @property
    def name(self) -> str:
        """The recipe's name (its key under ``[recipes]``)."""
        return self._name

    @field_validator("kinetics", mode="before")
    @classmethod
    def _kinetics_path(cls, value: Any, info: ValidationInfo) -> Any:
        if not isinstance(value, str | Path) or str(value) == "":
            raise ValueError(f"expected the path of a kinetics file, got {shown(value)}")
        try:
            return (base_dir(info) / value).resolve()
        except (OSError, RuntimeError, ValueError) as exc:  # NUL byte, symlink loop
            raise ValueError(f"cannot use {shown(str(value))} as a path: {exc}") from None

    @field_validator("assay_sd")
    @classmethod
    def _assay_sd(cls, value: float, info: ValidationInfo) -> float:
        if info.data.get("assay_kind") == "conversion":
            return check_range(
                value,
                "a conversion assay's sd (a fraction)",
                0.0,
                1.0,
                low_open=True,
                high_open=True,
            )
        return check_range(value, "a positive assay sd [mol/L]", 0.0, low_open=True)

    @field_validator("temperature_plan", mode="before")
    @classmethod
    def _plan_to_si(cls, value: Any, info: ValidationInfo) -> Any:
        if from_file(info) is None:
            return value
        unit = file_unit(info, "plan_unit")
        if not isinstance(value, list):
            raise ValueError(f"expected [[minutes, setpoint in {unit}], ...], got {shown(value)}")
        plan = []
        for point in value:
            if not (isinstance(point, list) and len(point) == 2 and all(map(is_number, point))):
                raise ValueError(
                    f"expected [[minutes, setpoint in {unit}], ...], got {shown(point)}"
                )
            plan.append((float(point[0]) * 60.0, float(to_kelvin(point[1], unit))))
        return tuple(plan)

    @field_validator("temperature_limits_k", mode="before")
    @classmethod
    def _recipe_limits_to_kelvin(cls, value: Any, info: ValidationInfo) -> Any:
        if from_file(info) is None or value is None:
            return value
        unit = file_unit(info, "plan_unit")
        if not (isinstance(value, list) and len(value) == 2 and all(map(is_number, value))):
            raise ValueError(f"expected [low, high] in {unit}, got {shown(value)}")
        return tuple(float(to_kelvin(v, unit)) for v in value)

    @field_validator("temperature_limits_k")
    @classmethod
    def _recipe_limits_ordered(cls, value: tuple | None) -> tuple | None:
        if value is None:
            return value
        low, high = value
        check_range(low, "a low limit [K]", *limits.TEMPERATURE_K)
        check_range(high, "a high limit [K]", *limits.TEMPERATURE_K)
        if not low < high:
            raise ValueError(f"expected [low, high] with low < high, got {list(value)!r} [K]")
        return value

    @field_validator("temperature_plan")
    @classmethod
    def _plan_plausible(cls, plan: tuple) -> tuple:
        for i, (t_s, T_K) in enumerate(plan):
            check_range(t_s, f"point {i}'s time since start [s]", 0.0)
            check_range(T_K, f"point {i}'s setpoint [K]", *limits.TEMPERATURE_K)
            if i and t_s < plan[i - 1][0]:
                raise ValueError(f"expected times that do not decrease; point {i} goes back")
        return plan
