"""``phantomlab chromophore show``: a published molar extinction spectrum (layer 5, no physics).

    phantomlab chromophore show NAME --wavelength-nm LIST [--source S] [--json]

JSON keys (docs/contract.md): ``wavelength_nm``, ``epsilon_per_molar_per_cm``, ``basis``,
``source``; extras: ``chromophore``, ``source_key``, ``band_nm``, ``molar_mass_g_per_mol``,
``sources``; ``warnings`` is added by the command line.
"""

from __future__ import annotations

from phantomlab.cli import CommandResult, add_json_option
from phantomlab.errors import InputError
from phantomlab.units import parse_number_list

__all__ = ["register"]

#: Most wavelengths one call prints.
MAX_WAVELENGTHS = 2000


def register(subparsers) -> None:
    from phantomlab.materials.haemoglobin import CHROMOPHORES, DEFAULT_HAEMOGLOBIN_SOURCE, HAEMOGLOBIN_SOURCES

    chromophore = subparsers.add_parser(
        "chromophore", help="published molar extinction spectra of haemoglobin (oxy, deoxy, met, carboxy)"
    )
    actions = chromophore.add_subparsers(dest="chromophore_command", metavar="ACTION")
    show = actions.add_parser(
        "show",
        help="molar extinction coefficient of a chromophore at given wavelengths",
        description="Molar extinction coefficient (base 10, 1/(M cm), per mole of haemoglobin tetramer) "
        "from a published table.",
    )
    show.add_argument("name", metavar="NAME", help=f"chromophore: {', '.join(CHROMOPHORES)}")
    show.add_argument(
        "--wavelength-nm", required=True, metavar="LIST",
        help="wavelengths in nm: 660,800,940 or START:STOP:STEP (STOP included)",
    )
    show.add_argument(
        "--source", default=None, metavar="S",
        help=f"published table: {', '.join(HAEMOGLOBIN_SOURCES)} (default {DEFAULT_HAEMOGLOBIN_SOURCE}; "
        "for methb and cohb the table that prints them)",
    )
    add_json_option(show)
    show.set_defaults(handler=_show)

    def no_action(args):
        raise InputError("chromophore: give an action: show")

    chromophore.set_defaults(handler=no_action)


def _show(args) -> CommandResult:
    from phantomlab.materials.haemoglobin import (
        EXTINCTION_BASIS,
        HAEMOGLOBIN_TETRAMER_MOLAR_MASS_G_PER_MOL,
        chromophore_title,
        extinction_table,
        haemoglobin_extinction,
        haemoglobin_source,
        source_for,
        sources_holding,
    )

    wavelength = parse_number_list(args.wavelength_nm, name="--wavelength-nm")
    if wavelength.size > MAX_WAVELENGTHS:
        raise InputError(f"--wavelength-nm: {wavelength.size} wavelengths; at most {MAX_WAVELENGTHS}")
    name = str(args.name).strip().lower()
    spec = haemoglobin_source(source_for([name], args.source))
    epsilon = haemoglobin_extinction(name, wavelength_nm=wavelength, source=spec.key)
    table = extinction_table(spec.key)
    payload = {
        "wavelength_nm": wavelength,
        "epsilon_per_molar_per_cm": epsilon,
        "basis": EXTINCTION_BASIS,
        "source": table.source,
        "chromophore": name,
        "source_key": spec.key,
        "band_nm": list(table.band_nm),
        "molar_mass_g_per_mol": HAEMOGLOBIN_TETRAMER_MOLAR_MASS_G_PER_MOL,
        "sources": list(sources_holding(name)),
    }
    lines = [
        f"{chromophore_title(name)} ({name}), table {spec.key}: {spec.citation}",
        f"basis: {EXTINCTION_BASIS}",
        f"{'wavelength_nm':>13}  {'epsilon [1/(M cm)]':>18}",
        "-" * 33,
    ]
    lines += [f"{w:13.1f}  {e:18.6g}" for w, e in zip(wavelength, epsilon)]
    return CommandResult(payload=payload, text="\n".join(lines))
