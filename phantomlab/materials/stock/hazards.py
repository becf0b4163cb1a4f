"""Hazard keys a stock may carry and the caution a mixing sheet shows for each (layer 1).

The texts are the usual cautions only: local rules, the safety data sheet of each product
and licensed practice come first.
"""

from __future__ import annotations

__all__ = ["HAZARD_KEYS", "BLOOD_HAZARDS"]

#: Hazard keys a stock may carry, each with the caution a mixing sheet shows for it.
HAZARD_KEYS: dict[str, str] = {
    "nano_powder": "fine/nano powder: weigh in a ventilated enclosure, add powder to liquid, "
    "clean up wet, wear a respirator rated for nano particles",
    "powder": "fine powder: weigh in a ventilated enclosure, add powder to liquid, clean up wet",
    "dye": "dye: gloves and eye protection; stains skin and benches",
    "ink": "ink: gloves; carbon inks stain; treat every bottle as its own lot",
    "solvent": "solvent: flammable; keep away from hot plates and sonicators, work in a fume hood",
    "resin": "resin / hardener: sensitiser; gloves and ventilation; large pours can overheat",
    "isocyanate": "isocyanate: respiratory sensitiser; fume hood and suitable respirator",
    "hot_gel": "hot gel: scald risk; boiling agar and microwave superheating, use heat-proof gloves",
    "biohazard": "blood product: treat as potentially infectious (gloves, eye protection, coat, no mouth "
    "pipetting); human blood only under your institution's approvals and biosafety rules, animal blood under "
    "local animal by-product rules; disinfect spills; dispose of blood phantoms and tips as clinical waste",
    "yeast": "yeast (deoxygenation): live culture; keep vessels vented (it makes CO2); inactivate before "
    "disposal by local rules",
    "oxygen_exchange": "open surface: air oxygen diffuses in from the top, so a deoxygenated phantom reads "
    "higher sO2 near the surface; cover or seal it, stir gently, sample where the probe measures",
}

#: Hazard keys a blood stock carries even when its file does not list them.
BLOOD_HAZARDS = ("biohazard", "oxygen_exchange")
