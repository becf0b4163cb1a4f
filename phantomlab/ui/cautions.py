"""The cautions the page shows (layer 5): the very lines the mixing sheet prints.

The design page shows :func:`phantomlab.recipe.cautions.cautions_for` (stock hazards, the
matrix preparation, characterisation) and its closing line, so the page and the sheet can
never disagree.  The fit page shows the characterisation caution with one more line for
bright broadband sources (FIELD.md, "Cautions the tool must show") and one for the dust of
sphere coatings.
"""

from __future__ import annotations

from typing import Iterable

import streamlit as st

__all__ = ["BRIGHT_SOURCES", "show_cautions", "show_light_source_caution"]

#: Lamps and LEDs used in characterisation (in addition to the sheet's laser line).
BRIGHT_SOURCES = (
    "bright sources: halogen and xenon lamps and high-power LEDs in spectrometers and "
    "cameras can harm eyes (blue and UV content, heat); do not look into the source or the "
    "fibre end, and keep shields in place"
)


def show_cautions(stocks: Iterable, *, preparation_kind: str = "liquid", recipe=None) -> None:
    """The cautions block of the design page (the sheet's cautions, same text).

    ``recipe`` adds what its process brings beyond the stocks (yeast for a deoxygenation).
    """
    from phantomlab.recipe.cautions import CLOSING_LINE, cautions_for  # layer 3
    from phantomlab.recipe.oxygenation import process_hazards

    extra = process_hazards(recipe) if recipe is not None else ()
    found = cautions_for(stocks=list(stocks), preparation_kind=preparation_kind, extra_hazards=extra)
    lines = [f"- {caution.text}" if caution.text.startswith(caution.source)
             else f"- **{caution.source}** — {caution.text}" for caution in found]
    with st.container(border=True):
        st.markdown("**⚠ Cautions**")
        st.markdown("\n".join(lines + [f"- {CLOSING_LINE}"]))


def show_light_source_caution() -> None:
    """The caution for lasers and bright sources used to characterise a phantom."""
    from phantomlab.recipe.cautions import CHARACTERISATION_CAUTION, CLOSING_LINE, SPHERE_COATING_CAUTION  # layer 3

    with st.container(border=True):
        st.markdown("**⚠ Lasers, bright sources and sphere coatings**")
        st.markdown(
            "\n".join(f"- {text}" for text in (CHARACTERISATION_CAUTION, BRIGHT_SOURCES, SPHERE_COATING_CAUTION,
                                                CLOSING_LINE))
        )
