"""``phantomlab batch exclude|include``: a batch or a measurement out of the calibration, and back (layer 5).

    phantomlab batch exclude BATCH_ID [--measurement ID] --reason TEXT [--operator NAME]
    phantomlab batch include BATCH_ID [--measurement ID] [--reason TEXT] [--operator NAME]

Two actions of ``phantomlab batch`` (registered by :mod:`phantomlab.commands.batch`); the work
is :func:`phantomlab.recalibration.exclude_batch` / :func:`~phantomlab.recalibration.include_batch`,
as on the page.  JSON: ``batch_id``, ``measurement_id`` (None: the whole batch), ``excluded``,
``reason``, ``version``, ``recorded_at``.
"""

from __future__ import annotations

from phantomlab.cli import CommandResult
from phantomlab.commands._batch_io import open_log

__all__ = ["add_exclusion_actions", "exclude_handler", "include_handler"]


def add_exclusion_actions(actions):
    """Add ``exclude`` and ``include`` to the ``batch`` sub-parsers; return both parsers."""
    exclude = actions.add_parser("exclude", help="leave a batch (or one measurement) out of the calibration")
    exclude.add_argument("batch_id", metavar="BATCH_ID")
    exclude.add_argument("--measurement", type=int, metavar="ID", help="only this measurement of the batch")
    exclude.add_argument("--reason", required=True, metavar="TEXT", help="why (kept in the history)")
    exclude.add_argument("--operator", metavar="NAME")

    include = actions.add_parser("include", help="take an excluded batch (or measurement) into the calibration again")
    include.add_argument("batch_id", metavar="BATCH_ID")
    include.add_argument("--measurement", type=int, metavar="ID", help="only this measurement of the batch")
    include.add_argument("--reason", metavar="TEXT", help="why (kept in the history)")
    include.add_argument("--operator", metavar="NAME")
    return exclude, include


def _what(done: dict) -> str:
    return f"measurement {done['measurement_id']} of batch" if done["measurement_id"] else "batch"


def exclude_handler(args) -> CommandResult:
    from phantomlab.recalibration import exclude_batch

    store = open_log(args)  # an existing log only
    try:
        done = exclude_batch(store, args.batch_id, measurement_id=args.measurement, reason=args.reason,
                             recorded_by=args.operator)
    finally:
        store.close()
    return CommandResult(payload=done, text=f"{_what(done)} {done['batch_id']} left out of the calibration: "
                         f"{done['reason']}\n(phantomlab recalibrate previews the result; --apply records it)")


def include_handler(args) -> CommandResult:
    from phantomlab.recalibration import include_batch

    store = open_log(args)  # an existing log only
    try:
        done = include_batch(store, args.batch_id, measurement_id=args.measurement, reason=args.reason,
                             recorded_by=args.operator)
    finally:
        store.close()
    return CommandResult(payload=done, text=f"{_what(done)} {done['batch_id']} is in the calibration again: "
                         f"{done['reason']}")
