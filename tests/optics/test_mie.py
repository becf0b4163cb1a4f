"""Mie wiring against printed values (Bohren & Huffman 1983, Wiscombe 1979), the Rayleigh
limit and an independent Mie library (scattnlay)."""

import numpy as np
import pytest

from phantomlab.errors import InputError
from phantomlab.optics.mie import MIE_ENGINES, sphere_ensemble_optics, sphere_ensemble_optics_naive
from phantomlab.optics.mie_series import mie_efficiencies

WAVELENGTH_NM = 1000.0


@pytest.fixture(params=sorted(MIE_ENGINES))
def engine(request):
    return request.param


def single(m, x, *, n_matrix=1.0, engine="numpy"):
    """Run one monodisperse sphere through our wiring and read the efficiencies back.

    The sphere diameter is chosen so that x = pi d n_matrix / lambda; for one size
    mus = 1.5 f Qsca / d (FIELD.md), so Qsca = mus d / 1.5 at f = 1.
    """
    d_um = x * WAVELENGTH_NM / (np.pi * n_matrix) / 1000.0
    out = sphere_ensemble_optics(
        wavelength_nm=[WAVELENGTH_NM], particle_index=m * n_matrix, matrix_index=n_matrix,
        diameters_um=[d_um], number_weights=[1.0], volume_fraction=1.0, engine=engine,
    )
    d_mm = d_um / 1000.0
    qsca = out.mus_per_mm[0] * d_mm / 1.5
    qabs = out.mua_per_mm[0] * d_mm / 1.5
    return qsca + qabs, qsca, out.g[0]


def test_bohren_huffman_worked_example(engine):
    # Bohren & Huffman 1983, Appendix A: m = 1.55, x = 5.21282 -> Qsca = 3.10543, g = 0.63314
    qext, qsca, g = single(1.55, 5.21282, engine=engine)
    assert qsca == pytest.approx(3.10543, abs=1e-5)  # 6 significant digits printed
    assert qext == pytest.approx(3.10543, abs=1e-5)
    assert g == pytest.approx(0.63314, abs=1e-5)


def test_relative_index_and_wavelength_in_matrix(engine):
    # Same Bohren & Huffman case, but the sphere sits in water-like n = 1.33: our wiring must
    # form m = n_p / n_m and x = pi d n_m / lambda0 to land on the same printed numbers.
    qext, qsca, g = single(1.55, 5.21282, n_matrix=1.33, engine=engine)
    assert qsca == pytest.approx(3.10543, abs=1e-5)
    assert g == pytest.approx(0.63314, abs=1e-5)


@pytest.mark.parametrize(
    "m, x, qext, qsca, gqsca",
    [
        (0.75, 10.0, 2.232265, 2.232265, 2.001164),  # Wiscombe 1979, NCAR TN-140, test case
        (1.33 - 1e-5j, 100.0, 2.101321, 2.096594, 1.821854),  # Wiscombe 1979
        (1.5 - 1j, 1.0, 2.336321, 0.6634538, 0.1274736),  # Wiscombe 1979
    ],
)
def test_wiscombe_values(m, x, qext, qsca, gqsca, engine):
    got_ext, got_sca, got_g = single(m, x, engine=engine)
    assert got_ext == pytest.approx(qext, rel=2e-6)  # 7 significant digits printed
    assert got_sca == pytest.approx(qsca, rel=2e-6)
    assert got_g * got_sca == pytest.approx(gqsca, rel=2e-6)


def test_sign_convention_absorbing_particle_has_positive_mua():
    # m = n - ik (miepython, Wiscombe): absorption shows up as mua > 0
    _, _, _ = single(1.5 - 0.1j, 2.0)
    with pytest.raises(InputError, match="imaginary part <= 0"):
        single(1.5 + 0.1j, 2.0)


@pytest.mark.parametrize("m", [1.5 - 0.01j, 1.2 - 0.001j, 2.0 - 0.5j])
def test_rayleigh_limit(m, engine):
    # Bohren & Huffman 1983, eqs. 5.8-5.9, with K = (m^2 - 1)/(m^2 + 2) in their n + ik convention
    x = 0.01
    m_bh = np.conj(m)
    K = (m_bh**2 - 1) / (m_bh**2 + 2)
    qext, qsca, g = single(m, x, engine=engine)
    assert qsca == pytest.approx(8 / 3 * x**4 * abs(K) ** 2, rel=1e-3)  # O(x^2) corrections
    assert qext - qsca == pytest.approx(4 * x * K.imag, rel=1e-3)
    assert abs(g) < 1e-3


SCATTNLAY_GRID = [
    (m, x)
    for m in (0.75, 1.05, 1.2, 1.5, 2.0, 2.6, 1.5 - 0.01j, 1.1 - 0.1j, 1.5 - 1j)
    for x in (0.1, 0.7, 3.0, 12.0, 40.0, 100.0)
]


@pytest.mark.parametrize("m, x", SCATTNLAY_GRID)
def test_against_scattnlay(m, x, engine):
    from scattnlay import scattnlay  # independent Mie implementation, convention m = n + ik

    _, qext_ref, qsca_ref, _, _, _, g_ref, *_ = scattnlay(np.array([x]), np.array([np.conj(m)]))
    qext, qsca, g = single(m, x, n_matrix=1.33, engine=engine)
    # miepython uses a small-sphere expansion for small x (its core.py), good to ~1e-6 there
    rel = 1e-8 if (engine == "numpy" or x > 0.5) else 2e-6
    assert qsca == pytest.approx(qsca_ref, rel=rel)
    assert qext == pytest.approx(qext_ref, rel=rel)
    assert g == pytest.approx(g_ref, rel=rel, abs=1e-10)


def test_numpy_series_against_miepython_in_one_batch():
    import miepython

    rng = np.random.default_rng(3)
    x = np.concatenate([np.geomspace(0.02, 80.0, 400), np.pi * np.arange(1, 8)])  # sin x = 0 at k pi
    m = rng.uniform(1.02, 2.7, x.size) - 1j * rng.choice([0.0, 1e-4, 0.05, 0.5], x.size)
    qext, qsca, g = mie_efficiencies(m, x)  # one batch, mixed sizes and indices
    for i in list(range(0, 400, 7)) + list(range(400, x.size)):
        e, s_, _, gg = miepython.efficiencies_mx(m[i], x[i])
        assert qsca[i] == pytest.approx(s_, rel=1e-7)
        assert qext[i] == pytest.approx(e, rel=1e-7)
        assert g[i] == pytest.approx(gg, rel=1e-7, abs=1e-9)


def test_unknown_engine():
    with pytest.raises(InputError, match="unknown Mie engine 'fast'; engines: numpy, miepython"):
        sphere_ensemble_optics(
            wavelength_nm=[600.0], particle_index=1.5, matrix_index=1.33, diameters_um=[1.0],
            number_weights=[1.0], engine="fast",
        )


def test_size_average_weights_by_cross_section():
    from scattnlay import scattnlay

    n_m, n_p, lam = 1.33, 1.59, 633.0
    d_um = np.array([0.4, 0.8, 1.6])
    w = np.array([0.5, 0.3, 0.2])
    out = sphere_ensemble_optics(
        wavelength_nm=[lam], particle_index=n_p, matrix_index=n_m, diameters_um=d_um, number_weights=w, volume_fraction=0.01
    )
    x = np.pi * d_um * 1000 * n_m / lam
    res = [scattnlay(np.array([xi]), np.array([n_p / n_m + 0j])) for xi in x]
    qsca = np.array([r[2] for r in res])
    g = np.array([r[6] for r in res])
    d_mm = d_um / 1000
    csca = qsca * np.pi * d_mm**2 / 4
    volume = np.pi * d_mm**3 / 6
    assert out.mus_per_mm[0] == pytest.approx(0.01 * np.sum(w * csca) / np.sum(w * volume), rel=1e-6)
    assert out.g[0] == pytest.approx(np.sum(w * csca * g) / np.sum(w * csca), rel=1e-6)


def test_vectorised_equals_naive_loop():
    kwargs = dict(
        wavelength_nm=np.linspace(400, 1000, 7), particle_index=1.58, matrix_index=np.linspace(1.34, 1.33, 7),
        diameters_um=np.linspace(0.8, 1.2, 9), number_weights=np.ones(9), volume_fraction=0.02,
    )
    slow = sphere_ensemble_optics_naive(**kwargs)
    fast = sphere_ensemble_optics(**kwargs)
    via_mx = sphere_ensemble_optics(**kwargs, engine="miepython")
    assert via_mx.mus_per_mm == pytest.approx(slow.mus_per_mm, rel=1e-13)
    assert fast.mus_per_mm == pytest.approx(slow.mus_per_mm, rel=1e-10)
    assert fast.g == pytest.approx(slow.g, rel=1e-10)


def test_bad_inputs():
    base = dict(wavelength_nm=[600.0], particle_index=1.5, matrix_index=1.33, diameters_um=[1.0], number_weights=[1.0])
    with pytest.raises(InputError, match="finite numbers > 0 nm"):
        sphere_ensemble_optics(**{**base, "wavelength_nm": [np.nan]})
    with pytest.raises(InputError, match="diameters must be > 0"):
        sphere_ensemble_optics(**{**base, "diameters_um": [-1.0]})
    with pytest.raises(InputError, match="matrix index must be finite and > 0"):
        sphere_ensemble_optics(**{**base, "matrix_index": 0.0})
