"""Cautions for a mixing sheet: from the stocks' hazard keys and the matrix preparation.

Stock hazards use the caution text of the stock model (``phantomlab.materials.HAZARD_KEYS``);
the preparation adds what its steps involve (FIELD.md, "Cautions the tool must show"); every
sheet ends with :data:`CLOSING_LINE`.  The texts are the usual cautions of the trade, not a
risk assessment: local rules and safety data sheets come first.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["CLOSING_LINE", "Caution", "cautions_for"]

CLOSING_LINE = (
    "Local safety rules and the safety data sheets of every stock come first. "
    "A phantom made from this sheet is not a certified reference standard."
)

#: Preparation kind → cautions its steps carry (FIELD.md, Matrices and Cautions).
PREPARATION_CAUTIONS: dict[str, tuple[str, ...]] = {
    "liquid": (),
    "gelatin": (
        "hot gel: scald risk from the hot gel and the hot plate; heat-proof gloves",
    ),
    "agar": (
        "hot agar: boiling agar and microwave superheating can erupt; heat in short bursts, "
        "stir, heat-proof gloves and eye protection",
    ),
    "silicone": (
        "silicone: sulfur, tin compounds and latex gloves inhibit the platinum cure; use nitrile "
        "gloves and clean tools",
        "silicone: dense powders settle during slow cures; keep the cure schedule on this sheet",
    ),
    "resin": (
        "resin: amine hardeners are skin sensitisers; gloves, sleeves and ventilation",
        "resin: large pours overheat (exotherm); keep to the pour size on this sheet",
    ),
}

#: Shown on every sheet: the phantom is characterised with light sources afterwards.
CHARACTERISATION_CAUTION = (
    "characterisation: class 3B/4 lasers and invisible NIR beams; wear eyewear rated for the "
    "wavelength and follow the laser rules of the room"
)

#: Integrating spheres and reflectance standards (shown with sphere measurements).
SPHERE_COATING_CAUTION = (
    "integrating spheres and standards: pressed PTFE and barium sulfate coatings shed fine dust; "
    "do not touch or blow into the coating, avoid breathing the dust (wear a dust mask when "
    "cleaning or recoating), and follow the coating's safety data sheet and the rules of the room; "
    "the lamp or laser that feeds the sphere needs the eyewear and shielding of its class"
)


@dataclass(frozen=True)
class Caution:
    """One caution line and what brings it onto the sheet (a stock key or the preparation)."""

    source: str
    text: str


def cautions_for(*, stocks, preparation_kind: str, extra_hazards=()) -> tuple[Caution, ...]:
    """Cautions that apply to the stocks and the matrix preparation of a batch.

    Parameters
    ----------
    stocks : sequence of phantomlab.materials.Stock
        The matrix and the stocks actually dispensed.
    preparation_kind : str
        Key of :data:`PREPARATION_CAUTIONS`.
    extra_hazards : sequence of (str, str)
        (hazard key, what brings it) beyond the stocks' own, e.g. ``("yeast", "deoxygenation")``
        from a recipe's ``[oxygenation]`` (:func:`phantomlab.recipe.oxygenation.process_hazards`).

    Returns
    -------
    tuple of Caution
        Stock hazards (in stock order, each text once), then preparation cautions, then the
        characterisation caution.  The closing line is :data:`CLOSING_LINE`, separate.
    """
    from phantomlab.materials import HAZARD_KEYS

    out: list[Caution] = []
    seen: set[str] = set()
    for stock in stocks:
        for key in stock.hazards:
            text = HAZARD_KEYS.get(key, f"{key}: see the stock's safety data sheet")
            if text not in seen:
                seen.add(text)
                out.append(Caution(stock.key, text))
            else:
                for i, caution in enumerate(out):
                    if caution.text == text and stock.key not in caution.source.split(", "):
                        out[i] = Caution(f"{caution.source}, {stock.key}", text)
    for key, source in extra_hazards:
        text = HAZARD_KEYS.get(key, f"{key}: see the safety data sheet")
        if text not in seen:
            seen.add(text)
            out.append(Caution(source, text))
    hazard_keys = {key for stock in stocks for key in stock.hazards}
    for text in PREPARATION_CAUTIONS.get(preparation_kind, ()):
        if text.startswith("hot gel:") and "hot_gel" in hazard_keys:
            continue  # the matrix stock's hot-gel caution already says it
        out.append(Caution(f"{preparation_kind} preparation", text))
    out.append(Caution("characterisation", CHARACTERISATION_CAUTION))
    return tuple(out)
