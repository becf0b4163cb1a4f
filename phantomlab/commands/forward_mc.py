"""``phantomlab forward --kind mc``: our Monte Carlo engine run per entry, with its progress (layer 5).

    phantomlab forward --kind mc --mua-per-mm L --mus-per-mm L --g L --n L [--thickness-mm D]
                                 [--rho-mm L [--time-ps L]] --photons N [--seed S] [--threads T]

One :func:`phantomlab.transport.montecarlo.simulate` run per entry (called by
:mod:`phantomlab.commands.forward`), the photons of all entries bounded together by
``mc_photons`` and the tallies by ``forward_points``; a run longer than two seconds shows its
progress on stderr (:class:`MonteCarloProgress`), never on stdout.  JSON: the slab quantities
with their SDs, ``reflectance_per_mm2`` per distance with ``--rho-mm``, the time-resolved
tallies with ``--time-ps``, and the run's ``photons``, ``seed``, ``threads``, ``seconds``.
"""

from __future__ import annotations

import sys
import time

import numpy as np

from phantomlab.cli import CommandResult
from phantomlab.commands.forward import REFLECTANCE_CONVENTION, SLAB_KEYS
from phantomlab.commands.forward_options import (option_list, option_number, slab_inputs_json, slab_scattering,
                                                 slide_pair)
from phantomlab.commands.forward_text import entry_table, grid_table
from phantomlab.errors import InputError
from phantomlab.limits import check_limit

__all__ = ["monte_carlo", "MonteCarloProgress"]


def monte_carlo(args, estimator: str) -> CommandResult:
    try:
        from phantomlab.transport.montecarlo import simulate
    except ImportError as exc:  # the engine is a separate module of the transport layer
        raise InputError(f"the Monte Carlo engine is not available here ({exc})") from None

    count, lists, mus, g = slab_scattering(args)
    if args.incidence != "collimated":
        raise InputError("--kind mc models a normally incident pencil beam; --incidence diffuse is for --kind slab")
    if option_number(args.slide_mua_per_mm, "--slide-mua-per-mm") != 0.0:
        raise InputError("--kind mc takes clear slides only; --slide-mua-per-mm is for --kind slab")
    if args.photons is None:
        raise InputError("--kind mc needs --photons N (photons launched per entry)")
    if args.photons < 1:
        raise InputError(f"--photons must be a whole number >= 1, got {args.photons}")
    check_limit("mc_photons", args.photons * count, given=f"--photons {args.photons} x {count} entries")
    thickness = None if args.thickness_mm is None else option_number(args.thickness_mm, "--thickness-mm")
    rho = option_list(args.rho_mm, "--rho-mm")
    if rho is not None:
        check_limit("forward_points", count * rho.size, given=f"{count} entries x {rho.size} distances")
    time = option_list(args.time_ps, "--time-ps")
    if time is not None and rho is not None:
        check_limit("forward_points", count * rho.size * time.size,
                    given=f"{count} entries x {rho.size} distances x {time.size} times")
    n_outside = option_number(args.n_outside, "--n-outside")
    n_slide = slide_pair(args)
    shown = MonteCarloProgress(total=args.photons * count)
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
        **slab_inputs_json(args, lists, mus=mus, g=g, n_outside=n_outside, thickness=thickness),
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
    for key in SLAB_KEYS:
        payload[key] = np.array([float(getattr(run, key)) for run in runs])
        sd = f"{key}_sd"
        if hasattr(runs[0], sd):
            payload[sd] = np.array([float(getattr(run, sd)) for run in runs])
    columns = ["total_reflectance", "specular_reflectance", "total_transmittance"]
    text = entry_table(payload, columns, with_sd=True)
    if rho is not None:
        payload["rho_mm"] = rho
        payload["reflectance_per_mm2"] = np.array([run.reflectance_per_mm2 for run in runs])
        payload["reflectance_per_mm2_sd"] = np.array([run.reflectance_per_mm2_sd for run in runs])
        payload["reflectance_convention"] = REFLECTANCE_CONVENTION
        text += "\n" + grid_table("rho_mm", rho, "R [1/mm^2]", payload["reflectance_per_mm2"], payload)
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


class MonteCarloProgress:
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
