"""phantomlab: design, mix, log and correct tissue-simulating optical phantoms.

The top-level namespace is kept small; the layers live in sub-packages (docs/design.md):
``units`` (0), ``materials`` (1), ``optics`` and ``transport`` (2), ``recipe`` and
``calibration`` (3), ``store`` (4), ``cli``/``ui`` (5).
"""

__version__ = "0.1.0"

from phantomlab.errors import InputError, PhantomlabWarning  # noqa: E402

__all__ = ["InputError", "PhantomlabWarning", "__version__"]
