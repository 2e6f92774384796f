"""The forecast of one batch's end time: Monte Carlo along the temperature plan.

The forecast follows DESIGN.md: the future temperature is the recipe's plan
(relative to the batch start; blended from the last measured value), else the
last measured value held. Monte Carlo draws of ``ln alpha`` (from its
posterior) and of ``Ea`` and the order (from the kinetics file's standard
errors) give P10/P50/P90 end times. With assays, each draw is *anchored* so it
still passes through what the assays saw: a different ``Ea`` changes the
extrapolation away from the assays, not the fit to them.
"""

from __future__ import annotations

import numpy as np

from ..physics.quadrature import segment_integrals
from ..physics.rate_laws import power_G, power_G_inv
from ..physics.reversible import step_reversible
from ..physics.theta import plan_temperature
from .posterior import ActivityPosterior
from .settings import EstimatorSettings
from .state import BatchState

PLAN_BLEND_S = 600.0  # the reactor is taken to rejoin its plan over ten minutes
FORECAST_STEP_S = 60.0


def _future_profile(state: BatchState, at_s: float, horizon_s: float):
    """Times and temperatures [s], [K] from ``at_s`` to the horizon."""
    tr = state.trace
    n = len(tr)
    T_now = float(tr.T_K[n - 1])
    grid = np.arange(at_s, at_s + horizon_s + FORECAST_STEP_S, FORECAST_STEP_S)
    plan = state.recipe.temperature_plan
    if not plan:
        return grid, np.full_like(grid, T_now)
    planned = plan_temperature(plan, state.start_s, grid)
    blend = np.clip((grid - at_s) / PLAN_BLEND_S, 0.0, 1.0)
    return grid, T_now + blend * (planned - T_now)


def _timeline(state: BatchState, at_s: float, horizon_s: float, include_past: bool = True):
    """Measured trace up to ``at_s`` (held after the last sample) joined to the forecast.

    Without ``include_past`` only the last measured sample starts the timeline: enough
    when no draw has reached the target yet, and O(horizon) instead of O(batch).
    """
    tr, kin = state.trace, state.kinetics
    n = int(np.searchsorted(tr.t_s[: len(tr)], at_s, side="right"))
    first = 0 if include_past else n - 1
    t_m, T_m = tr.t_s[first:n], tr.T_K[first:n]
    th, s1, s2 = tr.theta[first:n], tr.s1[first:n], tr.s2[first:n]
    t_f, T_f = _future_profile(state, at_s, horizon_s)
    t_link = np.concatenate([[t_m[-1]], t_f])
    T_link = np.concatenate([[T_m[-1]], T_f])
    a, b, c = segment_integrals(t_link, T_link, kin.ea_j_per_mol, kin.t_ref_k)
    t = np.concatenate([t_m, t_f])
    theta = np.concatenate([th, th[-1] + np.cumsum(a)])
    S1 = np.concatenate([s1, s1[-1] + np.cumsum(b)])
    S2 = np.concatenate([s2, s2[-1] + np.cumsum(c)])
    T = np.concatenate([T_m, T_f])
    keep = np.concatenate([[True], np.diff(t) > 0])
    return t[keep], T[keep], theta[keep], S1[keep], S2[keep], n


def _log_profile(theta, S1, S2):
    with np.errstate(divide="ignore", invalid="ignore"):
        ln_th = np.log(theta)
        m1 = np.where(theta > 0, S1 / theta, 0.0)
        v = np.where(theta > 0, S2 / theta - m1**2, 0.0)
    return ln_th, m1, np.maximum(v, 0.0)


def _first_crossing(level_fn, target, n_points: int):
    """Vectorised bisection for the first index where ``level_fn(idx) >= target``.

    ``level_fn`` maps index arrays (one per draw) to levels; assumed non-decreasing.
    Returns the index (``n_points`` where never reached).
    """
    lo = np.zeros(len(target), dtype=int)
    hi = np.full(len(target), n_points - 1)
    reached = level_fn(hi) >= target
    while True:
        active = (hi - lo) > 1
        if not np.any(active):
            break
        mid = (lo + hi) // 2
        up = level_fn(mid) >= target
        hi = np.where(active & up, mid, hi)
        lo = np.where(active & ~up, mid, lo)
    first_ok = level_fn(lo) >= target
    idx = np.where(first_ok, lo, hi)
    return np.where(reached, idx, n_points)


def _draws(state: BatchState, post: ActivityPosterior, settings: EstimatorSettings):
    kin = state.kinetics
    rng = np.random.default_rng(settings.seed)
    n = settings.monte_carlo_draws
    u = (rng.permutation(n) + rng.random(n)) / n  # stratified: smooth quantiles
    phi = post.sample(u)
    cov = kin.parameter_cov()[1:, 1:]  # Ea and order; ln k_ref is inside the prior of alpha
    if not kin.law.separable or kin.rate_law != "power" or kin.epsilon:
        cov = cov.copy()
        cov[1, :] = cov[:, 1] = 0.0
    if np.any(np.diag(cov) > 0):
        d = rng.multivariate_normal(np.zeros(2), cov, size=n, method="eigh")
    else:
        d = np.zeros((n, 2))
    return phi, d[:, 0], d[:, 1], rng


def forecast_separable(state, at_s, post, settings):
    kin, law = state.kinetics, state.kinetics.law
    horizon_s = settings.horizon_h * 3600.0
    prof: dict = {}

    def build(include_past: bool) -> None:
        t, _T, theta, S1, S2, _ = _timeline(state, at_s, horizon_s, include_past)
        ln_th, m1, v = _log_profile(theta, S1, S2)
        prof.update(t=t, theta=theta, ln_th=ln_th, m1=m1, v=v)

    build(include_past=False)
    phi, d_ea, d_n, rng = _draws(state, post, settings)
    gap_var = state.trace.gap_log_variance(min(at_s, state.trace.last_t_s))
    eps = rng.normal(0.0, np.sqrt(gap_var), len(phi)) if gap_var > 0 else np.zeros(len(phi))
    th_now = float(np.interp(at_s, prof["t"], prof["theta"]))

    def level(idx):  # ln Theta_j(t[idx]) per draw
        base = prof["ln_th"][idx] + d_ea * prof["m1"][idx] + 0.5 * d_ea**2 * prof["v"][idx]
        past = np.minimum(1.0, th_now / np.maximum(prof["theta"][idx], 1e-300))
        return base + eps * past

    order = kin.order + d_n
    if kin.rate_law == "power" and not kin.epsilon:
        G = lambda X: power_G(X, order)  # noqa: E731
        G_inv = lambda y: power_G_inv(y, order)  # noqa: E731
        scale = kin.k_ref * state.c_a0 ** (order - 1.0)
    else:
        G, G_inv, scale = law.G, law.G_inv, state.rate_scale()
    if post.used.any():
        # anchor each draw at the information-weighted assay point
        w = post.fisher / post.fisher.sum() if post.fisher.sum() > 0 else None
        t_used = state.assay_t_s[state.assay_t_s <= at_s][post.used]
        w = w[post.used] if w is not None else np.full(len(t_used), 1 / len(t_used))
        th_a, s1_a, s2_a = state.moments_at(t_used)
        ln_a = np.log(np.maximum(th_a, 1e-300)) @ w
        _, m1_a, v_a = _log_profile(th_a, s1_a, s2_a)
        m1_a, v_a = m1_a @ w, v_a @ w
        X_a = law.G_inv(np.exp(phi) * state.rate_scale() * np.exp(ln_a))
        ln_c = np.log(np.maximum(G(X_a), 1e-300)) - (ln_a + d_ea * m1_a + 0.5 * d_ea**2 * v_a)
    else:
        ln_c = phi + np.log(scale)
    i_now = min(int(np.searchsorted(prof["t"], at_s, side="left")), len(prof["t"]) - 1)
    X_now = G_inv(np.exp(ln_c + level(np.full(len(phi), i_now))))
    target = state.recipe.target_conversion
    if np.any(X_now >= target):
        build(include_past=True)  # some draws crossed before now: search the whole trace
    t = prof["t"]
    if target >= law.x_max:
        return (
            X_now,
            np.full(len(phi), np.inf),
            (
                f"target X = {target:g} is not reachable: the co-reactant limits conversion to "
                f"{law.x_max:.3g}"
            ),
        )
    need = np.log(G(np.full(len(phi), target))) - ln_c
    idx = _first_crossing(level, need, len(t))
    t_end = np.full(len(phi), np.inf)
    ok = idx < len(t)
    i = idx[ok]
    prev = np.maximum(i - 1, 0)
    lv_hi = level(np.where(ok, idx, 0))[ok]
    lv_lo = level(np.where(ok, np.maximum(idx - 1, 0), 0))[ok]
    frac = np.where(
        lv_hi > lv_lo, (need[ok] - lv_lo) / np.where(lv_hi > lv_lo, lv_hi - lv_lo, 1), 1.0
    )
    t_end[ok] = t[prev] + np.clip(frac, 0.0, 1.0) * (t[i] - t[prev])
    return X_now, t_end, ""


def forecast_reversible(state, at_s, post, settings):
    """Reversible law: X on the activity grid carried along the plan; draws interpolate."""
    horizon_s = settings.horizon_h * 3600.0
    X_at_nodes = state.conversion_at(np.array([at_s]), np.exp(state.phi_grid))[:, 0]
    t_f, T_f = _future_profile(state, at_s, horizon_s)
    step = 4  # 4-minute steps are ample for a linear law with minute-scale dynamics
    t_f, T_f = t_f[::step], T_f[::step]
    C, A = state.reversible_coefficients(t_f, T_f)
    traj = step_reversible(X_at_nodes, np.exp(state.phi_grid), C, A)  # (steps, nodes)
    target = state.recipe.target_conversion
    t_node = np.full(len(state.phi_grid), np.inf)
    past = state.trace.t_s[: len(state.trace)]
    for j in range(len(state.phi_grid)):
        if X_at_nodes[j] >= target:
            xs = state.x_grid[: len(past), j]
            k = int(np.argmax(xs >= target))
            t_node[j] = past[k] if xs[k] >= target else at_s
            continue
        hit = np.flatnonzero(traj[:, j] >= target)
        if len(hit):
            k = hit[0]
            x0, t0 = (traj[k - 1, j], t_f[k]) if k else (X_at_nodes[j], t_f[0])
            x1, t1 = traj[k, j], t_f[k + 1]
            t_node[j] = t0 + (target - x0) / max(x1 - x0, 1e-300) * (t1 - t0)
    phi, _, _, _ = _draws(state, post, settings)
    X_now = np.interp(phi, state.phi_grid, X_at_nodes)
    finite = np.isfinite(t_node)
    t_end = np.full(len(phi), np.inf)
    if finite.any():
        lo, hi = state.phi_grid[finite].min(), state.phi_grid[finite].max()
        inside = (phi >= lo) & (phi <= hi)
        t_end[inside] = np.interp(phi[inside], state.phi_grid[finite], t_node[finite])
    note = ""
    x_eq_end = state.equilibrium_conversion(T_f[-1])
    if target >= x_eq_end and not finite.any():
        note = (
            f"target X = {target:g} is above the equilibrium conversion {x_eq_end:.3f} "
            f"at the plan's final temperature ({T_f[-1] - 273.15:.1f} degC)"
        )
    return X_now, t_end, note
