"""``phantomlab oxygenation``: oxygenation series of a batch (layer 5, no physics).

    phantomlab oxygenation add BATCH_ID SERIES.csv --chromophores LIST [--references READINGS.csv]
                               [--name NAME] [--source S] [--temperature-c T] [--operator NAME]
                               [--db URL] [--json]
    phantomlab oxygenation show BATCH_ID [--db URL] [--json]

JSON keys (docs/contract.md): add — ``batch``, ``series_id``, ``name``, ``chromophores``,
``source``, ``water_temperature_c``, ``points``, ``readings``, ``comparison``; show — ``batch``, ``series`` (each with
``series_id``, ``name``, ``recorded_at``, ``recorded_by``, ``series_file_name``,
``readings_file_name``, ``chromophores``, ``source``, ``water_temperature_c``, ``points``, ``readings``,
``comparison``); ``warnings`` is added by the command line.
"""

from __future__ import annotations

from pathlib import Path

from phantomlab.cli import CommandResult, add_json_option
from phantomlab.commands.batch import add_db_option
from phantomlab.errors import InputError

__all__ = ["register"]


def register(subparsers) -> None:
    from phantomlab.materials.haemoglobin import DEFAULT_HAEMOGLOBIN_SOURCE, HAEMOGLOBIN_SOURCES

    group = subparsers.add_parser(
        "oxygenation", help="oxygenation series of a batch: mua over time, reference sO2 readings"
    )
    actions = group.add_subparsers(dest="oxygenation_command", metavar="ACTION")
    add = actions.add_parser(
        "add",
        help="store a series of mua spectra over time (and reference sO2 readings) with a batch",
        description="Unmix every time point of the series file into sO2 and total haemoglobin, set the "
        "reference readings beside them, and store both files with the batch (one transaction; a file "
        "that does not parse writes nothing).",
    )
    add.add_argument("batch_id", metavar="BATCH_ID", help="the batch, e.g. 2026-031")
    add.add_argument("series_file", metavar="SERIES.csv", help="measured_at,wavelength_nm,mua_per_mm[,mua_sd_per_mm]")
    add.add_argument("--chromophores", required=True, metavar="LIST", help="hbo2,hb and any of water, lipid")
    add.add_argument("--references", default=None, metavar="READINGS.csv",
                     help="reference sO2 readings: measured_at,reference_so2 (0-1) or reference_so2_percent "
                     "(0-100)[,method][,instrument]")
    add.add_argument("--name", default=None, metavar="NAME", help="name of the series (default: the file's name)")
    add.add_argument(
        "--source", default=DEFAULT_HAEMOGLOBIN_SOURCE, metavar="S",
        help=f"haemoglobin table: {', '.join(HAEMOGLOBIN_SOURCES)} (default {DEFAULT_HAEMOGLOBIN_SOURCE})",
    )
    add.add_argument("--temperature-c", type=float, default=None, metavar="T",
                     help="temperature of the phantom when measured, 0-60 C: the water absorbs at it "
                     "(default: the batch recipe's measure_temperature_c)")
    add.add_argument("--operator", default=None, metavar="NAME", help="who records it")
    add_db_option(add)
    add_json_option(add)
    add.set_defaults(handler=_add)

    show = actions.add_parser("show", help="the oxygenation series of a batch, fitted vs reference sO2")
    show.add_argument("batch_id", metavar="BATCH_ID", help="the batch")
    add_db_option(show)
    add_json_option(show)
    show.set_defaults(handler=_show)

    def no_action(args):
        raise InputError("oxygenation: give an action: add or show")

    group.set_defaults(handler=no_action)


def _read(path_text: str, what: str) -> tuple[str, bytes]:
    from phantomlab.inputs import read_bytes_file  # regular file, within the file_mb limit

    return Path(path_text).name, read_bytes_file(path_text, what=what)


def _comparison_lines(comparison) -> list[str]:
    if not comparison:
        return ["  no reference readings"]
    lines = [f"  {'time':<19}  {'reference':>9}  {'fitted':>7}  {'sd':>6}  {'fit-ref':>7}  {'gap min':>7}  how"]
    for row in comparison:
        def cell(value, spec, width):
            return f"{value:{spec}}".rjust(width) if value is not None else "-".rjust(width)
        lines.append(
            f"  {row['measured_at']:<19}  {cell(row['reference_so2'], '.3f', 9)}  {cell(row['fitted_so2'], '.3f', 7)}"
            f"  {cell(row['fitted_so2_sd'], '.3f', 6)}  {cell(row['difference'], '+.3f', 7)}"
            f"  {cell(row['gap_min'], '.1f', 7)}  {row['how']}"
        )
    return lines


def _water_text(item) -> str:
    temperature = item.get("water_temperature_c")
    return "" if temperature is None else f", water at {temperature:g} C"


def _points_lines(points) -> list[str]:
    lines = [f"  {'time':<19}  {'min':>6}  {'sO2':>6}  {'sd':>6}  {'tHb uM':>8}  {'sd':>6}"]
    for p in points:
        so2 = "-" if p["so2"] is None else f"{p['so2']:.3f}"
        sd = "-" if p["so2_sd"] is None else f"{p['so2_sd']:.3f}"
        lines.append(f"  {p['measured_at']:<19}  {p['minutes']:6.1f}  {so2:>6}  {sd:>6}  {p['thb_um']:8.3g}  {p['thb_sd_um']:6.2g}")
    return lines


def _add(args) -> CommandResult:
    from phantomlab.oxygenation_workflow import record_oxygenation_series
    from phantomlab.store import open_store

    from phantomlab.materials.water import checked_liquid_temperature

    if args.temperature_c is not None:
        checked_liquid_temperature(args.temperature_c, what="--temperature-c")
    series_name, series_bytes = _read(args.series_file, "series file")
    readings_name = readings_bytes = None
    if args.references is not None:
        readings_name, readings_bytes = _read(args.references, "reference readings")
    store = open_store(args.db, create=False)
    try:
        recorded = record_oxygenation_series(
            store, args.batch_id, name=args.name or Path(series_name).stem, series_file_name=series_name,
            series_content=series_bytes, chromophores=args.chromophores, source=args.source,
            readings_file_name=readings_name, readings_content=readings_bytes, recorded_by=args.operator,
            water_temperature_c=args.temperature_c,
        )
    finally:
        store.close()
    computation = recorded.computation
    lines = [f"batch {recorded.code}: oxygenation series {recorded.name!r} stored (id {recorded.series_id}), "
             f"{len(computation.points)} time points, {len(computation.readings)} reference readings, "
             f"water at {computation.water_temperature_c:g} C"]
    lines += _points_lines(computation.points) + ["fitted vs reference sO2:"] + _comparison_lines(computation.comparison)
    return CommandResult(payload=recorded.to_json(), text="\n".join(lines), warnings=list(computation.warnings))


def _show(args) -> CommandResult:
    from phantomlab.oxygenation_workflow import oxygenation_of
    from phantomlab.store import open_store

    store = open_store(args.db, create=False)
    try:
        series = oxygenation_of(store, args.batch_id)
    finally:
        store.close()
    lines = [f"batch {args.batch_id}: {len(series)} oxygenation series"]
    for item in series:
        lines.append(f"series {item['name']!r} (id {item['series_id']}, recorded {item['recorded_at'][:16]}, "
                     f"{','.join(item['chromophores'])}, table {item['source']}{_water_text(item)})")
        lines += _points_lines(item["points"]) + ["fitted vs reference sO2:"] + _comparison_lines(item["comparison"])
    return CommandResult(payload={"batch": args.batch_id, "series": series}, text="\n".join(lines))
