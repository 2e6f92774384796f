"""One batch's state: its temperature trace (as running integrals) and its assays.

Updating costs O(new samples). The state knows nothing of databases or clocks.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import DataQualityError
from ..physics.arrhenius import R_J_PER_MOL_K, arrhenius_factor, equilibrium_constant
from ..physics.reversible import refine_trace, reversible_segments, step_reversible
from ..physics.theta import ThetaTrace
from .kinetics import Kinetics


@dataclass(frozen=True)
class RecipeModel:
    """What the estimator needs of a recipe (SI: s, K, mol/L)."""

    name: str
    kinetics: Kinetics
    target_conversion: float = 0.95
    assay_kind: str = "concentration"
    assay_sd: float = 0.02
    initial_concentration: float | None = None
    temperature_plan: tuple = ()

    @classmethod
    def from_config(cls, recipe, kinetics: Kinetics) -> RecipeModel:
        return cls(
            recipe.name,
            kinetics,
            recipe.target_conversion,
            recipe.assay_kind,
            recipe.assay_sd,
            recipe.initial_concentration,
            recipe.temperature_plan,
        )


@dataclass
class BatchState:
    """A running (or finished) batch as the estimator sees it."""

    batch: str
    unit: str
    recipe: RecipeModel
    start_s: float
    c_a0: float
    end_s: float | None = None
    charge_from_tag: bool = True
    max_gap_s: float = 300.0
    trace: ThetaTrace = field(init=False)
    assay_t_s: np.ndarray = field(default_factory=lambda: np.empty(0))
    assay_value: np.ndarray = field(default_factory=lambda: np.empty(0))
    # reversible law only: X on a fixed grid of ln(activity), at each trace sample
    posterior_cache: tuple | None = field(default=None, repr=False)
    phi_grid: np.ndarray = field(default_factory=lambda: np.empty(0))
    x_grid: np.ndarray = field(default_factory=lambda: np.empty((0, 0)))

    def __post_init__(self):
        kin = self.recipe.kinetics
        self.trace = ThetaTrace(kin.ea_j_per_mol, kin.t_ref_k, max_gap_s=self.max_gap_s)
        if not kin.law.separable:
            sd = prior_sd(kin)
            half = max(12.0 * sd, 1.5)  # as wide as the posterior grid (t prior)
            self.phi_grid = np.linspace(-half, half, 241)
            self.x_grid = np.zeros((0, len(self.phi_grid)))

    @property
    def kinetics(self) -> Kinetics:
        return self.recipe.kinetics

    def add_temperature(self, t_s, T_K) -> None:
        """Add temperature samples [s], [K] (samples before the start are ignored)."""
        t_s = np.asarray(t_s, dtype=float)
        if (
            len(self.trace)
            and 0 < len(t_s) <= 32
            and self.kinetics.law.separable
            and (self.end_s is None or t_s[-1] <= self.end_s)
            and self.trace._append_few(t_s.tolist(), np.asarray(T_K, float).tolist())
        ):
            return  # the usual poll: samples after the last, inside the window
        keep = t_s >= self.start_s
        if self.end_s is not None:
            keep &= t_s <= self.end_s
        i0 = self.trace.extend(t_s[keep], np.asarray(T_K, dtype=float)[keep])
        if not self.kinetics.law.separable:
            self._advance_reversible(i0)

    def _advance_reversible(self, i0: int) -> None:
        """X on the activity grid from sample ``i0`` (unchanged) to the end of the trace."""
        tr, kin, law = self.trace, self.kinetics, self.kinetics.law
        n = len(tr)
        if n == 0:
            return
        i0 = min(i0, len(self.x_grid) - 1) if len(self.x_grid) else 0
        x0 = self.x_grid[i0] if len(self.x_grid) else np.zeros(len(self.phi_grid))
        # long intervals (gaps, coarse traces) are cut: the step freezes X* per interval
        scale = max(abs(kin.ea_j_per_mol), abs(law.dh_rxn_j_per_mol), 1.0)
        t_f, T_f, at = refine_trace(tr.t_s[i0:n], tr.T_K[i0:n], scale, kin.t_ref_k)
        C, A = self.reversible_coefficients(t_f, T_f)
        steps = step_reversible(x0, np.exp(self.phi_grid), C, A)[at[1:] - 1]
        self.x_grid = np.vstack([self.x_grid[:i0], x0[None, :], steps])

    def reversible_coefficients(self, t_s, T_K):
        """`reversible_segments` with this batch's kinetics, over a trace [s], [K]."""
        kin, law = self.kinetics, self.kinetics.law
        return reversible_segments(
            t_s,
            T_K,
            kin.ea_j_per_mol,
            kin.t_ref_k,
            kin.k_ref,
            law.k_eq_ref,
            law.dh_rxn_j_per_mol,
            law.theta_r,
        )

    def add_assays(self, t_s, values) -> None:
        """Add assays at their sample times [s] (any arrival order; a repeat replaces)."""
        t = np.concatenate([self.assay_t_s, np.asarray(t_s, dtype=float)])
        v = np.concatenate([self.assay_value, np.asarray(values, dtype=float)])
        keep = t >= self.start_s
        if self.end_s is not None:
            keep &= t <= self.end_s
        t, v = t[keep], v[keep]
        order = np.argsort(t, kind="stable")
        t, v = t[order], v[order]
        last = np.concatenate([np.diff(t) > 0, [True]])[: len(t)]  # latest value for a time wins
        self.assay_t_s, self.assay_value = t[last], v[last]

    # ---- model read-outs
    def moments_at(self, t_s):
        """``(Theta, S1, S2)`` at times, holding the last temperature after the last sample."""
        tr = self.trace
        t_s = np.asarray(t_s, dtype=float)
        n = len(tr)
        if n == 0:
            z = np.zeros_like(t_s)
            return z, z, z
        ts = tr.t_s[:n]
        th, s1, s2 = (np.interp(t_s, ts, arr[:n]) for arr in (tr.theta, tr.s1, tr.s2))
        after = t_s > ts[-1]
        if np.any(after):
            kin = self.kinetics
            T_last = tr.T_K[n - 1]
            f = arrhenius_factor(T_last, kin.ea_j_per_mol, kin.t_ref_k)
            g = -(1.0 / T_last - 1.0 / kin.t_ref_k) / R_J_PER_MOL_K
            dt = np.where(after, t_s - ts[-1], 0.0) * f
            th, s1, s2 = th + dt, s1 + dt * g, s2 + dt * g * g
        return th, s1, s2

    def theta_at(self, t_s) -> np.ndarray:
        """``Theta`` [s] at times, holding the last temperature after the last sample."""
        return self.moments_at(t_s)[0]

    def rate_scale(self) -> float:
        """``k_ref * s(C_A0)``: multiplies ``alpha * Theta`` to give ``G(X)`` [-/s]."""
        kin = self.kinetics
        return kin.k_ref * kin.law.scale(self.c_a0)

    def conversion_now(self, alpha: float = 1.0) -> float:
        """Model conversion at the last temperature sample for activity ``alpha`` [-]."""
        tr = self.trace
        theta = float(tr.theta[len(tr) - 1]) if len(tr) else 0.0
        law = self.kinetics.law
        if law.separable:
            return float(law.G_inv(float(alpha) * self.rate_scale() * theta))
        return float(self._reversible_at([tr.last_t_s], alpha)[0, 0])

    def conversion_at(self, t_s, alpha: float | np.ndarray = 1.0):
        """Model conversion at times for activity ``alpha`` (arrays broadcast) [-]."""
        law = self.kinetics.law
        if law.separable:
            return law.G_inv(np.multiply.outer(alpha, self.theta_at(t_s)) * self.rate_scale())
        return self._reversible_at(t_s, alpha)

    def _reversible_at(self, t_s, alpha):
        """X (len(alpha) x len(t)) from the activity grid; T held after the last sample."""
        tr = self.trace
        n = len(tr)
        t_s = np.atleast_1d(np.asarray(t_s, dtype=float))
        phi = np.log(np.atleast_1d(np.asarray(alpha, dtype=float)))
        if n == 0:
            return np.zeros((len(phi), len(t_s)))
        ts = tr.t_s[:n]
        nodes = np.empty((len(t_s), len(self.phi_grid)))
        for j, t in enumerate(t_s):
            if t <= ts[-1]:
                i = int(np.clip(np.searchsorted(ts, t, side="right") - 1, 0, max(n - 2, 0)))
                frac = 0.0 if n < 2 else (t - ts[i]) / (ts[i + 1] - ts[i])
                hi = self.x_grid[min(i + 1, n - 1)]
                nodes[j] = self.x_grid[i] + np.clip(frac, 0.0, 1.0) * (hi - self.x_grid[i])
            else:
                C, A = self.reversible_coefficients([ts[-1], t], [tr.T_K[n - 1]] * 2)
                nodes[j] = step_reversible(self.x_grid[-1], np.exp(self.phi_grid), C, A)[-1]
        return np.stack([np.interp(phi, self.phi_grid, nodes[j]) for j in range(len(t_s))], axis=1)

    def equilibrium_conversion(self, T_K) -> float:
        law, kin = self.kinetics.law, self.kinetics
        return float(
            law.x_eq(equilibrium_constant(T_K, law.k_eq_ref, law.dh_rxn_j_per_mol, kin.t_ref_k))
        )

    def predict_assays(self, phi: np.ndarray, t_s: np.ndarray) -> np.ndarray:
        """Predicted assays (m phi values x n times) in assay units."""
        X = self.conversion_at(t_s, np.exp(phi))
        if self.recipe.assay_kind == "conversion":
            return X
        return self.c_a0 * (1.0 - X)


def prior_sd(kin: Kinetics) -> float:
    """Prior sd of ``ln alpha``: batch-to-batch spread plus the ``ln k_ref`` uncertainty."""
    return float(np.hypot(max(kin.activity_sd, 1e-3), kin.stderr_k_ref / kin.k_ref))


def state_from_data(data, model: RecipeModel, max_gap_s: float = 300.0) -> BatchState:
    """A batch state from what the historian reader delivered (a ``BatchData``).

    The initial concentration is the charge tag's value when it is positive, else the
    recipe's ``initial_concentration``.
    """
    b = data.batch
    c_a0, from_tag = data.charge, True
    if c_a0 is None or not c_a0 > 0:
        c_a0, from_tag = model.initial_concentration, False
    if c_a0 is None:
        raise DataQualityError(
            f"batch {b.batch}: no charge sample and no recipes.{b.recipe}.initial_concentration"
        )
    state = BatchState(
        b.batch,
        b.unit,
        model,
        b.start_s,
        float(c_a0),
        end_s=b.end_s,
        charge_from_tag=from_tag,
        max_gap_s=max_gap_s,
    )
    state.add_temperature(data.temperature.t_s, data.temperature.value)
    state.add_assays(data.assays.t_s, data.assays.value)
    return state
