"""Shared widgets of the page (layer 5): validated inputs, guarded layer calls, downloads.

Nothing here computes physics.  The helpers turn what a person types into canonical values
through :mod:`phantomlab.units`, show a refusal *next to the field* (``st.error`` right under
it) instead of a traceback, and run calls into the lower layers so that an
:class:`~phantomlab.errors.InputError` becomes one red line and every
:class:`~phantomlab.errors.PhantomlabWarning` one yellow line.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np
import streamlit as st

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.ui.plain_text import plain
from phantomlab.units import parse_number_list, parse_quantity

__all__ = [
    "Outcome",
    "call_layer",
    "quantity_field",
    "number_list_field",
    "show_warnings",
]

#: Errors a lower layer raises for input it cannot accept; shown as a one-line message.
USER_ERRORS = (InputError, ValueError, KeyError, FileNotFoundError, IsADirectoryError)


@dataclass
class Outcome:
    """What a guarded call handed back: the value (None when refused) and its messages."""

    value: Any = None
    error: str | None = None
    warnings: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return self.error is None


def _one_line(message: object) -> str:
    text = " ".join(str(message).split())
    if isinstance(message, KeyError) and text.startswith("'") and text.endswith("'"):
        text = text[1:-1]
    return text


def call_layer(
    what: str, function: Callable[..., Any], *args: Any, show: bool = True, **kwargs: Any
) -> Outcome:
    """Run ``function(*args, **kwargs)`` from a lower layer and show what went wrong, if anything.

    Parameters
    ----------
    what : str
        Plain words for the step (``"Solving the recipe"``); it starts the error line.
    function : callable
        The layer function.
    show : bool
        Show the error and warnings on the page now (default) or leave that to the caller.

    Returns
    -------
    Outcome
        ``value`` is the function's result, or None when it refused the input; ``error`` holds
        the one-line reason; ``warnings`` the physics warnings it raised.
    """
    outcome = Outcome()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", PhantomlabWarning)
        try:
            outcome.value = function(*args, **kwargs)
        except USER_ERRORS as exc:  # bad input: one line, never a traceback
            outcome.error = f"{what}: {_one_line(exc) or type(exc).__name__}"
    for item in caught:
        if issubclass(item.category, PhantomlabWarning):
            message = _one_line(item.message)
            if message not in outcome.warnings:
                outcome.warnings.append(message)
    if show:
        if outcome.error:
            st.error(plain(outcome.error))  # a refusal may quote what was typed
        show_warnings(outcome.warnings)
    return outcome


def show_warnings(messages) -> None:
    """One yellow line per warning (duplicates dropped, order kept)."""
    seen: set[str] = set()
    for message in messages or ():
        text = _one_line(message)
        if text and text not in seen:
            seen.add(text)
            st.warning(plain(text))


def quantity_field(
    label: str,
    *,
    kind: str,
    default: str,
    key: str,
    help: str | None = None,
    minimum: float | None = None,
    container=None,
) -> float | None:
    """A text field for a quantity with its unit (``"500 mL"``, ``"0.1 /cm"``).

    Returns the value in the canonical unit of ``kind`` (nm, mm, 1/mm, mL, g, ...) or None,
    in which case the reason is shown right under the field.
    """
    place = container if container is not None else st
    if key not in st.session_state:
        st.session_state[key] = default
    text = place.text_input(label, key=key, help=help)
    try:
        value = parse_quantity(text, kind)
    except InputError as exc:
        place.error(plain(exc))
        return None
    if minimum is not None and not value > minimum:
        place.error(plain(f"{label}: must be more than {minimum:g}; got {text!r}"))
        return None
    return value


def number_list_field(
    label: str,
    *,
    default: str,
    key: str,
    name: str,
    help: str | None = None,
    positive: bool = False,
    container=None,
) -> np.ndarray | None:
    """A text field for a list (``650,750,850`` or ``START:STOP:STEP``); None when refused."""
    place = container if container is not None else st
    if key not in st.session_state:
        st.session_state[key] = default
    text = place.text_input(label, key=key, help=help)
    try:
        values = parse_number_list(text, name=name)
    except InputError as exc:
        place.error(plain(exc))
        return None
    if positive and np.any(values <= 0):
        place.error(plain(f"{name}: every value must be > 0; got {text!r}"))
        return None
    return values
