"""The invented sample plant: site, units, recipes, schedule rules and planted faults.

Everything in this module is invented for the demo and the tests. The numbers
are chosen to look like a small multi-purpose batch plant, not taken from any
real site. The tool that reads this data is advisory only; it is not a safety
or control system, and neither is this generator.
"""

from __future__ import annotations

from dataclasses import dataclass

R_GAS = 8.314462618  # molar gas constant [J/(mol*K)], CODATA 2018 (exact since the 2019 SI)
ZERO_CELSIUS_K = 273.15

OPC_GOOD = 0x00000000  # OPC UA status code severity bits (OPC 10000-4, StatusCode)
OPC_UNCERTAIN = 0x40000000
OPC_BAD = 0x80000000

SITE_NAME = "Tessel Works of Brindlemoor Fine Chemicals (invented)"
SITE_TIMEZONE = "Europe/Berlin"  # the shift pattern is local; the export itself is UTC
HISTORY_START = "2026-10-05T06:00:00+00:00"  # a Monday
DEFAULT_DAYS = 28
EXPORT_END_OFFSET_S = 5 * 3600 + 41 * 60 + 17  # the export stops at an odd time of day
BATCH_ID_PREFIX = "TW26-"


@dataclass(frozen=True)
class Recipe:
    """A recipe as the generator knows it (the truth, not what the plant believes)."""

    name: str
    description: str
    rate_law: str  # "power" | "bimolecular"
    k_ref: float  # rate constant at t_ref_k [s^-1 (L/mol)^(order-1)]
    t_ref_k: float  # reference temperature [K]
    ea_j_per_mol: float  # activation energy [J/mol]
    c_a0_nominal: float  # initial concentration of A [mol/L]
    c_a0_rel_sd: float  # batch-to-batch spread of the charge [-], clipped at +-C_A0_REL_CLIP
    assay_kind: str  # "concentration" of A [mol/L] | "conversion" [-]
    assay_sd: float  # one-sigma lab error, in assay units
    assay_decimals: int  # the lab reports this many decimals
    target_conversion: float  # operators discharge once an assay shows this [-]
    plan: tuple[tuple[float, float], ...]  # (minutes since start, setpoint [degC]); last holds
    activity_sd: float  # sigma of ln(activity) between batches [-]
    order: float = 1.0  # power law only
    theta_b: float | None = None  # bimolecular only: C_B0 / C_A0 [-]
    b: float | None = None  # bimolecular only: mol B per mol A [-]


@dataclass(frozen=True)
class Unit:
    """One reactor and its historian tags."""

    name: str  # ISA-88 unit name, e.g. "R-101"
    tag_prefix: str  # tags are PREFIX.TT, PREFIX.ASSAY, PREFIX.CA0
    volume_m3: float  # working volume, for the README only [m^3]
    period_s: float  # temperature sampling period [s]
    phase_s: float  # offset of the sampling grid from the history start [s]
    lag_tau_s: float  # first-order lag of contents to setpoint while running [s]
    idle_tau_s: float  # lag to ambient while idle (jacket on tempered water) [s]
    noise_sd_k: float  # temperature sensor noise, one sigma [K]
    ambient_degc: float  # idle setpoint [degC]
    campaigns: tuple[tuple[float, str], ...]  # (fraction of history from which, recipe)
    running_at_end: bool  # the export stops while this unit runs a batch

    @property
    def temperature_tag(self) -> str:
        return f"{self.tag_prefix}.TT"

    @property
    def assay_tag(self) -> str:
        return f"{self.tag_prefix}.ASSAY"

    @property
    def charge_tag(self) -> str:
        return f"{self.tag_prefix}.CA0"

    def recipe_at(self, fraction: float) -> str:
        """The recipe in campaign at ``fraction`` of the history (0 = start, 1 = export end)."""
        name = self.campaigns[0][1]
        for since, recipe in self.campaigns:
            if fraction >= since:
                name = recipe
        return name


RECIPES: dict[str, Recipe] = {
    "DIM-7": Recipe(
        name="DIM-7",
        description=(
            "catalysed dimerisation of the (invented) unsaturated ester tesselate, 2 A -> A2, "
            "in toluene; second order in A"
        ),
        rate_law="power",
        order=2.0,
        k_ref=5.6e-4,
        t_ref_k=343.15,
        ea_j_per_mol=72_000.0,
        c_a0_nominal=1.60,
        c_a0_rel_sd=0.025,
        assay_kind="concentration",
        assay_sd=0.02,
        assay_decimals=3,
        target_conversion=0.95,
        plan=((0.0, 30.0), (50.0, 70.0), (240.0, 70.0), (270.0, 76.0)),
        activity_sd=0.06,
    ),
    "CPL-3": Recipe(
        name="CPL-3",
        description=(
            "coupling of the (invented) anhydride brindane A with the amine B, A + B -> P, "
            "20 % excess of B; first order in each"
        ),
        rate_law="bimolecular",
        theta_b=1.2,
        b=1.0,
        k_ref=3.0e-4,
        t_ref_k=328.15,
        ea_j_per_mol=58_000.0,
        c_a0_nominal=1.25,
        c_a0_rel_sd=0.025,
        assay_kind="conversion",
        assay_sd=0.01,
        assay_decimals=3,
        target_conversion=0.96,
        plan=((0.0, 25.0), (40.0, 55.0), (180.0, 55.0), (200.0, 62.0)),
        activity_sd=0.06,
    ),
}

UNITS: tuple[Unit, ...] = (
    Unit(
        name="R-101",
        tag_prefix="R101",
        volume_m3=6.3,
        period_s=5.0,
        phase_s=0.0,
        lag_tau_s=540.0,
        idle_tau_s=1500.0,
        noise_sd_k=0.15,
        ambient_degc=19.5,
        campaigns=((0.0, "DIM-7"),),
        running_at_end=True,
    ),
    Unit(
        name="R-102",
        tag_prefix="R102",
        volume_m3=4.0,
        period_s=10.0,
        phase_s=3.0,
        lag_tau_s=720.0,
        idle_tau_s=1800.0,
        noise_sd_k=0.20,
        ambient_degc=21.0,
        campaigns=((0.0, "CPL-3"), (0.5, "DIM-7")),
        running_at_end=False,
    ),
    Unit(
        name="R-103",
        tag_prefix="R103",
        volume_m3=2.5,
        period_s=15.0,
        phase_s=7.0,
        lag_tau_s=420.0,
        idle_tau_s=1200.0,
        noise_sd_k=0.25,
        ambient_degc=20.5,
        campaigns=((0.0, "CPL-3"),),
        running_at_end=True,
    ),
)

# --- how the operators work (all invented, "common practice"-like) -------------------------
C_A0_REL_CLIP = 0.06  # the charge never misses nominal by more than this [-]
CHARGE_DAYS = (0, 1, 2, 3, 4, 5)  # Monday..Saturday (local); no charging on Sunday
CHARGE_WINDOW_LOCAL_H = (6.0, 15.0)  # a batch is charged between these local hours
CHARGE_DELAY_MAX_S = 3 * 3600  # after the window opens or the unit is free, up to this late
SKIP_DAY_PROBABILITY = 0.12  # no feed, other work: the unit waits a day
TURNAROUND_S = (2 * 3600, 4 * 3600)  # cleaning and preparation after a discharge
CHARGE_ENTRY_DELAY_S = (60, 300)  # the charge record reaches the historian this late
FIRST_ASSAY_MIN = (30, 60)  # first lab sample this many minutes after start
ASSAY_INTERVAL_MIN = (30, 60)  # then every this many minutes
ASSAY_DELAY_MIN = (20, 60)  # the result is in the historian this long after sampling
DISCHARGE_DELAY_MIN = (15, 45)  # from seeing a passing assay to the end event
MAX_BATCH_S = 14 * 3600  # no batch may take longer (a check on the scenario)
FINAL_START_BEFORE_END_H = (1.5, 4.0)  # running batches started this long before the export end
SIM_HORIZON_S = 18 * 3600  # the true kinetics are integrated this far past each start

# --- drift and faults planted on purpose ----------------------------------------------------
DRIFT_RECIPE = "DIM-7"
DRIFT_FACTOR_PER_BATCH = 0.975  # activity multiplies by this for every batch after the onset
DRIFT_SPAN_DAYS = 10.0  # onset this long before the export end (at most 40 % of the history)
SPIKE_FRACTION = 4e-4  # of temperature samples: bad quality, value far off
NAN_PER_UNIT = 6  # temperature samples with no value (NaN -> NULL in SQLite), bad quality
UNCERTAIN_FRACTION = 5e-4  # sporadic uncertain-quality temperature samples
JITTER_MS = 40  # temperature timestamps wander this much around the grid [ms]
OUTLIER_SIGMA = 10.0  # the gross lab error, in assay sd (reads as less converted)
