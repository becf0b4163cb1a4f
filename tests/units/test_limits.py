"""Stated limits and the parsing of typed values without arithmetic (phantomlab.limits, units).

Rule: every size and count a person can type has a stated limit, refused in one line that
names the limit and how to raise it, before anything is built.
"""

import time

import pytest

from phantomlab.errors import InputError
from phantomlab.limits import LIMITS, check_limit, limit, limits_table
from phantomlab.units import parse_number_list, parse_quantity


@pytest.mark.parametrize("text", ["9**9**9 nm", "9**9**5 mL", "2*3 mL", "(1) mL", "1 mL+1 mL",
                                  "10**10 nm", "1e3**1e3 nm", "2 mm**99", "1 nm " * 30])
def test_no_arithmetic_in_a_quantity(text):
    started = time.monotonic()
    with pytest.raises(InputError) as info:
        parse_quantity(text, "wavelength" if "nm" in text else "volume")
    assert time.monotonic() - started < 1.0  # refused at once, never evaluated
    assert "\n" not in str(info.value)


@pytest.mark.parametrize("text, kind, expected", [
    ("1 mm^-1", "attenuation", 1.0), ("1 mm**-1", "attenuation", 1.0), ("2 g/L", "mass_concentration", 0.002),
    ("10 μL", "volume", 0.01), ("1 nm*nm/nm", "wavelength", 1.0), (".5 mL", "volume", 0.5),
])
def test_ordinary_quantities_still_read(text, kind, expected):
    assert parse_quantity(text, kind) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("text", ["1e999 % w/v", "nan % w/v", "1e999 mL", "inf mL"])
def test_infinite_quantities_refused(text):
    kind = "mass_concentration" if "w/v" in text else "volume"
    with pytest.raises(InputError, match="finite|unit"):
        parse_quantity(text, kind)


@pytest.mark.parametrize("text", ["1:1e12:1", "1:1e9:1", "0:1:1e-300", ",".join(["1"] * 10_001)])
def test_list_expansion_capped_before_building(text):
    started = time.monotonic()
    with pytest.raises(InputError, match=r"more than the limit of 10,000 values .*PHANTOMLAB_MAX_LIST_VALUES"):
        parse_number_list(text, name="--rho-mm")
    assert time.monotonic() - started < 1.0


@pytest.mark.parametrize("text", ["1:inf:1", "nan,1", "1:2:nan", "1e999"])
def test_non_finite_lists_refused(text):
    with pytest.raises(InputError, match="not a finite number"):
        parse_number_list(text, name="--x")


def test_a_limit_is_raised_by_its_variable(monkeypatch):
    monkeypatch.setenv("PHANTOMLAB_MAX_LIST_VALUES", "20000")
    assert limit("list_values") == 20_000
    assert parse_number_list("1:15000:1").size == 15_000
    monkeypatch.setenv("PHANTOMLAB_MAX_LIST_VALUES", "lots")
    with pytest.raises(InputError, match="PHANTOMLAB_MAX_LIST_VALUES must be a whole number >= 1"):
        limit("list_values")


def test_every_limit_is_stated():
    table = limits_table()
    for item in LIMITS.values():
        assert item.variable in table and f"{item.default:,}" in table
        with pytest.raises(InputError, match=item.variable):
            check_limit(item.name, item.default + 1, given="x")
        check_limit(item.name, item.default, given="x")  # the limit itself is allowed


# ---- property tests: any text is read or refused in one line, never anything else ----------------

from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

_TYPED = st.one_of(
    st.text(max_size=60),
    st.text(alphabet="0123456789.eE+-*^/ :,%()nmLlugcKCdayhsµ°wv", max_size=40),
)


@settings(max_examples=300, deadline=None)
@given(text=_TYPED, kind=st.sampled_from(["volume", "wavelength", "attenuation", "temperature",
                                          "mass_concentration", "volume_fraction"]))
def test_any_typed_quantity_is_read_or_refused_in_one_line(text, kind):
    try:
        value = parse_quantity(text, kind)
    except InputError as exc:
        assert "\n" not in str(exc)
    else:
        assert isinstance(value, float) and value == value and abs(value) != float("inf")


@settings(max_examples=300, deadline=None)
@given(text=st.one_of(st.text(max_size=60), st.text(alphabet="0123456789.eE+-:,naif ", max_size=40)))
def test_any_typed_list_is_read_or_refused_in_one_line(text):
    try:
        values = parse_number_list(text, name="--x")
    except InputError as exc:
        assert "\n" not in str(exc)
    else:
        assert 1 <= values.size <= limit("list_values")
