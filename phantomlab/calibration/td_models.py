"""The forward models a time-domain fit calls, one trial per row (layer 3).

:func:`td_curve_model` returns ``shape(mua (N,), musp (N,), rho (N,), times (N, L))``, the
response R(ρ, t) or T(ρ, t) [1/(mm² ps)] of each row at its own times: the diffusion models of
:mod:`phantomlab.transport.time_domain`, the half-space Monte Carlo lookup
(:mod:`phantomlab.calibration.mc_lookup_time`), or the slab model corrected by direct Monte
Carlo runs (:mod:`phantomlab.calibration.slab_time_correction`).  :func:`face_average`
averages any of them over a detection fibre's face.
"""

from __future__ import annotations

import numpy as np

from phantomlab.errors import InputError

__all__ = ["TD_FIT_MODELS", "td_curve_model", "face_average"]

TD_FIT_MODELS = ("kienle1997", "contini1997", "patterson1989", "mc", "mc-slab")


def td_curve_model(*, model: str, geometry: str, thickness_mm, n: float, n_outside: float, baseline=None,
                   slab_correction=None):
    """The response R(ρ, t) of one trial per row: ``shape(mua (N,), musp (N,), rho (N,), times (N, L))``.

    A model with its own error (the lookups) carries ``relative_sd``, ``bandwidth_at`` (the
    error's correlation width in ln t), optionally ``relative_bias``, each
    ``(musp (N,), rho (N,), times (N, L))``, and ``default_bandwidth``.
    """
    if model == "mc":
        from phantomlab.calibration.fit_srdr import check_baseline_indices
        from phantomlab.calibration.mc_lookup_time import time_resolved_lookup

        if baseline is None:
            raise InputError("td model 'mc' needs a Monte Carlo baseline (--baseline FILE)")
        if geometry != "reflectance" or thickness_mm is not None:
            raise InputError("td model 'mc' is for reflectance from a thick phantom (the baselines are half-space "
                             "runs); fit transmittance or a thin slab with kienle1997, contini1997 or patterson1989")
        check_baseline_indices(baseline, n=n, n_outside=n_outside)
        lookup = time_resolved_lookup(baseline)

        def shape(mua, musp, rho, times):
            mus = np.asarray(musp, float) / (1.0 - lookup.g)
            return lookup.curves(mua_per_mm=mua, mus_per_mm=mus, rho_mm=rho, time_ps=times)

        def at(method):
            def evaluate(musp, rho, times):
                mus = np.asarray(musp, float) / (1.0 - lookup.g)
                return method(mus_per_mm=mus, rho_mm=np.broadcast_to(np.asarray(rho)[:, None], times.shape),
                              time_ps=times)
            return evaluate

        shape.lookup = lookup
        shape.relative_sd = at(lookup.relative_sd)
        shape.bandwidth_at = at(lookup.tau_bandwidth_at)
        shape.relative_bias = at(lookup.relative_bias)
        shape.default_bandwidth = lookup.tau_bandwidth
        return shape
    if model == "mc-slab":
        return _slab_shape(geometry=geometry, thickness_mm=thickness_mm, n=n, n_outside=n_outside,
                           correction=slab_correction)
    if model not in TD_FIT_MODELS:
        raise InputError(f"unknown td fit model {model!r}; accepted: {', '.join(TD_FIT_MODELS)}")
    from phantomlab.transport.time_domain import time_resolved_evaluator

    evaluate = time_resolved_evaluator(n=n, n_outside=n_outside, thickness_mm=thickness_mm, geometry=geometry,
                                       model=model)

    def shape(mua, musp, rho, times):
        return evaluate(mua_per_mm=np.asarray(mua, float)[:, None], musp_per_mm=np.asarray(musp, float)[:, None],
                        rho_mm=np.asarray(rho, float)[:, None], time_ps=times)

    def points(mua, musp, rho_points, times):
        """The response at several distances per row, rho_points (N, Q): shape (N, L, Q)."""
        return evaluate(mua_per_mm=np.asarray(mua, float)[:, None, None],
                        musp_per_mm=np.asarray(musp, float)[:, None, None],
                        rho_mm=np.asarray(rho_points, float)[:, None, :], time_ps=np.asarray(times, float)[:, :, None])

    shape.points = points
    return shape


def _slab_shape(*, geometry, thickness_mm, n, n_outside, correction):
    """contini1997 transmittance times the Monte Carlo correction C (slab_time_correction.py)."""
    if correction is None:
        raise InputError("td model 'mc-slab' needs the slab's Monte Carlo nodes (phantomlab.calibration.fit_td_slab)")
    if geometry != "transmittance" or thickness_mm is None:
        raise InputError("td model 'mc-slab' is for transmittance through a slab of given thickness")
    if abs(correction.n - n) > 5e-4 or abs(correction.n_outside - n_outside) > 5e-4:
        raise InputError(f"the slab nodes were made for n = {correction.n:g}, n_outside = {correction.n_outside:g}, "
                         f"not n = {n:g}, n_outside = {n_outside:g}")
    from phantomlab.transport.time_domain import time_resolved_evaluator

    evaluate = time_resolved_evaluator(n=n, n_outside=n_outside, thickness_mm=thickness_mm, geometry=geometry,
                                       model="contini1997")
    d = float(thickness_mm)

    def shape(mua, musp, rho, times):
        diffusion = evaluate(mua_per_mm=np.asarray(mua, float)[:, None], musp_per_mm=np.asarray(musp, float)[:, None],
                             rho_mm=np.asarray(rho, float)[:, None], time_ps=times)
        return diffusion * correction.factor(musp_per_mm=musp, rho_mm=rho, time_ps=times, thickness_mm=d)

    def points(mua, musp, rho_points, times):
        """The response at several distances per row, rho_points (N, Q): shape (N, L, Q)."""
        diffusion = evaluate(mua_per_mm=np.asarray(mua, float)[:, None, None],
                             musp_per_mm=np.asarray(musp, float)[:, None, None],
                             rho_mm=np.asarray(rho_points, float)[:, None, :],
                             time_ps=np.asarray(times, float)[:, :, None])
        return diffusion * correction.factor_points(musp_per_mm=musp, rho_mm=rho_points, time_ps=times,
                                                    thickness_mm=d)

    def at(method):
        return lambda musp, rho, times: method(musp_per_mm=musp, rho_mm=rho, time_ps=times, thickness_mm=d)

    shape.relative_sd = at(correction.relative_sd)
    shape.bandwidth_at = at(correction.bandwidth_at)
    shape.default_bandwidth = correction.default_bandwidth
    shape.correction = correction
    shape.points = points
    shape.relative_sd_points = lambda musp, rho_points, times: correction.relative_sd_points(
        musp_per_mm=musp, rho_mm=rho_points, time_ps=times, thickness_mm=d)
    shape.correlation_points = lambda rho_points: correction.correlation_points(rho_mm=rho_points, thickness_mm=d)
    return shape


def face_average(shape, *, core_mm: float, rho_mm):
    """``shape`` averaged over a detection fibre's face (a disc of diameter ``core_mm`` centred at ρ).

    Gauss–Legendre in the radius (6 nodes, weight r) and, off the axis, in the angle (6 nodes
    on [0, π], the face being symmetric about the line to the source); on the axis (every ρ
    = 0, transmittance's usual case) the radius alone.  A model with ``points`` (the diffusion
    models and mc-slab) is asked for every face point in one call, which shares the depth sums;
    the lookup point by point.  The model-error hooks are kept at the face's centre, except the
    relative SD of a model that gives it per point with the correlation between points
    (``relative_sd_points``, ``correlation_points``: mc-slab): the SD of the face's average
    then weighs each point's SD by its share of the light and correlates the points as the
    model's noise is correlated.
    """
    radius = 0.5 * core_mm
    x, w = np.polynomial.legendre.leggauss(6)
    r = 0.5 * radius * (x + 1.0)
    weight_r = 0.5 * radius * w * 2.0 * r / radius**2  # Σ = 1 over the disc (∫ 2r dr / a²)
    on_axis = bool(np.all(np.asarray(rho_mm, float) == 0.0))
    phi = 0.5 * np.pi * (x + 1.0)
    weight_phi = 0.5 * w  # mean over [0, π]
    points = [(ri, 0.0, wr) for ri, wr in zip(r, weight_r)] if on_axis else \
        [(ri, pj, wr * wp) for ri, wr in zip(r, weight_r) for pj, wp in zip(phi, weight_phi)]

    ri, pj, wq = (np.array(column) for column in zip(*points))

    def face_distances(rho):
        """Distances of the face's points from the beam axis, (N, Q) for rows at ρ (N,)."""
        rho = np.asarray(rho, float)[:, None]
        return np.sqrt(rho**2 + ri**2 + 2.0 * rho * ri * np.cos(pj))

    def averaged(mua, musp, rho, times):
        rho = np.asarray(rho, float)
        if hasattr(shape, "points"):  # every face point in one call: the depth sums are shared
            return shape.points(mua, musp, face_distances(rho), times) @ wq
        distance = face_distances(rho)
        return sum(wq[q] * shape(mua, musp, distance[:, q], times) for q in range(wq.size))

    for hook in ("relative_sd", "bandwidth_at", "relative_bias", "default_bandwidth", "lookup", "correction"):
        if hasattr(shape, hook):
            setattr(averaged, hook, getattr(shape, hook))
    if hasattr(shape, "relative_sd_points") and hasattr(shape, "points"):
        def face_relative_sd(musp, rho, times):
            distance = face_distances(rho)  # (N, Q)
            # each point's share of the face's light (μa cancels: a common factor)
            light = shape.points(np.zeros(distance.shape[0]), musp, distance, times) * wq
            with np.errstate(invalid="ignore", divide="ignore"):
                share = np.nan_to_num(light / light.sum(axis=-1, keepdims=True))
            spread = share * shape.relative_sd_points(musp, distance, times)  # (N, L, Q)
            correlation = shape.correlation_points(distance)  # (N, Q, Q)
            return np.sqrt(np.maximum(np.einsum("nlq,nqp,nlp->nl", spread, correlation, spread), 0.0))

        averaged.relative_sd = face_relative_sd
    return averaged
