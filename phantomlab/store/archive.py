"""A whole lab as one archive of JSON and CSV files, and back (layer 4).

The archive is a zip file:

* ``manifest.json`` — what the archive is (format name and version, phantomlab version,
  schema revision, time of export, row count of every table);
* ``tables/TABLE.json`` — every row of every table, every version, all columns: the part
  an import reads.  Bytes are ``{"base64": ...}``, dates and times ISO 8601 strings;
* ``batches.csv``, ``calibration_potencies.csv`` — the same facts flat, for a spreadsheet;
* ``measurements/ID/FILE`` — each measurement file exactly as uploaded.

:func:`load_archive` reads and checks an archive whole without writing anything (bounded in
size, every row against its table); :func:`import_lab` then loads it into an EMPTY database
in one transaction, keeping every id, so export → import → export gives the same tables
byte for byte.
"""

from __future__ import annotations

import base64
import csv
import datetime as _dt
import hashlib
import io
import json
import re
import zipfile
from dataclasses import dataclass
from pathlib import Path, PurePosixPath
from typing import Any

from sqlalchemy import Boolean, Date, DateTime, Float, Integer, LargeBinary, String, func, insert, select, text

from phantomlab import __version__
from phantomlab.errors import InputError
from phantomlab.store.engine import Store
from phantomlab.inputs import regular_file
from phantomlab.limits import check_limit, limit
from phantomlab.store.migrate import current_revision, head_revision
from phantomlab.store.schema import Base, Batch, BatchPlan, CalibrationPotency, Recipe

__all__ = ["ARCHIVE_FORMAT", "LabArchive", "export_lab", "import_lab", "load_archive", "read_archive_tables"]

#: Name and version written into (and required from) every archive's manifest.
ARCHIVE_FORMAT = {"format": "phantomlab lab archive", "format_version": 1}


def _encode(value: Any) -> Any:
    if isinstance(value, (bytes, bytearray, memoryview)):
        return {"base64": base64.b64encode(bytes(value)).decode("ascii")}
    if isinstance(value, (_dt.datetime, _dt.date)):
        return value.isoformat()
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


# ---- reading an archive: bounded, validated, before anything is written --------------------------

#: Members read from an archive, besides the tables: the manifest (at most this size [bytes]).
_MANIFEST_MAX_BYTES = 1_000_000


def read_archive_tables(path: str | Path) -> tuple[dict[str, Any], dict[str, list[dict[str, Any]]]]:
    """The manifest and the table rows of an archive (checked in structure, not yet decoded).

    The archive file and the members read (``manifest.json``, ``tables/*.json``) are held to
    the ``archive_mb`` limit (:mod:`phantomlab.limits`) by the sizes the zip declares, and no
    member is read past its declared size, so a zip bomb is refused without being unpacked.
    Only those members are read; no member is ever extracted to disk.
    """
    path = Path(path)
    _check_archive_file(path)
    allowed = limit("archive_mb") * 1_000_000
    try:
        with zipfile.ZipFile(path) as archive:
            members = {info.filename: info for info in archive.infolist()}
            if "manifest.json" not in members:
                raise InputError(f"{path.name} is not a phantomlab lab archive (no manifest.json)")
            if members["manifest.json"].file_size > _MANIFEST_MAX_BYTES:
                raise InputError(f"{path.name}: manifest.json is {members['manifest.json'].file_size:,} bytes; "
                                 "a lab archive's manifest is a few kB (archive damaged or not ours)")
            manifest = _json_member(archive, members["manifest.json"], path)
            _check_manifest(manifest, path)
            wanted = [members.get(f"tables/{name}.json") for name in manifest["tables"]]
            for name, info in zip(manifest["tables"], wanted):
                if info is None:
                    raise InputError(f"{path.name}: tables/{name}.json is missing from the archive")
            check_limit("archive_mb", sum(info.file_size for info in wanted) / 1e6,
                        given=f"{path.name}: tables unpacked")
            tables = {}
            for name, info in zip(manifest["tables"], wanted):
                rows = _json_member(archive, info, path, allowed=allowed)
                if not isinstance(rows, list) or not all(isinstance(row, dict) for row in rows):
                    raise InputError(f"{path.name}: tables/{name}.json is not a list of rows (archive damaged)")
                tables[name] = rows
    except zipfile.BadZipFile:
        raise InputError(f"{path.name} is not a zip archive; a file made by `phantomlab batch export` is expected") from None
    except (zipfile.LargeZipFile, NotImplementedError, RuntimeError, EOFError, OSError) as exc:
        # encrypted members, unknown compression, truncated files
        raise InputError(f"{path.name}: the zip archive cannot be read ({type(exc).__name__}); "
                         "a file made by `phantomlab batch export` is expected") from None
    return manifest, tables


def _check_archive_file(path: Path) -> None:
    """A regular file within the ``archive_mb`` limit (refused before it is opened as a zip)."""
    file = regular_file(path, what="archive")
    check_limit("archive_mb", file.stat().st_size / 1e6, given=f"archive {file.name!r}")


def _json_member(archive: zipfile.ZipFile, info: zipfile.ZipInfo, path: Path, *, allowed: int | None = None):
    with archive.open(info) as stream:  # reads stop at the declared size (zipfile)
        data = stream.read(info.file_size + 1 if allowed is None else min(info.file_size, allowed) + 1)
    try:
        return json.loads(data)
    except (json.JSONDecodeError, UnicodeDecodeError, RecursionError):
        raise InputError(f"{path.name}: {info.filename} does not parse as JSON (archive damaged)") from None


def _check_manifest(manifest: Any, path: Path) -> None:
    if not isinstance(manifest, dict):
        raise InputError(f"{path.name}: manifest.json is not a JSON object (archive damaged)")
    if {k: manifest.get(k) for k in ARCHIVE_FORMAT} != ARCHIVE_FORMAT:
        # what the manifest says is not quoted: the file may not be an archive of ours at all
        raise InputError(
            f"{path.name}: archive format or format version not accepted; accepted: "
            f"{ARCHIVE_FORMAT['format']!r} version {ARCHIVE_FORMAT['format_version']}"
        )
    counts = manifest.get("tables")
    if not isinstance(counts, dict) or not all(
        isinstance(k, str) and isinstance(v, int) and not isinstance(v, bool) and v >= 0 for k, v in counts.items()
    ):
        raise InputError(f"{path.name}: the manifest's tables must map table names to row counts (archive damaged)")
    known = {table.name for table in Base.metadata.sorted_tables}
    unknown = sorted(set(counts) - known)
    if unknown:
        raise InputError(
            f"{path.name}: the archive holds {len(unknown)} table(s) this phantomlab does not know; "
            "it was made by a newer version"
        )
    revision, head = manifest.get("schema_revision"), head_revision()
    if revision != head:
        made = _shown(revision, r"\d{4}", "(unreadable)")
        version = _shown(manifest.get("software_version"), r"\d[0-9A-Za-z.+-]{0,30}", "(unreadable)")
        raise InputError(
            f"{path.name}: archive made at schema revision {made} by phantomlab {version}; this phantomlab "
            f"writes revision {head}. Import it with the version that exported it; opening that database with "
            "this version then upgrades it"
        )


def _shown(value, pattern: str, otherwise: str) -> str:
    """``value`` if it looks like what it should be (a revision, a version), else a description."""
    return str(value) if isinstance(value, str) and re.fullmatch(pattern, value) else otherwise


def _decode(column, value: Any, *, where: str) -> Any:
    """A JSON value of the archive as the value of ``column``; refused (never quoted) if it is not one."""
    if value is None:
        if not column.nullable and not column.primary_key:
            raise InputError(f"{where}: column {column.name} is empty; it may not be (archive damaged)")
        return None
    kind = column.type
    try:
        if isinstance(kind, LargeBinary):
            if not isinstance(value, dict) or set(value) != {"base64"} or not isinstance(value["base64"], str):
                raise ValueError
            return base64.b64decode(value["base64"], validate=True)
        if isinstance(kind, DateTime):
            return _dt.datetime.fromisoformat(value)
        if isinstance(kind, Date):
            return _dt.date.fromisoformat(value)
        if isinstance(kind, Boolean):
            if not isinstance(value, bool):
                raise ValueError
            return value
        if isinstance(kind, Integer):
            if isinstance(value, bool) or not isinstance(value, int) or abs(value) >= 2**63:
                raise ValueError
            return value
        if isinstance(kind, Float):
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise ValueError
            return float(value)
        if isinstance(kind, String):
            if not isinstance(value, str) or (kind.length is not None and len(value) > kind.length):
                raise ValueError
            return value
    except (TypeError, KeyError, ValueError, OverflowError):
        raise InputError(f"{where}: column {column.name} holds a value that is not of its type "
                         f"{type(kind).__name__} (archive damaged)") from None
    return value  # JSON columns hold any JSON value


def _decoded_tables(manifest, tables, path: Path) -> dict[str, list[dict[str, Any]]]:
    known = {table.name: table for table in Base.metadata.sorted_tables}
    decoded: dict[str, list[dict[str, Any]]] = {}
    for name, rows in tables.items():
        table = known[name]
        if len(rows) != manifest["tables"][name]:
            raise InputError(f"archive table {name} has {len(rows)} rows, the manifest says {manifest['tables'][name]}")
        required = [c.name for c in table.columns
                    if not c.nullable and c.default is None and c.server_default is None]
        keys = [c.name for c in table.primary_key.columns]
        seen: set = set()
        decoded[name] = []
        for number, row in enumerate(rows, start=1):
            where = f"archive table {name}, row {number}"
            extra = set(row) - set(table.c.keys())
            if extra:
                raise InputError(f"archive table {name} has {len(extra)} column(s) this phantomlab does not know; "
                                 "it was made by another version")
            missing = [c for c in required if c not in row]
            if missing:
                raise InputError(f"{where}: lacks column(s) {', '.join(missing)} (archive damaged)")
            values = {key: _decode(table.c[key], value, where=where) for key, value in row.items()}
            identity = tuple(values.get(k) for k in keys)
            if None in identity or identity in seen:
                raise InputError(f"{where}: its key ({', '.join(keys)}) is empty or repeats (archive damaged)")
            seen.add(identity)
            decoded[name].append(values)
    for name, rows in decoded.items():  # every reference points at a row of the archive
        for foreign in known[name].foreign_keys:
            target = foreign.column
            present = {r.get(target.name) for r in decoded.get(target.table.name, [])}
            for number, row in enumerate(rows, start=1):
                value = row.get(foreign.parent.name)
                if value is not None and value not in present:
                    raise InputError(f"archive table {name}, row {number}: column {foreign.parent.name} refers to "
                                     f"a {target.table.name} row the archive lacks (archive damaged)")
    for row in decoded.get("measurements", []):
        if hashlib.sha256(row["raw_content"]).hexdigest() != row["content_sha256"]:
            raise InputError(f"archive measurement {row['id']}: file content does not match its SHA-256; archive damaged")
    return decoded


@dataclass(frozen=True)
class LabArchive:
    """An archive read and checked whole, ready to import: manifest and decoded rows per table."""

    path: Path
    manifest: dict
    tables: dict

    @property
    def counts(self) -> dict[str, int]:
        return {name: len(rows) for name, rows in self.tables.items()}


def load_archive(path: str | Path) -> LabArchive:
    """Read and check an archive completely, writing nothing: call it before opening a database.

    Raises
    ------
    InputError
        Not a zip, past the size limit, not a phantomlab archive, another schema revision,
        a row that does not fit its table (unknown or missing column, wrong type, repeated
        key, reference to a missing row), a measurement whose bytes do not match their hash.
        The message names tables, rows and columns, never a value.
    """
    path = Path(path)
    manifest, tables = read_archive_tables(path)
    return LabArchive(path=path, manifest=manifest, tables=_decoded_tables(manifest, tables, path))


def import_lab(store: Store, archive: "str | Path | LabArchive") -> dict[str, int]:
    """Load an archive into an empty batch log (one transaction); return rows per table."""
    loaded = archive if isinstance(archive, LabArchive) else load_archive(archive)
    decoded = loaded.tables
    known = {table.name: table for table in Base.metadata.sorted_tables}
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
    return loaded.counts
