"""``phantomlab correct``: the next batch corrected, or a top-up for the batch on the bench (layer 5).

    phantomlab correct BATCH_ID [--db URL] [--recipe RECIPE.toml] [--sheet FILE.html] [--json]
    phantomlab correct BATCH_ID --top-up [--volume-ml V] [--max-added-ml V] [--db URL] [--json]

Without ``--top-up``: the batch's recipe planned again with the newest calibrated potencies
of the lots on the shelf (``phantomlab recalibrate --apply`` records them): the doses, the
predicted μa and μs′ of the next batch ± SD at every target wavelength, and its ``verdict``
against the recipe's tolerances (PASS/FAIL/UNDECIDED at 2 SD of the prediction, the rule of
:mod:`phantomlab.calibration.verdict`).  JSON: the ``plan`` keys of docs/contract.md plus
``after_batch``, ``potencies_used``, ``potencies_from`` and ``verdict``.  The sheet (a draft)
names the batch it corrects and the calibration state; ``batch add RECIPE --corrects
BATCH_ID`` logs it.

The work is :mod:`phantomlab.correction_workflow` (``next_batch_plan``, ``top_up_batch``), as on the page.

With ``--top-up`` (liquid batches): from the batch's newest fitted measurement, what to add —
which stock, how much, how much diluent — to bring it to the target; nothing can be taken
out.  JSON: ``batch_id``, ``additions`` [{stock, volume_ml, mass_g, below_min_dispense}],
``diluent``, ``diluent_volume_ml``, ``final_volume_ml``, ``wavelength_nm``, ``before``,
``predicted``, ``target``, ``warnings``.
"""

from __future__ import annotations

from pathlib import Path

from phantomlab.cli import CommandResult, add_json_option

__all__ = ["register"]


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "correct",
        help="plan the next batch with calibrated potencies, or a top-up for a liquid batch",
        description="Corrected plan for the batch after BATCH_ID (calibrated potencies), or with "
        "--top-up the additions that bring a liquid batch still on the bench to its target.",
    )
    parser.add_argument("batch_id", metavar="BATCH_ID")
    parser.add_argument("--db", metavar="URL", default=None,
                        help="SQLAlchemy URL of the batch log (default: $PHANTOMLAB_DB, else phantomlab.sqlite)")
    parser.add_argument("--recipe", metavar="RECIPE.toml", default=None,
                        help="recipe file to use if the batch's recorded recipe file is not there any more")
    parser.add_argument("--top-up", action="store_true", help="additions for the batch on the bench (liquid)")
    parser.add_argument("--volume-ml", type=float, default=None, metavar="V",
                        help="volume of the batch now, in mL (default: the planned batch volume)")
    parser.add_argument("--max-added-ml", type=float, default=None, metavar="V",
                        help="room left in the vessel, in mL")
    parser.add_argument("--sheet", metavar="FILE.html", default=None, help="write the corrected plan's sheet (draft)")
    add_json_option(parser)
    parser.set_defaults(handler=_correct)


def _plan_text(plan_json: dict, batch_id: str, verdict) -> str:
    from phantomlab.recalibration import describe_potencies_from

    lines = [f"corrected plan after batch {batch_id} ({plan_json.get('recipe')}); "
             f"{describe_potencies_from(plan_json.get('potencies_from'))}:"]
    for key, value in plan_json.get("potencies_used", {}).items():
        lines.append(f"  {key:<14} potency {value[0]:.3f} ± {value[1]:.3f}")
    lines.append("doses (undiluted stock in the final mix):")
    for dose in plan_json["doses"]:
        lines.append(f"  {dose['stock']:<14} {dose['volume_ml']:.5g} mL  ({dose['mass_g']:.5g} g, "
                     f"volume fraction {dose['volume_fraction']:.4g})")
    predicted = plan_json["predicted"]
    lines.append("predicted next batch (± SD from the potencies and the dispensing):")
    for i, w in enumerate(predicted["wavelength_nm"]):
        lines.append(f"  {w:g} nm  mua {predicted['mua_per_mm'][i]:.4g} ± {predicted['mua_sd_per_mm'][i]:.2g} /mm   "
                     f"mus' {predicted['musp_per_mm'][i]:.4g} ± {predicted['musp_sd_per_mm'][i]:.2g} /mm")
    lines.append("against the recipe's tolerances (PASS/FAIL at 2 SD of the prediction):")
    lines += verdict.lines(what="predicted")
    return "\n".join(lines)


def _top_up_text(payload: dict) -> str:
    lines = [f"top-up of batch {payload['batch_id']} ({payload['current_volume_ml']:g} mL now):"]
    for item in payload["additions"]:
        if item["volume_ml"] > 0:
            flag = "  (below the smallest dispensable amount: pre-dilute)" if item["below_min_dispense"] else ""
            lines.append(f"  add {item['volume_ml']:.4g} mL of {item['stock']} ({item['mass_g']:.4g} g){flag}")
    lines.append(f"  add {payload['diluent_volume_ml']:.4g} mL of {payload['diluent']} (diluent)")
    lines.append(f"  final volume {payload['final_volume_ml']:.5g} mL")
    for i, w in enumerate(payload["wavelength_nm"]):
        lines.append(f"  {w:g} nm  mua {100 * payload['before']['mua_rel_error'][i]:+.1f} % -> "
                     f"{100 * payload['predicted']['mua_rel_error'][i]:+.1f} %   mus' "
                     f"{100 * payload['before']['musp_rel_error'][i]:+.1f} % -> "
                     f"{100 * payload['predicted']['musp_rel_error'][i]:+.1f} %")
    return "\n".join(lines)


def _correct(args) -> CommandResult:
    from phantomlab.recalibration import potencies_from
    from phantomlab.store import get_batch, open_store, recipe_of
    from phantomlab.correction_workflow import next_batch_plan, top_up_batch
    from phantomlab.workflows import batch_recipe_file

    from phantomlab.outputs import check_writable_folder, write_text_atomically

    if args.sheet and not args.top_up:
        check_writable_folder(Path(args.sheet), what="--sheet")
    store = open_store(args.db, create=False)
    try:
        with store.reading() as session:
            batch = get_batch(session, args.batch_id, include_retracted=False)
            recipe, _notes = batch_recipe_file(recipe_of(session, batch), args.recipe)
            code = batch.code
        if args.top_up:
            done = top_up_batch(store, code, recipe, current_volume_ml=args.volume_ml,
                                max_added_ml=args.max_added_ml)
        else:
            plan, usable = next_batch_plan(store, recipe)
            with store.reading() as session:
                source = potencies_from(session, recipe, usable)
    finally:
        store.close()
    if not args.top_up:
        from phantomlab.calibration.verdict import judge
        from phantomlab.recalibration import describe_potencies_from

        payload = dict(plan.to_json())
        payload["after_batch"] = code
        payload["potencies_used"] = {k: [v[0], v[1]] for k, v in usable.items()}
        payload["potencies_from"] = source
        verdict = judge(target=payload["target"], values=payload["predicted"])
        payload["verdict"] = verdict.to_json()
        if args.sheet:
            from phantomlab.recipe.sheet import render_sheet_html

            note = f"Corrects batch {code}; {describe_potencies_from(source)}"
            write_text_atomically(Path(args.sheet), render_sheet_html(plan, draft=True, note=note), what="--sheet")
            payload["sheet"] = args.sheet
        return CommandResult(payload=payload, text=_plan_text(payload, code, verdict))
    payload = done.result.to_json()
    payload.update({"batch_id": code, "fit_id": done.fit_id,
                    "potencies_used": {k: [v[0], v[1]] for k, v in done.potencies.items()}})
    return CommandResult(payload=payload, text=_top_up_text(payload))
