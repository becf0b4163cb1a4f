"""The td fit's starting grid: the compiled shift scan against its numpy form and an exact case.

Sources: the numpy form of the same sums (``td_curves._shifted_chi2``, plain array
arithmetic), and an exact solution (a curve moved by a whole number of bins and scaled is
matched with χ² = 0 at that shift and amplitude).
"""

import numpy as np

from phantomlab.calibration._scan_kernels import shift_scan_chi2
from phantomlab.calibration.td_curves import _shifted_chi2


def test_the_compiled_shift_scan_equals_its_numpy_form():
    rng = np.random.default_rng(11)
    rows, bins, shifts = 7, 120, 13
    time = 5.0 + 10.0 * np.arange(bins)
    curves = rng.gamma(2.0, 1.0, (rows, bins))
    data = rng.gamma(2.0, 3.0, (rows, bins))
    weight = rng.uniform(0.1, 2.0, (rows, bins)) * (rng.uniform(size=(rows, bins)) > 0.3)
    # shifts that move curves partly off either end, and fractions of a bin
    moves = rng.uniform(-400.0, 400.0, (rows, shifts))
    expected = _shifted_chi2(time, curves, moves, data, weight)
    got = np.empty_like(expected)
    shift_scan_chi2(curves, moves / 10.0, data, weight, got)
    np.testing.assert_allclose(got, expected, rtol=1e-12, atol=1e-12 * expected.max())


def test_a_moved_and_scaled_curve_is_found_at_its_shift_with_zero_chi2():
    bins = 200
    time = 5.0 + 10.0 * np.arange(bins)
    curve = np.exp(-0.5 * ((time - 600.0) / 80.0) ** 2)[None, :]
    data = 7.5 * np.roll(curve, 12, axis=1)  # 120 ps later, the tail far below rounding
    weight = np.ones((1, bins))
    moves = np.array([[100.0, 110.0, 120.0, 130.0]])
    chi2 = np.empty(moves.shape)
    shift_scan_chi2(curve, moves / 10.0, data, weight, chi2)
    assert np.argmin(chi2[0]) == 2
    assert chi2[0, 2] < 1e-20 and chi2[0, 1] > 1e-3
