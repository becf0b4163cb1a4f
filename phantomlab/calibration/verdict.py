"""PASS or FAIL of optics against a recipe's tolerances, their SD considered (layer 3).

One rule for every place that judges a batch — the batch record, ``batch measure``, the page's
"fit and attach", and ``correct`` (the predicted next batch):

with the deviation ``d = value/target − 1``, its relative SD ``u = SD/target`` and the recipe's
relative tolerance ``t`` at a targeted wavelength,

* **PASS** when ``|d| + k·u ≤ t``: within tolerance even at k SD (conformance shown);
* **FAIL** when ``|d| − k·u > t``: outside tolerance even at k SD (non-conformance shown);
* **UNDECIDED** otherwise: the SD is too wide to tell (the line says whether the value itself
  lies inside);

with the guard band k = :data:`GUARD_K` = 2, the decision rule of guarded acceptance and
rejection (ISO 14253-1:2017, sec. 5 and 6; JCGM 106:2012, *Evaluation of measurement data —
The role of measurement uncertainty in conformity assessment*, sec. 8.3, guard band w = k·u):
about 2 % one-sided risk of a wrong PASS or a wrong FAIL for a normal error.  A batch passes
when every targeted value passes; it fails when any fails; otherwise it is undecided.
Values on another wavelength grid are interpolated linearly onto the target's inside their
band (none outside).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

__all__ = ["GUARD_K", "RULE", "Verdict", "judge", "on_grid"]

GUARD_K = 2.0
RULE = (f"PASS when |deviation| + {GUARD_K:g} SD <= tolerance, FAIL when |deviation| - {GUARD_K:g} SD > "
        "tolerance, else UNDECIDED (guarded acceptance, ISO 14253-1 / JCGM 106:2012 sec. 8.3)")


def _values(sequence) -> np.ndarray:
    if sequence is None:
        return np.array([], dtype=float)
    return np.asarray([np.nan if v is None else v for v in sequence], dtype=float)


def on_grid(values: Mapping[str, Any] | None, key: str, grid: np.ndarray) -> np.ndarray:
    """A spectrum ``values[key]`` on the target grid (linear interpolation inside its band, NaN outside)."""
    out = np.full(grid.shape, np.nan)
    if not values:
        return out
    wavelength = _values(values.get("wavelength_nm"))
    data = _values(values.get(key))
    if wavelength.size == 0 or data.shape != wavelength.shape:
        return out
    order = np.argsort(wavelength)
    wavelength, data = wavelength[order], data[order]
    inside = (grid >= wavelength[0] - 1e-9) & (grid <= wavelength[-1] + 1e-9)
    out[inside] = np.interp(grid[inside], wavelength, data)
    return out


@dataclass(frozen=True)
class Verdict:
    """The decision per targeted value and for the batch.

    Attributes
    ----------
    rows : tuple of dict
        ``quantity`` ("mua" or "musp"), ``wavelength_nm``, ``target_per_mm``, ``value_per_mm``,
        ``sd_per_mm``, ``deviation_percent``, ``sd_percent``, ``tolerance_percent``, ``outcome``
        ("PASS", "FAIL", "UNDECIDED", or None when there is no value or no tolerance),
        ``pass`` (True, False, or None for undecided or missing).
    outcome : str or None
        "PASS", "FAIL" or "UNDECIDED" for the batch; None when nothing could be judged.
    """

    rows: tuple
    outcome: str | None

    @property
    def passed(self) -> bool:
        return self.outcome == "PASS"

    def failing(self) -> list[dict]:
        return [r for r in self.rows if r["outcome"] == "FAIL"]

    def to_json(self) -> dict[str, Any]:
        """``pass`` (bool), ``outcome``, ``rule`` and ``per_wavelength`` (the rows)."""
        return {"pass": self.passed, "outcome": self.outcome, "rule": RULE,
                "per_wavelength": [dict(r) for r in self.rows]}

    def lines(self, *, what: str = "measured") -> list[str]:
        """One line per targeted value for a person, and a closing line for the batch."""
        out = []
        for r in self.rows:
            if r["outcome"] is None:
                continue
            name = "mua" if r["quantity"] == "mua" else "mus'"
            extra = ""
            if r["outcome"] == "UNDECIDED":
                inside = abs(r["deviation_percent"]) <= r["tolerance_percent"]
                extra = f" (the value itself is {'inside' if inside else 'outside'}; its SD is too wide to tell)"
            out.append(f"  {r['outcome']:<9} {name:<4} {r['wavelength_nm']:g} nm: {what} "
                       f"{r['deviation_percent']:+.1f} % ± {r['sd_percent']:.1f} % of target "
                       f"(tolerance ±{r['tolerance_percent']:g} %){extra}")
        closing = {"PASS": "PASS: every targeted value within tolerance",
                   "FAIL": "FAIL: at least one targeted value outside tolerance",
                   "UNDECIDED": "UNDECIDED: none outside tolerance, but not every value shown inside",
                   None: "not judged: no value at a targeted wavelength"}[self.outcome]
        return out + [closing]


def judge(*, target: Mapping[str, Any], values: Mapping[str, Any] | None,
          mua_tolerance_percent: float | None = None, musp_tolerance_percent: float | None = None) -> Verdict:
    """PASS, FAIL or UNDECIDED per targeted value by the rule of the module docstring.

    Parameters
    ----------
    target : mapping
        ``wavelength_nm``, ``mua_per_mm``, ``musp_per_mm`` (None or NaN where not targeted),
        and by default the tolerances ``mua_tolerance_percent``, ``musp_tolerance_percent``
        (the plan JSON's ``target`` object).
    values : mapping or None
        ``wavelength_nm``, ``mua_per_mm``, ``musp_per_mm`` and their ``*_sd_per_mm`` [1/mm]:
        a fit, or a prediction.  A missing SD counts as 0 (then the rule is plain acceptance).
    mua_tolerance_percent, musp_tolerance_percent : float, optional [%]
        Override the target's.
    """
    grid = _values(target.get("wavelength_nm"))
    tolerances = {
        "mua": mua_tolerance_percent if mua_tolerance_percent is not None else target.get("mua_tolerance_percent"),
        "musp": musp_tolerance_percent if musp_tolerance_percent is not None else target.get("musp_tolerance_percent"),
    }
    rows = []
    for name in ("mua", "musp"):
        wanted = _values(target.get(f"{name}_per_mm"))
        if wanted.shape != grid.shape:
            continue
        have = on_grid(values, f"{name}_per_mm", grid)
        sd = on_grid(values, f"{name}_sd_per_mm", grid)
        tolerance = tolerances[name]
        for w, a, b, s in zip(grid, wanted, have, sd):
            if not (np.isfinite(a) and a > 0):
                continue
            row = {"quantity": name, "wavelength_nm": float(w), "target_per_mm": float(a),
                   "value_per_mm": float(b) if np.isfinite(b) else None,
                   "sd_per_mm": float(s) if np.isfinite(s) else None,
                   "deviation_percent": None, "sd_percent": None,
                   "tolerance_percent": None if tolerance is None else float(tolerance),
                   "outcome": None, "pass": None}
            if np.isfinite(b) and tolerance is not None:
                d = 100.0 * (b / a - 1.0)
                u = 100.0 * (s / a) if np.isfinite(s) and s >= 0 else 0.0
                t = float(tolerance) * (1 + 1e-9)
                outcome = ("PASS" if abs(d) + GUARD_K * u <= t else
                           "FAIL" if abs(d) - GUARD_K * u > t else "UNDECIDED")
                row.update(deviation_percent=d, sd_percent=u, outcome=outcome,
                           **{"pass": {"PASS": True, "FAIL": False}.get(outcome)})
            rows.append(row)
    outcomes = [r["outcome"] for r in rows if r["outcome"] is not None]
    if not outcomes:
        overall = None
    elif "FAIL" in outcomes:
        overall = "FAIL"
    elif "UNDECIDED" in outcomes:
        overall = "UNDECIDED"
    else:
        overall = "PASS"
    return Verdict(rows=tuple(rows), outcome=overall)
