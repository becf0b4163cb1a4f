"""``phantomlab forward --kind td|fd``: time-resolved and frequency-domain forward models (layer 5).

    phantomlab forward --kind td --mua-per-mm L --musp-per-mm L --n L --rho-mm L --time-ps L
                                 [--geometry reflectance|transmittance] [--thickness-mm D]
                                 [--model kienle1997|contini1997|patterson1989|mc] [--boundary B]
                                 [--baseline FILE]
    phantomlab forward --kind fd --mua-per-mm L --musp-per-mm L --n L --rho-mm L --frequency-mhz L
                                 [--model kienle1997|contini1997|mc] [--boundary B] [--baseline FILE]

JSON keys: td ``reflectance_per_mm2_per_ps`` (or ``transmittance_per_mm2_per_ps``), a list per
entry of lists per distance of values per time [1/(mm² ps) per unit incident energy]; fd
``amplitude_per_mm2`` [1/mm² per unit incident AC power] and ``phase_deg`` (lag, degrees, not
wrapped), each per entry, distance and frequency; plus ``rho_mm``, ``time_ps`` or
``frequency_mhz``, ``geometry``, ``thickness_mm``, ``model``, ``boundary`` and the inputs.  The
Monte Carlo lookup (``--model mc``) needs a baseline file (``phantomlab baseline build``) made
for the same n and n_outside, and answers for reflectance from a half-space only.
"""

from __future__ import annotations

import numpy as np

from phantomlab.cli import CommandResult
from phantomlab.commands.forward_options import common_inputs, option_list, option_number, scattering_option
from phantomlab.commands.forward_text import entry_labels
from phantomlab.errors import InputError
from phantomlab.limits import check_limit

__all__ = ["handle_time_kinds"]

def handle_time_kinds(args, model: str) -> CommandResult:
    """The td and fd kinds of ``phantomlab forward`` (called by :mod:`phantomlab.commands.forward`)."""
    scatter, which, g = scattering_option(args)
    if which == "mus" and g is None:
        raise InputError("--mus-per-mm needs --g to give the reduced scattering musp = mus (1 - g)")
    count, lists = common_inputs(args, scatter, g)
    musp = lists["scattering"] * (1.0 - lists["g"]) if which == "mus" else lists["scattering"]
    n_outside = option_number(args.n_outside, "--n-outside")
    if args.rho_mm is None:
        raise InputError(f"--kind {args.kind} needs --rho-mm LIST (distances from the beam axis in mm)")
    rho = option_list(args.rho_mm, "--rho-mm")
    payload = {"kind": args.kind, "model": model, "mua_per_mm": lists["mua"], "musp_per_mm": musp, "n": lists["n"],
               "n_outside": n_outside, "rho_mm": rho,
               "reflectance_convention": "per unit incident energy (td) or AC power (fd); specular reflection excluded"}
    if lists["wavelength"] is not None:
        payload["wavelength_nm"] = lists["wavelength"]
    if args.kind == "td":
        return _td(args, model, count, lists, musp, n_outside, rho, payload)
    return _fd(args, model, count, lists, musp, n_outside, rho, payload)


def _baseline(args, n_values, n_outside):
    if not args.baseline:
        raise InputError("--model mc needs --baseline FILE (a Monte Carlo baseline: phantomlab baseline build)")
    from phantomlab.calibration.fit_srdr import check_baseline_indices
    from phantomlab.calibration.mc_lookup_time import time_resolved_lookup
    from phantomlab.transport.montecarlo import load_baseline

    baseline = load_baseline(args.baseline)
    for n in np.unique(n_values):
        check_baseline_indices(baseline, n=float(n), n_outside=n_outside)
    return time_resolved_lookup(baseline)


def _td(args, model, count, lists, musp, n_outside, rho, payload):
    from phantomlab.transport.time_domain import TD_DEFAULT_BOUNDARY, time_resolved

    if args.time_ps is None:
        raise InputError("--kind td needs --time-ps LIST (times after the pulse entered, in ps)")
    time = option_list(args.time_ps, "--time-ps")
    check_limit("forward_points", count * rho.size * time.size,
                given=f"{count} entries x {rho.size} distances x {time.size} times")
    geometry = args.geometry or "reflectance"
    thickness = None if args.thickness_mm is None else option_number(args.thickness_mm, "--thickness-mm")
    key = f"{geometry}_per_mm2_per_ps"
    if model == "mc":
        if geometry != "reflectance" or thickness is not None:
            raise InputError("--model mc answers for reflectance from a half-space only (the baselines are "
                             "half-space runs); leave out --thickness-mm and --geometry transmittance")
        lookup = _baseline(args, lists["n"], n_outside)
        mus = musp / (1.0 - lookup.g)
        values = np.stack([lookup.point(mua_per_mm=np.full(rho.size, lists["mua"][k]), mus_per_mm=np.full(rho.size, mus[k]),
                                        rho_mm=np.broadcast_to(rho[:, None], (rho.size, time.size)),
                                        time_ps=np.broadcast_to(time[None, :], (rho.size, time.size)))
                           for k in range(count)])
        boundary = None
    else:
        boundary = args.boundary or TD_DEFAULT_BOUNDARY[model]
        values = time_resolved(mua_per_mm=lists["mua"], musp_per_mm=musp, rho_mm=rho[:, None], time_ps=time[None, :],
                               n=lists["n"], n_outside=n_outside, thickness_mm=thickness, geometry=geometry,
                               model=model, boundary=boundary)
    payload.update(geometry=geometry, thickness_mm=thickness, boundary=boundary, time_ps=time,
                   **{key: np.reshape(values, (count, rho.size, time.size))})
    lines = [f"{args.kind} ({geometry}) by {model}" + (f", boundary {boundary}" if boundary else "")
             + (f", slab {thickness:g} mm" if thickness is not None else ", half-space")]
    for k, label in enumerate(entry_labels(payload)):
        for r, distance in enumerate(rho):
            lines.append(f"{label}, rho {distance:g} mm: " + "  ".join(
                f"{t:g} ps {v:.4g}" for t, v in zip(time, payload[key][k, r])))
    lines.append(f"({geometry} [1/(mm^2 ps)] per unit incident energy, specular reflection excluded)")
    return CommandResult(payload=payload, text="\n".join(lines))


def _fd(args, model, count, lists, musp, n_outside, rho, payload):
    from phantomlab.transport.frequency_domain import FD_DEFAULT_BOUNDARY, amplitude_and_phase

    if args.frequency_mhz is None:
        raise InputError("--kind fd needs --frequency-mhz LIST (modulation frequencies in MHz)")
    freq = option_list(args.frequency_mhz, "--frequency-mhz")
    check_limit("forward_points", count * rho.size * freq.size,
                given=f"{count} entries x {rho.size} distances x {freq.size} frequencies")
    if model == "mc":
        from phantomlab.calibration.fit_fd import fd_forward

        lookup = _baseline(args, lists["n"], n_outside)
        amplitude, phase = [], []
        for k in range(count):
            forward = fd_forward(model="mc", rho_mm=rho, frequency_mhz=freq, n=float(lists["n"][k]),
                                 n_outside=n_outside, baseline=lookup.baseline)
            log_amp, lag = forward(lists["mua"][k:k + 1], musp[k:k + 1])
            amplitude.append(np.exp(log_amp[0]))
            phase.append(np.degrees(lag[0]))
        amplitude, phase = np.array(amplitude), np.array(phase)
        boundary = None
    else:
        boundary = args.boundary or FD_DEFAULT_BOUNDARY[model]
        amplitude, phase = amplitude_and_phase(mua_per_mm=lists["mua"], musp_per_mm=musp, rho_mm=rho[:, None],
                                               frequency_mhz=freq[None, :], n=lists["n"], n_outside=n_outside,
                                               model=model, boundary=boundary)
    payload.update(boundary=boundary, frequency_mhz=freq,
                   amplitude_per_mm2=np.reshape(amplitude, (count, rho.size, freq.size)),
                   phase_deg=np.reshape(phase, (count, rho.size, freq.size)))
    lines = [f"fd by {model}" + (f", boundary {boundary}" if boundary else "") + ", half-space"]
    for k, label in enumerate(entry_labels(payload)):
        for r, distance in enumerate(rho):
            lines.append(f"{label}, rho {distance:g} mm: " + "  ".join(
                f"{f:g} MHz AC {a:.4g} phase {p:.2f} deg"
                for f, a, p in zip(freq, payload["amplitude_per_mm2"][k, r], payload["phase_deg"][k, r])))
    lines.append("(AC amplitude [1/mm^2] per unit incident AC power; phase lag in degrees)")
    return CommandResult(payload=payload, text="\n".join(lines))
