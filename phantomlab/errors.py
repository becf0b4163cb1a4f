"""Exception and warning types shared by every layer (layer 0).

``InputError`` is what the project raises for anything a person typed or a file held that
cannot be accepted.  Its message is one line that says what was wrong and what is accepted;
the command line and the page show that line as it is, never a traceback.

``PhantomlabWarning`` marks physics used outside its validity range (a dispersion formula
outside its fitted band, diffusion close to the source, independent scattering at a high
volume fraction).  Commands collect these into the ``warnings`` list of their JSON output.
"""

from __future__ import annotations

__all__ = ["InputError", "PhantomlabWarning"]


class InputError(ValueError):
    """Bad input: a one-line message naming what was given and what is accepted."""

    def __init__(self, message: str) -> None:
        one_line = " ".join(str(message).split())
        super().__init__(one_line)


class PhantomlabWarning(UserWarning):
    """A model used where it is poor, or an input that is accepted with a caveat."""
