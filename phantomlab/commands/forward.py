"""``phantomlab forward``: what an instrument would measure for given optical properties
(layer 5: input and output only; the physics is in :mod:`phantomlab.transport`).

    phantomlab forward --kind srdr  --mua-per-mm L --musp-per-mm L --n L --rho-mm L [--model M] [--boundary B]
    phantomlab forward --kind sfdi  --mua-per-mm L --musp-per-mm L --n L --fx-per-mm L [--boundary B]
    phantomlab forward --kind total --mua-per-mm L --musp-per-mm L --n L [--model M] [--boundary B]
    phantomlab forward --kind slab  --mua-per-mm L --mus-per-mm L --g L --n L --thickness-mm D
                                    [--n-slide N --slides both|top|bottom] [--incidence collimated|diffuse]
    phantomlab forward --kind mc    --mua-per-mm L --mus-per-mm L --g L --n L [--thickness-mm D]
                                    [--rho-mm L [--time-ps L]] --photons N [--seed S] [--threads T]
    phantomlab forward --kind td    --mua-per-mm L --musp-per-mm L --n L --rho-mm L --time-ps L [...]
    phantomlab forward --kind fd    --mua-per-mm L --musp-per-mm L --n L --rho-mm L --frequency-mhz L [...]

(td and fd: :mod:`phantomlab.commands.forward_time`; mc: :mod:`phantomlab.commands.forward_mc`.
The per-entry lists are read in :mod:`phantomlab.commands.forward_options`, the text tables
made in :mod:`phantomlab.commands.forward_text`.)

Every list (``L``) is comma-separated or ``START:STOP:STEP``; the coefficient lists (and
``--g``, ``--n``) hold one entry per set of optical properties ("entry", usually one per
wavelength) and a single value is repeated for every entry.  Per-entry results in the JSON
are lists over the entries; spatially resolved results are lists (entries) of lists
(distances or frequencies).  The diffusion kinds take ``--musp-per-mm`` or
``--mus-per-mm`` with ``--g``; the slab and Monte Carlo kinds take ``--mus-per-mm`` with
``--g`` or ``--musp-per-mm`` with ``--g``.

Sizes are bounded (:mod:`phantomlab.limits`): each list by ``list_values``, entries ×
distances (or frequencies) by ``forward_points``, and the photons of a Monte Carlo run (all
entries together) by ``mc_photons``.  A Monte Carlo run that lasts longer than two seconds
shows its progress on stderr; Ctrl-C stops it between chunks of photons and prints nothing
on stdout.

Every reflectance is per unit power *incident* on the surface (DEVELOPERS.md, "Reflectance
conventions"): ``reflectance_per_mm2`` of ``--kind srdr`` (diffusion, which includes the
beam's entry loss 1 − R_specular) and of ``--kind mc --rho-mm`` (Monte Carlo) mean the same
thing and can be compared as they come; the JSON says so in ``reflectance_convention``.
"""

from __future__ import annotations

import argparse
import warnings

import numpy as np

from phantomlab.cli import CommandResult, add_json_option
from phantomlab.commands.forward_options import (check_g, common_inputs, option_list, option_number,
                                                 scattering_option, slab_inputs_json, slab_scattering, slide_pair)
from phantomlab.commands.forward_text import entry_table, grid_table
from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.limits import check_limit

__all__ = ["register", "KINDS", "MODELS", "REFLECTANCE_CONVENTION", "SLAB_KEYS"]

#: What every reflectance of this command is normalised to (the ``reflectance_convention`` key).
REFLECTANCE_CONVENTION = "per unit incident power; specular reflection excluded"

KINDS = ("srdr", "sfdi", "total", "slab", "mc", "td", "fd")

#: The models each kind accepts (the first is the default).
MODELS = {
    "srdr": ("kienle1997", "farrell1992"),
    "total": ("kienle1997", "farrell1992"),
    "sfdi": ("cuccia2009",),
    "slab": ("adding-doubling",),
    "mc": ("weighted", "analog"),
    "td": ("kienle1997", "contini1997", "patterson1989", "mc"),
    "fd": ("kienle1997", "contini1997", "mc"),
}

#: The slab quantities of ``--kind slab`` and ``--kind mc`` (JSON keys, one value per entry).
SLAB_KEYS = (
    "total_reflectance",
    "specular_reflectance",
    "diffuse_reflectance",
    "unscattered_reflectance",
    "total_transmittance",
    "unscattered_transmittance",
    "diffuse_transmittance",
    "absorbed_fraction",
)


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "forward",
        help="forward models: diffusion R(rho), R(fx), total Rd; adding-doubling slab; Monte Carlo",
        description="Compute what a measurement would read for given optical properties.",
    )
    parser.add_argument("--kind", required=True, choices=KINDS, help="which measurement to model")
    parser.add_argument(
        "--model",
        default=None,
        help="srdr/total: kienle1997 (default) or farrell1992; sfdi: cuccia2009; "
        "slab: adding-doubling; mc: the estimator, weighted (default) or analog; "
        "td: kienle1997 (default), contini1997, patterson1989, mc (needs --baseline); "
        "fd: kienle1997 (default), contini1997, mc (needs --baseline)",
    )
    parser.add_argument(
        "--boundary",
        default=None,
        help="diffusion kinds: method for the boundary coefficient, groenhuis1983 or haskell1994 "
        "(default: the model's published choice; groenhuis1983 for sfdi)",
    )
    parser.add_argument("--mua-per-mm", metavar="LIST", required=True, help="absorption coefficient [1/mm]")
    parser.add_argument("--musp-per-mm", metavar="LIST", help="reduced scattering coefficient [1/mm]")
    parser.add_argument("--mus-per-mm", metavar="LIST", help="scattering coefficient [1/mm]")
    parser.add_argument("--g", metavar="LIST", help="Henyey-Greenstein anisotropy, in (-1, 1)")
    parser.add_argument("--n", metavar="LIST", required=True, help="refractive index of the medium")
    parser.add_argument("--n-outside", metavar="N", default="1.0", help="refractive index outside (default 1.0)")
    parser.add_argument("--rho-mm", metavar="LIST", help="source-detector distances [mm] (srdr; mc)")
    parser.add_argument("--fx-per-mm", metavar="LIST", help="spatial frequencies [1/mm] (sfdi)")
    parser.add_argument("--time-ps", metavar="LIST", help="times after the pulse entered [ps] (td; mc: bin centres)")
    parser.add_argument("--frequency-mhz", metavar="LIST", help="modulation frequencies [MHz] (fd)")
    parser.add_argument("--geometry", choices=("reflectance", "transmittance"), default=None,
                        help="td: light leaving the entry face (default) or the far face of a slab")
    parser.add_argument("--baseline", metavar="FILE", help="Monte Carlo baseline for td/fd --model mc")
    parser.add_argument(
        "--thickness-mm", metavar="D", help="slab thickness [mm] (slab: required; mc: absent = semi-infinite)"
    )
    parser.add_argument("--n-slide", metavar="N", help="index of glass slides on the sample (slab, mc)")
    parser.add_argument(
        "--slides", choices=("both", "top", "bottom"), default="both", help="which faces carry a slide (slab, mc)"
    )
    parser.add_argument("--slide-thickness-mm", metavar="D", default="0", help="slide thickness [mm] (slab)")
    parser.add_argument(
        "--slide-mua-per-mm", metavar="MUA", default="0", help="absorption of the slide glass [1/mm] (slab)"
    )
    parser.add_argument(
        "--incidence", choices=("collimated", "diffuse"), default="collimated", help="illumination (slab)"
    )
    parser.add_argument("--photons", type=int, help="photons launched per entry (mc)")
    parser.add_argument("--seed", type=int, default=0, help="master random seed (mc; default 0)")
    parser.add_argument("--threads", type=int, default=None, help="threads (mc; default all cores)")
    parser.add_argument("--wavelength-nm", metavar="LIST", help="optional wavelength label of each entry [nm]")
    add_json_option(parser)
    parser.set_defaults(handler=handle)


def _model(args) -> str:
    valid = MODELS[args.kind]
    if args.model is None:
        return valid[0]
    if args.model not in valid:
        raise InputError(f"--model {args.model!r} is not a {args.kind} model; valid: {', '.join(valid)}")
    return args.model


# ---- the kinds ----------------------------------------------------------------------------


def handle(args: argparse.Namespace) -> CommandResult:
    model = _model(args)
    if args.kind in ("srdr", "sfdi", "total"):
        return _diffusion(args, model)
    if args.kind == "slab":
        return _slab(args)
    if args.kind in ("td", "fd"):
        from phantomlab.commands.forward_time import handle_time_kinds

        return handle_time_kinds(args, model)
    from phantomlab.commands.forward_mc import monte_carlo

    return monte_carlo(args, model)


def _diffusion(args, model: str) -> CommandResult:
    from phantomlab.transport import diffusion, spatial_frequency_domain

    scattering, which, g = scattering_option(args)
    if which == "mus" and g is None:
        raise InputError("--mus-per-mm needs --g to give the reduced scattering musp = mus (1 - g)")
    count, lists = common_inputs(args, scattering, g)
    musp = lists["scattering"]
    if which == "mus":  # μs′ = μs (1 − g)
        check_g(lists["g"], args.g)
        musp = musp * (1.0 - lists["g"])
    n_outside = option_number(args.n_outside, "--n-outside")
    common = dict(mua_per_mm=lists["mua"], musp_per_mm=musp, n=lists["n"], n_outside=n_outside)
    payload = {
        "kind": args.kind,
        "model": model,
        "mua_per_mm": lists["mua"],
        "musp_per_mm": musp,
        "n": lists["n"],
        "n_outside": n_outside,
        "reflectance_convention": REFLECTANCE_CONVENTION,
    }
    if lists["wavelength"] is not None:
        payload["wavelength_nm"] = lists["wavelength"]
    if args.kind == "srdr":
        if args.rho_mm is None:
            raise InputError("--kind srdr needs --rho-mm LIST (source-detector distances in mm)")
        rho = option_list(args.rho_mm, "--rho-mm")
        check_limit("forward_points", count * rho.size, given=f"{count} entries x {rho.size} distances")
        boundary = args.boundary or diffusion.DEFAULT_BOUNDARY[model]
        values = diffusion.srdr_reflectance(rho_mm=rho, model=model, boundary=boundary, **common)
        if model == "farrell1992":
            _warn_flux_only_mismatch(lists["n"], n_outside)
        payload.update(boundary=boundary, rho_mm=rho, reflectance_per_mm2=np.reshape(values, (count, rho.size)))
        text = grid_table("rho_mm", rho, "R [1/mm^2]", payload["reflectance_per_mm2"], payload)
        text += f"\n(R {REFLECTANCE_CONVENTION})"
    elif args.kind == "sfdi":
        if args.fx_per_mm is None:
            raise InputError("--kind sfdi needs --fx-per-mm LIST (spatial frequencies in 1/mm)")
        fx = option_list(args.fx_per_mm, "--fx-per-mm")
        check_limit("forward_points", count * fx.size, given=f"{count} entries x {fx.size} frequencies")
        boundary = args.boundary or "groenhuis1983"
        values = spatial_frequency_domain.sfdi_reflectance(fx_per_mm=fx, boundary=boundary, model=model, **common)
        payload.update(boundary=boundary, fx_per_mm=fx, reflectance=np.reshape(values, (count, fx.size)))
        text = grid_table("fx_per_mm", fx, "R [-]", payload["reflectance"], payload)
        text += f"\n(R {REFLECTANCE_CONVENTION})"
    else:
        boundary = args.boundary or diffusion.DEFAULT_BOUNDARY[model]
        values = diffusion.total_diffuse_reflectance(model=model, boundary=boundary, **common)
        payload.update(boundary=boundary, diffuse_reflectance=np.reshape(values, (count,)))
        text = entry_table(payload, ["diffuse_reflectance"])
    return CommandResult(payload=payload, text=text)


def _warn_flux_only_mismatch(n, n_outside: float) -> None:
    from phantomlab.transport.diffusion import FLUX_ONLY_MAX_INDEX_MISMATCH

    relative = np.asarray(n, float) / n_outside
    off = relative[np.abs(relative - 1.0) > FLUX_ONLY_MAX_INDEX_MISMATCH]
    if off.size:
        warnings.warn(
            f"srdr model farrell1992 (flux only) at n/n_outside = {off[np.argmax(np.abs(off - 1))]:.3g}: at a "
            f"mismatched surface it reads 8-21 % below Monte Carlo at 3-8 transport mean free paths "
            f"(n = 1.4 in air); --model kienle1997 is within 1-5 % there",
            PhantomlabWarning,
            stacklevel=2,
        )


def _slab(args) -> CommandResult:
    from phantomlab.transport.adding_doubling import slab_reflectance_transmittance

    count, lists, mus, g = slab_scattering(args)
    if args.thickness_mm is None:
        raise InputError("--kind slab needs --thickness-mm D (sample thickness in mm)")
    thickness = option_number(args.thickness_mm, "--thickness-mm")
    n_outside = option_number(args.n_outside, "--n-outside")
    n_slide = slide_pair(args)
    result = slab_reflectance_transmittance(
        mua_per_mm=lists["mua"],
        mus_per_mm=mus,
        g=g,
        thickness_mm=thickness,
        n=lists["n"],
        n_outside=n_outside,
        n_slide=n_slide,
        slide_thickness_mm=option_number(args.slide_thickness_mm, "--slide-thickness-mm"),
        slide_mua_per_mm=option_number(args.slide_mua_per_mm, "--slide-mua-per-mm"),
        incidence=args.incidence,
    )
    payload = {
        "kind": "slab",
        "model": "adding-doubling",
        "incidence": args.incidence,
        **slab_inputs_json(args, lists, mus=mus, g=g, n_outside=n_outside, thickness=thickness),
        "quadrature_points": result.quadrature_points,
    }
    if lists["wavelength"] is not None:
        payload["wavelength_nm"] = lists["wavelength"]
    for key in SLAB_KEYS:
        payload[key] = np.reshape(getattr(result, key), (count,))
    text = entry_table(payload, ["total_reflectance", "specular_reflectance", "total_transmittance",
                                  "unscattered_transmittance"])
    return CommandResult(payload=payload, text=text)
