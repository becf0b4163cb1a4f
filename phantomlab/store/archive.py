"""A whole lab as one archive of JSON and CSV files, and back (layer 4).

The archive is a zip file:

* ``manifest.json`` — what the archive is (format name and version, phantomlab version,
  schema revision, time of export, row count of every table);
* ``tables/TABLE.json`` — every row of every table, every version, all columns: the part
  an import reads.  Bytes are ``{"base64": ...}``, dates and times ISO 8601 strings;
* ``batches.csv``, ``calibration_potencies.csv`` — the same facts flat, for a spreadsheet;
* ``measurements/ID/FILE`` — each measurement file exactly as uploaded.

:func:`import_lab` loads an archive into an EMPTY database in one transaction, keeping
every id, so export → import → export gives the same tables byte for byte.
"""

from __future__ import annotations

import base64
import csv
import datetime as _dt
import hashlib
import io
import json
import zipfile
from pathlib import Path, PurePosixPath
from typing import Any

from sqlalchemy import Date, DateTime, LargeBinary, func, insert, select, text

from phantomlab import __version__
from phantomlab.errors import InputError
from phantomlab.store.engine import Store
from phantomlab.store.migrate import current_revision
from phantomlab.store.schema import Base, Batch, BatchPlan, CalibrationPotency, Recipe

__all__ = ["ARCHIVE_FORMAT", "export_lab", "import_lab", "read_archive_tables"]

#: Name and version written into (and required from) every archive's manifest.
ARCHIVE_FORMAT = {"format": "phantomlab lab archive", "format_version": 1}


def _encode(value: Any) -> Any:
    if isinstance(value, (bytes, bytearray, memoryview)):
        return {"base64": base64.b64encode(bytes(value)).decode("ascii")}
    if isinstance(value, (_dt.datetime, _dt.date)):
        return value.isoformat()
    return value


def _decode(column, value: Any) -> Any:
    if value is None:
        return None
    kind = column.type
    try:
        if isinstance(kind, LargeBinary):
            return base64.b64decode(value["base64"], validate=True)
        if isinstance(kind, DateTime):
            return _dt.datetime.fromisoformat(value)
        if isinstance(kind, Date):
            return _dt.date.fromisoformat(value)
    except (TypeError, KeyError, ValueError):
        raise InputError(
            f"archive table {column.table.name}: column {column.name} holds {str(value)[:40]!r}, "
            "not a value of its type"
        ) from None
    return value


def _table_rows(session, table) -> list[dict[str, Any]]:
    order = [table.c[c.name] for c in table.primary_key.columns]
    return [
        {key: _encode(value) for key, value in row._mapping.items()}
        for row in session.execute(select(table).order_by(*order))
    ]


def export_lab(store: Store, path: str | Path) -> dict[str, Any]:
    """Write the whole batch log to the zip archive ``path``; return the manifest."""
    path = Path(path)
    if path.suffix.lower() != ".zip":
        raise InputError(f"archive name {path.name!r} must end in .zip (a zip of JSON and CSV files)")
    with store.reading() as session:
        tables = {table.name: _table_rows(session, table) for table in Base.metadata.sorted_tables}
        batch_rows = session.execute(
            select(Batch, Recipe.name, Recipe.recipe_version)
            .join(BatchPlan, BatchPlan.id == Batch.plan_id)
            .join(Recipe, Recipe.id == BatchPlan.recipe_id)
            .order_by(Batch.id)
        ).all()
        batches_csv = _csv(
            ["code", "version", "status", "retracted", "operator", "planned_on", "mixed_on",
             "recipe", "recipe_version", "recorded_at", "change_note"],
            [[b.code, b.version, b.status, b.retracted, b.operator, b.planned_on, b.mixed_on,
              name, rversion, b.recorded_at, b.change_note] for b, name, rversion in batch_rows],
        )
        potencies_csv = _csv(
            ["state_id", "stock_key", "lot", "potency", "potency_sd"],
            [[p.state_id, p.stock_key, p.lot, repr(p.potency), repr(p.potency_sd)]
             for p in session.scalars(select(CalibrationPotency).order_by(CalibrationPotency.id))],
        )
    manifest = {
        **ARCHIVE_FORMAT,
        "software_version": __version__,
        "schema_revision": current_revision(store.engine),
        "exported_at": _dt.datetime.now(_dt.timezone.utc).replace(tzinfo=None).isoformat(),
        "tables": {name: len(rows) for name, rows in tables.items()},
    }
    if not path.parent.is_dir():
        raise InputError(f"archive folder {str(path.parent)!r} does not exist")
    partial = path.with_name(path.name + ".partial")
    try:
        _write_archive(partial, manifest, tables, batches_csv, potencies_csv)
        partial.replace(path)
    except OSError as exc:
        partial.unlink(missing_ok=True)
        raise InputError(f"cannot write archive {str(path)!r} ({exc.strerror or exc})") from None
    return manifest


def _write_archive(partial: Path, manifest, tables, batches_csv: str, potencies_csv: str) -> None:
    with zipfile.ZipFile(partial, "w", compression=zipfile.ZIP_DEFLATED) as archive:
        archive.writestr("manifest.json", json.dumps(manifest, indent=2, sort_keys=True))
        for name, rows in tables.items():
            archive.writestr(
                f"tables/{name}.json",
                json.dumps(rows, indent=1, sort_keys=True, allow_nan=False),
            )
        archive.writestr("batches.csv", batches_csv)
        archive.writestr("calibration_potencies.csv", potencies_csv)
        for row in tables.get("measurements", []):
            safe = PurePosixPath(str(row["file_name"]).replace("\\", "/")).name or "measurement"
            archive.writestr(
                f"measurements/{row['id']}/{safe}", base64.b64decode(row["raw_content"]["base64"])
            )


def _csv(header: list[str], rows: list[list[Any]]) -> str:
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(header)
    for row in rows:
        writer.writerow(["" if v is None else _encode(v) for v in row])
    return buffer.getvalue()


def read_archive_tables(path: str | Path) -> tuple[dict[str, Any], dict[str, list[dict[str, Any]]]]:
    """The manifest and the table rows of an archive (checked, not yet decoded)."""
    path = Path(path)
    if not path.is_file():
        raise InputError(f"archive {str(path)!r} not found")
    try:
        with zipfile.ZipFile(path) as archive:
            names = set(archive.namelist())
            if "manifest.json" not in names:
                raise InputError(f"{path.name} is not a phantomlab lab archive (no manifest.json)")
            manifest = json.loads(archive.read("manifest.json"))
            if {k: manifest.get(k) for k in ARCHIVE_FORMAT} != ARCHIVE_FORMAT:
                raise InputError(
                    f"{path.name}: archive format {manifest.get('format')!r} version "
                    f"{manifest.get('format_version')!r} not accepted; accepted: "
                    f"{ARCHIVE_FORMAT['format']!r} version {ARCHIVE_FORMAT['format_version']}"
                )
            tables = {}
            for name in manifest.get("tables", {}):
                member = f"tables/{name}.json"
                if member not in names:
                    raise InputError(f"{path.name}: {member} is missing from the archive")
                tables[name] = json.loads(archive.read(member))
    except zipfile.BadZipFile:
        raise InputError(f"{path.name} is not a zip archive; a file made by `phantomlab batch export` is expected") from None
    except json.JSONDecodeError as exc:
        raise InputError(f"{path.name}: a JSON file in the archive does not parse ({exc.msg})") from None
    return manifest, tables


def import_lab(store: Store, path: str | Path) -> dict[str, int]:
    """Load an archive into an empty batch log (one transaction); return rows per table."""
    manifest, tables = read_archive_tables(path)
    known = {table.name: table for table in Base.metadata.sorted_tables}
    unknown = sorted(set(tables) - set(known))
    if unknown:
        raise InputError(
            f"archive holds tables this phantomlab does not know ({', '.join(unknown)}); "
            "it was made by a newer version"
        )
    decoded: dict[str, list[dict[str, Any]]] = {}
    for name, rows in tables.items():
        table = known[name]
        if len(rows) != manifest["tables"][name]:
            raise InputError(f"archive table {name} has {len(rows)} rows, the manifest says {manifest['tables'][name]}")
        decoded[name] = []
        for row in rows:
            extra = set(row) - set(table.c.keys())
            if extra:
                raise InputError(f"archive table {name} has columns this phantomlab does not know: {', '.join(sorted(extra))}")
            decoded[name].append({key: _decode(table.c[key], value) for key, value in row.items()})
    for row in decoded.get("measurements", []):
        if hashlib.sha256(row["raw_content"]).hexdigest() != row["content_sha256"]:
            raise InputError(f"archive measurement {row['id']}: file content does not match its SHA-256; archive damaged")
    with store.transaction() as session:
        for table in known.values():
            present = session.scalar(select(func.count()).select_from(table))
            if present:
                raise InputError(
                    f"the database already holds {present} rows in {table.name}; "
                    "import a lab archive into an empty database"
                )
        for table in Base.metadata.sorted_tables:
            rows = decoded.get(table.name, [])
            if rows:
                session.execute(insert(table), rows)
        if session.get_bind().dialect.name == "postgresql":
            for table in Base.metadata.sorted_tables:
                if "id" in table.c and decoded.get(table.name):
                    session.execute(text(
                        f"SELECT setval(pg_get_serial_sequence('{table.name}', 'id'), "
                        f"(SELECT MAX(id) FROM {table.name}))"
                    ))
    return {name: len(rows) for name, rows in decoded.items()}
