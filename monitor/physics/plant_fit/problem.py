"""The joint fit's data: each series' trace and assays, and Θ at every assay for any Ea.

A `FitSeries` is one batch (or lab run) as given; a `Problem` is all of them prepared
once: traces cleaned, sorted and cut at the last assay, assays located in their trace
intervals, and the Gauss-Legendre nodes of every interval laid out so that Θ and
``S1 = dΘ/dEa`` at all assays cost one ``exp`` over the nodes (`Problem.theta`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..arrhenius import R_J_PER_MOL_K
from ..quadrature import GL_NODES, GL_WEIGHTS, split_cells  # the same quadrature as Θ
from .diagnostics import FitWarning, WarningKind

#: Quadrature cells are planned for Ea up to this [J/mol]: finer than any smaller Ea needs.
EA_PLAN_J_PER_MOL = 300e3
#: Assays this far past the last temperature sample are said to hold its value [s].
HELD_TRACE_WARNING_S = 300.0


@dataclass
class FitSeries:
    """One batch (or one lab run) for the joint fit.

    Times may be epoch seconds or seconds since the start, consistently; Θ is zero
    at ``start_s`` (default the first trace sample). The trace is taken piecewise
    linear and held at its last value if an assay lies beyond it.
    """

    name: str
    t_s: np.ndarray  # temperature sample times [s]
    T_K: np.ndarray  # temperatures [K]
    c_a0: float  # initial concentration of A [mol/L]
    assay_t_s: np.ndarray  # assay sample times [s]
    assay_value: np.ndarray  # [mol/L] ("concentration") or [-] ("conversion")
    assay_kind: str = "concentration"
    assay_sd: float | np.ndarray = 0.02  # one-sigma assay error [assay units]
    start_s: float | None = None


@dataclass
class _Prepared:
    """One series after preparation: its trace from the start and its usable assays."""

    t: np.ndarray  # trace times since the start [s]
    T: np.ndarray  # [K]
    obs: np.ndarray
    sd: np.ndarray
    t_rel: np.ndarray  # assay times since the start [s]
    interval: np.ndarray  # trace interval of each assay
    weight: np.ndarray  # its linear position within that interval [-]


def _prepare(s: FitSeries, warnings: list) -> _Prepared | None:
    """Clean, sort and cut one series' trace; locate its usable assays (None: none)."""
    t = np.asarray(s.t_s, dtype=float)
    T = np.asarray(s.T_K, dtype=float)
    good = np.isfinite(t) & np.isfinite(T)
    t, T = t[good], T[good]
    t, first = np.unique(t, return_index=True)  # sorted, the first of equal times
    T = T[first]
    ta = np.asarray(s.assay_t_s, dtype=float)
    ya = np.asarray(s.assay_value, dtype=float)
    sa = np.broadcast_to(np.asarray(s.assay_sd, dtype=float), ta.shape)
    start = float(t[0]) if s.start_s is None and len(t) else float(s.start_s or 0.0)
    use = np.isfinite(ya) & np.isfinite(ta) & (ta >= start) & (sa > 0)
    if not len(t) or not use.any() or t[-1] < start:
        warnings.append(
            FitWarning(
                WarningKind.SERIES_LEFT_OUT,
                f"{s.name}: no temperature samples or no usable assays; left out",
                {"series": s.name},
            )
        )
        return None
    if s.assay_kind not in ("concentration", "conversion"):
        raise ValueError(f"{s.name}: assay_kind must be 'concentration' or 'conversion'")
    ta, ya, sa = ta[use], ya[use], sa[use]
    t = t - start
    keep = t >= 0
    t, T = t[keep], T[keep]
    if t[0] > 0:  # the trace starts late: hold its first value back to the start
        t, T = np.concatenate([[0.0], t]), np.concatenate([[T[0]], T])
    last = float(ta.max() - start)
    if last > t[-1]:
        if last - t[-1] > HELD_TRACE_WARNING_S:
            warnings.append(
                FitWarning(
                    WarningKind.TRACE_HELD,
                    f"{s.name}: assays run {(last - t[-1]) / 60:.0f} min past "
                    "the last temperature sample; its last value is held",
                    {"series": s.name, "held_s": float(last - t[-1])},
                )
            )
        t, T = np.concatenate([t, [last]]), np.concatenate([T, [T[-1]]])
    if len(t) < 2:  # a single sample: hold it over one second
        t, T = np.array([0.0, max(last, 1.0)]), np.array([T[0], T[0]])
    n_keep = int(np.searchsorted(t, last, side="left")) + 1
    t, T = t[: max(n_keep, 2)], T[: max(n_keep, 2)]
    rel = ta - start
    i = np.clip(np.searchsorted(t, rel, side="right") - 1, 0, len(t) - 2)
    w = np.clip((rel - t[i]) / (t[i + 1] - t[i]), 0.0, 1.0)
    return _Prepared(t, T, ya, sa, rel, i, w)


class Problem:
    """The prepared data: per-series traces and assay interpolation weights.

    Assays of all series are concatenated in series order; ``bidx`` says whose each
    is. Series with nothing usable are left out with a `WarningKind.SERIES_LEFT_OUT`
    warning appended to ``warnings``.
    """

    def __init__(self, series: Sequence[FitSeries], warnings: list):
        self.names: list[str] = []
        self.traces: list[tuple[np.ndarray, np.ndarray]] = []
        kept: list[tuple[FitSeries, _Prepared]] = []
        for s in series:
            prepared = _prepare(s, warnings)
            if prepared is not None:
                self.names.append(s.name)
                self.traces.append((prepared.t, prepared.T))
                kept.append((s, prepared))
        if not self.names:
            raise ValueError("no series with temperature samples and usable assays")
        cat = np.concatenate
        self.obs = cat([p.obs for _, p in kept])
        self.sd = cat([p.sd for _, p in kept])
        self.conc = cat([np.full(len(p.obs), s.assay_kind == "concentration") for s, p in kept])
        self.c0 = cat([np.full(len(p.obs), float(s.c_a0)) for s, p in kept])
        self.bidx = cat([np.full(len(p.obs), b) for b, (_, p) in enumerate(kept)]).astype(int)
        self.t_rel = cat([p.t_rel for _, p in kept])
        self._idx = [p.interval for _, p in kept]
        self._frac = [p.weight for _, p in kept]
        self._node_ref: float | None = None
        self._node_data: tuple | None = None
        self.c0_series = np.array([float(s.c_a0) for s, _ in kept])
        self.n_series = len(self.names)
        self.counts = np.array([len(p.obs) for _, p in kept])

    def _nodes(self, t_ref_k: float) -> tuple:
        """Quadrature nodes of every trace interval, fixed for a given ``T_ref``.

        The cells are those of `monitor.physics.quadrature.segment_integrals` planned
        for the largest Ea the fit considers (`EA_PLAN_J_PER_MOL`), so for any smaller
        Ea they are at least as fine; one evaluation is then a single ``exp`` over all
        nodes.
        """
        if self._node_ref == t_ref_k:
            return self._node_data
        G, half, starts, first, n_int = [], [], [], [], 0
        n_cells = 0
        for t, T in self.traces:
            a, b, Ta, Tb, split = split_cells(
                t[:-1], t[1:], T[:-1], T[1:], EA_PLAN_J_PER_MOL, t_ref_k
            )
            Tn = (Ta + Tb)[:, None] / 2.0 + ((Tb - Ta) / 2.0)[:, None] * GL_NODES[None, :]
            G.append(-(1.0 / Tn - 1.0 / t_ref_k) / R_J_PER_MOL_K)
            half.append((b - a) / 2.0)
            cell_owner = np.arange(len(t) - 1) if split is None else split[0]
            # index of each interval's first cell (cells of one interval are contiguous)
            starts.append(n_cells + np.flatnonzero(np.r_[True, np.diff(cell_owner) != 0]))
            first.append(n_int)
            n_cells += len(a)
            n_int += len(t) - 1
        first = np.array(first)
        gi = np.concatenate([i + f for i, f in zip(self._idx, first, strict=True)])
        self._node_data = (
            np.vstack(G),
            np.concatenate(half),
            np.concatenate(starts),
            first[self.bidx],
            gi,
            np.concatenate(self._frac),
        )
        self._node_ref = t_ref_k
        return self._node_data

    def theta(self, ea_j_per_mol: float, t_ref_k: float) -> tuple[np.ndarray, np.ndarray]:
        """``Theta`` [s] and ``S1 = dTheta/dEa`` [s mol/J] at every assay.

        Θ is linear between trace samples, as `monitor.physics.theta.ThetaTrace.at`.
        """
        G, half, starts, first, gi, frac = self._nodes(t_ref_k)
        E = np.exp(ea_j_per_mol * G)
        th = np.add.reduceat(half * (E @ GL_WEIGHTS), starts)
        s1 = np.add.reduceat(half * ((E * G) @ GL_WEIGHTS), starts)
        cth = np.concatenate([[0.0], np.cumsum(th)])
        cs1 = np.concatenate([[0.0], np.cumsum(s1)])
        return (cth[gi] - cth[first] + frac * th[gi], cs1[gi] - cs1[first] + frac * s1[gi])

    def last_assays(self) -> np.ndarray:
        """Index (into the concatenated assays) of each series' latest assay."""
        return np.array(
            [
                np.flatnonzero(self.bidx == b)[np.argmax(self.t_rel[self.bidx == b])]
                for b in range(self.n_series)
            ]
        )

    def mean_inverse_temperature(self, ea_j_per_mol: float, t_ref_k: float) -> float:
        """Θ-weighted mean of 1/T over each series up to its last assay [1/K]."""
        th, s1 = self.theta(ea_j_per_mol, t_ref_k)
        last = self.last_assays()
        # mean of g = -(1/T - 1/T_ref)/R over a window is S1/Theta
        return float(1.0 / t_ref_k - R_J_PER_MOL_K * np.sum(s1[last]) / np.sum(th[last]))

    def effective_temperatures(self, ea_j_per_mol: float, t_ref_k: float) -> np.ndarray:
        """Per assay, the Θ-weighted harmonic mean temperature of its window [K]."""
        th, s1 = self.theta(ea_j_per_mol, t_ref_k)
        ok = th > 0
        out = np.full(len(th), np.nan)
        out[ok] = 1.0 / (1.0 / t_ref_k - R_J_PER_MOL_K * s1[ok] / th[ok])
        return out

    def observed_conversion(self) -> tuple[np.ndarray, np.ndarray]:
        """The assays as conversion [-] and their one-sigma errors [-]."""
        x = np.where(self.conc, 1.0 - self.obs / self.c0, self.obs)
        sd_x = np.where(self.conc, self.sd / self.c0, self.sd)
        return x, sd_x


__all__ = ["EA_PLAN_J_PER_MOL", "FitSeries", "Problem"]
