"""``phantomlab forward``: the readable text output (layer 5: output only).

A header with the inputs of each entry (:func:`inputs_header`), then a table of values over a
grid of distances or spatial frequencies, one column per entry (:func:`grid_table`), or of
named quantities, one row per entry with their SDs where given (:func:`entry_table`).  Entries
are labelled by their wavelength when ``--wavelength-nm`` gives one (:func:`entry_labels`).
The JSON output is the payload itself (:mod:`phantomlab.cli`).
"""

from __future__ import annotations

__all__ = ["entry_labels", "inputs_header", "grid_table", "entry_table"]


def entry_labels(payload) -> list[str]:
    count = len(payload["mua_per_mm"])
    if "wavelength_nm" in payload:
        return [f"{w:g} nm" for w in payload["wavelength_nm"]]
    return [f"#{k + 1}" for k in range(count)]


def inputs_header(payload) -> str:
    scatter = "musp_per_mm" if payload["kind"] in ("srdr", "sfdi", "total") else "mus_per_mm"
    unit_name = "mus' [1/mm]" if scatter == "musp_per_mm" else "mus [1/mm]"
    lines = [f"{payload['kind']} by {payload['model']}"
             + (f", boundary {payload['boundary']}" if "boundary" in payload else "")
             + f", n_outside {payload['n_outside']:g}"]
    for label, mua, sc, n, k in zip(
        entry_labels(payload), payload["mua_per_mm"], payload[scatter], payload["n"], range(len(payload["n"]))
    ):
        g = f"  g {payload['g'][k]:.4g}" if "g" in payload else ""
        lines.append(f"  {label}: mua {mua:.4g} [1/mm]  {unit_name} {sc:.4g}{g}  n {n:.4g}")
    return "\n".join(lines)


def grid_table(grid_name: str, grid, value_name: str, values, payload) -> str:
    labels = entry_labels(payload)
    width = max(14, *(len(label) + 2 for label in labels))
    lines = [inputs_header(payload), "", f"{grid_name:>10}" + "".join(f"{label:>{width}}" for label in labels)]
    lines.append(f"{'':>10}" + "".join(f"{value_name:>{width}}" for _ in labels))
    for j, x in enumerate(grid):
        lines.append(f"{x:>10.4g}" + "".join(f"{row[j]:>{width}.5g}" for row in values))
    return "\n".join(lines)


def entry_table(payload, keys: list[str], *, with_sd: bool = False) -> str:
    labels = entry_labels(payload)
    lines = [inputs_header(payload), ""]
    head = f"{'entry':>10}" + "".join(f"{key:>28}" for key in keys)
    lines.append(head)
    for k, label in enumerate(labels):
        cells = []
        for key in keys:
            value = payload[key][k]
            sd = payload.get(f"{key}_sd")
            cell = f"{value:.5g}" + (f" ± {sd[k]:.2g}" if with_sd and sd is not None else "")
            cells.append(f"{cell:>28}")
        lines.append(f"{label:>10}" + "".join(cells))
    lines.append("(fractions of the incident power)")
    return "\n".join(lines)
