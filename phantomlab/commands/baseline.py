"""``phantomlab baseline``: build or inspect a stored Monte Carlo baseline (layer 5, no physics).

    phantomlab baseline build OUT.npz --g G --n N [--n-outside N] [--mua-ref-per-mm A]
                              [--mus-ref-per-mm S] [--photons P] [--seed S] [--threads T]
                              [--force] [--json]
    phantomlab baseline show FILE.npz [--json]
    phantomlab baseline list [--baseline-dir FOLDER] [--json]
    phantomlab baseline clear [--baseline-dir FOLDER] [--json]

A baseline is one analog Monte Carlo run in a half-space at a reference (μa, μs) with every
exit kept (``phantomlab.transport.montecarlo.build_baseline``); ``phantomlab fit --model mc
--baseline FILE`` and ``batch measure`` re-weight and scale it for every trial μa, μs′.
It is made for one g, one phantom index and one outside index: build one per phantom
family.  JSON keys: ``file``, ``g``, ``n``, ``n_outside``, ``mua_ref_per_mm``,
``mus_ref_per_mm``, ``photons``, ``detected``, ``seed``, ``largest_exit_radius_mm``,
``max_musp_over_mua`` (the highest μs′/μa it can answer, (1 − g)·μs_ref/μa_ref),
``megabytes``, and for ``build`` ``seconds`` (simulation, compilation excluded where cached).

``list`` and ``clear`` manage the per-user cache the default fits use
(``phantomlab.calibration.baseline_cache``; folder: ``--baseline-dir``, else
``$PHANTOMLAB_BASELINE_DIR``, else the user cache folder).  JSON: ``folder``, ``baselines``
(each ``file``, ``g``, ``n``, ``n_outside``, ``photons``, ``megabytes``, ``modified``,
``usable`` (true or the reason it would be refused), ``lookup_table``), ``megabytes`` (total);
``clear``: ``folder``, ``removed`` (each ``file``, ``megabytes``), ``megabytes`` (freed).
"""

from __future__ import annotations

import argparse
from pathlib import Path

from phantomlab.cli import CommandResult, add_json_option
from phantomlab.commands._baseline_options import BASELINE_DIR_ENV, ProgressBar
from phantomlab.errors import InputError

__all__ = ["register"]

#: Defaults of ``baseline build``: a reference μa/μs of 1e-4 answers μs′/μa up to 2000 at
#: g = 0.8, and a million photons keep the lookup's own noise near 1 % out to about 30
#: transport lengths (tests/calibration/test_mc_lookup.py used 2.5 million for 50).
DEFAULT_MUA_REF_PER_MM = 0.001
DEFAULT_MUS_REF_PER_MM = 10.0
DEFAULT_PHOTONS = 1_000_000


def register(subparsers) -> None:
    baseline = subparsers.add_parser(
        "baseline", help="build or inspect a stored Monte Carlo baseline for the mc fits",
        description="A stored Monte Carlo baseline: one run re-used by every Monte Carlo lookup fit.")
    actions = baseline.add_subparsers(dest="baseline_command", metavar="ACTION")

    build = actions.add_parser(
        "build", help="run the Monte Carlo once and store every exit (for fit --model mc)",
        description="Run the analog Monte Carlo once in a half-space and store each exiting photon's "
        "radius, path length and scattering count. One baseline serves one g and one pair of indices.")
    build.add_argument("out", metavar="OUT.npz", help="file to write (refused if it exists, unless --force)")
    build.add_argument("--g", type=float, required=True, metavar="G",
                       help="Henyey-Greenstein anisotropy of the phantom's scatterers, in (-1, 1)")
    build.add_argument("--n", type=float, required=True, metavar="N", help="refractive index of the phantom")
    build.add_argument("--n-outside", type=float, default=1.0, metavar="N",
                       help="refractive index above the surface (default 1.0, air)")
    build.add_argument("--mua-ref-per-mm", type=float, default=DEFAULT_MUA_REF_PER_MM, metavar="A",
                       help=f"reference absorption [1/mm] (default {DEFAULT_MUA_REF_PER_MM:g}); smaller "
                       "answers lower mua but runs longer")
    build.add_argument("--mus-ref-per-mm", type=float, default=DEFAULT_MUS_REF_PER_MM, metavar="S",
                       help=f"reference scattering [1/mm] (default {DEFAULT_MUS_REF_PER_MM:g})")
    build.add_argument("--photons", type=int, default=DEFAULT_PHOTONS, metavar="P",
                       help=f"photons launched (default {DEFAULT_PHOTONS:,}; about 10 bytes stored per exit)")
    build.add_argument("--seed", type=int, default=1, metavar="S", help="master seed (default 1)")
    build.add_argument("--threads", type=int, default=None, metavar="T", help="threads (default all cores)")
    build.add_argument("--force", action="store_true", help="replace OUT.npz if it exists")
    add_json_option(build)
    build.set_defaults(handler=_build)

    show = actions.add_parser("show", help="what a stored baseline was made for and what it can answer",
                              description="The inputs of a stored baseline and the range it can answer.")
    show.add_argument("file", metavar="FILE.npz", help="a file written by 'phantomlab baseline build'")
    add_json_option(show)
    show.set_defaults(handler=_show)
    listing = actions.add_parser("list", help="the cached baselines the default fits use",
                                 description="The Monte Carlo baselines in the per-user cache, with what they "
                                 "were made for and whether a fit can use them.")
    add_baseline_options_folder(listing)
    add_json_option(listing)
    listing.set_defaults(handler=_list)
    clear = actions.add_parser("clear", help="delete the cached baselines (the next fit builds what it needs)",
                               description="Delete every cached Monte Carlo baseline and its lookup table.")
    add_baseline_options_folder(clear)
    add_json_option(clear)
    clear.set_defaults(handler=_clear)
    baseline.set_defaults(handler=_no_action)


def add_baseline_options_folder(parser) -> None:
    parser.add_argument("--baseline-dir", default=None, metavar="FOLDER",
                        help=f"the cache folder (default: ${BASELINE_DIR_ENV}, else the user cache folder)")


def _no_action(args: argparse.Namespace):
    raise InputError("baseline: give an action: build, show, list or clear")


def _list(args: argparse.Namespace) -> CommandResult:
    from phantomlab.calibration.baseline_cache import baseline_folder, list_cached, table_path

    from phantomlab.calibration.slab_time_nodes import list_nodes

    folder = baseline_folder(args.baseline_dir)
    rows = list_cached(folder)
    slabs = list_nodes(folder)
    # the lookup tables kept beside the baselines are on disk too (a td/fd table 1.6 MB)
    tables = {r["file"]: table_path(Path(r["file"])).stat().st_size / 1e6 for r in rows if r["lookup_table"]}
    total = round(sum(r["megabytes"] for r in rows + slabs) + sum(tables.values()), 3)
    lines = [f"cached Monte Carlo baselines in {folder}: {len(rows)}"
             + (f", and {len(slabs)} slab runs" if slabs else "") + f" ({total:.1f} MB)"]
    for r in rows:
        made = (f"g {r['g']:g}, n {r['n']:g} / {r['n_outside']:g}, {r['photons']:,} photons"
                if r["g"] is not None else "inputs unreadable")
        state = "usable" if r["usable"] is True else f"refused: {r['usable']}"
        kept = f", its lookup table beside it ({tables[r['file']]:.1f} MB)" if r["file"] in tables else ""
        lines.append(f"  {Path(r['file']).name}  {made}, {r['megabytes']:.1f} MB{kept}, {r['modified']}  ({state})")
    if not rows:
        lines.append("  none yet: the first default srdr/sfdi fit builds the one it needs")
    if slabs:
        lines.append(f"slab runs of the td transmittance model: {len(slabs)}")
        lines += [f"  {Path(r['file']).name}  g {r['g']:g}, n {r['n']:g} / {r['n_outside']:g}, "
                  f"{r['tau_prime']:g} transport lengths, {r['megabytes']:.2f} MB, {r['modified']}" for r in slabs]
    return CommandResult(payload={"folder": str(folder), "baselines": rows, "slab_runs": slabs, "megabytes": total},
                         text="\n".join(lines))


def _clear(args: argparse.Namespace) -> CommandResult:
    from phantomlab.calibration.baseline_cache import baseline_folder, clear_cached

    folder = baseline_folder(args.baseline_dir)
    removed = clear_cached(folder)
    freed = round(sum(r["megabytes"] for r in removed), 3)
    text = (f"removed {len(removed)} files ({freed:.1f} MB) from {folder}" if removed
            else f"nothing to remove in {folder}")
    return CommandResult(payload={"folder": str(folder), "removed": removed, "megabytes": freed}, text=text)


def _summary(baseline, path: Path) -> dict:
    largest = float(baseline.exit_radius_mm.max()) if baseline.detected else 0.0
    ratio = float(baseline.minimum_absorption_ratio)
    return {
        "file": str(path),
        "g": float(baseline.g),
        "n": float(baseline.n),
        "n_outside": float(baseline.n_outside),
        "mua_ref_per_mm": float(baseline.mua_per_mm),
        "mus_ref_per_mm": float(baseline.mus_per_mm),
        "photons": int(baseline.photons),
        "detected": int(baseline.detected),
        "seed": int(baseline.seed),
        "largest_exit_radius_mm": largest,
        "max_musp_over_mua": float(f"{(1.0 - float(baseline.g)) / ratio:.6g}") if ratio > 0 else None,
        "megabytes": round(baseline.nbytes / 1e6, 3),
    }


def _text(summary: dict, headline: str) -> str:
    reach_mm = summary["largest_exit_radius_mm"]
    return "\n".join([
        headline,
        f"  medium        g = {summary['g']:g}, n = {summary['n']:g} under n_outside = {summary['n_outside']:g}",
        f"  reference     mua = {summary['mua_ref_per_mm']:g} /mm, mus = {summary['mus_ref_per_mm']:g} /mm",
        f"  photons       {summary['photons']:,} launched, {summary['detected']:,} stored "
        f"({summary['megabytes']:.1f} MB)",
        f"  answers       musp/mua up to {summary['max_musp_over_mua']:.4g}; exits seen out to {reach_mm:.3g} mm "
        f"at the reference mus (further at lower mus, nearer at higher)",
        "  use it with   phantomlab fit FILE.csv --kind srdr --baseline " + summary["file"],
    ])


def _build(args: argparse.Namespace) -> CommandResult:
    from phantomlab.limits import check_limit
    from phantomlab.transport.montecarlo import build_baseline

    out = Path(args.out)
    if out.suffix != ".npz":
        raise InputError(f"baseline file must end in .npz, got {out.name!r}")
    if out.exists() and not args.force:
        raise InputError(f"{out} exists; give --force to replace it, or another file name")
    if not out.parent.exists():
        raise InputError(f"folder {out.parent} does not exist")
    if args.photons < 1000:
        raise InputError(f"--photons must be at least 1000 for a usable baseline, got {args.photons}")
    check_limit("baseline_photons", args.photons, given=f"--photons {args.photons}")
    baseline = build_baseline(mua_per_mm=args.mua_ref_per_mm, mus_per_mm=args.mus_ref_per_mm, g=args.g, n=args.n,
                              n_outside=args.n_outside, photons=args.photons, seed=args.seed, threads=args.threads,
                              progress=ProgressBar(title=f"building {out} (Ctrl-C stops it, nothing is written)"))
    baseline.save(out)
    summary = _summary(baseline, out)
    summary["seconds"] = round(float(baseline.seconds), 3)
    headline = f"baseline written to {out} in {summary['seconds']:.1f} s"
    return CommandResult(payload=summary, text=_text(summary, headline))


def _show(args: argparse.Namespace) -> CommandResult:
    from phantomlab.transport.montecarlo import load_baseline

    path = Path(args.file)
    if not path.is_file():
        raise InputError(f"no baseline file {path}")
    summary = _summary(load_baseline(path), path)
    return CommandResult(payload=summary, text=_text(summary, f"baseline {path}"))
