"""The batch log (layer 4): stock lots, recipes, batches, measurements, fits, calibrations.

Open it with :func:`open_store` (SQLite file by default, PostgreSQL by URL); run each
command in one ``with store.transaction() as session:`` block and call the repository
functions with that session.  History is append-only (:mod:`phantomlab.store.history`).
"""

from phantomlab.store.batches import (
    add_batch,
    batch_history,
    batch_lots,
    get_batch,
    list_batches,
    next_batch_code,
    plan_of,
    recipe_of,
    record_actual,
    set_status,
)
from phantomlab.store.calibrations import (
    CalibratedPotency,
    calibration_potencies,
    calibration_states,
    restore_calibration_state,
    latest_calibration_state,
    latest_potencies,
    latest_potency_states,
    potencies_for_shelf,
    record_calibration,
)
from phantomlab.store.engine import (
    Store,
    StoreBusyError,
    StoreConflictError,
    open_store,
    resolve_url,
)
from phantomlab.store.exclusions import (
    calibration_exclusions,
    exclude_from_calibration,
    exclusion_history,
    include_in_calibration,
)
from phantomlab.store.evidence import BatchEvidence, FitEvidence, calibration_evidence
from phantomlab.store.history import correct, history_of, retract, unretract
from phantomlab.store.measurements import (
    add_fit,
    add_measurement,
    fits_of,
    get_measurement,
    measurements_of,
)
from phantomlab.store.snapshots import record_recipe, record_stock_lot
from phantomlab.store.stamp import log_stamp

__all__ = [
    "BatchEvidence",
    "CalibratedPotency",
    "calibration_exclusions",
    "calibration_states",
    "exclude_from_calibration",
    "exclusion_history",
    "include_in_calibration",
    "restore_calibration_state",
    "FitEvidence",
    "Store",
    "StoreBusyError",
    "StoreConflictError",
    "add_batch",
    "add_fit",
    "add_measurement",
    "batch_history",
    "batch_lots",
    "calibration_evidence",
    "calibration_potencies",
    "correct",
    "fits_of",
    "get_batch",
    "get_measurement",
    "history_of",
    "latest_calibration_state",
    "log_stamp",
    "latest_potencies",
    "latest_potency_states",
    "list_batches",
    "measurements_of",
    "next_batch_code",
    "open_store",
    "plan_of",
    "potencies_for_shelf",
    "recipe_of",
    "record_actual",
    "record_calibration",
    "record_recipe",
    "record_stock_lot",
    "resolve_url",
    "retract",
    "set_status",
    "unretract",
]
