"""``phantomlab stock optics``: the intrinsic optics of one stock (layer 5, no physics).

    phantomlab stock optics STOCKS.toml KEY --wavelength-nm LIST [--matrix KEY]
                            [--temperature-c T] [--potency P] [--so2 S] [--json]
    phantomlab stock export STOCKS.toml OUT.toml [--db URL] [--force] [--json]

JSON keys (docs/contract.md): ``stock``, ``wavelength_nm``, ``mua_per_mm``, ``mus_per_mm``, ``g``,
``musp_per_mm``; extras: ``kind``, ``matrix``, ``temperature_c``, ``potency``, ``lot``,
``solids_volume_fraction``, ``mua_sd_per_mm``, ``so2`` (blood); ``warnings`` is added by the command line.

``export`` writes the stock file with the stocks added on the page (kept in the batch log)
laid over it, as one stand-alone stock file (``phantomlab.shelf_export``): ``file``,
``stocks``, ``from_page`` (``{stock, version}``), ``files``.
"""

from __future__ import annotations

import argparse

from phantomlab.cli import CommandResult, add_json_option
from phantomlab.commands.batch import add_db_option
from phantomlab.errors import InputError
from phantomlab.units import parse_number_list

__all__ = ["register"]


def register(subparsers) -> None:
    stock = subparsers.add_parser("stock", help="what is on the shelf: the optics of one stock")
    actions = stock.add_subparsers(dest="stock_command", metavar="ACTION")
    optics = actions.add_parser(
        "optics",
        help="intrinsic mua, mus, g, mus' of a stock per volume fraction of it in the final mix",
        description="Intrinsic optics of one stock: per unit volume fraction of the undiluted "
        "stock in the final mix, in the shelf's matrix.",
    )
    optics.add_argument("stocks_file", metavar="STOCKS.toml", help="the stock file (shelf)")
    optics.add_argument("key", metavar="KEY", help="the stock's key in the file")
    optics.add_argument(
        "--wavelength-nm", required=True, metavar="LIST",
        help="wavelengths in nm: 650,750,850 or START:STOP:STEP (STOP included)",
    )
    optics.add_argument(
        "--matrix", metavar="KEY", default=None,
        help="the matrix stock the stock goes into (default: the only matrix on the shelf)",
    )
    optics.add_argument("--temperature-c", type=float, default=20.0, metavar="T", help="temperature in °C (default 20)")
    optics.add_argument("--potency", type=float, default=None, metavar="P", help="override the stock's potency")
    optics.add_argument("--so2", type=float, default=None, metavar="S",
                        help="oxygen saturation 0-1 of a blood stock's haemoglobin (required for blood)")
    add_json_option(optics)
    optics.set_defaults(handler=_optics)

    export = actions.add_parser(
        "export",
        help="the stock file plus the stocks added on the page, as one stock file the command line reads",
        description="Write the stock file with the newest page version of every stock added or edited on "
        "the page laid over it; CSV files go to OUT-files/ beside it. The stock file and the batch log "
        "are not changed.",
    )
    export.add_argument("stocks_file", metavar="STOCKS.toml", help="the lab's stock file")
    export.add_argument("out", metavar="OUT.toml", help="the stock file to write")
    add_db_option(export)
    export.add_argument("--force", action="store_true", help="replace OUT.toml if it exists")
    add_json_option(export)
    export.set_defaults(handler=_export)
    stock.set_defaults(handler=_no_action(stock))


def _no_action(parser: argparse.ArgumentParser):
    def handler(args):
        raise InputError("stock: give an action: optics or export")

    return handler


def _table(optics) -> str:
    header = f"{'wavelength_nm':>13}  {'mua [1/mm]':>12}  {'mus [1/mm]':>12}  {'g [-]':>7}  {'musp [1/mm]':>12}"
    lines = [header, "-" * len(header)]
    for w, a, s, g, sp in zip(optics.wavelength_nm, optics.mua_per_mm, optics.mus_per_mm, optics.g, optics.musp_per_mm):
        lines.append(f"{w:13.1f}  {a:12.5g}  {s:12.5g}  {g:7.4f}  {sp:12.5g}")
    return "\n".join(lines)


def _optics(args) -> CommandResult:
    from phantomlab.materials import load_shelf
    from phantomlab.optics import intrinsic_optics

    from phantomlab.inputs import check_temperature_c

    wavelength = parse_number_list(args.wavelength_nm, name="--wavelength-nm")
    check_temperature_c(args.temperature_c, name="--temperature-c")
    shelf = load_shelf(args.stocks_file)
    stock = shelf[args.key]
    if stock.kind == "matrix" and args.matrix is None:
        matrix = stock
    elif stock.kind in ("absorber", "emulsion", "blood") and args.matrix is None:
        matrix = None  # their optics do not depend on the matrix index
    elif args.matrix is None and len(shelf.of_kind("matrix")) > 1:
        raise InputError(
            f"the shelf has several matrices ({', '.join(shelf.of_kind('matrix'))}); choose one with --matrix KEY"
        )
    else:
        matrix = shelf.matrix(args.matrix)
    if args.potency is not None and not args.potency > 0:
        raise InputError(f"--potency must be > 0, got {args.potency:g}")
    if stock.kind == "blood":
        from phantomlab.materials.blood import check_so2

        if args.so2 is None:
            raise InputError(f"stock {stock.key} is blood: give --so2 (the oxygen saturation 0-1 at that moment)")
        check_so2(args.so2, name="--so2")
    optics = intrinsic_optics(
        stock, wavelength_nm=wavelength, matrix=matrix, potency=args.potency, temperature_c=args.temperature_c,
        so2=args.so2,
    )
    potency = stock.potency if args.potency is None else args.potency
    payload = optics.to_json()
    payload.update(
        {
            "kind": stock.kind,
            "matrix": None if matrix is None else matrix.key,
            "temperature_c": args.temperature_c,
            "potency": potency,
            "lot": stock.lot,
            "solids_volume_fraction": stock.solids_volume_fraction,
            "mua_sd_per_mm": optics.mua_sd_per_mm,
        }
    )
    if stock.kind == "blood":
        payload["so2"] = args.so2
    title = (
        f"stock {stock.key} ({stock.kind}{', lot ' + stock.lot if stock.lot else ''})"
        f"{'' if matrix is None else ' in matrix ' + matrix.key}, "
        f"{args.temperature_c:g} °C, potency {potency:g}"
        + (f", sO2 {args.so2:g}" if stock.kind == "blood" else "") + "\n"
        "intrinsic optics: per unit volume fraction of the undiluted stock in the final mix"
    )
    return CommandResult(payload=payload, text=title + "\n" + _table(optics))


def _export(args) -> CommandResult:
    from phantomlab.shelf_export import export_shelf
    from phantomlab.store import open_store

    store = open_store(args.db, create=False)
    try:
        done = export_shelf(store, args.stocks_file, args.out, force=args.force)
    finally:
        store.close()
    page = ", ".join(f"{key} (page version {version})" for key, version in done.from_page) or "none"
    text = (f"wrote {done.path}: {len(done.stocks)} stocks, {len(done.files)} CSV files beside it\n"
            f"  from the page: {page}\n"
            f"  use it as any stock file, e.g. stocks_file = \"{done.path.name}\" in a recipe")
    return CommandResult(payload=done.to_json(), text=text)
