"""The model seen through a measured instrument response (transport/convolution.py).

Check: a Gaussian IRF on an exponential decay, whose convolution is the closed form
(1/2) exp(σ²/(2τ²) − t/τ) erfc((σ²/τ − t)/(σ√2)) (the exponentially modified Gaussian; e.g.
Grushka 1972, Anal Chem 44:1733), integrated over each data bin by quadrature; the IRF given as
its exact bin integrals (erf).
"""

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.special import erf, erfc

from phantomlab.errors import InputError
from phantomlab.transport.convolution import irf_convolved_counts, prepare_irf

STEP = 10.0
DECAY = 500.0
SIGMA = 60.0
TIME = np.arange(-500.0, 4000.0, STEP) + 5.0
IRF_TIME = np.arange(-400.0, 400.0, STEP)
IRF = 0.5 * (erf((IRF_TIME + STEP / 2) / (SIGMA * np.sqrt(2))) - erf((IRF_TIME - STEP / 2) / (SIGMA * np.sqrt(2))))


def emg(x):
    return 0.5 * np.exp(SIGMA**2 / (2 * DECAY**2) - x / DECAY) * erfc((SIGMA**2 / DECAY - x) / (SIGMA * np.sqrt(2)))


def binned_emg(shift):
    return np.array([quad(emg, a - STEP / 2 - shift, a + STEP / 2 - shift)[0] for a in TIME])


@pytest.mark.parametrize("shift", [0.0, 3.3, 137.0])
@pytest.mark.parametrize("subdivisions, tolerance", [(1, 1e-3), (3, 1.5e-4)])
def test_gaussian_irf_on_an_exponential(shift, subdivisions, tolerance):
    got = irf_convolved_counts(model=lambda t: np.exp(-t / DECAY), time_ps=TIME, irf_time_ps=IRF_TIME, irf=IRF,
                               shift_ps=shift, subdivisions=subdivisions)[0]
    expected = binned_emg(shift)
    # the IRF's normalisation to unit sum is part of the method (its tails beyond ±400 ps are 1e-11)
    assert np.max(np.abs(got - expected)) <= tolerance * expected.max()


def test_single_bin_irf_gives_bin_averages_of_the_model():
    irf_time = np.array([0.0])
    with pytest.raises(InputError, match="at least two time bins"):
        prepare_irf(time_ps=TIME, irf_time_ps=irf_time, irf=[1.0])
    irf_time = np.array([0.0, STEP])
    got = irf_convolved_counts(model=lambda t: np.exp(-t / DECAY), time_ps=TIME, irf_time_ps=irf_time,
                               irf=[1.0, 0.0], shift_ps=0.0, subdivisions=1)[0]
    # IRF uniform on [−Δ/2, Δ/2]: each data bin sees the model averaged over a triangle of half-width Δ
    expected = []
    for a in TIME:
        def tri(x):
            return (STEP - abs(x - a)) / STEP**2 * (np.exp(-x / DECAY) if x > 0 else 0.0)
        expected.append(STEP * (quad(tri, a - STEP, a, points=[0.0] if a - STEP < 0 < a else None)[0]
                                + quad(tri, a, a + STEP, points=[0.0] if a < 0 < a + STEP else None)[0]))
    assert got == pytest.approx(np.array(expected), abs=2e-6 * max(expected))


def test_rows_have_their_own_shift_and_irf():
    response = prepare_irf(time_ps=TIME, irf_time_ps=IRF_TIME, irf=np.stack([IRF, np.roll(IRF, 5)]))
    both = response.counts(lambda t: np.exp(-t / DECAY), [0.0, 20.0])
    alone = prepare_irf(time_ps=TIME, irf_time_ps=IRF_TIME, irf=np.roll(IRF, 5)).counts(lambda t: np.exp(-t / DECAY), 20.0)
    assert both.shape == (2, TIME.size)
    assert both[1] == pytest.approx(alone[0], rel=1e-12, abs=1e-15)
    assert response.irf_fwhm_ps == pytest.approx(2 * np.sqrt(2 * np.log(2)) * SIGMA, rel=0.02)


@pytest.mark.parametrize("irf_time, irf, match", [
    (np.arange(-400.0, 400.0, 20.0), np.ones(40), "time step of 20 ps, the data 10 ps"),
    (np.array([0.0, 10.0, 25.0]), np.ones(3), "evenly spaced"),
    (np.array([0.0, 10.0, 5.0]), np.ones(3), "must increase"),
    (IRF_TIME, np.zeros(IRF_TIME.size), "holds no counts"),
    (IRF_TIME, -IRF, "finite and >= 0"),
])
def test_bad_irf_is_refused(irf_time, irf, match):
    with pytest.raises(InputError, match=match):
        prepare_irf(time_ps=TIME, irf_time_ps=irf_time, irf=irf)


@pytest.mark.parametrize("subdivisions", [1, 2, 3, 4])
def test_the_direct_band_and_the_fft_agree_and_meet_the_closed_form(subdivisions):
    """A fit adds each curve's convolution directly over the IRF's band (a numba kernel); long
    problems go by FFT.  Both against the closed form above, and against each other to rounding,
    with several IRF rows and curves that pick their row."""
    irfs = np.stack([IRF, np.roll(IRF, 3)])
    direct = prepare_irf(time_ps=TIME, irf_time_ps=IRF_TIME, irf=irfs, subdivisions=subdivisions)
    by_fft = prepare_irf(time_ps=TIME, irf_time_ps=IRF_TIME, irf=irfs, subdivisions=subdivisions, direct=False)
    assert direct.moving is not None and by_fft.moving is None
    shifts = np.array([0.0, 3.3, 137.0, -20.0])
    rows = np.array([0, 1, 0, 1])

    def model(t):
        return np.exp(-t / DECAY)

    a = direct.counts(model, shifts, irf_rows=rows)
    b = by_fft.counts(model, shifts, irf_rows=rows)
    np.testing.assert_allclose(a, b, rtol=0, atol=1e-12 * b.max())
    # the rectangle-per-sub-bin error falls as 1/s² (the tolerances of the test above for s = 1, 3)
    tolerance = max(1e-3 / subdivisions**2, 1.5e-4)
    expected = binned_emg(137.0)
    assert np.max(np.abs(a[2] - expected)) <= tolerance * expected.max()
