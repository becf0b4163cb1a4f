"""``phantomlab plan``: doses, pre-dilutions and predicted optics of a recipe (layer 5).

    phantomlab plan RECIPE.toml [--db URL] [--json] [--sheet FILE.html] [--csv FILE]
    phantomlab plan RECIPE.toml --series STOCK_KEY [--levels N] [--low X] [--high Y]
                                [--series-volume-ml V | --series-mass-g M] [...]

The JSON object has the stable keys of docs/contract.md (``recipe``, ``batch_volume_ml``,
``doses``, ``predicted``, ``target``, ``warnings``) plus extras, among them ``recipe_hash`` (the one
canonical hash ``batch add`` records) and ``potencies_from``: ``"stock file"`` or
``{"state_id", "recorded_at", "restores_state_id"}``.  When a batch log is in reach —
``--db URL``, else ``$PHANTOMLAB_DB``, else ``phantomlab.sqlite`` in the working folder when
that file exists — the plan takes the calibrated potencies of the lots on the shelf from it,
exactly as ``batch add`` does (same doses, same hash); ``plan`` never creates a database
file, so without one a draft from the recipe and stock file alone stays possible.  A sheet
written here is a draft ("DRAFT — not a logged batch"); ``phantomlab batch add`` prints the
logged one.
With ``--series``, a calibration series of one stock is planned instead (level 0 is the base).
"""

from __future__ import annotations

import math
from pathlib import Path

from phantomlab.cli import CommandResult, add_json_option
from phantomlab.errors import InputError

__all__ = ["register"]


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "plan", help="doses, pre-dilutions, predicted optics and a draft mixing sheet for a recipe",
        description="Solve a recipe's doses and print them; optionally write the draft mixing sheet.",
    )
    parser.add_argument("recipe", metavar="RECIPE.toml")
    parser.add_argument("--db", metavar="URL", default=None,
                        help="use the calibrated potencies of the batch log at this SQLAlchemy URL")
    parser.add_argument("--sheet", metavar="FILE.html", help="write the draft mixing sheet (HTML, one A4 page)")
    parser.add_argument("--csv", metavar="FILE", help="write the draft mixing sheet as CSV")
    series = parser.add_argument_group("calibration series of a new lot")
    series.add_argument("--series", metavar="STOCK_KEY",
                        help="plan small batches of this stock at 3-5 levels around the recipe's dose")
    series.add_argument("--levels", type=int, default=None, help="number of concentrations, 3-5 (default 4)")
    series.add_argument("--low", type=float, default=None, help="lowest multiple of the recipe dose (0.25)")
    series.add_argument("--high", type=float, default=None, help="highest multiple of the recipe dose (2)")
    series.add_argument("--series-volume-ml", type=float, default=None, help="size of each small batch [mL]")
    series.add_argument("--series-mass-g", type=float, default=None, help="size of each small batch [g]")
    add_json_option(parser)
    parser.set_defaults(handler=handle)


def _batch_log_url(url: str | None) -> tuple[str | None, str | None]:
    """The batch log in reach, and a note when an implicit one is missing (never creates one)."""
    import os

    from phantomlab.store.engine import DEFAULT_URL, ENV_VARIABLE, resolve_url, sqlite_file  # layer 4

    explicit = url is not None
    chosen = resolve_url(url)
    database = sqlite_file(chosen)
    if database is None or database.exists():
        return chosen, None
    if explicit or (os.environ.get(ENV_VARIABLE) and chosen != resolve_url(DEFAULT_URL)):
        where = "--db" if explicit else f"${ENV_VARIABLE}"
        return None, (f"no batch log at {str(database)!r} ({where}) yet: potencies from the stock file "
                      "(plan reads a batch log, it never creates one)")
    return None, None


def _calibrated(recipe, url):
    """``(potencies, potencies_from, note)`` — from the batch log in reach, else the stock file."""
    found, note = _batch_log_url(url)
    if found is None:
        return None, "stock file", note
    from phantomlab.store import open_store  # layer 4
    from phantomlab.workflows import plan_potencies

    store = open_store(found, create=False)
    try:
        potencies, source = plan_potencies(store, recipe)
    finally:
        store.close()
    return potencies, source, note


def _write(path: str, text: str) -> str:
    from phantomlab.outputs import write_text_atomically  # whole or not at all

    return str(write_text_atomically(Path(path), text, what=f"cannot write {path!r}"))


def handle(args) -> CommandResult:
    from phantomlab.recipe import load_recipe, solve
    from phantomlab.recipe.sheet import render_sheet_csv, render_sheet_html

    recipe = load_recipe(args.recipe)
    potencies, source, note = _calibrated(recipe, args.db)
    if note:
        import warnings

        from phantomlab.errors import PhantomlabWarning

        warnings.warn(note, PhantomlabWarning, stacklevel=2)
    if args.series is None:
        for name in ("levels", "low", "high", "series_volume_ml", "series_mass_g"):
            if getattr(args, name) is not None:
                raise InputError(f"--{name.replace('_', '-')} needs --series STOCK_KEY")
        plan = solve(recipe, potencies=potencies)
        payload = plan.to_json()
        payload["potencies_from"] = source
        payload["recipe_hash"] = recipe.content_hash
        written = []
        if args.sheet:
            from phantomlab.recalibration import describe_potencies_from

            note = describe_potencies_from(source).capitalize() if source != "stock file" else None
            written.append(_write(args.sheet, render_sheet_html(plan, draft=True, note=note)))
        if args.csv:
            written.append(_write(args.csv, render_sheet_csv(plan, draft=True)))
        payload["sheet_files"] = written
        return CommandResult(payload=payload, text=_summary(plan, written, source))

    from phantomlab.recipe.calibration_series import plan_series
    from phantomlab.recipe.sheet import render_series_html

    series = plan_series(recipe, args.series, levels=args.levels, low=args.low, high=args.high,
                         batch_volume_ml=args.series_volume_ml, batch_mass_g=args.series_mass_g,
                         potencies=potencies)
    payload = series.to_json()
    payload["potencies_from"] = source
    payload["recipe_hash"] = recipe.content_hash
    written = []
    if args.sheet:
        written.append(_write(args.sheet, render_series_html(series)))
    if args.csv:
        written.append(_write(args.csv, "".join(
            render_sheet_csv(lv.plan, draft=True) if i == 0 else
            render_sheet_csv(lv.plan, draft=True).split("\n", 1)[1]
            for i, lv in enumerate(series.levels))))
    payload["sheet_files"] = written
    return CommandResult(payload=payload, text=_series_summary(series, written))


def _amount(value: float, unit: str) -> str:
    from phantomlab.recipe.procedure import format_amount

    return format_amount(value, unit)


def _summary(plan, written, source) -> str:
    from phantomlab.recalibration import describe_potencies_from

    recipe = plan.recipe
    size = (f"{recipe.batch_mass_g:g} g (≈ {plan.batch_volume_ml:.4g} mL)" if recipe.by_mass
            else f"{recipe.batch_volume_ml:g} mL")
    lines = [
        f"plan: {recipe.name} (version {recipe.version}, hash {recipe.content_hash[:12]})",
        "DRAFT — not a logged batch (use 'phantomlab batch add' to log it)",
        f"batch {size}; matrix {recipe.matrix_key} ({recipe.preparation.kind}); "
        f"{describe_potencies_from(source)}",
        "",
        "doses (undiluted stock that ends in the batch):",
    ]
    for dose in plan.doses:
        if not dose.used:
            lines.append(f"  {dose.stock:<12} not used")
            continue
        amount = _amount(dose.mass_g, "g") if dose.by == "balance" else _amount(dose.volume_ml, "mL")
        line = f"  {dose.stock:<12} {amount:>10}  ({100 * dose.volume_fraction:.4g} % v/v, {dose.by})"
        if dose.dilution:
            unit = dose.dilution.unit
            chain = "; ".join(f"{s.label} = {_amount(s.source_amount, unit)} {s.source} + "
                              f"{_amount(s.diluent_amount, unit)} {dose.dilution.diluent}"
                              for s in dose.dilution.steps)
            line += f"\n  {'':<12} pre-dilute: {chain}; then {'weigh' if dose.by == 'balance' else 'pipette'} {_amount(dose.dispense_amount, unit)} of {dose.dilution.dispense_from}"
        lines.append(line)
    lines.append("matrix: " + "; ".join(f"{label} {_amount(a, u)}" for label, a, u, _ in plan.matrix.parts))
    lines += ["", "predicted at the target wavelengths (g from the scattering model, not measured):",
              f"  {'nm':>6} {'mua target':>11} {'mua ± SD':>20} {'Δ%':>6} {'musp target':>12} {'musp ± SD':>18}"
              f" {'Δ%':>6} {'g':>6}"]
    t, p = plan.target, plan.predicted

    def show(v, d=4):
        return "—" if not math.isfinite(v) else f"{v:.{d}g}"

    def pct(v):
        return "—" if not math.isfinite(v) else f"{100 * v:+.1f}"

    r = plan.residuals
    for i, lam in enumerate(t.wavelength_nm):
        lines.append(f"  {lam:6g} {show(t.mua_per_mm[i]):>11} {show(p.mua_per_mm[i]) + ' ± ' + show(p.mua_sd_per_mm[i], 2):>20}"
                     f" {pct(r['mua_relative'][i]):>6}"
                     f" {show(t.musp_per_mm[i]):>12} {show(p.musp_per_mm[i]) + ' ± ' + show(p.musp_sd_per_mm[i], 2):>18}"
                     f" {pct(r['musp_relative'][i]):>6} {show(p.g[i], 3):>6}")
    met = [name for name in ("mua", "musp", "g") if not plan.residuals[f"{name}_met"]]
    lines.append("all targets met within tolerance" if not met else f"not met: {', '.join(met)} (see warnings)")
    lines += _so2_lines(plan)
    for path in written:
        lines.append(f"sheet written: {path}")
    return "\n".join(lines)


def _so2_lines(plan) -> list[str]:
    """The planned sO₂ series of a recipe with ``[oxygenation]``: μa at every level."""
    if getattr(plan.recipe, "oxygenation", None) is None:
        return []
    from phantomlab.recipe.oxygenation import so2_series

    series = so2_series(plan, wavelength_nm=plan.target.wavelength_nm)
    points = ", ".join(f"{p:.0f}" for p in series.isosbestic_nm) or "none in the band"
    lines = ["", f"planned sO2 series: {series.blood_stock} {100 * series.blood_volume_fraction:.3g} % v/v = "
             f"total haemoglobin {series.thb_um:.4g} uM (tetramer, table {series.source}); isosbestic: {points} nm",
             f"  {'nm':>6} " + " ".join(f"{'mua @ ' + format(100 * lv.so2, '.0f') + ' %':>13}" for lv in series.levels)]
    for i, lam in enumerate(series.wavelength_nm):
        lines.append(f"  {lam:6g} " + " ".join(f"{lv.mua_per_mm[i]:13.4g}" for lv in series.levels))
    return lines


def _series_summary(series, written) -> str:
    stock = series.stock
    lines = [f"calibration series of {stock} (lot {series.recipe.stock(stock).lot}) for {series.recipe.name}",
             "DRAFT — small batches, not logged; level 0 is the base without the stock", ""]
    for level in series.levels:
        dose = level.plan.dose(stock)
        amount = ("—" if not dose.used else
                  (_amount(dose.mass_g, "g") if dose.by == "balance" else _amount(dose.volume_ml, "mL")))
        via = f" via {dose.dilution.dispense_from}" if dose.dilution else ""
        p = level.plan.predicted
        k = series.readout_index
        lines.append(f"  level {level.level}: {level.multiple:.3g} × recipe dose, {stock} {amount}{via}; "
                     f"predicted mua {p.mua_per_mm[k]:.4g} /mm, musp {p.musp_per_mm[k]:.4g} /mm at "
                     f"{p.wavelength_nm[k]:g} nm")
    lines.append(f"each level: {series.levels[0].plan.batch_volume_ml:.4g} mL; the other stocks at the recipe's doses")
    for path in written:
        lines.append(f"sheets written: {path}")
    return "\n".join(lines)
