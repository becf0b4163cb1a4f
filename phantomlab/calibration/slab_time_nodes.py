"""Direct Monte Carlo runs through slabs for the time-domain transmittance model, kept in the cache (layer 3).

The time-resolved transmittance of a non-absorbing slab depends, for a given anisotropy g
and indices n, n_outside, on its thickness in transport lengths τ′ = μs′d only, once distance
and time are measured in units of the thickness: ρ/d and the diffusion time
y = D v t/d² = v t/(3 τ′ d) (D = 1/(3μs′), v = c/n).  One run at τ′ therefore serves every
(μs′, d) with μs′d = τ′, and absorption follows by the Beer–Lambert weight exp(−μa v t)
of each bin.  :mod:`phantomlab.calibration.slab_time_correction` interpolates between runs
(*nodes*) on a fixed grid in τ′, τ′ = 2^(k/4) (19 % apart), so the runs a fit needs are
shared by every later fit of a phantom with the same g and indices.

A node is one call of :func:`phantomlab.transport.montecarlo.simulate` (pencil beam at
normal incidence, Henyey–Greenstein scattering, Fresnel faces; μa = 0; time gate at
y = :data:`Y_GATE`) at thickness :data:`RUN_THICKNESS_MM` with μs = τ′/(d (1 − g)), tallying
the bottom face on rings of 0.05 d out to d/2 and in bins of 0.002 in y.  It is kept in the
baseline cache folder (:func:`~phantomlab.calibration.baseline_cache.baseline_folder`) as
``slab-time-g0.80-n1.400-out1.000-tau16.00.npz``: the tallies, their standard errors and the
inputs, written whole or not at all.
"""

from __future__ import annotations

import math
import os
import re
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from phantomlab.errors import InputError
from phantomlab.transport.time_domain_images import SPEED_OF_LIGHT_MM_PER_PS

__all__ = ["SlabNode", "NODE_PHOTONS", "NODE_SEED", "node_grid", "node_file_name", "build_node", "load_node",
           "obtain_nodes", "list_nodes", "TAU_PRIME_RANGE"]

#: Nodes at τ′ = 2^(k/4): 19 % apart (the correction's change between neighbours is a few
#: per cent on the early rise and under 1 % elsewhere, and it is interpolated linearly in ln τ′).
NODES_PER_OCTAVE = 4
#: Thickness range of the nodes [transport lengths]: below 4 a slab is too thin for the
#: diffusion model the correction multiplies; beyond 64 a run's photons cost too much.
TAU_PRIME_RANGE = (4.0, 64.0)
#: Photons of a node: its noise is part of the fit's SDs (about 1 % of the correction per
#: kernel width near the peak at 10 million, measured on tests/calibration/fixtures/mc_td_slab.npz).
NODE_PHOTONS = 10_000_000
#: Master seed of the nodes (each node adds its k).
NODE_SEED = 20_253
#: Thickness of the runs [mm] (any: only τ′ matters).
RUN_THICKNESS_MM = 10.0
#: Time gate and bin width of the runs, in diffusion time y = v t/(3 τ′ d).
Y_GATE = 1.6
Y_STEP = 0.002
#: Ring edges of the runs as fractions of the thickness.
RHO_EDGES_OVER_D = np.round(np.arange(0.0, 0.5001, 0.05), 10)
_FORMAT = 1
_NAME = re.compile(r"^slab-time-g(\d\.\d\d)-n(\d\.\d\d\d)-out(\d\.\d\d\d)-tau(\d+\.\d\d)\.npz$")


@dataclass(frozen=True, eq=False)
class SlabNode:
    """Time-resolved transmittance of one non-absorbing slab run (one node).

    Attributes
    ----------
    g, n, n_outside : float
    tau_prime : float
        μs′d of the run [transport lengths].
    thickness_mm : float [mm]
        d of the run.
    time_ps : ndarray (T,) [ps]
        Bin centres of the run.
    rho_edges_mm : ndarray (R + 1,) [mm]
        Ring edges of the run.
    values, sd : ndarray (R, T) [1/(mm² ps)]
        Transmittance per unit area and time per unit incident power, and its standard error.
    photons, seed : int
    path : Path or None
    """

    g: float
    n: float
    n_outside: float
    tau_prime: float
    thickness_mm: float
    time_ps: np.ndarray
    rho_edges_mm: np.ndarray
    values: np.ndarray
    sd: np.ndarray
    photons: int
    seed: int
    path: Path | None = None

    @property
    def musp_per_mm(self) -> float:
        """μs′ of the run [1/mm]."""
        return self.tau_prime / self.thickness_mm


def node_grid(tau_low: float, tau_high: float) -> list[float]:
    """The node τ′ values that bracket [tau_low, tau_high] (one node at or beyond each end)."""
    low = math.floor(NODES_PER_OCTAVE * math.log2(max(tau_low, TAU_PRIME_RANGE[0])) + 1e-9)
    high = math.ceil(NODES_PER_OCTAVE * math.log2(min(max(tau_high, tau_low), TAU_PRIME_RANGE[1])) - 1e-9)
    return [round(2.0 ** (k / NODES_PER_OCTAVE), 2) for k in range(low, max(high, low + 1) + 1)]


def _settings(g, n, n_outside) -> tuple[float, float, float]:
    from phantomlab.calibration.baseline_cache import cache_settings

    settings = cache_settings(g=g, n=n, n_outside=n_outside)  # the baselines' ranges and rounding
    return settings["g"], settings["n"], settings["n_outside"]


def node_file_name(*, g, n, n_outside, tau_prime) -> str:
    """``slab-time-g0.80-n1.400-out1.000-tau16.00.npz``."""
    g, n, n_outside = _settings(g, n, n_outside)
    return f"slab-time-g{g:.2f}-n{n:.3f}-out{n_outside:.3f}-tau{float(tau_prime):.2f}.npz"


def _node_seed(tau_prime: float) -> int:
    return NODE_SEED + int(round(NODES_PER_OCTAVE * math.log2(tau_prime)))


def build_node(*, g, n, n_outside=1.0, tau_prime, photons=NODE_PHOTONS, seed=None, progress=None) -> SlabNode:
    """Run one node (see the module docstring); ``progress(done, total)`` as for ``simulate``."""
    from phantomlab.transport.montecarlo import simulate

    g, n, n_outside = _settings(g, n, n_outside)
    if not TAU_PRIME_RANGE[0] * 0.999 <= tau_prime <= TAU_PRIME_RANGE[1] * 1.001:
        raise InputError(f"a slab {tau_prime:.3g} transport lengths thick is outside the slab model's range "
                         f"{TAU_PRIME_RANGE[0]:g}–{TAU_PRIME_RANGE[1]:g}")
    d = RUN_THICKNESS_MM
    v = SPEED_OF_LIGHT_MM_PER_PS / n
    y_edges = np.arange(0.0, Y_GATE + Y_STEP / 2, Y_STEP)
    time_ps = 0.5 * (y_edges[1:] + y_edges[:-1]) * 3.0 * tau_prime * d / v
    rho_edges = RHO_EDGES_OVER_D * d
    seed = _node_seed(tau_prime) if seed is None else int(seed)
    run = simulate(mua_per_mm=0.0, mus_per_mm=tau_prime / (d * (1.0 - g)), g=g, n=n, n_outside=n_outside,
                   thickness_mm=d, rho_mm=0.5 * (rho_edges[1:] + rho_edges[:-1]), time_ps=time_ps, time_gate=True,
                   photons=int(photons), seed=seed, progress=progress)
    if not np.allclose(run.rho_edges_mm, rho_edges):
        raise RuntimeError("the run's rings differ from the node's")  # pragma: no cover - a change in simulate
    return SlabNode(g=g, n=n, n_outside=n_outside, tau_prime=float(tau_prime), thickness_mm=d, time_ps=time_ps,
                    rho_edges_mm=rho_edges, values=np.asarray(run.transmittance_per_mm2_per_ps, float),
                    sd=np.asarray(run.transmittance_per_mm2_per_ps_sd, float), photons=int(photons), seed=seed)


def save_node(node: SlabNode, path: Path) -> None:
    """Write a node (a temporary file renamed into place: never half written)."""
    part = path.with_name("." + path.name + ".part")
    with open(part, "wb") as handle:
        np.savez_compressed(handle, format=_FORMAT, g=node.g, n=node.n, n_outside=node.n_outside,
                            tau_prime=node.tau_prime, thickness_mm=node.thickness_mm, time_ps=node.time_ps,
                            rho_edges_mm=node.rho_edges_mm, values=node.values.astype(np.float32),
                            sd=node.sd.astype(np.float32), photons=node.photons, seed=node.seed)
    os.replace(part, path)


def load_node(path) -> SlabNode:
    """Read a node file; one line (InputError) when it is not one of ours or is damaged."""
    path = Path(path)
    try:
        with np.load(path, allow_pickle=False) as data:
            if int(data["format"]) != _FORMAT:
                raise InputError(f"slab node {path.name}: format {int(data['format'])}, this version reads {_FORMAT}")
            values = np.asarray(data["values"], float)
            node = SlabNode(g=float(data["g"]), n=float(data["n"]), n_outside=float(data["n_outside"]),
                            tau_prime=float(data["tau_prime"]), thickness_mm=float(data["thickness_mm"]),
                            time_ps=np.asarray(data["time_ps"], float), rho_edges_mm=np.asarray(data["rho_edges_mm"], float),
                            values=values, sd=np.asarray(data["sd"], float), photons=int(data["photons"]),
                            seed=int(data["seed"]), path=path)
    except InputError:
        raise
    except (OSError, KeyError, ValueError, TypeError) as exc:
        raise InputError(f"slab node {path.name} cannot be read ({type(exc).__name__}); delete it or give --rebuild") from None
    R, T = node.rho_edges_mm.size - 1, node.time_ps.size
    if node.values.shape != (R, T) or node.sd.shape != (R, T) or not np.all(np.isfinite(node.values)):
        raise InputError(f"slab node {path.name} is damaged (tallies of the wrong shape or not finite); delete it "
                         "or give --rebuild")
    return node


def obtain_nodes(tau_primes, *, g, n, n_outside=1.0, folder=None, rebuild=False, progress=None,
                 photons=NODE_PHOTONS) -> list[SlabNode]:
    """The nodes at ``tau_primes`` (values of :func:`node_grid`): read from the cache, the missing ones run once.

    ``progress(done, total)`` counts photons over all the runs this call makes; an exception
    from it (or Ctrl-C) stops the run in progress, and writes nothing for it.
    """
    from phantomlab.calibration.baseline_cache import _writable_folder, baseline_folder

    root = baseline_folder(folder)
    wanted = sorted({round(float(t), 2) for t in tau_primes})
    nodes, missing = {}, []
    for tau in wanted:
        path = root / node_file_name(g=g, n=n, n_outside=n_outside, tau_prime=tau)
        if path.is_file() and not rebuild:
            node = load_node(path)
            expected = _settings(g, n, n_outside) + (tau,)
            made = (node.g, node.n, node.n_outside, node.tau_prime)
            if any(abs(a - b) > 5e-4 for a, b in zip(made, expected)):
                raise InputError(f"slab node {path.name} was made for other inputs than its name says; delete it or "
                                 "give --rebuild")
            nodes[tau] = node
        else:
            missing.append((tau, path))
    if missing:
        _writable_folder(root)
        total = photons * len(missing)
        for i, (tau, path) in enumerate(missing):
            report = None if progress is None else (lambda done, _t, i=i: progress(i * photons + done, total))
            node = build_node(g=g, n=n, n_outside=n_outside, tau_prime=tau, photons=photons, progress=report)
            save_node(node, path)
            nodes[tau] = SlabNode(**{**node.__dict__, "path": path})
    return [nodes[tau] for tau in wanted]


def list_nodes(folder=None) -> list[dict]:
    """The slab nodes in the cache folder, each ``{file, g, n, n_outside, tau_prime, megabytes, modified}``."""
    from phantomlab.calibration.baseline_cache import baseline_folder

    root = baseline_folder(folder)
    rows = []
    for path in sorted(root.glob("slab-time-*.npz")) if root.is_dir() else []:
        match = _NAME.match(path.name)
        if not match:
            continue
        g, n, n_out, tau = (float(v) for v in match.groups())
        rows.append({"file": str(path), "g": g, "n": n, "n_outside": n_out, "tau_prime": tau,
                     "megabytes": round(path.stat().st_size / 1e6, 3),
                     "modified": time.strftime("%Y-%m-%d %H:%M", time.localtime(path.stat().st_mtime))})
    return rows
