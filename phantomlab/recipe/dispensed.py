"""What was really dispensed, line by line as the mixing sheet asks for it (layer 3).

The sheet asks the technician to write an actual amount on every line: the matrix (one
line, or its two parts), each pre-dilution step ("actual taken", "actual diluent") and each
dose.  This module is the one reading of those lines, for ``phantomlab batch actual`` (the
amounts CSV, :func:`parse_amounts_csv`) and for the page (its form, built from
:func:`bench_lines`); :func:`undiluted_amounts` turns them into amounts of undiluted stock
and volume fractions, which the recipe layer's prediction takes.

Rows (plain dicts, as :func:`parse_amounts_csv` gives them), each named in ``stock`` by:

* a stock key: ``{stock, volume_ml | mass_g[, dilution_factor]}`` — the amount of the stock,
  or of its pre-dilution 1 in ``dilution_factor`` (the stock is amount / factor);
* a pre-dilution step as the sheet names it (``KEY-D1``): ``{stock, volume_ml | mass_g,
  diluent_ml | diluent_g}`` — actual taken and actual diluent, in the step's unit.  With every
  step of a stock given, its dose row is the amount of its last pre-dilution and its dilution
  factor is the product of the steps' (taken + diluent) / taken;
* the matrix key: the matrix as measured on the sheet, volume or mass;
* a matrix part ``MATRIX:PART`` (``:powder`` and ``:water`` of a gel, ``:part_a`` and
  ``:part_b`` of silicone or resin): the sheet's matrix lines one by one.

The diluent a pre-dilution carries into the batch is part of the matrix (the plan measures
the matrix line short by that much), so with the matrix given the batch volume is the
matrix as measured + the carried diluent + the undiluted stocks (volumes additive).
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

from phantomlab.errors import InputError
from phantomlab.recipe.procedure import dose_order_key, format_amount, format_tolerance

__all__ = [
    "AMOUNT_COLUMNS",
    "MATRIX_PARTS",
    "BenchLine",
    "bench_lines",
    "matrix_part_name",
    "parse_amounts_csv",
    "undiluted_amounts",
]

#: Columns of the amounts CSV (docs/formats.md, "Amounts CSV").
AMOUNT_COLUMNS = ("stock", "volume_ml", "mass_g", "dilution_factor", "diluent_ml", "diluent_g")

#: Per preparation kind: the part names of its matrix lines, in the sheet's order, and which
#: of them make up the matrix of the batch ("total"); a gel's powder is dissolved in the
#: water it is made up with, so the made-up volume alone is the matrix.
MATRIX_PARTS: dict[str, dict[str, tuple[str, ...]]] = {
    "liquid": {"parts": ("",), "total": ("",)},
    "gelatin": {"parts": ("powder", "water"), "total": ("water",)},
    "agar": {"parts": ("powder", "water"), "total": ("water",)},
    "silicone": {"parts": ("part_a", "part_b"), "total": ("part_a", "part_b")},
    "resin": {"parts": ("part_a", "part_b"), "total": ("part_a", "part_b")},
}
_UNITS = {"volume_ml": "mL", "mass_g": "g"}


def matrix_part_name(matrix_key: str, part: str) -> str:
    """The row name of a matrix line: the matrix key, or ``KEY:part`` for a two-line matrix."""
    return matrix_key if not part else f"{matrix_key}:{part}"


def _parts_of(kind: str) -> dict[str, tuple[str, ...]]:
    return MATRIX_PARTS.get(kind, MATRIX_PARTS["liquid"])


# ---- the sheet's lines ---------------------------------------------------------------------------


@dataclass(frozen=True)
class BenchLine:
    """One line of the sheet with a field for its actual amount.

    Attributes
    ----------
    kind : str
        ``"matrix"``, ``"predilution"`` or ``"dose"``.
    name : str
        The row name the amounts take (matrix key or ``KEY:part``, step label, stock key).
    label : str
        What the sheet calls the line.
    source : str
        Where it is taken from (a dose: the stock or its last pre-dilution).
    amount, tolerance : float [unit]
        Planned amount and its ± (dose and matrix lines; a step's amount to take).
    unit : str
        ``"mL"`` or ``"g"``: how the sheet measures it.
    number : int or None
        The line number of the sheet's amounts table (pre-dilution steps have none).
    stock : str or None
        The stock a dose or pre-dilution step belongs to.
    diluent, diluent_amount : str, float
        A pre-dilution step's diluent and its planned amount [unit].
    dilution_factor : float
        A dose: the planned overall dilution N of what it is dispensed from (1: the stock).
    """

    kind: str
    name: str
    label: str
    source: str
    amount: float
    unit: str
    tolerance: float = 0.0
    number: int | None = None
    stock: str | None = None
    diluent: str = ""
    diluent_amount: float = 0.0
    dilution_factor: float = 1.0

    @property
    def amount_text(self) -> str:
        """The planned amount as the sheet prints it (``67.6 µL``)."""
        return format_amount(self.amount, self.unit)

    @property
    def tolerance_text(self) -> str:
        return "± " + format_tolerance(self.tolerance, self.unit) if self.tolerance else ""

    @property
    def diluent_text(self) -> str:
        return format_amount(self.diluent_amount, self.unit)


def bench_lines(plan: Mapping[str, Any]) -> list[BenchLine]:
    """The lines of a stored plan (``Plan.to_json()``) in the sheet's order and rounding.

    Matrix lines and doses are numbered as the sheet's amounts table numbers them; the
    pre-dilution steps follow the sheet's pre-dilution table.  Returned in the order the
    sheet prints them: pre-dilutions (made first), then the amounts table.
    """
    matrix = plan.get("matrix") or {}
    matrix_key = str(matrix.get("stock") or "matrix")
    kind = str((plan.get("preparation") or {}).get("kind") or "liquid")
    parts = _parts_of(kind)["parts"]
    source = f"{matrix_key} lot {matrix.get('lot') or '(none)'}"
    amounts: list[BenchLine] = []
    number = 1
    for index, part in enumerate(matrix.get("parts") or []):
        name = matrix_part_name(matrix_key, parts[index] if index < len(parts) else f"part_{index + 1}")
        amounts.append(BenchLine(kind="matrix", name=name, label=str(part["label"]), source=source,
                                 amount=float(part["amount"]), unit=str(part["unit"]),
                                 tolerance=float(part.get("tolerance") or 0.0), number=number))
        number += 1
    doses = [d for d in plan.get("doses") or [] if d.get("volume_fraction")]
    steps: list[BenchLine] = []
    for dose in doses:
        for step in dose.get("dilution") or []:
            steps.append(BenchLine(kind="predilution", name=str(step["label"]), label=str(step["label"]),
                                   source=str(step["source"]), amount=float(step["source_amount"]),
                                   unit=str(step["unit"]), stock=dose["stock"], diluent=str(step["diluent"]),
                                   diluent_amount=float(step["diluent_amount"])))
    for dose in sorted(doses, key=lambda d: dose_order_key(str(d.get("kind") or ""), d["stock"])):
        share = 1.0
        for step in dose.get("dilution") or []:
            share *= float(step["factor"])  # the source's share of each dilution (1 in 10 -> 0.1)
        unit = dose.get("dispense_unit") or ("g" if dose.get("dispense_by") == "balance" else "mL")
        amounts.append(BenchLine(kind="dose", name=dose["stock"], label=dose["stock"],
                                 source=dose.get("dispense_from") or f"{dose['stock']} stock",
                                 amount=float(dose["dispense_amount"]), unit=unit,
                                 tolerance=float(dose.get("tolerance") or 0.0), number=number,
                                 stock=dose["stock"], dilution_factor=1.0 / share))
        number += 1
    return steps + amounts


# ---- the amounts CSV ----------------------------------------------------------------------------


def parse_amounts_csv(text: str, *, source: str = "amounts file") -> list[dict[str, Any]]:
    """Rows of an amounts CSV (the module docstring says what each row may name).

    Header: ``stock`` and ``volume_ml`` and/or ``mass_g`` (one of them filled per row), and
    optionally ``dilution_factor`` (the amount is of a pre-dilution 1 in factor) and
    ``diluent_ml`` / ``diluent_g`` (a pre-dilution step's actual diluent; its row's
    ``volume_ml`` / ``mass_g`` is the actual taken).  Lines starting with ``#`` are comments.
    """
    lines = [line for line in text.splitlines() if line.strip() and not line.lstrip().startswith("#")]
    if not lines:
        raise InputError(f"{source} is empty; accepted header: stock,volume_ml or stock,mass_g")
    reader = csv.DictReader(io.StringIO("\n".join(lines)))
    header = [h.strip() for h in (reader.fieldnames or [])]
    wrong = [h for h in header if h not in AMOUNT_COLUMNS]
    if wrong or "stock" not in header or not ({"volume_ml", "mass_g"} & set(header)):
        where = f" (column {header.index(wrong[0]) + 1})" if wrong else ""
        raise InputError(  # the header is not quoted back: it may not be an amounts file at all
            f"{source}: header not accepted{where} (amounts in mL or g only); "
            "accepted: stock,volume_ml or stock,mass_g [,dilution_factor] [,diluent_ml or diluent_g]"
        )
    rows: list[dict[str, Any]] = []
    seen: set[str] = set()
    for number, raw in enumerate(reader, start=2):
        row = {k.strip(): (v or "").strip() for k, v in raw.items() if k is not None}
        stock = row.get("stock", "")
        where = f"{source} line {number}"
        if not stock:
            raise InputError(f"{where}: no stock name")
        if stock in seen:
            raise InputError(f"{where}: stock {stock!r} given twice")
        seen.add(stock)
        given = {k: row.get(k, "") for k in ("volume_ml", "mass_g") if row.get(k, "")}
        if len(given) != 1:
            raise InputError(f"{where}: give exactly one of volume_ml or mass_g for {stock!r}")
        (unit, text_value), = given.items()
        parsed: dict[str, Any] = {"stock": stock, unit: _non_negative(text_value, where=f"{where}, {unit}")}
        for column in ("diluent_ml", "diluent_g"):
            if row.get(column):
                parsed[column] = _non_negative(row[column], where=f"{where}, {column}")
        if row.get("dilution_factor"):
            parsed["dilution_factor"] = _non_negative(row["dilution_factor"], where=f"{where}, dilution_factor")
            if parsed["dilution_factor"] < 1:
                raise InputError(f"{where}: dilution_factor {parsed['dilution_factor']:g} must be >= 1")
        elif not any(column in parsed for column in ("diluent_ml", "diluent_g")):
            parsed["dilution_factor"] = 1.0  # the stock itself
        rows.append(parsed)
    if not rows:
        raise InputError(f"{source} has a header but no amounts")
    return rows


def _non_negative(text: str, *, where: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise InputError(f"{where}: not a number (give the bare number in the column's unit)") from None
    if not (math.isfinite(value) and value >= 0):
        raise InputError(f"{where}: must be a finite number >= 0")
    return value


# ---- undiluting ------------------------------------------------------------------------------


def _number(value: Any, *, where: str) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InputError(f"amounts: {where} must be a number") from None
    if not (math.isfinite(number) and number >= 0):
        raise InputError(f"amounts: {where} = {value!r} must be a finite number >= 0")
    return number


def _checked(row: Mapping[str, Any]) -> dict[str, Any]:
    """One row with its numbers checked: a name, one amount, an optional factor or diluent."""
    name = str(row.get("stock") or "").strip()
    if not name:
        raise InputError("amounts: a row without a stock name")
    given = {k: row[k] for k in ("volume_ml", "mass_g") if row.get(k) is not None}
    if len(given) != 1:
        raise InputError(f"amounts: give exactly one of volume_ml or mass_g for {name!r}")
    (unit, value), = given.items()
    checked: dict[str, Any] = {"stock": name, unit: _number(value, where=f"{name}: {unit}")}
    if row.get("dilution_factor") is not None:
        factor = _number(row["dilution_factor"], where=f"{name}: dilution_factor")
        if factor < 1:
            raise InputError(f"amounts: {name}: dilution_factor {factor:g} must be >= 1")
        checked["dilution_factor"] = factor
    diluent = {k: row[k] for k in ("diluent_ml", "diluent_g") if row.get(k) is not None}
    if len(diluent) > 1:
        raise InputError(f"amounts: {name}: give one of diluent_ml or diluent_g")
    for key, value in diluent.items():
        checked[key] = _number(value, where=f"{name}: {key}")
    return checked


def _step_rows(rows, plan: Mapping[str, Any]) -> dict[str, list[dict[str, Any]]]:
    """Per stock, its pre-dilution steps as made: every step given, or none."""
    planned = {str(step["label"]): (dose["stock"], step)
               for dose in plan.get("doses") or [] for step in dose.get("dilution") or []}
    made: dict[str, list[dict[str, Any]]] = {}
    for row in rows:
        stock, step = planned[row["stock"]]
        unit = str(step["unit"])
        taken_key, diluent_key = ("volume_ml", "diluent_ml") if unit == "mL" else ("mass_g", "diluent_g")
        if taken_key not in row or diluent_key not in row:
            raise InputError(
                f"amounts: pre-dilution {row['stock']} is made by {'volume' if unit == 'mL' else 'mass'}: "
                f"give its actual taken as {taken_key} and its actual diluent as {diluent_key}")
        if "dilution_factor" in row:
            raise InputError(f"amounts: pre-dilution {row['stock']}: no dilution_factor on a step row "
                             "(the step's factor is (taken + diluent) / taken)")
        taken, diluent = row[taken_key], row[diluent_key]
        if not taken > 0:
            raise InputError(f"amounts: pre-dilution {row['stock']}: actual taken must be > 0")
        made.setdefault(stock, []).append({
            "step": row["stock"], "source": step["source"], "taken": taken, "diluent": diluent, "unit": unit,
            "share": taken / (taken + diluent), "planned_share": float(step["factor"]),
        })
    for dose in plan.get("doses") or []:
        labels = [str(step["label"]) for step in dose.get("dilution") or []]
        if dose["stock"] in made and len(made[dose["stock"]]) != len(labels):
            given = {s["step"] for s in made[dose["stock"]]}
            missing = [label for label in labels if label not in given]
            raise InputError(f"amounts: pre-dilution {', '.join(missing)} of {dose['stock']} not given; "
                             "give every step of a pre-dilution, or none (the planned factor is used)")
    return made


def undiluted_amounts(rows: Sequence[Mapping[str, Any]], recipe,
                      plan: Mapping[str, Any]) -> tuple[list[dict[str, Any]], dict[str, float]]:
    """Amounts of undiluted stock and their volume fractions in what was made.

    Parameters
    ----------
    rows : list of dict
        The sheet's lines as given (module docstring; :func:`parse_amounts_csv`).
    recipe : Recipe
        The batch's recipe (stock densities [g/mL], the matrix).
    plan : dict
        The batch's stored plan (``Plan.to_json()``): its pre-dilution steps, matrix lines
        and planned amounts.

    Returns
    -------
    amounts : list of dict
        One row per stock given and one for the matrix when given: ``stock``, ``volume_ml``
        and ``mass_g`` of undiluted stock [mL, g], ``given`` (as typed), ``dilution_factor``,
        ``predilution`` (the steps as made, when given), ``volume_fraction``, the planned
        amounts; the matrix row holds the whole matrix (carried diluent included), its
        ``parts`` as measured and ``carried_diluent_volume_ml``.
    fractions : dict
        Volume fraction of each stock (not the matrix) in what was made.
    """
    checked = [_checked(row) for row in rows]
    seen: set[str] = set()
    for row in checked:
        if row["stock"] in seen:
            raise InputError(f"amounts: {row['stock']!r} given twice")
        seen.add(row["stock"])
    matrix_key = recipe.matrix_key
    kind = recipe.preparation.kind
    parts = _parts_of(kind)
    part_names = {matrix_part_name(matrix_key, p): p for p in parts["parts"] if p}
    step_labels = {str(step["label"]) for dose in plan.get("doses") or [] for step in dose.get("dilution") or []}
    accepted = [matrix_key, *part_names, *sorted(step_labels), *recipe.stock_keys]
    for row in checked:
        if row["stock"] not in accepted:
            raise InputError(f"amounts: {row['stock']!r} is not a stock of this batch nor a line of its sheet; "
                             f"accepted: {', '.join(accepted)}")
        if row["stock"] not in step_labels and any(k in row for k in ("diluent_ml", "diluent_g")):
            raise InputError(f"amounts: {row['stock']}: a diluent is given only for a pre-dilution step "
                             f"({', '.join(sorted(step_labels)) or 'this batch has none'})")
    steps = _step_rows([r for r in checked if r["stock"] in step_labels], plan)
    planned = {d["stock"]: d for d in plan.get("doses") or []}
    density_matrix = float(recipe.matrix.density_g_per_ml)

    amounts: list[dict[str, Any]] = []
    carried_ml = 0.0
    for row in checked:
        key = row["stock"]
        if key not in recipe.stock_keys:
            continue
        stock = recipe.stock(key)
        dose = planned.get(key, {})
        unit_key = "volume_ml" if "volume_ml" in row else "mass_g"
        given = row[unit_key]
        made = steps.get(key)
        if made is not None:
            if row.get("dilution_factor", 1.0) != 1.0:
                raise InputError(f"amounts: {key}: its pre-dilution steps are given, so its amount is of "
                                 f"{made[-1]['step']}; leave its dilution_factor out")
            factor = 1.0 / math.prod(step["share"] for step in made)
        else:
            factor = row.get("dilution_factor", 1.0)
        steps_unit = (dose.get("dilution") or [{}])[0].get("unit")
        if factor > 1 and steps_unit and _UNITS[unit_key] != steps_unit:
            what = "volume (mL)" if steps_unit == "mL" else "mass (g)"
            raise InputError(f"amounts: {key}: the amount is of its pre-dilution, made by {what}; give it "
                             f"by {'volume' if steps_unit == 'mL' else 'mass'} too ("
                             f"{'volume_ml' if steps_unit == 'mL' else 'mass_g'} in an amounts file): "
                             "the dilution's density is not known")
        if unit_key == "volume_ml":
            volume = given / factor
            mass = volume * stock.density_g_per_ml
            carried_ml += given - volume
        else:
            mass = given / factor
            volume = mass / stock.density_g_per_ml
            carried_ml += (given - mass) / density_matrix
        item = {"stock": key, "volume_ml": volume, "mass_g": mass, "given": {unit_key: given},
                "dilution_factor": factor,
                "planned_volume_ml": dose.get("volume_ml"), "planned_mass_g": dose.get("mass_g")}
        if made is not None:
            item["predilution"] = made
        amounts.append(item)
    for key in steps:
        if key not in {a["stock"] for a in amounts}:
            raise InputError(f"amounts: the pre-dilution of {key} is given but not the amount of it that went "
                             "into the batch")

    matrix = _matrix_row(checked, recipe, plan, part_names, parts["total"], carried_ml)
    if matrix is not None:
        amounts.insert(0, matrix)
    total = (sum(a["volume_ml"] for a in amounts) if matrix is not None
             else float(plan.get("batch_volume_ml") or 0))
    if not math.isfinite(total):
        raise InputError("amounts: the amounts add up to more than a number can hold; check the units (mL, g)")
    if not total > 0:
        raise InputError("amounts: the batch volume comes out as 0 mL; give the matrix amount too")
    for item in amounts:
        item["volume_fraction"] = item["volume_ml"] / total
    fractions = {a["stock"]: a["volume_fraction"] for a in amounts if a["stock"] != matrix_key}
    missing = [k for k in recipe.stock_keys if k not in fractions and planned.get(k, {}).get("volume_fraction", 0) > 0]
    if missing:
        raise InputError(f"amounts: no amount for {', '.join(missing)}; give 0 for a stock left out")
    if sum(fractions.values()) >= 1:
        raise InputError("amounts: the stocks add up to the whole batch volume or more; give the matrix amount")
    return amounts, fractions


def _matrix_row(checked, recipe, plan, part_names: dict[str, str], total_parts: tuple[str, ...],
                carried_ml: float) -> dict[str, Any] | None:
    """The matrix as made: from its row (the whole matrix as measured) or from its lines."""
    matrix_key = recipe.matrix_key
    density = float(recipe.matrix.density_g_per_ml)
    whole = next((r for r in checked if r["stock"] == matrix_key), None)
    lines = [r for r in checked if r["stock"] in part_names]
    if whole is not None and lines:
        raise InputError(f"amounts: give the matrix {matrix_key} as one amount or by its lines "
                         f"({', '.join(part_names)}), not both")
    if whole is None and not lines:
        return None
    if (whole or {}).get("dilution_factor", 1.0) != 1.0:
        raise InputError(f"amounts: the matrix {matrix_key} takes no dilution_factor")
    planned_lines = {matrix_part_name(matrix_key, p): line
                     for p, line in zip(_parts_of(recipe.preparation.kind)["parts"],
                                        (plan.get("matrix") or {}).get("parts") or [])}
    parts = []
    if whole is not None:
        volume = whole["volume_ml"] if "volume_ml" in whole else whole["mass_g"] / density
        given = {k: whole[k] for k in ("volume_ml", "mass_g") if k in whole}
    else:
        needed = [matrix_part_name(matrix_key, p) for p in total_parts]
        absent = [name for name in needed if name not in {r["stock"] for r in lines}]
        if absent:
            raise InputError(f"amounts: matrix line {', '.join(absent)} not given; the matrix of the batch "
                             f"is {' + '.join(needed)}")
        volume = 0.0
        for row in lines:
            name = row["stock"]
            unit_key = "volume_ml" if "volume_ml" in row else "mass_g"
            wanted = (planned_lines.get(name) or {}).get("unit")
            if wanted == "g" and unit_key != "mass_g":
                raise InputError(f"amounts: matrix line {name} is weighed; give it as mass_g")
            parts.append({"part": name, "label": (planned_lines.get(name) or {}).get("label", name),
                          unit_key: row[unit_key]})
            if part_names[name] in total_parts:
                volume += row["volume_ml"] if unit_key == "volume_ml" else row["mass_g"] / density
        given = {"lines": {p["part"]: {k: v for k, v in p.items() if k in ("volume_ml", "mass_g")} for p in parts}}
    volume += carried_ml
    item = {"stock": matrix_key, "volume_ml": volume, "mass_g": volume * density, "given": given,
            "dilution_factor": 1.0, "carried_diluent_volume_ml": carried_ml,
            "planned_volume_ml": (plan.get("matrix") or {}).get("volume_ml"),
            "planned_mass_g": (plan.get("matrix") or {}).get("mass_g")}
    if parts:
        item["parts"] = parts
    return item
