"""The stated limits on every size and count a person can hand over (layer 0).

Each limit has a default and an environment variable that raises (or lowers) it, so a lab
that needs a bigger list, a longer Monte Carlo run or a larger file sets, for example,
``PHANTOMLAB_MAX_LIST_VALUES=50000`` for the command line and the page alike.  Going past a
limit is refused with one :class:`~phantomlab.errors.InputError` line that names the value,
the limit and the variable; nothing is computed or written first.

The defaults are sized for a laptop with two cores and a few GB of memory: the work or
memory each one allows is written beside it.
"""

from __future__ import annotations

import os
from dataclasses import dataclass

from phantomlab.errors import InputError

__all__ = ["Limit", "LIMITS", "limit", "check_limit", "limits_table"]


@dataclass(frozen=True)
class Limit:
    """One limit: its name, default, unit and what it bounds."""

    name: str
    default: int
    unit: str
    what: str

    @property
    def variable(self) -> str:
        """The environment variable that sets it (``PHANTOMLAB_MAX_<NAME>``)."""
        return f"PHANTOMLAB_MAX_{self.name.upper()}"


#: Every limit, by name.  Sizes in MB are 10^6 bytes.
LIMITS: dict[str, Limit] = {
    item.name: item
    for item in (
        # 10 000 wavelengths cover 400-2500 nm at 0.2 nm steps.
        Limit("list_values", 10_000, "values",
              "values in one typed list"),
        # 8 bytes each, a few arrays of this size at once: about 100 MB.
        Limit("forward_points", 2_000_000, "points",
              "entries x distances (or frequencies) computed by one forward command"),
        # Measured on two shared cores: 18 500 photons/s at mua 0.01, mus 10 /mm, g 0.9 (about
        # 90 min for the limit); 110 000 photons/s at mua 0.1 /mm, g 0.8 (about 15 min).
        Limit("mc_photons", 100_000_000, "photons",
              "photons launched by one Monte Carlo command, all entries together"),
        # Each stored exit takes 10 bytes: 50 million photons are a 500 MB baseline.
        Limit("baseline_photons", 50_000_000, "photons",
              "photons launched to build one Monte Carlo baseline"),
        # A 601-wavelength x 300-distance srdr file is 5.7 MB; reading it peaked at 195 MB
        # (34 times its size, measured with tracemalloc), so the limit allows about 350 MB.
        Limit("file_mb", 10, "MB",
              "size of one CSV or TOML file read (recipe, stock file, spectrum, measurement, "
              "sidecar, amounts)"),
        Limit("baseline_file_mb", 600, "MB", "size of one Monte Carlo baseline file read"),
        # An import holds the unpacked tables in memory as Python objects, several times their size.
        Limit("archive_mb", 256, "MB",
              "size of a lab archive, and of its tables once unpacked"),
    )
}


def limit(name: str) -> int:
    """The limit ``name`` in force: its environment variable if set, else the default.

    Raises
    ------
    InputError
        For an unknown name, or a variable that is not a whole number >= 1.
    """
    try:
        item = LIMITS[name]
    except KeyError:
        raise InputError(f"unknown limit {name!r}; known: {', '.join(LIMITS)}") from None
    text = os.environ.get(item.variable)
    if text is None or not text.strip():
        return item.default
    try:
        value = int(text.strip().replace("_", ""))
    except ValueError:
        value = 0
    if value < 1:
        raise InputError(f"{item.variable} must be a whole number >= 1 ({item.unit}); it is set to {text[:20]!r}")
    return value


def check_limit(name: str, value: float, *, given: str) -> None:
    """Refuse ``value`` above the limit ``name``, naming ``given``, the limit and its variable.

    Parameters
    ----------
    name : str
        A key of :data:`LIMITS`.
    value : float
        The size or count asked for, in the limit's unit.
    given : str
        What asked for it, e.g. ``"--rho-mm 1:1e12:1"``.
    """
    item = LIMITS[name]
    allowed = limit(name)
    if value > allowed:
        if value >= 1e15:
            shown = f"{value:.3g}"
        elif float(value).is_integer():
            shown = f"{value:,.0f}"
        else:
            shown = f"{value:,.1f}"
        raise InputError(
            f"{given}: {shown} {item.unit}, more than the limit of {allowed:,} {item.unit} "
            f"({item.what}); raise it with {item.variable}=N if you mean it"
        )


def limits_table() -> str:
    """A markdown table of the limits (default, variable, what), for the docs and ``--help``."""
    lines = ["| limit | default | raise with | what it bounds |", "|---|---|---|---|"]
    for item in LIMITS.values():
        lines.append(f"| `{item.name}` | {item.default:,} {item.unit} | `{item.variable}` | {item.what} |")
    return "\n".join(lines)
