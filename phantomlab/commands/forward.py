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

(td and fd: :mod:`phantomlab.commands.forward_time`.)

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
import sys
import time
import warnings

import numpy as np

from phantomlab.cli import CommandResult, add_json_option
from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.limits import check_limit
from phantomlab.units import parse_number_list

__all__ = ["register", "KINDS", "MODELS", "REFLECTANCE_CONVENTION"]

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

_SLAB_KEYS = (
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


# ---- reading the options ------------------------------------------------------------------


def _list(text, option: str):
    return None if text is None else parse_number_list(text, name=option)


def _number(text, option: str) -> float:
    values = parse_number_list(text, name=option)
    if values.size != 1:
        raise InputError(f"{option} takes one number, got {text!r}")
    return float(values[0])


def _entries(**lists) -> tuple[int, dict[str, np.ndarray]]:
    sizes = {name: values.size for name, values in lists.items() if values is not None}
    count = max(sizes.values())
    for name, size in sizes.items():
        if size not in (1, count):
            shown = ", ".join(f"{k} {v}" for k, v in sizes.items())
            raise InputError(
                f"per-entry lists must have one value or the same length; got {shown} values"
            )
    return count, {
        name: (np.broadcast_to(values, (count,)).copy() if values is not None else None)
        for name, values in lists.items()
    }


def _model(args) -> str:
    valid = MODELS[args.kind]
    if args.model is None:
        return valid[0]
    if args.model not in valid:
        raise InputError(f"--model {args.model!r} is not a {args.kind} model; valid: {', '.join(valid)}")
    return args.model


def _scattering(args):
    """The scattering list given, which one it is ('musp' or 'mus'), and --g if given."""
    musp = _list(args.musp_per_mm, "--musp-per-mm")
    mus = _list(args.mus_per_mm, "--mus-per-mm")
    g = _list(args.g, "--g")
    if (musp is None) == (mus is None):
        raise InputError(f"--kind {args.kind} needs exactly one of --musp-per-mm or --mus-per-mm")
    return (musp, "musp", g) if musp is not None else (mus, "mus", g)


def _check_g(g, text) -> None:
    if np.any(np.abs(g) >= 1):
        raise InputError(f"--g must lie in (-1, 1), got {text}")


# ---- the kinds ----------------------------------------------------------------------------


def handle(args: argparse.Namespace) -> CommandResult:
    model = _model(args)
    if args.kind in ("srdr", "sfdi", "total"):
        return _diffusion(args, model)
    if args.kind == "slab":
        return _slab(args)
    if args.kind in ("td", "fd"):
        from phantomlab.commands.forward_time import handle_time_kinds

        return handle_time_kinds(args, model, common_inputs=_common_inputs, scattering=_scattering,
                                 entries_list=_list, number=_number, labels=_labels)
    return _monte_carlo(args, model)


def _common_inputs(args, scattering: np.ndarray, g):
    mua = _list(args.mua_per_mm, "--mua-per-mm")
    n = _list(args.n, "--n")
    wavelength = _list(args.wavelength_nm, "--wavelength-nm")
    count, lists = _entries(mua=mua, scattering=scattering, g=g, n=n, wavelength=wavelength)
    return count, lists


def _diffusion(args, model: str) -> CommandResult:
    from phantomlab.transport import diffusion

    scattering, which, g = _scattering(args)
    if which == "mus" and g is None:
        raise InputError("--mus-per-mm needs --g to give the reduced scattering musp = mus (1 - g)")
    count, lists = _common_inputs(args, scattering, g)
    musp = lists["scattering"]
    if which == "mus":  # μs′ = μs (1 − g)
        _check_g(lists["g"], args.g)
        musp = musp * (1.0 - lists["g"])
    n_outside = _number(args.n_outside, "--n-outside")
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
        rho = _list(args.rho_mm, "--rho-mm")
        check_limit("forward_points", count * rho.size, given=f"{count} entries x {rho.size} distances")
        boundary = args.boundary or diffusion.DEFAULT_BOUNDARY[model]
        values = diffusion.srdr_reflectance(rho_mm=rho, model=model, boundary=boundary, **common)
        if model == "farrell1992":
            _warn_flux_only_mismatch(lists["n"], n_outside)
        payload.update(boundary=boundary, rho_mm=rho, reflectance_per_mm2=np.reshape(values, (count, rho.size)))
        text = _grid_table("rho_mm", rho, "R [1/mm^2]", payload["reflectance_per_mm2"], payload)
        text += f"\n(R {REFLECTANCE_CONVENTION})"
    elif args.kind == "sfdi":
        if args.fx_per_mm is None:
            raise InputError("--kind sfdi needs --fx-per-mm LIST (spatial frequencies in 1/mm)")
        fx = _list(args.fx_per_mm, "--fx-per-mm")
        check_limit("forward_points", count * fx.size, given=f"{count} entries x {fx.size} frequencies")
        boundary = args.boundary or "groenhuis1983"
        values = diffusion.sfdi_reflectance(fx_per_mm=fx, boundary=boundary, model=model, **common)
        payload.update(boundary=boundary, fx_per_mm=fx, reflectance=np.reshape(values, (count, fx.size)))
        text = _grid_table("fx_per_mm", fx, "R [-]", payload["reflectance"], payload)
        text += f"\n(R {REFLECTANCE_CONVENTION})"
    else:
        boundary = args.boundary or diffusion.DEFAULT_BOUNDARY[model]
        values = diffusion.total_diffuse_reflectance(model=model, boundary=boundary, **common)
        payload.update(boundary=boundary, diffuse_reflectance=np.reshape(values, (count,)))
        text = _entry_table(payload, ["diffuse_reflectance"])
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


def _slab_scattering(args):
    scattering, which, g = _scattering(args)
    if g is None:
        raise InputError(f"--kind {args.kind} needs --g (Henyey-Greenstein anisotropy)")
    count, lists = _common_inputs(args, scattering, g)
    g_values = lists["g"]
    _check_g(g_values, args.g)
    mus = lists["scattering"] / (1.0 - g_values) if which == "musp" else lists["scattering"]
    return count, lists, mus, g_values


def _slide_pair(args):
    """None, one index for both faces, or a tuple (top, bottom) from --n-slide and --slides."""
    if args.n_slide is None:
        return None
    index = _number(args.n_slide, "--n-slide")
    return {"both": index, "top": (index, None), "bottom": (None, index)}[args.slides]


def _slab(args) -> CommandResult:
    from phantomlab.transport.adding_doubling import slab_reflectance_transmittance

    count, lists, mus, g = _slab_scattering(args)
    if args.thickness_mm is None:
        raise InputError("--kind slab needs --thickness-mm D (sample thickness in mm)")
    thickness = _number(args.thickness_mm, "--thickness-mm")
    n_outside = _number(args.n_outside, "--n-outside")
    n_slide = _slide_pair(args)
    result = slab_reflectance_transmittance(
        mua_per_mm=lists["mua"],
        mus_per_mm=mus,
        g=g,
        thickness_mm=thickness,
        n=lists["n"],
        n_outside=n_outside,
        n_slide=n_slide,
        slide_thickness_mm=_number(args.slide_thickness_mm, "--slide-thickness-mm"),
        slide_mua_per_mm=_number(args.slide_mua_per_mm, "--slide-mua-per-mm"),
        incidence=args.incidence,
    )
    payload = {
        "kind": "slab",
        "model": "adding-doubling",
        "incidence": args.incidence,
        "mua_per_mm": lists["mua"],
        "mus_per_mm": mus,
        "g": g,
        "musp_per_mm": mus * (1.0 - g),
        "n": lists["n"],
        "n_outside": n_outside,
        "thickness_mm": thickness,
        "n_slide": None if args.n_slide is None else _number(args.n_slide, "--n-slide"),
        "slides": None if args.n_slide is None else args.slides,
        "quadrature_points": result.quadrature_points,
    }
    if lists["wavelength"] is not None:
        payload["wavelength_nm"] = lists["wavelength"]
    for key in _SLAB_KEYS:
        payload[key] = np.reshape(getattr(result, key), (count,))
    text = _entry_table(payload, ["total_reflectance", "specular_reflectance", "total_transmittance",
                                  "unscattered_transmittance"])
    return CommandResult(payload=payload, text=text)


def _monte_carlo(args, estimator: str) -> CommandResult:
    try:
        from phantomlab.transport.montecarlo import simulate
    except ImportError as exc:  # the engine is a separate module of the transport layer
        raise InputError(f"the Monte Carlo engine is not available here ({exc})") from None

    count, lists, mus, g = _slab_scattering(args)
    if args.incidence != "collimated":
        raise InputError("--kind mc models a normally incident pencil beam; --incidence diffuse is for --kind slab")
    if _number(args.slide_mua_per_mm, "--slide-mua-per-mm") != 0.0:
        raise InputError("--kind mc takes clear slides only; --slide-mua-per-mm is for --kind slab")
    if args.photons is None:
        raise InputError("--kind mc needs --photons N (photons launched per entry)")
    if args.photons < 1:
        raise InputError(f"--photons must be a whole number >= 1, got {args.photons}")
    check_limit("mc_photons", args.photons * count, given=f"--photons {args.photons} x {count} entries")
    thickness = None if args.thickness_mm is None else _number(args.thickness_mm, "--thickness-mm")
    rho = _list(args.rho_mm, "--rho-mm")
    if rho is not None:
        check_limit("forward_points", count * rho.size, given=f"{count} entries x {rho.size} distances")
    time = _list(args.time_ps, "--time-ps")
    if time is not None and rho is not None:
        check_limit("forward_points", count * rho.size * time.size,
                    given=f"{count} entries x {rho.size} distances x {time.size} times")
    n_outside = _number(args.n_outside, "--n-outside")
    n_slide = _slide_pair(args)
    shown = _Progress(total=args.photons * count)
    runs = [
        simulate(
            mua_per_mm=float(lists["mua"][k]),
            mus_per_mm=float(mus[k]),
            g=float(g[k]),
            n=float(lists["n"][k]),
            n_outside=n_outside,
            thickness_mm=thickness,
            rho_mm=rho,
            time_ps=time,
            photons=args.photons,
            seed=args.seed,
            threads=args.threads,
            estimator=estimator,
            n_slide=n_slide,
            progress=shown.entry(k, args.photons),
        )
        for k in range(count)
    ]
    shown.close()
    payload = {
        "kind": "mc",
        "model": estimator,
        "estimator": estimator,
        "mua_per_mm": lists["mua"],
        "mus_per_mm": mus,
        "g": g,
        "musp_per_mm": mus * (1.0 - g),
        "n": lists["n"],
        "n_outside": n_outside,
        "thickness_mm": thickness,
        "n_slide": None if args.n_slide is None else _number(args.n_slide, "--n-slide"),
        "slides": None if args.n_slide is None else args.slides,
        "photons": int(args.photons),
        "seed": int(args.seed),
        "threads": runs[0].threads,
        "seconds": float(sum(run.seconds for run in runs)),
        "seconds_each": [float(run.seconds) for run in runs],
        "figure_of_merit": [float(run.figure_of_merit) for run in runs],
        "interactions": [int(run.interactions) for run in runs],
    }
    if lists["wavelength"] is not None:
        payload["wavelength_nm"] = lists["wavelength"]
    for key in _SLAB_KEYS:
        payload[key] = np.array([float(getattr(run, key)) for run in runs])
        sd = f"{key}_sd"
        if hasattr(runs[0], sd):
            payload[sd] = np.array([float(getattr(run, sd)) for run in runs])
    columns = ["total_reflectance", "specular_reflectance", "total_transmittance"]
    text = _entry_table(payload, columns, with_sd=True)
    if rho is not None:
        payload["rho_mm"] = rho
        payload["reflectance_per_mm2"] = np.array([run.reflectance_per_mm2 for run in runs])
        payload["reflectance_per_mm2_sd"] = np.array([run.reflectance_per_mm2_sd for run in runs])
        payload["reflectance_convention"] = REFLECTANCE_CONVENTION
        text += "\n" + _grid_table("rho_mm", rho, "R [1/mm^2]", payload["reflectance_per_mm2"], payload)
        text += f"\n(R {REFLECTANCE_CONVENTION}; annulus averages)"
    if time is not None:
        payload["time_ps"] = time
        for key in ("reflectance_per_mm2_per_ps", "transmittance_per_mm2_per_ps"):
            if getattr(runs[0], key) is not None:
                payload[key] = np.array([getattr(run, key) for run in runs])
                payload[key + "_sd"] = np.array([getattr(run, key + "_sd") for run in runs])
        text += f"\ntime-resolved tallies on {time.size} time bins: in the JSON (reflectance_per_mm2_per_ps)"
    text += (
        f"\n{args.photons} photons per entry, seed {args.seed}, {payload['seconds']:.3g} s simulated"
        " (compilation excluded)"
    )
    return CommandResult(payload=payload, text=text)


class _Progress:
    """Progress of a Monte Carlo command on stderr, once it has run for two seconds.

    On a terminal one line is rewritten in place (at most once a second); otherwise a line is
    printed every ten per cent, or every minute.  stdout stays untouched (the ``--json`` contract).
    """

    def __init__(self, *, total: int, stream=None, after_s: float = 2.0) -> None:
        self.total = max(int(total), 1)
        self.stream = stream if stream is not None else sys.stderr
        self.after_s = after_s
        self.started = time.monotonic()
        self.last_fraction = 0.0
        self.shown_at = self.started
        self.printed = False
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())

    def entry(self, index: int, photons: int):
        def report(done: int, _total: int) -> None:
            self.show(index * photons + done)

        return report

    def show(self, done: int) -> None:
        now = time.monotonic()
        elapsed = now - self.started
        if elapsed < self.after_s:
            return
        fraction = done / self.total
        if self.printed and fraction < 1.0:
            if self.tty and now - self.shown_at < 1.0:
                return
            if not self.tty and fraction - self.last_fraction < 0.1 - 1e-9 and now - self.shown_at < 60.0:
                return
        left = elapsed * (1.0 - fraction) / fraction if fraction > 0 else float("nan")
        line = (f"Monte Carlo: {100 * fraction:3.0f} % of {self.total:,} photons, {elapsed:.0f} s,"
                f" about {left:.0f} s left (Ctrl-C stops)")
        self.stream.write(("\r" + line) if self.tty else line + "\n")
        self.stream.flush()
        self.printed, self.last_fraction, self.shown_at = True, fraction, now

    def close(self) -> None:
        if self.printed and self.tty:
            self.stream.write("\n")
            self.stream.flush()


# ---- readable output ------------------------------------------------------------------------


def _labels(payload) -> list[str]:
    count = len(payload["mua_per_mm"])
    if "wavelength_nm" in payload:
        return [f"{w:g} nm" for w in payload["wavelength_nm"]]
    return [f"#{k + 1}" for k in range(count)]


def _header(payload) -> str:
    scatter = "musp_per_mm" if payload["kind"] in ("srdr", "sfdi", "total") else "mus_per_mm"
    unit_name = "mus' [1/mm]" if scatter == "musp_per_mm" else "mus [1/mm]"
    lines = [f"{payload['kind']} by {payload['model']}"
             + (f", boundary {payload['boundary']}" if "boundary" in payload else "")
             + f", n_outside {payload['n_outside']:g}"]
    for label, mua, sc, n, k in zip(
        _labels(payload), payload["mua_per_mm"], payload[scatter], payload["n"], range(len(payload["n"]))
    ):
        g = f"  g {payload['g'][k]:.4g}" if "g" in payload else ""
        lines.append(f"  {label}: mua {mua:.4g} [1/mm]  {unit_name} {sc:.4g}{g}  n {n:.4g}")
    return "\n".join(lines)


def _grid_table(grid_name: str, grid, value_name: str, values, payload) -> str:
    labels = _labels(payload)
    width = max(14, *(len(label) + 2 for label in labels))
    lines = [_header(payload), "", f"{grid_name:>10}" + "".join(f"{label:>{width}}" for label in labels)]
    lines.append(f"{'':>10}" + "".join(f"{value_name:>{width}}" for _ in labels))
    for j, x in enumerate(grid):
        lines.append(f"{x:>10.4g}" + "".join(f"{row[j]:>{width}.5g}" for row in values))
    return "\n".join(lines)


def _entry_table(payload, keys: list[str], *, with_sd: bool = False) -> str:
    labels = _labels(payload)
    lines = [_header(payload), ""]
    head = f"{'entry':>10}" + "".join(f"{key:>28}" for key in keys)
    lines.append(head)
    for k, label in enumerate(labels):
        cells = []
        for key in keys:
            value = payload[key][k]
            sd = payload.get(f"{key}_sd")
            cell = f"{value:.5g}" + (f" ± {sd[k]:.2g}" if with_sd and sd is not None else "")
            cells.append(f"{cell:>28}")
        lines.append(f"{label:>10}" + "".join(cells))
    lines.append("(fractions of the incident power)")
    return "\n".join(lines)
