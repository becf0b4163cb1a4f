"""Inverse adding-doubling per wavelength: μa, μs′ and, with collimated transmission, g (layer 3).

Each wavelength is one small problem: two or three measured numbers — total reflectance R,
total transmittance T and, when measured, the collimated (unscattered) transmittance Tc —
and two or three unknowns: log μa, log μs′ and, when g is not given, g itself.  R and T
mostly fix μa and μs′; Tc fixes μt = μa + μs′/(1 − g) through Beer–Lambert between the
faces, hence g (Pickering et al. 1993: the third measurement of the double-sphere system).

The forward model is the adding-doubling slab of the transport layer, batched over all the
wavelengths still being solved, with its streams held fixed while a problem is solved (so
that the finite-difference Jacobian sees a smooth function) and chosen from the g reached
(``streams_for_anisotropy``; one more round if g moved into a row that needs more).  The
solver is Gauss–Newton (Newton for as many data as unknowns) with step halving, started
from the best node of a coarse grid computed in one batched call.  The covariance is
(JᵀJ)⁻¹ of the normalised residuals at the solution (Press et al. 1992, eq. 15.5.15),
carried to linear units by the delta method.

References
----------
Prahl SA, van Gemert MJC, Welch AJ 1993, Appl Opt 32:559 (inverse adding-doubling).
Pickering JW et al. 1993, Appl Opt 32:399 (R, T and the unscattered transmission give μa,
μs and g).
Press WH et al. 1992, *Numerical Recipes*, 2nd ed., sec. 15.5.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from phantomlab.calibration.spectral import MUA_BOUNDS_PER_MM, MUSP_BOUNDS_PER_MM
from phantomlab.transport.adding_doubling import slab_reflectance_transmittance, streams_for_anisotropy

__all__ = ["SlabModel", "SlabSolution", "invert_slab", "G_BOUNDS"]

#: Range of the fitted anisotropy (HG g of phantoms is positive; streams claim 0.1 % to 0.97).
G_BOUNDS = (-0.5, 0.98)
#: Streams of the coarse start grid (a start needs a few per cent, not 0.1 %).
_GRID_STREAMS = 16
_MAX_ITERATIONS = 40
#: Convergence: largest Newton step in log μa, log μs′ and g.
_STEP_TOLERANCE = 1e-6
#: Convergence of stage 1 (16 streams, whose own error is ~1e-2 at high g).
_COARSE_TOLERANCE = 1e-3
#: Relative forward-difference step of the Jacobian.
_FD_STEP = 1e-6


@dataclass(frozen=True)
class SlabModel:
    """What the measurement saw of a slab, as a function of its optics.

    Attributes
    ----------
    thickness_mm, n, n_outside : float
    slides : dict
        Keyword arguments for the slides of ``slab_reflectance_transmittance``.
    specular_included, unscattered_included : bool
        Whether the measured R holds the specular reflection and T the unscattered beam.
    capture_reflectance, capture_transmittance : ndarray (W,) or None
        Fraction of the diffuse reflectance / transmittance that reached the detector
        (light lost at the ports and edges, :mod:`phantomlab.calibration.lost_light`);
        None means all of it.
    """

    thickness_mm: float
    n: float
    n_outside: float = 1.0
    slides: dict = field(default_factory=dict)
    specular_included: bool = True
    unscattered_included: bool = True
    capture_reflectance: np.ndarray | None = None
    capture_transmittance: np.ndarray | None = None

    def start_key(self):
        """What the observables depend on besides (albedo, optical thickness, g); None if more."""
        if self.capture_reflectance is not None or self.capture_transmittance is not None:
            return None
        slides = tuple(sorted((k, v if not isinstance(v, np.ndarray) else tuple(v.tolist()))
                              for k, v in self.slides.items()))
        return ("slab", float(self.n), float(self.n_outside), slides, self.specular_included,
                self.unscattered_included)

    def observables(self, mua, musp, g, *, streams=None, rows=None, incidence="collimated"):
        """(N, 3): model R, T and Tc as measured, at the given optics.

        ``rows`` picks the capture factors of those wavelengths; ``streams`` (N,) fixes the
        quadrature (default: chosen from g).
        """
        mua, musp, g = np.broadcast_arrays(*(np.atleast_1d(np.asarray(v, float)) for v in (mua, musp, g)))
        result = slab_reflectance_transmittance(
            mua_per_mm=mua, mus_per_mm=musp / (1.0 - g), g=g, thickness_mm=self.thickness_mm, n=self.n,
            n_outside=self.n_outside, quadrature_points=streams, incidence=incidence, **self.slides)
        capture_r = 1.0 if self.capture_reflectance is None else _pick(self.capture_reflectance, rows)
        capture_t = 1.0 if self.capture_transmittance is None else _pick(self.capture_transmittance, rows)
        reflectance = capture_r * np.asarray(result.diffuse_reflectance)
        if self.specular_included:
            reflectance = reflectance + np.asarray(result.specular_reflectance)
        unscattered = np.asarray(result.unscattered_transmittance)
        transmittance = capture_t * np.asarray(result.diffuse_transmittance)
        if self.unscattered_included:
            transmittance = transmittance + unscattered
        return np.stack([reflectance, transmittance, unscattered], axis=-1)


def _pick(values, rows):
    values = np.asarray(values, float)
    return values if rows is None or values.ndim == 0 else values[rows]


@dataclass(frozen=True)
class SlabSolution:
    """Per-wavelength solution of :func:`invert_slab` (all arrays (W,) unless said).

    Attributes
    ----------
    mua_per_mm, musp_per_mm, g : ndarray
    covariance : ndarray (W, 3, 3)
        Of (μa [1/mm], μs′ [1/mm], g); zeros in the g row and column when g was given.
    residuals : ndarray (W, M)
        (model − data)/SD at the solution (NaN where a datum is missing).
    chi2, dof : ndarray
    model : ndarray (W, 3)
        R, T, Tc of the model at the solution.
    streams : ndarray of int
    converged : ndarray of bool
    """

    mua_per_mm: np.ndarray
    musp_per_mm: np.ndarray
    g: np.ndarray
    covariance: np.ndarray
    residuals: np.ndarray
    chi2: np.ndarray
    dof: np.ndarray
    model: np.ndarray
    streams: np.ndarray
    converged: np.ndarray


def _grid_start(model: SlabModel, data, use, g_fixed):
    """Best node of a coarse (μa, μs′[, g]) grid per wavelength, by log-space distance."""
    mua_grid = np.geomspace(1e-4, 5.0, 18)
    musp_grid = np.geomspace(0.02, 30.0, 16)
    W = data.shape[0]
    best = np.full(W, np.inf)
    start = np.zeros((W, 3))
    if g_fixed is None or np.all(use[:, 2]):
        return _start_from_collimated(model, data, use, g_fixed)
    a_nodes, s_nodes = (v.ravel() for v in np.meshgrid(mua_grid, musp_grid, indexing="ij"))
    # a start needs g only roughly: one batched call per given g rounded to 0.05
    g_per_w = np.round(np.broadcast_to(np.asarray(g_fixed, float), (W,)) * 20.0) / 20.0
    for g_value in np.unique(g_per_w):
        rows = np.flatnonzero(g_per_w == g_value)
        g_nodes = np.full(a_nodes.shape, g_value)
        forward = model.observables(a_nodes, s_nodes, g_nodes, streams=np.full(a_nodes.shape, _GRID_STREAMS))
        _choose(forward, data[rows], use[rows], a_nodes, s_nodes, g_nodes, best, start, rows)
    return start


def _start_from_collimated(model: SlabModel, data, use, g_fixed=None):
    """Start of the three-parameter fit: μt from Tc, then the best (albedo, g) node.

    Tc depends on the optical thickness τ = μt d alone (and the faces), so τ is read off a
    table of Tc(τ); R and T at that τ come from one table over (albedo, log τ, g), linearly
    interpolated in log τ, and the closest (albedo, g) in log R, log T is the start.
    """
    W = data.shape[0]
    d = float(model.thickness_mm)
    tau_nodes = np.geomspace(0.01, 200.0, 28)
    clear = model.observables(tau_nodes / d, np.full(tau_nodes.shape, 1e-9), np.zeros(tau_nodes.shape),
                              streams=np.full(tau_nodes.shape, 4))[:, 2]
    tc = np.where(use[:, 2] & (data[:, 2] > 0), data[:, 2], np.nan)
    # Tc falls with τ: interpolate log τ against log Tc (both increasing once reversed)
    log_tau = np.interp(np.log(tc), np.log(np.maximum(clear[::-1], 1e-300)), np.log(tau_nodes[::-1]))
    tau = np.exp(np.where(np.isfinite(log_tau), log_tau, 0.0))
    albedo_nodes = 1.0 - np.geomspace(1e-3, 0.7, 13)
    g_nodes = np.array([0.0, 0.3, 0.5, 0.65, 0.75, 0.82, 0.88, 0.92, 0.95, 0.97])
    key = _table_key(model)
    table = _START_TABLES.get(key) if key is not None else None
    if table is None:
        A, T, G = np.meshgrid(albedo_nodes, tau_nodes, g_nodes, indexing="ij")
        mut = T / d
        table = model.observables((mut * (1 - A)).ravel(), (mut * A * (1 - G)).ravel(), G.ravel(),
                                  streams=np.full(A.size, _GRID_STREAMS))
        table = table.reshape(A.shape + (3,))[..., :2]  # (albedo, τ, g, [R, T])
        if key is not None:
            if len(_START_TABLES) >= _MAX_TABLES:
                _START_TABLES.pop(next(iter(_START_TABLES)))
            _START_TABLES[key] = table
    position = np.clip(np.interp(np.log(tau), np.log(tau_nodes), np.arange(tau_nodes.size)), 0, tau_nodes.size - 1)
    low = np.minimum(np.floor(position).astype(int), tau_nodes.size - 2)
    frac = (position - low)[:, None, None, None]
    at_tau = (1 - frac) * table[:, low].transpose(1, 0, 2, 3) + frac * table[:, low + 1].transpose(1, 0, 2, 3)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_model = np.log(np.maximum(at_tau, 1e-300))  # (W, albedo, g, 2)
        log_data = np.log(np.where(use[:, :2] & (data[:, :2] > 0), data[:, :2], np.nan))
    cost = np.nansum((log_model - log_data[:, None, None, :]) ** 2, axis=-1)  # (W, albedo, g)
    if g_fixed is not None:  # only the g node nearest the given g
        nearest = np.argmin(np.abs(g_nodes[None, :] - np.broadcast_to(np.asarray(g_fixed, float), (W,))[:, None]),
                            axis=1)
        cost = np.where(np.arange(g_nodes.size)[None, None, :] == nearest[:, None, None], cost, np.inf)
    cost = cost.reshape(W, -1)
    pick = np.argmin(cost, axis=1)
    ia, ig = np.unravel_index(pick, (albedo_nodes.size, g_nodes.size))
    a, g = albedo_nodes[ia], g_nodes[ig]
    mut_w = tau / d
    start = np.empty((W, 3))
    start[:, 0] = np.log(np.clip(mut_w * (1 - a), MUA_BOUNDS_PER_MM[0], MUA_BOUNDS_PER_MM[1]))
    start[:, 1] = np.log(np.clip(mut_w * a * (1 - g), MUSP_BOUNDS_PER_MM[0], MUSP_BOUNDS_PER_MM[1]))
    start[:, 2] = g if g_fixed is None else np.broadcast_to(np.asarray(g_fixed, float), (W,))
    return start


#: Start tables by model (faces, what is measured): computed once per process (a few hundred
#: ms each), they depend on the optical thickness, not on the sample's thickness.
_START_TABLES: dict = {}
_MAX_TABLES = 8


def _table_key(model):
    """A hashable description of what the model's observables depend on besides the optics."""
    try:
        key = model.start_key()
    except AttributeError:
        return None
    try:
        hash(key)
    except TypeError:
        return None
    return key


def _choose(forward, data, use, a_nodes, s_nodes, g_nodes, best, start, rows):
    with np.errstate(divide="ignore", invalid="ignore"):
        log_model = np.log(np.where(forward > 0, forward, 1e-300))  # (G, 3)
        log_data = np.log(np.where(use & (data > 0), data, 1.0))  # (W, 3)
    weight = (use & (data > 0)).astype(float)
    cost = (weight @ (log_model.T ** 2) - 2.0 * ((weight * log_data) @ log_model.T)
            + np.sum(weight * log_data**2, axis=1, keepdims=True))  # (W, G)
    cost = np.where(np.isfinite(cost), cost, np.inf)
    pick = np.argmin(cost, axis=1)
    value = cost[np.arange(rows.size), pick]
    better = value < best[rows]
    chosen = rows[better]
    best[chosen] = value[better]
    start[chosen, 0] = np.log(a_nodes[pick[better]])
    start[chosen, 1] = np.log(s_nodes[pick[better]])
    start[chosen, 2] = g_nodes[pick[better]]


def invert_slab(model: SlabModel, *, data, sd, g=None, start=None) -> SlabSolution:
    """Solve every wavelength for (μa, μs′[, g]) from (R, T[, Tc]).

    Parameters
    ----------
    model : SlabModel
    data, sd : ndarray (W, 3)
        Measured R, T, Tc and their SDs; NaN where not measured (a missing Tc column).
    g : float, array (W,) or None
        The anisotropy when given; None fits it (needs Tc at every wavelength).
    start : ndarray (W, 3), optional
        Start in (log μa, log μs′, g): a previous solution (the sphere and lost-light loops);
        the coarse first stage is then skipped.

    Returns
    -------
    SlabSolution
    """
    data = np.asarray(data, float)
    sd = np.asarray(sd, float)
    W = data.shape[0]
    use = np.isfinite(data) & np.isfinite(sd) & (sd > 0)
    fit_g = g is None
    P = 3 if fit_g else 2
    x = _grid_start(model, data, use, g) if start is None else np.array(start, float, copy=True)
    if not fit_g:
        x[:, 2] = np.broadcast_to(np.asarray(g, float), (W,))
    lower = np.array([np.log(MUA_BOUNDS_PER_MM[0]), np.log(MUSP_BOUNDS_PER_MM[0]), G_BOUNDS[0]])
    upper = np.array([np.log(MUA_BOUNDS_PER_MM[1]), np.log(MUSP_BOUNDS_PER_MM[1]), G_BOUNDS[1]])
    safe_data = np.where(use, data, 0.0)
    safe_sd = np.where(use, sd, 1.0)

    def residuals(x_rows, rows, streams):
        forward = model.observables(np.exp(x_rows[:, 0]), np.exp(x_rows[:, 1]), x_rows[:, 2],
                                    streams=streams, rows=rows)
        return np.where(use[rows], (forward - safe_data[rows]) / safe_sd[rows], 0.0), forward

    # Stage 1: a cheap quadrature brings every wavelength close (its error is a few per cent at
    # most); stage 2: the streams the reached g needs, from there (two or three Newton steps).
    W_all = np.arange(W)
    coarse_jac = None
    if start is None:  # a given start is already close (a previous solution): no coarse stage
        coarse = np.full(W, _GRID_STREAMS)
        x, _, _, coarse_jac = _newton(residuals, x, coarse, P, lower, upper, W_all, tolerance=_COARSE_TOLERANCE,
                                      broyden=True)
    streams = streams_for_anisotropy(x[:, 2])
    rows = W_all
    r = np.zeros((W, data.shape[1]))
    converged = np.zeros(W, bool)
    for _round in range(3):  # again only where g moved into a row of the table that needs more
        if coarse_jac is not None and _round == 0:
            # the coarse stage's Jacobian, carried on by Broyden updates: no new finite differences
            x_new, done, r_rows, _ = _newton(residuals, x, streams, P, lower, upper, rows, broyden=True,
                                             initial_jac=coarse_jac)
        else:
            x_new, done, r_rows, _ = _newton(residuals, x, streams, P, lower, upper, rows)
        x[rows] = x_new[rows]
        converged[rows], r[rows] = done[rows], r_rows
        needed = streams_for_anisotropy(x[:, 2])
        rows = np.flatnonzero(needed > streams)
        if rows.size == 0:
            break
        streams = np.maximum(streams, needed)
    # the covariance from a Jacobian at the solution, at the final streams
    jac = _jacobian(residuals, x, W_all, streams, r, P)
    forward = None
    if not np.all(use):
        forward = model.observables(np.exp(x[:, 0]), np.exp(x[:, 1]), x[:, 2], streams=streams, rows=W_all)
    normal = np.einsum("wmp,wmq->wpq", jac, jac)
    cov_x = _inverse(normal)
    values = np.exp(x[:, :2])
    scale = np.concatenate([values, np.ones((W, 1))], axis=1)[:, :P]
    covariance = np.zeros((W, 3, 3))
    covariance[:, :P, :P] = cov_x * scale[:, :, None] * scale[:, None, :]
    residual = np.where(use, r, np.nan)
    chi2 = np.nansum(residual**2, axis=1)
    dof = use.sum(axis=1) - P
    if forward is None:
        forward = safe_data + r * safe_sd
    return SlabSolution(mua_per_mm=values[:, 0], musp_per_mm=values[:, 1], g=x[:, 2].copy(),
                        covariance=covariance, residuals=residual, chi2=chi2, dof=dof, model=forward,
                        streams=np.asarray(streams, int), converged=converged)


def _jacobian(residuals, x, rows, streams, base, P):
    jac = np.empty(base.shape + (P,))
    for p in range(P):
        step = _FD_STEP * np.maximum(1.0, np.abs(x[:, p]))
        if p == 2:  # keep g + step inside (−1, 1)
            step = np.where(x[:, 2] + step < 0.995, step, -step)
        shifted = x.copy()
        shifted[:, p] += step
        jac[:, :, p] = (residuals(shifted, rows, streams[rows])[0] - base) / step[:, None]
    return jac


def _inverse(normal):
    out = np.empty_like(normal)
    for w in range(normal.shape[0]):
        try:
            out[w] = np.linalg.inv(normal[w]) if np.linalg.cond(normal[w]) < 1e14 else np.full_like(normal[w], np.inf)
        except np.linalg.LinAlgError:
            out[w] = np.inf
    return out


def _newton(residuals, x, streams, P, lower, upper, rows, tolerance=None, broyden=False, initial_jac=None):
    """Damped Gauss–Newton on ``rows``; returns (x, converged, residuals, Jacobian) of those rows.

    The Jacobian returned is the last one used for each row.  With ``broyden`` the
    finite-difference Jacobian is computed once and then carried along by Broyden's rank-one
    update after each accepted step (Broyden 1965, Math Comp 19:577), and recomputed only
    where a step was refused; ``initial_jac`` (of ``rows``) starts it without finite differences.
    """
    W = x.shape[0]
    x = x.copy()
    x[rows, :P] = np.clip(x[rows, :P], lower[:P], upper[:P])
    active = np.zeros(W, bool)
    active[rows] = True
    converged = np.zeros(W, bool)
    r = np.zeros((W, 3))  # R, T, Tc
    r[rows], _ = residuals(x[rows], rows, streams[rows])
    last_jac = np.zeros(r.shape + (P,))
    cost = np.sum(r**2, axis=1)
    damping = np.zeros(W)
    stale = np.ones(W, bool)  # rows whose Jacobian must come from finite differences
    if initial_jac is not None:
        last_jac[rows] = initial_jac
        stale[rows] = False
    for _ in range(_MAX_ITERATIONS):
        live = np.flatnonzero(active)
        if live.size == 0:
            break
        fresh = live[stale[live]] if broyden else live
        if fresh.size:
            last_jac[fresh] = _jacobian(residuals, x[fresh], fresh, streams, r[fresh], P)
            stale[fresh] = False
        jac = last_jac[live]
        normal = np.einsum("wmp,wmq->wpq", jac, jac)
        gradient = np.einsum("wmp,wm->wp", jac, r[live])
        diag = np.maximum(np.diagonal(normal, axis1=1, axis2=2), 1e-300)
        system = normal + (damping[live][:, None] * diag)[:, :, None] * np.eye(P)[None]
        try:
            step = -np.linalg.solve(system, gradient[..., None])[..., 0]
        except np.linalg.LinAlgError:
            step = -np.einsum("wpq,wq->wp", np.linalg.pinv(system), gradient)
        step = np.clip(np.nan_to_num(step), -3.0, 3.0)  # at most a factor e³ in one step
        pending = np.ones(live.size, bool)
        accepted = np.zeros(live.size, bool)
        factor = 1.0
        for _halving in range(6):
            sub = np.flatnonzero(pending)
            who = live[sub]
            trial = x[who].copy()
            trial[:, :P] = np.clip(trial[:, :P] + factor * step[sub], lower[:P], upper[:P])
            r_trial, _ = residuals(trial, who, streams[who])
            cost_trial = np.sum(r_trial**2, axis=1)
            better = np.isfinite(cost_trial) & (cost_trial <= cost[who] * (1 + 1e-12) + 1e-300)
            good = who[better]
            moved = np.max(np.abs(trial[better] - x[good]), axis=1)
            if broyden and good.size:  # J += (Δr − J Δx) Δxᵀ / |Δx|²
                dx = trial[better][:, :P] - x[good][:, :P]
                dr = r_trial[better] - r[good]
                predicted = np.einsum("wmp,wp->wm", last_jac[good], dx)
                norm = np.maximum(np.sum(dx**2, axis=1), 1e-300)
                last_jac[good] += (dr - predicted)[:, :, None] * dx[:, None, :] / norm[:, None, None]
            x[good] = trial[better]
            r[good] = r_trial[better]
            cost[good] = cost_trial[better]
            accepted[sub[better]] = True
            pending[sub[better]] = False
            done = good[moved < (_STEP_TOLERANCE if tolerance is None else tolerance)]
            converged[done] = True
            active[done] = False
            if not pending.any():
                break
            factor *= 0.5
        stuck = live[~accepted]
        stale[stuck] = True
        # no descent along the (halved) Newton step: at the minimum within rounding, or damp more
        at_minimum = stuck[np.max(np.abs(step[~accepted]), axis=1) < 1e-5]
        converged[at_minimum] = True
        active[at_minimum] = False
        damping[stuck] = np.maximum(damping[stuck] * 10.0, 1e-3)
        damping[live[accepted]] *= 0.3
        active[damping > 1e8] = False
    return x, converged, r[rows], last_jac[rows]
