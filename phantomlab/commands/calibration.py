"""``phantomlab calibration list|use``: the recorded calibration states, and rollback (layer 5).

    phantomlab calibration list [--db URL] [--json]
    phantomlab calibration use STATE_ID [--note TEXT] [--operator NAME] [--db URL] [--json]

``list`` shows every calibration state, oldest first, with its potencies and which one is
current.  ``use`` makes an earlier state current again: a NEW state that points at it
(``restores_state_id``) and carries its potencies exactly; every later plan uses it and says
so.  The work is :mod:`phantomlab.recalibration` (the page calls the same functions).

JSON: ``list`` → ``states`` [{state_id, recorded_at, recorded_by, method, restores_state_id,
current, batches, excluded, chi2_red, potencies [{stock, lot, potency, potency_sd,
spectral}]}]; ``use`` → ``state_id`` (the new state), ``restores_state_id``, ``recorded_at``,
``potencies`` {KEY: {potency, potency_sd, lot, spectral}}.
"""

from __future__ import annotations

from phantomlab.cli import CommandResult, add_json_option
from phantomlab.errors import InputError

__all__ = ["register"]


def register(subparsers) -> None:
    parser = subparsers.add_parser("calibration", help="list the calibration states; make an earlier one current")
    actions = parser.add_subparsers(dest="calibration_command", metavar="ACTION")
    listing = actions.add_parser("list", help="every calibration state with its potencies")
    use = actions.add_parser("use", help="make an earlier calibration state current again (rollback)")
    use.add_argument("state_id", metavar="STATE_ID", type=str)
    use.add_argument("--note", metavar="TEXT", help="why (kept with the new state)")
    use.add_argument("--operator", metavar="NAME")
    for action, handler in ((listing, _list), (use, _use)):
        action.add_argument("--db", metavar="URL", default=None,
                            help="SQLAlchemy URL of the batch log (default: $PHANTOMLAB_DB, else phantomlab.sqlite)")
        add_json_option(action)
        action.set_defaults(handler=handler)
    parser.set_defaults(handler=_no_action)


def _no_action(args) -> CommandResult:
    raise InputError("calibration: give an action: list, use STATE_ID")


def _list(args) -> CommandResult:
    from phantomlab.recalibration import calibration_list
    from phantomlab.store import open_store

    store = open_store(args.db, create=False)
    try:
        states = calibration_list(store)
    finally:
        store.close()
    if not states:
        return CommandResult(payload={"states": []},
                             text="no calibration recorded yet (phantomlab recalibrate --apply records one)")
    lines = []
    for state in states:
        mark = "  <- current" if state["current"] else ""
        origin = (f"rollback to state {state['restores_state_id']}" if state["restores_state_id"]
                  else f"from {len(state['batches'])} batch(es)"
                  + (f", {len(state['excluded'])} excluded" if state["excluded"] else ""))
        lines.append(f"state {state['state_id']}  {str(state['recorded_at'])[:16].replace('T', ' ')} UTC  "
                     f"{origin}{' by ' + state['recorded_by'] if state['recorded_by'] else ''}{mark}")
        for p in state["potencies"]:
            spectral = f"  {p['spectral']['text']}" if p.get("spectral") else ""
            lines.append(f"    {p['stock']:<14} lot {str(p['lot']):<18} {p['potency']:.4f} ± {p['potency_sd']:.4f}"
                         f"{spectral}")
    return CommandResult(payload={"states": states}, text="\n".join(lines))


def _use(args) -> CommandResult:
    from phantomlab.recalibration import use_calibration
    from phantomlab.store import open_store

    store = open_store(args.db, create=False)
    try:
        done = use_calibration(store, args.state_id, note=args.note, recorded_by=args.operator)
    finally:
        store.close()
    lines = [f"calibration state {done['restores_state_id']} is current again (recorded as state {done['state_id']})"]
    for key, p in done["potencies"].items():
        lines.append(f"  {key:<14} lot {str(p['lot']):<18} {p['potency']:.4f} ± {p['potency_sd']:.4f}")
    return CommandResult(payload=done, text="\n".join(lines))
