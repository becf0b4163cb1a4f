"""``phantomlab lab import``: load a whole lab archive into an empty batch log (layer 5).

    phantomlab lab import FILE.zip [--db URL] [--json]

The archive is what ``phantomlab batch export`` writes (a zip of JSON and CSV files); the
import keeps every record, version and id, in one transaction.
"""

from __future__ import annotations

from phantomlab.cli import CommandResult, add_json_option
from phantomlab.commands.batch import add_db_option
from phantomlab.errors import InputError

__all__ = ["register"]


def register(subparsers) -> None:
    lab = subparsers.add_parser("lab", help="a whole lab's batch log: import an archive")
    actions = lab.add_subparsers(dest="lab_command", metavar="ACTION")
    load = actions.add_parser("import", help="load an archive from `phantomlab batch export` into an empty database")
    load.add_argument("archive", metavar="FILE.zip")
    add_db_option(load)
    add_json_option(load)
    load.set_defaults(handler=_import)
    lab.set_defaults(handler=_no_action)


def _no_action(args) -> CommandResult:
    raise InputError("lab: give an action: import")


def _import(args) -> CommandResult:
    from phantomlab.store import open_store
    from phantomlab.store.archive import import_lab, load_archive
    from phantomlab.store.engine import resolve_url, sqlite_file

    archive = load_archive(args.archive)  # read and checked whole before any database is touched
    new_file = sqlite_file(resolve_url(args.db))
    if new_file is not None and new_file.exists():
        new_file = None  # not ours to remove
    store = open_store(args.db)
    try:
        counts = import_lab(store, archive)
    except BaseException:
        store.close()
        if new_file is not None:  # a refused import leaves no database behind
            for suffix in ("", "-wal", "-shm", "-journal"):
                new_file.with_name(new_file.name + suffix).unlink(missing_ok=True)
        raise
    store.close()
    summary = ", ".join(f"{n} {name}" for name, n in counts.items() if n)
    return CommandResult(payload={"archive": args.archive, "tables": counts},
                         text=f"imported {args.archive}: {summary or 'an empty log'}")
