"""The shared widgets: a refusal shows as one line next to the field, never a traceback.

Units by exact SI definition (BIPM SI Brochure, 9th ed., 2019): 1 cm = 10 mm, so 0.1 /cm is
0.01 /mm; 1 L = 1000 mL.
"""

from __future__ import annotations

import pytest
from streamlit.testing.v1 import AppTest


def _quantity_script():
    import streamlit as st

    from phantomlab.ui.widgets import quantity_field

    value = quantity_field("μa (with unit)", kind="attenuation", default="0.1 /cm", key="q", minimum=0.0)
    st.write(f"value={value!r}")


@pytest.mark.parametrize(
    "typed, shown",
    [("0.1 /cm", "value=0.01"), ("1 mm^-1", "value=1.0"), ("10 1/m", "value=0.01")],
)
def test_a_quantity_field_gives_canonical_units(typed, shown):
    app = AppTest.from_function(_quantity_script).run()
    app.text_input(key="q").set_value(typed).run()
    assert not app.error
    assert app.markdown[0].value.startswith(shown)


@pytest.mark.parametrize(
    "typed, reason",
    [("0.1", "no unit given"), ("0.1 nm", "unit of another kind"), ("-1 /mm", "must be more than 0"),
     ("", "empty quantity"), ("0.1 %", "a bare % is ambiguous")],
)
def test_a_refused_quantity_is_one_line_under_the_field(typed, reason):
    app = AppTest.from_function(_quantity_script).run()
    app.text_input(key="q").set_value(typed).run()
    assert not app.exception
    (error,) = app.error
    assert reason in error.value and "\n" not in error.value
    assert app.markdown[0].value == "value=None"


def _guarded_script():
    import warnings

    import streamlit as st

    from phantomlab.errors import InputError, PhantomlabWarning
    from phantomlab.ui.widgets import call_layer

    def refuses():
        raise InputError("stock 'x': unknown field 'potenzy'; fields: potency")

    def warns():
        warnings.warn("diffusion is poor within 1 mfp", PhantomlabWarning)
        warnings.warn("diffusion is poor within 1 mfp", PhantomlabWarning)  # shown once
        return 42

    first = call_layer("Reading the shelf", refuses)
    second = call_layer("Fitting", warns)
    st.write(f"first={first.value!r} ok={first.ok} second={second.value!r}")


def test_a_layer_refusal_is_one_red_line_and_warnings_are_yellow_lines():
    app = AppTest.from_function(_guarded_script).run()
    assert not app.exception
    assert [e.value for e in app.error] == [
        "Reading the shelf: stock 'x': unknown field 'potenzy'; fields: potency"]
    assert [w.value for w in app.warning] == ["diffusion is poor within 1 mfp"]
    assert app.markdown[0].value == "first=None ok=False second=42"


def _bug_script():
    from phantomlab.ui.widgets import call_layer

    def broken():
        raise ZeroDivisionError("a bug, not bad input")

    call_layer("Doing", broken)


def test_a_bug_is_not_dressed_up_as_bad_input():
    app = AppTest.from_function(_bug_script).run()
    assert app.exception  # a programming error stays visible to the tests
