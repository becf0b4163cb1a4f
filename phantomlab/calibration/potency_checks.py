"""What the batch data support: spectral corrections chosen by a stated rule, and outliers (layer 3).

**Spectral corrections** (:func:`select_extensions`).  A lot is a *candidate* for

* ``musp_power_law`` when it gives at least :data:`MIN_SHARE` of the μs′ of the batches that
  used it (on average over their wavelengths, at the prior potencies), and
* ``mua_legendre`` when it gives at least :data:`MIN_SHARE` of their μa above the matrix,

and only when at least :data:`MIN_BATCHES` batches used it (a shape seen in one or two
measurements may be theirs, not the lot's) and their fits cover at least
:data:`MIN_WAVELENGTHS` wavelengths.  Candidates are added one at a time (forward selection),
each time the one that lowers the quasi-likelihood Bayesian information criterion the most,

    QBIC = χ²/ĉ + k ln n

(Schwarz 1978, Ann. Stat. 6:461; the overdispersion ĉ = max(1, χ²ᵣ) of the model holding every
candidate divides χ², as in the quasi-likelihood criteria of Burnham & Anderson 2002, *Model
Selection and Multimodel Inference*, 2nd ed., sec. 6.2; k counts shape coefficients, n data
values), while it lowers QBIC by more than :data:`MIN_QBIC_DROP` ("positive evidence", Kass &
Raftery 1995, J. Am. Stat. Assoc. 90:773, sec. 3.2) AND the data are informative about the
new coefficients: their posterior SD at most :data:`MAX_SD_RATIO` of the prior SD and their
correlation with the lot's level below :data:`MAX_CORRELATION` in magnitude (identifiability).

**Outliers** (:func:`find_outliers`).  Each batch is left out in turn and the potencies
estimated again from the others (same model, the measurements' scale SD τ and the Birge
ratio estimated from the others, so an outlier does not hide behind the scatter it causes).
For every lot the batch used that at least two other batches also used, the change of its
level is compared with its SD under the hypothesis that the batch belongs:
var(p₋b − p) = var(p₋b) − var(p) for nested normal estimates (Hausman 1978, Econometrica
46:1251, lemma 2.1).  A batch is flagged when |z| > :data:`OUTLIER_Z` for some lot; in a batch
measured more than once, each measurement is tested the same way against all the other
observations, and a flagged batch with exactly one flagged measurement is reported as that
measurement.
"""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np

from phantomlab.calibration.potency_blocks import build_blocks, estimate_scale_sd
from phantomlab.calibration.potency_model import Extension, ModelFit, extension_slices, fit_model

__all__ = ["MIN_SHARE", "MIN_BATCHES", "MIN_WAVELENGTHS", "MIN_QBIC_DROP", "MAX_SD_RATIO",
           "MAX_CORRELATION", "OUTLIER_Z", "Calibration", "candidates", "select_extensions", "find_outliers"]

MIN_SHARE = 0.2
MIN_BATCHES = 3
MIN_WAVELENGTHS = 5
MIN_QBIC_DROP = 2.0
MAX_SD_RATIO = 0.5
MAX_CORRELATION = 0.95
OUTLIER_Z = 3.0


class Calibration:
    """The priors and observations of one calibration, and the fits made from them."""

    def __init__(self, priors, observations):
        self.priors = list(priors)
        self.index = {p.ident: k for k, p in enumerate(self.priors)}
        self.observations = list(observations)
        self.prior_levels = np.array([p.potency for p in self.priors], float)
        self.shares = _shares(self.priors, self.observations, self.index)
        counts = []
        for quantity in ("mua", "musp"):
            carriers = [ident for ident, entry in self.shares.items()
                        if entry[quantity] and float(np.mean(entry[quantity])) >= MIN_SHARE]
            counts.append(max(1, len(carriers)))
        self.lots_per_quantity = (counts[0], counts[1])
        #: the corrections of the model holding every candidate (set by select_extensions):
        #: the model τ is estimated with
        self.fullest: tuple = ()

    def fit(self, extensions: Sequence[Extension] = (), *, observations=None, scale_sd=(0.0, 0.0),
            levels=None) -> ModelFit:
        observations = self.observations if observations is None else observations
        levels = self.prior_levels if levels is None else levels
        blocks = build_blocks(observations, self.index, levels, scale_sd=scale_sd)
        return fit_model(self.priors, blocks, extensions, self.index)

    def fit_with_scale(self, extensions: Sequence[Extension] = (), *, observations=None,
                       scale_from: Sequence[Extension] | None = None
                       ) -> tuple[ModelFit, tuple[float, float], dict]:
        """The fit with τ of μa and μs′ estimated from the same observations.

        τ comes in one step from the residuals of the fit without it (the Paule–Mandel
        equation solved on those residuals; iterating would let a mis-specified model trade
        the level it can no longer see for the shape it cannot fit), of the model with the
        corrections ``scale_from`` (default: ``extensions``) — the least mis-specified model
        at hand, so that model error is not taken for measurement scatter.
        """
        observations = self.observations if observations is None else observations
        reference = self.fit(extensions if scale_from is None else scale_from, observations=observations)
        K = len(self.priors)
        levels = np.where(reference.theta[:K] > 0, reference.theta[:K], self.prior_levels)
        base = build_blocks(observations, self.index, levels)
        scale, report = estimate_scale_sd(reference, base, levels=levels, lots_per_quantity=self.lots_per_quantity)
        return self.fit(extensions, observations=observations, scale_sd=scale, levels=levels), scale, report


def _shares(priors, observations, index) -> dict[tuple, dict]:
    """Per lot: shares of μa (above the matrix) and μs′, the batches and wavelengths that saw it."""
    p0 = np.array([p.potency for p in priors])
    found: dict[tuple, dict] = {}
    for obs in observations:
        columns = [index[ident] for ident in obs.stocks if ident in index]
        if len(columns) != len(obs.stocks):
            continue  # build_blocks refuses it with the message
        f = obs.volume_fractions
        total_a = sum(f[s] * obs.intrinsic_mua_per_mm[s] * p0[k] for s, k in enumerate(columns))
        total_s = sum(f[s] * obs.intrinsic_musp_per_mm[s] * p0[k] for s, k in enumerate(columns))
        measured = np.stack([np.isfinite(obs.mua_per_mm) & np.isfinite(obs.covariance[:, 0, 0]),
                             np.isfinite(obs.musp_per_mm) & np.isfinite(obs.covariance[:, 1, 1])], axis=1)
        for s, k in enumerate(columns):
            ident = priors[k].ident
            entry = found.setdefault(ident, {"mua": [], "musp": [], "batches": set(), "mua_nm": set(),
                                             "musp_nm": set()})
            part_a = f[s] * obs.intrinsic_mua_per_mm[s] * p0[k]
            part_s = f[s] * obs.intrinsic_musp_per_mm[s] * p0[k]
            with np.errstate(invalid="ignore", divide="ignore"):
                entry["mua"].extend(np.where(total_a > 0, part_a / total_a, 0.0))
                entry["musp"].extend(np.where(total_s > 0, part_s / total_s, 0.0))
            entry["batches"].add(obs.batch_id)
            entry["mua_nm"].update(obs.wavelength_nm[measured[:, 0]].tolist())
            entry["musp_nm"].update(obs.wavelength_nm[measured[:, 1]].tolist())
    return found


def candidates(calibration: Calibration) -> list[dict]:
    """Every (lot, kind) the rule considers, with ``eligible`` and the reason when not."""
    out = []
    for ident, entry in calibration.shares.items():
        for kind, quantity in (("musp_power_law", "musp"), ("mua_legendre", "mua")):
            share = float(np.mean(entry[quantity])) if entry[quantity] else 0.0
            if share < MIN_SHARE:
                continue
            wavelengths = sorted(entry[f"{quantity}_nm"])
            item = {"stock": ident[0], "lot": ident[1], "kind": kind, "share": share,
                    "batches": len(entry["batches"]), "wavelengths": len(wavelengths), "eligible": True,
                    "reason": ""}
            if len(entry["batches"]) < MIN_BATCHES:
                item.update(eligible=False, reason=f"used in {len(entry['batches'])} batch(es); the rule needs "
                                                   f"at least {MIN_BATCHES}")
            elif len(wavelengths) < MIN_WAVELENGTHS:
                item.update(eligible=False, reason=f"{len(wavelengths)} wavelength(s) measured; the rule needs "
                                                   f"at least {MIN_WAVELENGTHS}")
            else:
                lo, hi = wavelengths[0], wavelengths[-1]
                if kind == "musp_power_law":
                    reference = float(10.0 * round(math.sqrt(lo * hi) / 10.0))
                    item["extension"] = Extension(ident, kind, reference)
                else:
                    item["extension"] = Extension(ident, kind, 0.5 * (lo + hi), 0.5 * (hi - lo))
            out.append(item)
    return out


def _qbic(fit: ModelFit, c_hat: float) -> float:
    shape_coefficients = sum(ext.size for ext in fit.extensions)
    return fit.chi2 / c_hat + shape_coefficients * math.log(max(fit.count, 2))


def _identifiable(fit: ModelFit, ext: Extension, index: dict) -> tuple[bool, dict]:
    _ext, where = extension_slices(fit, index)[ext.ident]
    k = index[ext.ident]
    cov = fit.covariance
    sd = np.sqrt(np.diag(cov)[where])
    prior = fit.prior_sd[where]
    corr = cov[k, where] / np.sqrt(cov[k, k] * np.diag(cov)[where])
    info = {"coefficient_sd": sd.tolist(), "prior_sd": prior.tolist(), "correlation_with_potency": corr.tolist()}
    ok = bool(np.all(sd <= MAX_SD_RATIO * prior) and np.all(np.abs(corr) < MAX_CORRELATION))
    return ok, info


def select_extensions(calibration: Calibration) -> tuple[list[Extension], list[dict], tuple[float, float]]:
    """The spectral corrections the data support, by the rule of the module docstring.

    Returns
    -------
    (list of Extension, list of dict, (τ_mua, τ_musp))
        The chosen corrections; one report entry per candidate (``stock``, ``lot``, ``kind``,
        ``used``, ``reason``, and where tested ``qbic_drop``, ``coefficient_sd``,
        ``prior_sd``, ``correlation_with_potency``); and the scale SDs the comparison used
        (those of the model holding every candidate).
    """
    found = candidates(calibration)
    eligible = [c for c in found if c["eligible"]]
    fullest: dict[tuple, dict] = {}
    for c in eligible:
        ident = (c["stock"], c["lot"])
        if ident not in fullest or c["share"] > fullest[ident]["share"]:
            fullest[ident] = c
    calibration.fullest = tuple(c["extension"] for c in fullest.values())
    full, scale, _report = calibration.fit_with_scale(calibration.fullest)
    levels = np.where(full.theta[:len(calibration.priors)] > 0, full.theta[:len(calibration.priors)],
                      calibration.prior_levels)
    c_hat = max(1.0, full.chi2_red) if math.isfinite(full.chi2_red) else 1.0
    chosen: list[Extension] = []
    current = calibration.fit((), scale_sd=scale, levels=levels)
    remaining = list(eligible)
    while remaining:
        best = None
        for c in remaining:
            if any(ext.ident == c["extension"].ident for ext in chosen):
                continue
            trial = calibration.fit([*chosen, c["extension"]], scale_sd=scale, levels=levels)
            drop = _qbic(current, c_hat) - _qbic(trial, c_hat)
            ok, info = _identifiable(trial, c["extension"], calibration.index)
            c.update(qbic_drop=float(drop), identifiable=ok, **info)
            if drop > MIN_QBIC_DROP and ok and (best is None or drop > best[0]):
                best = (drop, c, trial)
        if best is None:
            break
        _drop, c, trial = best
        chosen.append(c["extension"])
        current = trial
        remaining = [r for r in remaining if r is not c]
    used = {(ext.ident, ext.kind) for ext in chosen}
    extended = {ext.ident for ext in chosen}
    report = []
    for c in found:
        entry = {k: v for k, v in c.items() if k != "extension"}
        entry["used"] = ((c["stock"], c["lot"]), c["kind"]) in used
        if entry["used"]:
            entry["reason"] = f"QBIC drops by {c['qbic_drop']:.1f}; identifiable"
        elif c["eligible"]:
            if (c["stock"], c["lot"]) in extended:
                entry["reason"] = "the lot carries another correction"
            elif c.get("qbic_drop") is not None and c["qbic_drop"] <= MIN_QBIC_DROP:
                entry["reason"] = f"QBIC drops by {c['qbic_drop']:.1f} (needs > {MIN_QBIC_DROP:g}): the data do not need it"
            elif c.get("identifiable") is False:
                entry["reason"] = (f"not identifiable: coefficient SD {max(c['coefficient_sd']):.3g} vs prior "
                                   f"{max(c['prior_sd']):.3g} (needs <= {MAX_SD_RATIO:g} of it), correlation "
                                   f"with the level {max(abs(v) for v in c['correlation_with_potency']):.2f}")
            else:
                entry["reason"] = "another correction explained the data better"
        report.append(entry)
    return chosen, report, scale


def find_outliers(calibration: Calibration, extensions: Sequence[Extension]
                  ) -> tuple[list[dict], dict[tuple, dict[int, float]]]:
    """Batches and measurements whose data are improbable under the model (module docstring).

    Returns
    -------
    (list of dict, dict)
        Outliers ``{batch_id, measurement_id, reason, z, stock, lot}``, and the leave-one-out
        z of every tested lot index per batch id ``{batch_id: {lot index: z}}``.
    """
    observations = calibration.observations
    index = calibration.index
    batches: dict[str, list[int]] = {}
    for j, obs in enumerate(observations):
        batches.setdefault(obs.batch_id, []).append(j)
    batch_users: dict[int, set] = {}
    observation_users: dict[int, set] = {}
    for j, obs in enumerate(observations):
        for ident in obs.stocks:
            batch_users.setdefault(index[ident], set()).add(obs.batch_id)
            observation_users.setdefault(index[ident], set()).add(j)

    def leave_out(leave: Sequence[int], tested: set) -> dict[int, float]:
        keep = [obs for j, obs in enumerate(observations) if j not in set(leave)]
        reduced, scale, _ = calibration.fit_with_scale(extensions, observations=keep, scale_from=calibration.fullest)
        levels = np.where(reduced.theta[:len(calibration.priors)] > 0, reduced.theta[:len(calibration.priors)],
                          calibration.prior_levels)
        full = calibration.fit(extensions, scale_sd=scale, levels=levels)
        c_hat = max(1.0, reduced.chi2_red) if math.isfinite(reduced.chi2_red) else 1.0
        out = {}
        for k in tested:
            variance = c_hat * (reduced.covariance[k, k] - full.covariance[k, k])
            if variance > 0:
                out[k] = float((full.theta[k] - reduced.theta[k]) / math.sqrt(variance))
        return out

    per_batch: dict[str, dict[int, float]] = {}
    outliers = []
    for batch_id, members in batches.items():
        lots = {index[ident] for j in members for ident in observations[j].stocks}
        tested = {k for k in lots if len(batch_users.get(k, set()) - {batch_id}) >= 2}
        z = leave_out(members, tested) if tested else {}
        per_batch[batch_id] = z
        measurement_flags = {}
        if len(members) >= 2:
            for j in members:
                tested_j = {index[ident] for ident in observations[j].stocks
                            if len(observation_users.get(index[ident], set()) - {j}) >= 2}
                zj = leave_out([j], tested_j) if tested_j else {}
                worst = max(zj.items(), key=lambda item: abs(item[1]), default=None)
                if worst is not None and abs(worst[1]) > OUTLIER_Z:
                    measurement_flags[j] = worst
        worst = max(z.items(), key=lambda item: abs(item[1]), default=None)
        if worst is not None and abs(worst[1]) > OUTLIER_Z:
            if len(measurement_flags) == 1:
                (j, (k, value)), = measurement_flags.items()
                outliers.append(_outlier(observations[j], calibration.priors[k], value, one_measurement=True))
            else:
                k, value = worst
                outliers.append(_outlier(observations[members[0]], calibration.priors[k], value,
                                         one_measurement=False))
        else:
            for j, (k, value) in measurement_flags.items():
                outliers.append(_outlier(observations[j], calibration.priors[k], value, one_measurement=True))
    return outliers, per_batch


def _outlier(obs, prior, z: float, *, one_measurement: bool) -> dict:
    what = (f"measurement {obs.measurement_id} of batch {obs.batch_id}" if one_measurement
            else f"batch {obs.batch_id}")
    return {
        "batch_id": obs.batch_id,
        "measurement_id": obs.measurement_id if one_measurement else None,
        "stock": prior.stock, "lot": prior.lot, "z": z,
        "reason": (f"{what} disagrees with the others on {prior.stock} (lot {prior.lot or '-'}): leaving it "
                   f"out moves the potency by {abs(z):.1f} SD (flagged beyond {OUTLIER_Z:g} SD)"),
    }
