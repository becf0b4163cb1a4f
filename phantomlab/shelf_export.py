"""The stock file plus the stocks added on the page, written as one stock file (layer 5).

Stocks added or edited on the page live in the batch log as stock-lot snapshots (their
TOML table, with the content of every CSV file they name), not in the lab's stock file.
:func:`export_shelf` lays the newest page version of each such stock over the stock file
and writes the result as a stock file that the command line reads like any other
(``phantomlab plan``, ``batch add``): page CSV contents become files in a folder beside it,
and the CSV files the stock file names are copied there too, so the export stands alone.

Nothing here imports streamlit or argparse: ``phantomlab stock export`` and the page's shelf
view both call it.  The file is checked by the stock parser before it is put in place, and
written through a temporary file, so a failed export leaves nothing behind.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import os
import re
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path

from phantomlab.errors import InputError
from phantomlab.inputs import contained_path, parse_toml, read_text_file, trust_folder
from phantomlab.jsonable import to_jsonable

__all__ = ["PAGE_STOCK_SOURCE", "CSV_FIELDS", "page_stock_rows", "materialise_resolved", "shelf_document",
           "export_shelf", "file_stem", "ShelfExport"]

#: ``shelf_path`` of the stock-lot records added or edited on the page (not from a file).
PAGE_STOCK_SOURCE = "added on the page"

def _csv_fields() -> tuple[str, ...]:
    from phantomlab.materials.stock import _FIELDS

    return tuple(sorted({name for fields in _FIELDS.values() for name in fields if name.endswith("_csv")}))


#: Stock fields that name a CSV file (relative to the stock file's folder): every ``*_csv``
#: field any stock kind accepts, so a new kind's files are copied without a change here.
CSV_FIELDS = _csv_fields()


def shelf_document(path) -> dict:
    """The stock file as a TOML document (one line naming the file when it cannot be read)."""
    return parse_toml(read_text_file(path, what="stock file"), what=f"the stock file {str(path)!r}")


def file_stem(key: str) -> str:
    """A file-name part made from a stock key: letters, digits, ``-`` and ``_`` only.

    A key is text from a stock file or the page; as a file name it could hold ``/`` or
    ``..`` and write outside its folder.  A key that had to be changed keeps a short hash of
    itself, so two keys never share a file name.
    """
    text = str(key)
    safe = re.sub(r"[^A-Za-z0-9_-]", "_", text)[:48].strip("_-") or "stock"
    if safe != text:
        safe += "-" + hashlib.sha256(text.encode("utf-8")).hexdigest()[:8]
    return safe


def page_stock_rows(store) -> list:
    """The newest version of each stock lot added or edited on the page (not retracted)."""
    from phantomlab.store.history import current  # layer 4
    from phantomlab.store.schema import StockLot

    with store.reading() as session:
        rows = list(
            session.scalars(current(session, StockLot).where(StockLot.shelf_path == PAGE_STOCK_SOURCE))
        )
        for row in rows:
            session.expunge(row)
    return sorted(rows, key=lambda row: (row.recorded_at, row.id))


def materialise_resolved(key: str, table: dict, folder: Path, *, relative_to: Path | None = None,
                         trust: bool = True) -> dict:
    """Write the CSV contents a stock snapshot carries back to files the stock parser reads.

    A snapshot's ``resolved`` table holds, per CSV field, the columns of the file it named.
    Each is written once into ``folder``, named by the hash of its content; the field then
    names that file (relative to ``relative_to`` when given, else absolute).  With ``trust``
    the folder is one stock files anywhere may take data from (:func:`phantomlab.inputs.trust_folder`).
    """
    table = dict(table)
    resolved = table.pop("resolved", None) or {}
    for field_name, content in resolved.items():
        if field_name not in table or not isinstance(content, dict) or "columns" not in content:
            continue
        columns = content["columns"]
        names = list(columns)
        source = content.get("source") or "source: stored in the batch log"
        lines = [f"# {source}", ",".join(names)]
        lines += [",".join(repr(float(v)) for v in row) for row in zip(*(columns[name] for name in names))]
        text = "\n".join(lines) + "\n"
        digest = hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]
        folder.mkdir(parents=True, exist_ok=True)
        if trust:
            trust_folder(folder)  # files phantomlab writes from the snapshot, readable from any stock file
        target = folder / f"{file_stem(key)}-{field_name}-{digest}.csv"
        if not target.exists():
            target.write_text(text, encoding="utf-8")
        table[field_name] = str(target.relative_to(relative_to)) if relative_to is not None else str(target)
    return table


@dataclass(frozen=True)
class ShelfExport:
    """What :func:`export_shelf` wrote.

    Attributes
    ----------
    path : Path
        The stock file written.
    stocks : tuple of str
        Every stock key in it.
    from_page : tuple of (str, int)
        The stocks whose definition came from the page, with their version.
    files : tuple of Path
        The CSV files written or copied beside it.
    """

    path: Path
    stocks: tuple[str, ...]
    from_page: tuple[tuple[str, int], ...]
    files: tuple[Path, ...]

    def to_json(self) -> dict:
        return {"file": str(self.path), "stocks": list(self.stocks),
                "from_page": [{"stock": key, "version": version} for key, version in self.from_page],
                "files": [str(path) for path in self.files]}


def export_shelf(store, shelf_path, out_path, *, force: bool = False) -> ShelfExport:
    """Write the stock file with the page's stocks laid over it as one stand-alone stock file.

    Parameters
    ----------
    store : phantomlab.store.Store
        The batch log holding the page's stock-lot snapshots.
    shelf_path : path
        The lab's stock file.
    out_path : path
        The stock file to write (``.toml``); its CSV files go to ``<name>-files/`` beside it.
    force : bool
        Replace ``out_path`` if it exists (never the stock file itself).

    Returns
    -------
    ShelfExport

    Raises
    ------
    InputError
        The stock file cannot be read, ``out_path`` is the stock file or exists (without
        ``force``), its folder is missing, or the result does not parse as a stock file.
    """
    import tomli_w

    from phantomlab.materials import load_shelf  # layer 1

    shelf_path = Path(shelf_path)
    out = Path(out_path)
    if out.suffix != ".toml":
        raise InputError(f"the exported stock file must end in .toml, got {out.name!r}")
    if out.resolve() == shelf_path.resolve():
        raise InputError("the export would replace the stock file itself; give another file name")
    if out.exists() and not force:
        raise InputError(f"{out} exists; give --force to replace it, or another file name")
    if not out.parent.exists():
        raise InputError(f"folder {out.parent} does not exist")
    document = shelf_document(shelf_path)
    stocks = {key: dict(table) for key, table in dict(document.get("stocks", {})).items()}
    files_folder = out.parent / f"{out.stem}-files"
    written: list[Path] = []
    staging = Path(tempfile.mkdtemp(prefix=f".{out.stem}-", dir=out.parent))
    try:
        staged_files = staging / files_folder.name
        for key, table in stocks.items():  # the stock file's own CSV files, copied beside the export
            for name in CSV_FIELDS:
                if name in table:
                    source = contained_path(table[name], base_dir=shelf_path.resolve().parent,
                                            what=f"stock {key}, field {name}")
                    if not source.is_file():
                        raise InputError(f"stock {key}, field {name}: file {str(table[name])!r} not found "
                                         f"beside {shelf_path}")
                    staged_files.mkdir(parents=True, exist_ok=True)
                    copy = staged_files / f"{file_stem(key)}-{file_stem(source.stem)}{source.suffix[:8]}"
                    shutil.copyfile(source, copy)
                    table[name] = f"{files_folder.name}/{copy.name}"
        from_page = []
        for row in page_stock_rows(store):
            stocks[row.stock_key] = materialise_resolved(row.stock_key, dict(row.definition), staged_files,
                                                         relative_to=staging, trust=False)
            from_page.append((row.stock_key, int(row.version)))
        document = dict(document)
        document["stocks"] = stocks
        header = (f"# stock file exported by phantomlab on {_dt.date.today().isoformat()} from {shelf_path.name}"
                  f"{' and ' + str(len(from_page)) + ' stock(s) added on the page' if from_page else ''}\n"
                  f"# (CSV files in {files_folder.name}/; the original stock file and the batch log are unchanged)\n")
        staged = staging / out.name
        staged.write_text(header + tomli_w.dumps(to_jsonable(document)), encoding="utf-8")
        try:
            shelf = load_shelf(staged)
        except InputError as exc:
            raise InputError(f"the exported stock file would not load: {exc}") from None
        # put the files in place, then the stock file (rename: never half written)
        if staged_files.exists():
            files_folder.mkdir(exist_ok=True)
            for path in sorted(staged_files.iterdir()):
                target = files_folder / path.name
                os.replace(path, target)
                written.append(target)
        os.replace(staged, out)
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return ShelfExport(path=out, stocks=tuple(shelf.stocks), from_page=tuple(from_page), files=tuple(written))
