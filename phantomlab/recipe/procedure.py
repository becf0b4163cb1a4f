"""The ordered steps of a mixing sheet, with the amounts filled in (layer 3).

One list of plain sentences per preparation kind; amounts come from the plan so a technician
reads the number where the step is.  Absorbers go in before scatterers (the colour of a clear
mix shows they dissolved), and every dose is named with the line of the amounts table that
holds its figure, tolerance and the field for the actual amount.
"""

from __future__ import annotations

import math

from phantomlab.recipe.dose_amounts import is_dry_powder

__all__ = ["AmountLine", "amount_lines", "dose_order_key", "procedure_steps", "format_amount", "format_tolerance"]


def format_amount(amount: float, unit: str) -> str:
    """A readable amount: µL/mg below 1 mL/1 g, three to four significant figures."""
    if unit == "mL":
        if amount < 1.0:
            return f"{amount * 1000:.3g} µL" if amount * 1000 < 100 else f"{amount * 1000:.0f} µL"
        return f"{amount:.4g} mL"
    if unit == "g":
        if amount < 1.0:
            return f"{amount * 1000:.3g} mg" if amount * 1000 < 100 else f"{amount * 1000:.0f} mg"
        return f"{amount:.4g} g"
    return f"{amount:.4g} {unit}"


def format_tolerance(amount: float, unit: str) -> str:
    """A tolerance to two significant figures (a ± has no more meaning than that), µL/mg below 1 mL/1 g."""
    small = {"mL": ("µL", 1000.0), "g": ("mg", 1000.0)}
    shown, scale = (small[unit] if unit in small and amount < 1.0 else (unit, 1.0))
    value = float(f"{amount * scale:.2g}")
    return f"{value:g} {shown}"


class AmountLine:
    """One row of the amounts table: something to pipette or weigh, with its tolerance."""

    def __init__(self, number: int, label: str, source: str, amount: float, unit: str,
                 tolerance: float, stock: str | None, how: str) -> None:
        self.number = number
        self.label = label
        self.source = source
        self.amount = amount
        self.unit = unit
        self.tolerance = tolerance
        self.stock = stock
        self.how = how

    @property
    def text(self) -> str:
        return format_amount(self.amount, self.unit)

    @property
    def tolerance_text(self) -> str:
        return "± " + format_tolerance(self.tolerance, self.unit)


def dose_order_key(kind: str, stock: str) -> tuple[bool, str]:
    """The order doses go into the batch: absorbers first, then the rest, each by stock key.

    One rule for the sheet's amounts table and every form that follows it (the page's
    record of what was dispensed).
    """
    return (kind != "absorber", stock)


def amount_lines(plan) -> list[AmountLine]:
    """Every amount to measure into the batch, in the order the procedure adds them."""
    lines: list[AmountLine] = []
    number = 1
    for label, amount, unit, tolerance in plan.matrix.parts:
        how = "weigh" if unit == "g" else "measure"
        source = f"{plan.recipe.matrix_key} lot {plan.recipe.matrix.lot or '(none)'}"
        lines.append(AmountLine(number, label, source, amount, unit, tolerance, None, how))
        number += 1
    order = sorted((d for d in plan.doses if d.used), key=lambda d: dose_order_key(d.kind, d.stock))
    for dose in order:
        how = "weigh" if dose.by == "balance" else "pipette"
        source = dose.dilution.dispense_from if dose.dilution else f"{dose.stock} stock"
        lines.append(AmountLine(number, dose.stock, source, dose.dispense_amount, dose.unit,
                                dose.tolerance, dose.stock, how))
        number += 1
    return lines


def _line_refs(lines, kinds, plan) -> str:
    chosen = [ln for ln in lines if ln.stock is not None and plan.dose(ln.stock).kind in kinds]
    return ", ".join(f"{ln.stock} ({ln.text} of {ln.source}, line {ln.number})" for ln in chosen)


def procedure_steps(plan) -> list[str]:
    """The ordered steps for the plan's matrix preparation, amounts included."""
    recipe = plan.recipe
    prep = recipe.preparation
    lines = amount_lines(plan)
    matrix_lines = [ln for ln in lines if ln.stock is None]
    absorbers = _line_refs(lines, {"absorber"}, plan)
    scatterers = _line_refs(lines, {"spheres", "powder", "emulsion"}, plan)
    steps: list[str] = [
        "Check every lot and expiry date in the stocks table; do not use an expired lot "
        "without the lead's approval.",
        "Mix each stock bottle before drawing from it (invert gently; re-suspend spheres and "
        "powders as their supplier says).",
    ]
    diluted = [d for d in plan.doses if d.dilution]
    if diluted:
        steps.append("Make the pre-dilutions on the day of use, in table order, in clean vessels "
                     "labelled with name, lot, dilution and date; mix each fully before drawing from it.")
        powders = [d.stock for d in diluted if is_dry_powder(recipe.stock(d.stock))]
        if powders:
            # common practice, no source: a thin smear shows undispersed grains the eye misses in bulk
            steps.append(f"Weigh {', '.join(powders)} in a ventilated enclosure onto its diluent, "
                         f"{plan.dose(powders[0]).dilution.diluent}; stir in with a spatula, then mix "
                         "until a thin smear between glass slides shows no specks.")
    adds = []
    if absorbers:
        adds.append(f"Add the absorbers: {absorbers}.")
    if scatterers:
        adds.append(f"Add the scatterers: {scatterers}.")
    m = matrix_lines
    if prep.kind == "liquid":
        steps.append(f"Measure {m[0].text} of {m[0].label} (line {m[0].number}) into the mixing vessel.")
        steps += adds
        steps.append(f"Stir for {prep['stir_minutes']:g} min. Stir again before every measurement: "
                     "a scattering layer forms at the surface over hours.")
    elif prep.kind in ("gelatin", "agar"):
        powder, water = m
        steps.append(f"Weigh {powder.text} of {powder.label} (line {powder.number}).")
        if prep.kind == "gelatin":
            steps.append(f"Sprinkle it onto about 80 % of the water ({0.8 * water.amount:.4g} mL, cold) "
                         f"and let it swell for {prep['swell_minutes']:g} min.")
            steps.append(f"Heat to {prep['dissolve_temperature_c']:g} °C, stirring, until clear; "
                         "do not boil.")
        else:
            steps.append(f"Disperse it in about 80 % of the water ({0.8 * water.amount:.4g} mL).")
            steps.append(f"Heat to {prep['dissolve_temperature_c']:g} °C, stirring, until fully "
                         "dissolved.")
        final = 100.0 * powder.amount / plan.batch_volume_ml
        steps.append(f"Make the gel up to {water.text} with warm water in a graduated vessel (line "
                     f"{water.number}; write the volume in 'actual'). The stocks bring it to "
                     f"{format_amount(plan.batch_volume_ml, 'mL')}: {prep.kind} {final:.3g} % w/v in the "
                     "phantom.")
        steps.append(f"Cool to {prep['add_temperature_c']:g} °C (thermometer in the gel); write "
                     "the temperature on the sheet.")
        steps += [a[:-1] + f" at {prep['add_temperature_c']:g} °C, stirring gently without "
                  "making bubbles." for a in adds]
        steps.append("Write the mixing time on the sheet (scattering in gel depends on mixing "
                     "temperature and time).")
        steps.append(f"Pour into the mould; set at {prep['set_temperature_c']:g} °C for "
                     f"{prep['set_time_h']:g} h. Keep below 30 °C afterwards"
                     + (" (gelatin melts near 30–35 °C)." if prep.kind == "gelatin" else "."))
    else:  # two-part silicone or resin
        part_a, part_b = m
        steps.append(f"Weigh {part_a.text} of {part_a.label} (line {part_a.number}) into the mixing cup.")
        steps += [a[:-1] + " into part A." for a in adds]
        steps.append(f"Mix for {prep['mix_minutes']:g} min, scraping walls and bottom, until no "
                     "streaks or clumps remain.")
        if prep.kind == "silicone":
            ratio = f"{prep['base_to_curing_agent']:g}:1 base to curing agent by mass"
        else:
            ratio = f"{prep['hardener_parts_per_100_resin']:g} parts hardener per 100 resin by mass"
        steps.append(f"Add {part_b.text} of {part_b.label} (line {part_b.number}; {ratio}); mix "
                     f"{prep['mix_minutes']:g} min without whipping in air.")
        pressure = (f" at {prep['degas_pressure_kpa']:g} kPa absolute" if prep.given("degas_pressure_kpa")
                    else " under vacuum")
        steps.append(f"Degas for {prep['degas_minutes']:g} min{pressure} until bubbles stop rising.")
        material = "silicone" if prep.kind == "silicone" else "resin"
        cure = (f"Pour into the mould within the working time on the {material}'s data sheet; cure "
                f"{prep['cure_time_h']:g} h at {prep['cure_temperature_c']:g} °C")
        if prep.kind == "resin" and prep.given("post_cure_time_h"):
            cure += (f", then post-cure {prep['post_cure_time_h']:g} h at "
                     f"{prep['post_cure_temperature_c']:g} °C")
        if prep.kind == "resin" and prep.given("max_pour_mass_g"):
            cure += f"; pour at most {prep['max_pour_mass_g']:g} g at a time"
        steps.append(cure + ".")
    steps.append("Label the phantom with the batch ID and date; write what you actually measured "
                 "in the 'actual' fields.")
    steps.append(f"Characterise it at {prep.temperature_c:g} °C, the temperature the optics are "
                 "predicted for; let it reach that temperature first.")
    return steps


def _finite(value) -> bool:
    return value is not None and math.isfinite(value)
