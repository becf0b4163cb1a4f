"""``phantomlab forward``: the options read into per-entry arrays (layer 5: input only).

Every list option is comma-separated or ``START:STOP:STEP`` (:func:`option_list`); the
coefficient lists, ``--g`` and ``--n`` hold one value per entry or one for all
(:func:`per_entry`).  The scattering is ``--musp-per-mm`` or ``--mus-per-mm`` (with ``--g``),
exactly one of them (:func:`scattering_option`); the slab and Monte Carlo kinds need ``--g``
and get μs (:func:`slab_scattering`); ``--n-slide`` with ``--slides`` gives the slide
indices (:func:`slide_pair`).  Used by :mod:`phantomlab.commands.forward` and
:mod:`phantomlab.commands.forward_mc`.
"""

from __future__ import annotations

import numpy as np

from phantomlab.errors import InputError
from phantomlab.units import parse_number_list

__all__ = ["option_list", "option_number", "per_entry", "scattering_option", "check_g", "common_inputs",
           "slab_scattering", "slide_pair", "slab_inputs_json"]


def option_list(text, option: str):
    return None if text is None else parse_number_list(text, name=option)


def option_number(text, option: str) -> float:
    values = parse_number_list(text, name=option)
    if values.size != 1:
        raise InputError(f"{option} takes one number, got {text!r}")
    return float(values[0])


def per_entry(**lists) -> tuple[int, dict[str, np.ndarray]]:
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


def scattering_option(args):
    """The scattering list given, which one it is ('musp' or 'mus'), and --g if given."""
    musp = option_list(args.musp_per_mm, "--musp-per-mm")
    mus = option_list(args.mus_per_mm, "--mus-per-mm")
    g = option_list(args.g, "--g")
    if (musp is None) == (mus is None):
        raise InputError(f"--kind {args.kind} needs exactly one of --musp-per-mm or --mus-per-mm")
    return (musp, "musp", g) if musp is not None else (mus, "mus", g)


def check_g(g, text) -> None:
    if np.any(np.abs(g) >= 1):
        raise InputError(f"--g must lie in (-1, 1), got {text}")


def common_inputs(args, scattering: np.ndarray, g):
    mua = option_list(args.mua_per_mm, "--mua-per-mm")
    n = option_list(args.n, "--n")
    wavelength = option_list(args.wavelength_nm, "--wavelength-nm")
    count, lists = per_entry(mua=mua, scattering=scattering, g=g, n=n, wavelength=wavelength)
    return count, lists


def slab_scattering(args):
    scattering, which, g = scattering_option(args)
    if g is None:
        raise InputError(f"--kind {args.kind} needs --g (Henyey-Greenstein anisotropy)")
    count, lists = common_inputs(args, scattering, g)
    g_values = lists["g"]
    check_g(g_values, args.g)
    mus = lists["scattering"] / (1.0 - g_values) if which == "musp" else lists["scattering"]
    return count, lists, mus, g_values


def slide_pair(args):
    """None, one index for both faces, or a tuple (top, bottom) from --n-slide and --slides."""
    if args.n_slide is None:
        return None
    index = option_number(args.n_slide, "--n-slide")
    return {"both": index, "top": (index, None), "bottom": (None, index)}[args.slides]


def slab_inputs_json(args, lists, *, mus, g, n_outside: float, thickness) -> dict:
    """The inputs of a slab or Monte Carlo entry list as the JSON echoes them (``mua_per_mm`` to ``slides``)."""
    return {
        "mua_per_mm": lists["mua"],
        "mus_per_mm": mus,
        "g": g,
        "musp_per_mm": mus * (1.0 - g),
        "n": lists["n"],
        "n_outside": n_outside,
        "thickness_mm": thickness,
        "n_slide": None if args.n_slide is None else option_number(args.n_slide, "--n-slide"),
        "slides": None if args.n_slide is None else args.slides,
    }
