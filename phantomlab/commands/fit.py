"""``phantomlab fit``: fitted μa and μs′ of a measurement file (layer 5, no physics).

    phantomlab fit MEASUREMENT.csv --kind {srdr,sfdi,slab,sphere,optics,td,fd} [--n N] [--n-outside N]
                   [--thickness-mm D] [--model M] [--g G] [--baseline FILE] [--rebuild]
                   [--baseline-dir FOLDER] [--irf IRF.csv] [--geometry {reflectance,transmittance}]
                   [--musp-power-law] [--mua-from-stocks RECIPE.toml] [--json]

srdr, sfdi, td and fd fit with the Monte Carlo lookup unless ``--model`` names a diffusion model
(td and fd: where the lookup applies; elsewhere diffusion, said in a note); its
baseline (one per g, n, n_outside) comes from the per-user cache and is built there on first
use, with a progress bar on stderr (``phantomlab baseline list|clear``).

JSON keys (docs/contract.md): ``wavelength_nm``, ``mua_per_mm``, ``musp_per_mm``, ``mua_sd_per_mm``,
``musp_sd_per_mm``, ``model``, ``chi2_red``, ``warnings``; extras: ``kind``,
``covariance_mua_musp``, ``chi2_red_per_wavelength``, ``dof``, ``residuals``, ``parameters``,
``source``, ``replicates``, ``scale_factor`` (relative data), ``fit_quality`` (good, poor,
failed), ``fit_quality_reason``, ``sd_includes`` (see :mod:`phantomlab.calibration.fit_quality`);
slab and sphere: ``g``, ``g_sd`` (null when g was given), ``g_fitted``, ``total_reflectance``,
``total_transmittance`` (and ``collimated_transmittance``) with ``*_sd`` — for ``sphere``
derived from the readings — the model's values, and the lost-light keys when corrected.
Several files after each other are replicates of one phantom, combined with their spread
(td: histograms summed).  td adds ``time_shift_ps``, ``time_shift_sd_ps``, ``rho_mm``,
``amplitude``, ``background_counts`` (per wavelength and distance); fd adds
``phase_offset_deg``, ``phase_offset_sd_deg``, ``frequency_mhz`` when the phase offset was
fitted, and ``amplitude_scale_factor`` for a relative amplitude.
What the srdr/sfdi model ran with: ``n_used``, ``n_origin``, ``n_outside_used``,
``n_outside_origin`` (option, sidecar, default), ``g_used``, ``g_origin`` (option, sidecar,
batch, default, baseline file), ``baseline`` (the file), ``baseline_origin`` (cache, cache
(built now), file), ``g_note``; with a g per wavelength (the sidecar's ``[g_spectrum]``, the
batch's model) ``g_used`` is one per wavelength and ``baseline`` one file per g step of 0.02; td and fd with the default model: ``model_note`` (which model
was used and why: the Monte Carlo lookup, or diffusion where the lookup does not apply).
"""

from __future__ import annotations

import numpy as np

from phantomlab.cli import CommandResult, add_json_option
from phantomlab.commands._baseline_options import ProgressBar, add_baseline_options

__all__ = ["register"]


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "fit",
        help="fit mua and mus' to a measurement file (srdr, sfdi, slab, sphere, optics, td, fd)",
        description="Inverse fit of a measurement file: mua and mus' per wavelength with SDs. "
        "Metadata come from NAME.toml beside the file; options win over it.",
    )
    parser.add_argument("files", nargs="+", metavar="MEASUREMENT.csv",
                        help="the measurement file (several: replicates of one phantom)")
    parser.add_argument("--kind", required=True, choices=("srdr", "sfdi", "slab", "sphere", "optics", "td", "fd"),
                        help="sphere: raw integrating-sphere readings, the spheres described in the sidecar; "
                        "td: time-resolved histograms with their IRF; fd: AC amplitude and phase")
    parser.add_argument("--n", type=float, default=None, metavar="N", help="refractive index of the phantom")
    parser.add_argument("--n-outside", type=float, default=None, metavar="N",
                        help="refractive index outside (default 1.0, air)")
    parser.add_argument("--thickness-mm", type=float, default=None, metavar="D", help="slab thickness in mm")
    parser.add_argument("--model", default=None, metavar="M",
                        help="srdr: mc (default, Monte Carlo lookup), kienle1997, farrell1992; sfdi: mc "
                        "(default), cuccia2009; slab, sphere: adding-doubling; td: mc (default where it applies: "
                        "the lookup for reflectance, the Monte Carlo slab model for transmittance, whose first "
                        "fit runs slabs of ten million photons, minutes each, kept in the cache; else kienle1997, "
                        "or contini1997 for transmittance, said in a note), kienle1997, contini1997, "
                        "patterson1989; fd: mc "
                        "(default where it applies, else kienle1997), kienle1997, contini1997, "
                        "fantini1994 (slope method)")
    parser.add_argument("--g", type=float, default=None, metavar="G",
                        help="anisotropy: the Monte Carlo lookup's baseline (srdr, sfdi; default: the "
                        "sidecar's g or [g_spectrum], else 0.8, said in the output; 0-0.95); slab, sphere: assumed (without it g is fitted from the "
                        "collimated transmittance when the file has it)")
    parser.add_argument("--baseline", default=None, metavar="FILE",
                        help="a stored Monte Carlo baseline file to use instead of the cached one")
    add_baseline_options(parser)
    parser.add_argument("--irf", default=None, metavar="IRF.csv",
                        help="td: the instrument response (time_ps,counts), instead of irf = ... in the sidecar")
    parser.add_argument("--geometry", default=None, choices=("reflectance", "transmittance"),
                        help="td: reflectance (default) or transmittance through a slab (needs --thickness-mm)")
    parser.add_argument("--musp-power-law", action="store_true",
                        help="fit mus' as a power law a (lambda/500 nm)^-b jointly across the band")
    parser.add_argument("--mua-from-stocks", metavar="RECIPE.toml", default=None,
                        help="fit mua as the matrix plus a non-negative amount of each stock of this recipe "
                        "(the amounts are volume fraction x potency)")
    add_json_option(parser)
    parser.set_defaults(handler=_fit)


def quality_lines(result) -> list[str]:
    """The verdict and what the SDs include, as the lines above the table."""
    if result.fit_quality is None:
        return []
    head = {"good": "fit quality: good", "poor": "fit quality: POOR", "failed": "fit quality: FAILED"}[result.fit_quality]
    lines = [head, f"  {result.fit_quality_reason}"]
    if result.sd_includes:
        lines.append("SDs include: " + ", ".join(part.replace("_", " ") for part in result.sd_includes))
    return lines


def _table(result) -> str:
    scaled = result.scale_factor is not None  # relative data: the fitted instrument scale too
    fitted_g = bool(result.extras.get("g_fitted"))
    header = (f"{'wavelength_nm':>13}  {'mua [1/mm]':>11}  {'sd':>9}  {'musp [1/mm]':>11}  {'sd':>9}"
              + (f"  {'g':>7}  {'sd':>7}" if fitted_g else "")
              + f"  {'chi2_red':>8}" + (f"  {'scale':>10}" if scaled else ""))
    lines = [f"fit of {result.name} ({result.kind}, model {result.model})"]
    lines += quality_lines(result)
    lines += [header, "-" * len(header)]

    def number(value, width, spec):
        return f"{value:{width}{spec}}" if np.isfinite(value) else f"{'-':>{width}}"

    scales = result.scale_factor if scaled else np.full(result.wavelength_nm.shape, np.nan)
    nothing = np.full(result.wavelength_nm.shape, np.nan)
    g_values = np.asarray(result.extras.get("g", nothing), float)
    g_sds = np.asarray(result.extras.get("g_sd") if result.extras.get("g_sd") is not None else nothing, float)
    for w, a, sa, s, ss, gv, gs, c, k in zip(result.wavelength_nm, result.mua_per_mm, result.mua_sd_per_mm,
                                             result.musp_per_mm, result.musp_sd_per_mm, g_values, g_sds,
                                             result.chi2_red_per_wavelength, scales):
        lines.append(f"{w:13.1f}  {number(a, 11, '.5g')}  {number(sa, 9, '.3g')}  {number(s, 11, '.5g')}  "
                     f"{number(ss, 9, '.3g')}" + (f"  {number(gv, 7, '.4f')}  {number(gs, 7, '.2g')}" if fitted_g else "")
                     + f"  {number(c, 8, '.3g')}" + (f"  {number(k, 10, '.4g')}" if scaled else ""))
    lines.append("reduced chi2 over the file: " + (f"{result.chi2_red:.3g}" if np.isfinite(result.chi2_red)
                                                    else "- (no degrees of freedom, or no sd column)"))
    if "g_fitted" in result.extras:
        if fitted_g:
            lines.append("g: fitted from the collimated transmittance (with mua and musp)")
        else:
            lines.append(f"g: {result.parameters['g']['value']:g} given (assumed, not fitted; a collimated "
                         f"transmittance would let the fit return it)")
    if result.kind == "sphere":
        correction = np.asarray(result.extras.get("sphere_correction_reflectance"), float)
        lines.append(f"sphere correction: derived R / (plain ratio to the standard) = {np.nanmin(correction):.4g} "
                     f"to {np.nanmax(correction):.4g}")
    if result.extras.get("lost_light") == "monte-carlo":
        lost_r = np.asarray(result.extras["lost_reflectance_fraction"], float)
        lost_t = np.asarray(result.extras["lost_transmittance_fraction"], float)
        lines.append(f"lost light corrected by Monte Carlo ({result.extras['lost_light_rounds']} rounds): "
                     f"{100 * lost_r.min():.1f} to {100 * lost_r.max():.1f} % of the diffuse reflectance, "
                     f"{100 * lost_t.min():.1f} to {100 * lost_t.max():.1f} % of the diffuse transmittance")
    lines += result.parameter_lines()
    if result.kind == "sphere":
        from phantomlab.recipe.cautions import CHARACTERISATION_CAUTION, CLOSING_LINE, SPHERE_COATING_CAUTION

        lines += [f"caution: {text}" for text in (SPHERE_COATING_CAUTION, CHARACTERISATION_CAUTION, CLOSING_LINE)]
    shifts = getattr(result, "time_shift_ps", None)
    if shifts is not None and np.size(shifts):
        rho = result.curves.get("rho_mm", [])
        for w, row, row_sd in zip(result.wavelength_nm, shifts, result.time_shift_sd_ps):
            parts = [f"{r:g} mm: {t:.1f} ± {sd:.2g} ps" for r, t, sd in zip(rho, row, row_sd)]
            lines.append(f"time shift at {w:g} nm: " + ", ".join(parts))
    offsets = getattr(result, "phase_offset_deg", None)
    if offsets is not None:
        freq = result.curves.get("frequency_mhz", [])
        offset_sds = getattr(result, "phase_offset_sd_deg", None)
        offset_sds = np.full(np.shape(offsets), np.nan) if offset_sds is None else np.asarray(offset_sds, float)
        for w, row, row_sd in zip(result.wavelength_nm, offsets, offset_sds):
            lines.append(f"phase offset at {w:g} nm: " + ", ".join(
                f"{f:g} MHz {o:.2f}" + (f" ± {sd:.2g}" if np.isfinite(sd) else "") + " deg"
                for f, o, sd in zip(freq, row, row_sd)))
    lines += input_lines(result.extras)
    return "\n".join(lines)


def input_lines(inputs) -> list[str]:
    """What the model ran with, from a fit's ``extras`` or JSON (the keys ``n_used`` ... ``g_note``)."""
    from phantomlab.calibration.fit_inputs import input_parts

    lines = [f"note: {inputs['model_note']}"] if inputs.get("model_note") else []
    lines += input_parts(inputs)
    if inputs.get("g_note"):
        lines.append(f"note: {inputs['g_note']}")
    return lines


def _fit(args) -> CommandResult:
    from phantomlab.calibration import fit_measurement_file
    from phantomlab.calibration.spectral import SpectralConstraint

    constraint = SpectralConstraint(musp_power_law=True) if args.musp_power_law else None
    if args.mua_from_stocks:
        from phantomlab.calibration.observations import stock_constraint
        from phantomlab.recipe import load_recipe

        constraint = stock_constraint(load_recipe(args.mua_from_stocks), musp_power_law=args.musp_power_law)
    files = args.files[0] if len(args.files) == 1 else list(args.files)
    result = fit_measurement_file(
        files, kind=args.kind, n=args.n, n_outside=args.n_outside, thickness_mm=args.thickness_mm,
        g=args.g, model=args.model, baseline=args.baseline, constraint=constraint, irf=args.irf,
        geometry=args.geometry, baseline_dir=args.baseline_dir, rebuild=args.rebuild, progress=ProgressBar(),
    )
    return CommandResult(payload=result.to_json(), text=_table(result))
