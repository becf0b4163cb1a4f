"""The smoothed time-resolved table F(u, τ) of one Monte Carlo baseline (layer 3).

A baseline keeps, for every photon that left the top face of a half-space run at (μa_ref,
μs_ref), its exit radius ρᵢ and path length Lᵢ.  The time-resolved reflectance of the
non-absorbing medium per unit area and per unit path in units of the scattering length,
F(u, τ) (u = ρμs, τ = Lμs), is what :mod:`phantomlab.calibration.mc_lookup_time` scales to any
μs and weights by Beer–Lambert for any μa.  Each stored photon enters F at (ρᵢμs_ref, Lᵢμs_ref)
with weight e^(μa_ref Lᵢ) (it survived the reference absorption with probability
e^(−μa_ref Lᵢ)).

F is tabulated on cells of about 10 % in u and 4 % in τ, in the coordinates (log u,
s = log(τ/u²)): s is the similarity variable of diffusion, in which the peak of a curve far
from the source stays at one s (τ_peak ≈ 0.3 (1 − g) u²), so a kernel wide in log u at fixed s
follows the curves' shape instead of cutting across their rising edges.  F is smoothed as a
ratio to the time-resolved diffusion model of the same medium (``kienle1997`` of
:mod:`phantomlab.transport.time_domain` at μa = 0, integrated over each cell, a smooth control
as in :mod:`phantomlab.calibration.mc_lookup`): log(F_MC/F_diffusion) varies slowly except at
the earliest times, and is smoothed by a local-linear kernel regression in (log u, s)
(Cleveland 1979) with weights from the photon counts, followed by local scoring steps of the
Poisson likelihood that count the empty cells as well (Tibshirani & Hastie 1987).

**On the rise** (up to τ/u = 4, blended into the fit at fixed s by τ/u = 8: :func:`front_share`)
the kernel runs along constant r = log(τ/u) instead: the path's excess
over the straight line, the similarity of the early photons, which travel not far from it.
There the ratio to diffusion changes fast along constant s (diffusion's light arrives too
early, and by how much depends on u at fixed s) and slowly along constant r.  The photons are
binned again in (log u, r), fitted there with a kernel 0.2 wide in log u and 0.06 in r
(:data:`BANDWIDTH_LOG_U_FRONT`; twiced, Tukey 1977), and read back at the table's nodes.
Measured against the gated direct run of tests/calibration/fixtures/mc_td_half_space_early.npz
(180 million photons, another seed) with the 10-million-photon baseline, at μs′/μa = 10: the
kernel at fixed s (0.12 × 0.06) left the rise 3–9 % low at 10–12 mm (the run's own SE 0.4–1.6 %)
and the fitted μs′ −3.2 % (10 mm), −3.7 % (12 mm) and −12 % (15 mm); along r, with the scoring
steps and twicing, the rise is within 1 % at 10 mm and 1.3–5.5 % low at 12 mm (SE 0.6–3.3 %) and
μs′ comes out −1.9 %, −0.2 % and −5.7 % (at 15 mm the run’s own noise spreads μs′ by 2.4 %;
at 14 mm, where it spreads μs′ by 0.9 %, −6.3 %: the photons thin out at the front there).

**After it** the kernel is 0.12 wide in log u and 0.06 in s, and wider where the ratio is
smooth: 0.3 in log u beyond 10 transport lengths once the curve has peaked (0.12 nearer than
3, blended between), and 0.2 in s from six times the peak time on (0.06 before twice it).
Measured on quarters of a 3-million-photon baseline fitted to independent Monte Carlo data
(tests/calibration/fixtures/mc_td_half_space.npz), the wider kernels brought the spread of μa
at μs′/μa = 1000 (20 mm) from 5.6 to 3.9 %.

Beside log F the table keeps, per node, the relative standard error of the smoothed value
(counting statistics through the local-linear fit's own variance, which near the edge of
the photons, where the local line extrapolates, is several times the local-constant one: on
quarters of the 10-million-photon baseline the nodes' SDs match the quarters' spread within
a factor 0.5–1.5 on the whole rise and after it, where the local-constant SD was up to 2.3
times too small at the front) and the size of its smoothing bias, the
plug-in ½ h² f'' of a local-linear Gaussian-kernel fit (Fan & Gijbels 1996, *Local Polynomial
Modelling and Its Applications*, eq. 3.10) with f'' from second differences of the smoothed
table (0.1–0.3 % after the peak), and along the front, where the fit is twiced and that term
gone, (S − I)² applied to the fit (S the smoother; 0.5–1.5 % at τ/u < 1.6, where ½ h² f''
read 10–17 %).  With both, fits of the gated run by the quarters of the 10-million-photon
baseline (μs′/μa 10–30, 10–15 mm, IRF 100–300 ps, 36 cases) lie within 2 SD of the truth in
every case.  The fits add both to
the data's variance (:mod:`phantomlab.calibration.mc_lookup_time`).

References
----------
Cleveland WS 1979, J Am Stat Assoc 74:829–836, doi:10.1080/01621459.1979.10481038.
Fan J, Gijbels I 1996, Local Polynomial Modelling and Its Applications, Chapman & Hall.
Tibshirani R, Hastie T 1987, Local likelihood estimation, J Am Stat Assoc 82(398):559–567.
Tukey JW 1977, Exploratory Data Analysis, Addison-Wesley (twicing).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from phantomlab.calibration.lookup_smoothing import fill_rows, local_linear_2d
from phantomlab.errors import PhantomlabWarning
from phantomlab.transport.time_domain_images import SPEED_OF_LIGHT_MM_PER_PS

__all__ = ["TimeTable", "smoothed_time_table", "wide_shares", "control_reflectance", "BANDWIDTH_LOG_U",
           "BANDWIDTH_LOG_TAU", "BANDWIDTH_LOG_U_FAR", "BANDWIDTH_LOG_TAU_LATE", "BANDWIDTH_LOG_U_FRONT",
           "front_share", "front_ramp", "FRONT_RAMP_LOG_TAU"]

#: Radial cells of the table, in scattering lengths u = ρμs (log spaced).
_U_RANGE = (0.5, 400.0)
_U_STEP = math.log(1.10)
#: Path cells of the table, in scattering lengths τ = Lμs (log spaced).
_TAU_MIN = 0.5
_TAU_STEP = math.log(1.04)
#: Kernel widths (Gaussian SDs) of the smoothing, in log u and in s (= log τ at fixed u).
#: common practice, no source: about two cells each way, chosen by comparison with direct
#: Monte Carlo runs (tests/calibration/test_mc_lookup_time.py).
BANDWIDTH_LOG_U = 0.12
BANDWIDTH_LOG_TAU = 0.06
#: The kernel's width in log u before the peak, where it runs along constant r = log(τ/u)
#: (the path's excess over the straight line) instead of constant s: chosen on the direct
#: runs of tests/calibration/fixtures (see the module docstring).
BANDWIDTH_LOG_U_FRONT = 0.2
#: ... up to this path over distance τ/u, and not from this one on (blended linearly in
#: log(τ/u) between): the rise and the peak of a strongly absorbing curve (μs′/μa = 10 peaks
#: at τ/u ≈ 2–2.5 at 10–15 mm), not the peak of a far, weakly absorbing one (μs′/μa 1000 at
#: 20 mm peaks near τ/u = 7), which diffusion's similarity variable s follows better.
_FRONT_TO = (4.0, 8.0)
#: Wider kernels where the ratio to diffusion is smooth (see the module docstring), chosen
#: on independent Monte Carlo data: in s from the first to the second multiple of the
#: diffusion peak time on (linear in s) ...
BANDWIDTH_LOG_TAU_LATE = 0.2
_LATE_FROM_PEAK = (2.0, 6.0)
#: ... and in log u between these distances [transport lengths] (linear in log u), only from
#: this fraction of the peak time on (linear in s up to the peak).
BANDWIDTH_LOG_U_FAR = 0.3
_WIDE_FROM_TRANSPORT_LENGTHS = (3.0, 10.0)
_WIDE_U_FROM_PEAK = 0.5
#: Width in s (= log τ at fixed u) of the ramp by which the lookup's light rises from none to
#: the table's value about a distance's first photons (:func:`front_ramp`): two path cells
#: (8 % in τ), one either side.  On the gated direct run of tests/calibration/fixtures
#: (mc_td_half_space_early.npz, μs′/μa 10 at 10–14 mm) the light rises from under 1 % of its
#: peak to the table's first value within 6–15 % of the path; a step at the first photons (what
#: the table held before) left the fit's χ² rough where it crossed a time sample.  Centred,
#: the expected counts' μs′ at 10–14 mm (IRF 100 ps, the 2.3-million-photon test baseline)
#: moved by −0.2 to +0.7 %; set entirely before the first photons (adding light) by −0.3 to
#: −2.2 %.
FRONT_RAMP_LOG_TAU = 2 * _TAU_STEP
#: Cells with fewer photons than this do not take part in the first (log-ratio) fit as data.
_MIN_PHOTONS = 1.0
#: Local scoring steps of the Poisson likelihood after the first fit (:func:`_kernel_fit`);
#: a fourth moves log F by at most 0.003 (99 % of nodes < 0.0005) where the table's SD is
#: below 5 % (10-million-photon baseline).
_SCORING_STEPS = 3
#: Empty cells before a row's first photon that count as data (no light there) in the
#: scoring steps: a kernel's width and more (the kernel is 1.5 cells wide in s).
_EMPTY_CELLS_BEFORE = 5


def control_reflectance(baseline, u: np.ndarray, tau: np.ndarray) -> np.ndarray:
    """F of the time-resolved diffusion model (kienle1997, μa = 0) at (u, τ), per unit u-area and τ."""
    from phantomlab.transport.time_domain import time_resolved

    n = float(baseline.n)
    v = SPEED_OF_LIGHT_MM_PER_PS / n
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)  # only a control, near the source too
        values = time_resolved(mua_per_mm=0.0, musp_per_mm=1.0 - float(baseline.g), rho_mm=u, time_ps=tau / v,
                               n=n, n_outside=float(baseline.n_outside), model="kienle1997")
    # per unit time → per unit τ (τ = v t for μs = 1 /mm); strip the entry transmission the
    # baseline carries in its launch weight (both per incident energy: keep it, the ratio is what matters)
    return np.asarray(values, float) / v


def wide_shares(g: float, log_u, s):
    """Shares (0–1) of the wide kernels in log u and in s at table coordinates (log u, s).

    In log u: 0 within the first, 1 beyond the second distance of
    :data:`_WIDE_FROM_TRANSPORT_LENGTHS`, linear in log u between.  In s: 0 up to twice
    the time of the diffusion peak at that distance, 1 from six times it (linear in s),
    the peak taken as τ_p = 0.3 (1 − g) u² + u (half-space diffusion at μa = 0,
    t_p = ρ²/(10 D v) with D = 1/(3μs′) (Patterson et al. 1989, eq. 5 at μa = 0), plus
    the straight path).
    """
    a, b = (math.log(t) for t in _WIDE_FROM_TRANSPORT_LENGTHS)
    peak = np.log(0.3 * (1.0 - g) + np.exp(-log_u))  # log(τ_p/u²)
    # before the peak the ratio to diffusion changes fast with u at fixed s: narrow there
    after_peak = np.clip((s - peak + math.log(_WIDE_U_FROM_PEAK)) / -math.log(_WIDE_U_FROM_PEAK), 0.0, 1.0)
    far = np.clip((log_u + math.log(1.0 - g) - a) / (b - a), 0.0, 1.0) * after_peak
    late = np.clip((s - peak - math.log(_LATE_FROM_PEAK[0])) / math.log(_LATE_FROM_PEAK[1] / _LATE_FROM_PEAK[0]),
                   0.0, 1.0)
    return far, late


def front_share(log_u, s):
    """Share (0–1) of the fit along the front, in (log u, r), at table coordinates (log u, s).

    1 up to τ/u = _FRONT_TO[0], 0 from _FRONT_TO[1] on, linear in log(τ/u) between.
    """
    r = np.asarray(s) + np.asarray(log_u)
    a, b = (math.log(x) for x in _FRONT_TO)
    return np.clip((b - r) / (b - a), 0.0, 1.0)


def _bin_of(values: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """``np.searchsorted(edges, values, side='right')`` for evenly spaced ``edges``, found by arithmetic.

    The guess from the step is corrected against the edges themselves, so the result is
    exactly the search's (a value on an edge goes to the bin on its right).
    """
    step = (edges[-1] - edges[0]) / (edges.size - 1)
    with np.errstate(invalid="ignore"):
        guess = np.floor((values - edges[0]) / step) + 1.0
    index = np.clip(np.nan_to_num(guess, nan=float(edges.size)), 0, edges.size).astype(np.int64)
    index[np.isnan(values)] = edges.size  # where the search puts NaN
    for _ in range(4):  # the guess is off by at most one bin; correct until the search agrees
        low = (index > 0) & (edges[np.maximum(index - 1, 0)] > values)
        high = (index < edges.size) & (edges[np.minimum(index, edges.size - 1)] <= values)
        if not (low.any() or high.any()):
            break
        index = index - low + high
    return index


def cell_sums(x: np.ndarray, y: np.ndarray, x_edges: np.ndarray, y_edges: np.ndarray, weights) -> list[np.ndarray]:
    """``np.histogram2d(x, y, bins=(x_edges, y_edges), weights=w)[0]`` for each ``w`` in ``weights`` (None: counts).

    The same numbers to the bit (the same bins, a value on the last edge in the last bin, and
    the same order of summation), with the cells found once for all the histograms and by
    arithmetic on the evenly spaced edges rather than by binary search (for ten million
    photons, 5.5 s → well under 1 s).
    """
    i = _bin_of(x, x_edges)
    j = _bin_of(y, y_edges)
    i[x == x_edges[-1]] -= 1
    j[y == y_edges[-1]] -= 1
    inside = (i >= 1) & (i < x_edges.size) & (j >= 1) & (j < y_edges.size)
    shape = (x_edges.size - 1, y_edges.size - 1)
    flat = (i[inside] - 1) * shape[1] + (j[inside] - 1)
    return [np.bincount(flat, None if w is None else w[inside], minlength=shape[0] * shape[1]).astype(float)
            .reshape(shape) for w in weights]


@dataclass(frozen=True, eq=False)
class TimeTable:
    """The smoothed table of one baseline on its nodes (log u, s) = (ln(ρμs), ln(τ/u²)).

    Attributes
    ----------
    u_nodes : ndarray (U,)
        Node centres in u = ρμs (log spaced).
    s_nodes : ndarray (S,)
        Node centres in s = ln(τ/u²).
    log_f : ndarray (U, S)
        ln F, each row carried flat beyond its first and last photon (for the spline).
    inside : ndarray of bool (U, S)
        Nodes between a row's first and last photon (light reported there only).
    relative_sd : ndarray (U, S)
        Relative standard error of the smoothed F at each node.
    relative_bias : ndarray (U, S)
        Size of the smoothing bias ½ h² |f''| at each node (relative).
    counts : ndarray (U, S)
        Photons in each cell.
    tau_max : float
        Longest path stored, in scattering lengths.
    u_max : float
        Farthest exit stored, in scattering lengths.
    """

    u_nodes: np.ndarray
    s_nodes: np.ndarray
    log_f: np.ndarray
    inside: np.ndarray
    relative_sd: np.ndarray
    relative_bias: np.ndarray
    counts: np.ndarray
    tau_max: float
    u_max: float


@dataclass(frozen=True)
class _Cells:
    """The photons' cells of one coordinate system: counts, weight sums, and the control's expected weights."""

    counts: np.ndarray
    sums: np.ndarray  # Σ w per cell (per launched photon × launched: photon-weight units)
    squares: np.ndarray  # Σ w² per cell
    expected: np.ndarray  # the control's expected Σ w per cell (same units)
    use: np.ndarray  # cells holding photons and the control's light

    @property
    def log_ratio(self) -> np.ndarray:
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(self.use, np.log(self.sums / self.expected), 0.0)

    @property
    def inverse_var(self) -> np.ndarray:
        """1/relative variance of each cell's weight sum, (Σw)²/Σw² (counting statistics); 0 where unused."""
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(self.use, self.sums**2 / self.squares, 0.0)


def _ratio_cells(baseline, log_u_photon, y_photon, weight, lu_edges, y_edges, *, power) -> _Cells:
    """The photons' cells in (log u, y), τ = u^power e^y, with the control's expected weight of each."""
    counts, sums, squares = cell_sums(log_u_photon, y_photon, lu_edges, y_edges, (None, weight, weight * weight))
    # expected weight of each cell under the control: ∫∫ 2π u F_c du dτ, du dτ = u τ dx dy
    # (x = log u, y = log τ − power·x), Gauss–Legendre 3×3 in (x, y)
    x, w = np.polynomial.legendre.leggauss(3)
    xq = 0.5 * (lu_edges[:-1, None] + lu_edges[1:, None]) + 0.5 * _U_STEP * x[None, :]  # (U, 3)
    yq = 0.5 * (y_edges[:-1, None] + y_edges[1:, None]) + 0.5 * _TAU_STEP * x[None, :]  # (Y, 3)
    wx = 0.5 * _U_STEP * w  # (3,)
    wy = 0.5 * _TAU_STEP * w
    uq = np.exp(xq).reshape(-1, 1)  # (3U, 1)
    tq = np.exp(yq.reshape(1, -1) + power * xq.reshape(-1, 1))  # (3U, 3Y)
    control_nodes = control_reflectance(baseline, uq, tq).reshape(xq.shape[0], 3, yq.shape[0], 3)
    jacobian = (2 * math.pi * uq * uq * tq).reshape(control_nodes.shape)
    # per incident photon → in the cells' units (photon weight of the launched photons)
    expected = np.einsum("aibj,aibj,i,j->ab", control_nodes, jacobian, wx, wy) * (
        float(baseline.photons) / float(baseline.launch_weight))
    use = (counts >= _MIN_PHOTONS) & (expected > 0) & (sums > 0)
    return _Cells(counts=counts, sums=sums, squares=squares, expected=expected, use=use)


def _kernel_fit(cells: _Cells, sx, sy, *, twice: bool = False):
    """The kernel fit of log(F/F_control) (kernel SDs ``sx``, ``sy`` in cells), its nodes' SDs and biases.

    The cells' photon weight sums are Poisson-like counts with the mean μ = E·e^η (E the
    control's expected weight, η the log ratio).  A local-linear fit of the log ratios of the
    cells that hold photons starts :data:`_SCORING_STEPS` local scoring steps of the Poisson
    likelihood (Tibshirani & Hastie 1987): each a local-linear fit of the working
    response η + (Σw − μ)/μ with weights μ/d (d = Σw²/Σw, the cell's variance-to-mean ratio
    of its weights).  The steps count the empty cells too (from :data:`_EMPTY_CELLS_BEFORE`
    cells before a row's first photon on), which a fit of log ratios must leave out: left
    out, the front at 14 mm (u = 84) came out 24 % high at a tenth of the peak against the
    gated direct run (SE 5 %), with them 13 %.  ``twice``: the residuals of the last step are
    smoothed once more and added (twicing; Tukey 1977, *Exploratory Data Analysis*), which
    takes the h² term off the kernel's bias at 1.35 times the SD (the bias is then (S − I)²
    of the fit).
    """
    fitted, mass = local_linear_2d(cells.log_ratio, cells.inverse_var, sx, sy)
    use = cells.use
    column = np.arange(use.shape[1])[None, :]
    first = np.where(use.any(axis=1), np.argmax(use, axis=1), use.shape[1])
    last = np.where(use.any(axis=1), use.shape[1] - 1 - np.argmax(use[:, ::-1], axis=1), -1)
    domain = (cells.expected > 0) & (column >= first[:, None] - _EMPTY_CELLS_BEFORE) & (column <= last[:, None])
    with np.errstate(divide="ignore", invalid="ignore"):
        dispersion = fill_rows(np.where(use, cells.squares / cells.sums, np.nan))
    dispersion = np.where(dispersion > 0, dispersion, 1.0)

    def scoring():
        eta = fill_rows(np.where(np.isfinite(fitted), fitted, np.nan))
        mu = np.where(domain, cells.expected * np.exp(np.clip(eta, -30.0, 30.0)), 0.0)
        live = domain & (mu > 0)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.where(live, (cells.sums - mu) / mu, 0.0)
        return eta, step, np.where(live, mu / dispersion, 0.0)

    for k in range(_SCORING_STEPS):
        eta, step, weights = scoring()
        fitted, mass, *variance = local_linear_2d(eta + step, weights, sx, sy,
                                                  with_variance=k == _SCORING_STEPS - 1)
    (variance,) = variance
    inflation = 1.0
    if twice:
        _, step, weights = scoring()
        correction, _ = local_linear_2d(step, weights, sx, sy)
        fitted = fitted + np.nan_to_num(correction)
        # the twiced kernel 2K − K∗K of Gaussians: ∫(2K − K∗K)² = (11/6)∫K² in any dimension
        inflation = math.sqrt(11.0 / 6.0)
    # standard error of a node: the local-linear fit's own variance (the sandwich of
    # lookup_smoothing.local_linear_2d), up to about twice the local-constant Σ K² w/(Σ K w)²
    # at the edges of the photons (the front) where the local line extrapolates
    node_sd = inflation * np.sqrt(np.where(mass > 0, variance, np.inf))
    if twice:
        # the twiced fit's bias is −(S − I)² f, S the smoother (E[f̂] = (2S − S²) f): estimated
        # by smoothing the fit itself twice with the same weights
        filled = fill_rows(np.where(np.isfinite(fitted), fitted, np.nan))
        once = np.nan_to_num(local_linear_2d(filled, weights, sx, sy)[0] - filled)
        return fitted, node_sd, np.abs(np.nan_to_num(local_linear_2d(once, weights, sx, sy)[0]) - once)
    # the kernel's bias, ½ h² f'' per axis (local-linear regression with a Gaussian
    # kernel; Fan & Gijbels 1996, Local Polynomial Modelling, eq. 3.10), with f'' from
    # second differences two cells wide of the fitted values themselves
    with np.errstate(invalid="ignore"):
        curv_u = np.full(fitted.shape, np.nan)
        curv_u[2:-2] = (fitted[4:] - 2 * fitted[2:-2] + fitted[:-4]) / 4.0
        curv_s = np.full(fitted.shape, np.nan)
        curv_s[:, 2:-2] = (fitted[:, 4:] - 2 * fitted[:, 2:-2] + fitted[:, :-4]) / 4.0
        node_bias = 0.5 * np.abs(np.nan_to_num(sx**2 * curv_u) + np.nan_to_num(sy**2 * curv_s))
    return fitted, node_sd, node_bias


def _front_fit(baseline, log_u_photon, r_photon, weight, lu_edges, s_nodes):
    """:func:`_kernel_fit` in (log u, r = log(τ/u)), kernel :data:`BANDWIDTH_LOG_U_FRONT` × :data:`BANDWIDTH_LOG_TAU`.

    The photons are binned again on cells of r (the same 4 % steps; r ≥ 0, a path is at
    least the straight line) and the fit, its SDs and biases are read back at the table's
    nodes (log u, s) row by row (the rows are the same; r = s + log u), linearly in r.
    Outside the photons' r: NaN (SD: inf).
    """
    r_high = max(float(r_photon.max()) if r_photon.size else 1.0, _TAU_STEP) + _TAU_STEP
    r_edges = _TAU_STEP * np.arange(int(math.ceil(r_high / _TAU_STEP)) + 1)
    cells = _ratio_cells(baseline, log_u_photon, r_photon, weight, lu_edges, r_edges, power=1)
    tables = _kernel_fit(cells, BANDWIDTH_LOG_U_FRONT / _U_STEP, BANDWIDTH_LOG_TAU / _TAU_STEP, twice=True)
    r_nodes = 0.5 * (r_edges[:-1] + r_edges[1:])
    out = [np.full((lu_edges.size - 1, s_nodes.size), np.nan) for _ in tables]
    log_u = 0.5 * (lu_edges[:-1] + lu_edges[1:])
    for i in range(log_u.size):
        r_at = s_nodes + log_u[i]
        for table, into in zip(tables, out):
            good = np.isfinite(table[i])
            if np.count_nonzero(good) >= 2:
                into[i] = np.interp(r_at, r_nodes[good], table[i][good], left=np.nan, right=np.nan)
    out[1] = np.where(np.isfinite(out[1]), out[1], np.inf)
    return tuple(out)


def smoothed_time_table(baseline) -> TimeTable:
    """The :class:`TimeTable` of a baseline (see the module docstring); 3–4 s for two million photons."""
    mus_ref = float(baseline.mus_per_mm)
    mua_ref = float(baseline.mua_per_mm)
    path = baseline.path_length_mm.astype(np.float64)
    u = baseline.exit_radius_mm.astype(np.float64) * mus_ref
    tau = path * mus_ref
    weight = np.exp(mua_ref * path)  # back to the non-absorbing medium
    live = (u > 0) & (tau > 0)
    u, tau, weight = u[live], tau[live], weight[live]
    log_u_photon = np.log(u)
    s_photon = np.log(tau) - 2.0 * log_u_photon  # the diffusion similarity variable log(τ/u²)
    lu_edges = np.arange(math.log(_U_RANGE[0]), math.log(_U_RANGE[1]) + _U_STEP, _U_STEP)
    tau_max = max(float(tau.max()) if tau.size else 1.0, _TAU_MIN * 2)
    s_low = math.log(_TAU_MIN) - 2.0 * lu_edges[-1]
    s_high = math.log(tau_max) - 2.0 * lu_edges[0]
    s_edges = s_low + _TAU_STEP * np.arange(int(math.ceil((s_high - s_low) / _TAU_STEP)) + 1)
    cells = _ratio_cells(baseline, log_u_photon, s_photon, weight, lu_edges, s_edges, power=2)
    counts, use = cells.counts, cells.use
    u_nodes = np.exp(0.5 * (lu_edges[:-1] + lu_edges[1:]))
    s_nodes = 0.5 * (s_edges[:-1] + s_edges[1:])
    far, late = wide_shares(float(baseline.g), np.log(u_nodes)[:, None], s_nodes[None, :])
    smoothed = np.zeros(use.shape)
    spread = np.zeros(use.shape)
    bias = np.zeros(use.shape)
    # four local-linear fits (narrow or wide in log u × narrow or wide in s), blended; the
    # narrow-narrow one (before the peak) along the front, in (log u, r), read back at the nodes
    early = front_share(np.log(u_nodes)[:, None], s_nodes[None, :])
    for front, u_width, s_width, share in ((True, BANDWIDTH_LOG_U_FRONT, BANDWIDTH_LOG_TAU,
                                            (1 - far) * (1 - late) * early),
                                           (False, BANDWIDTH_LOG_U, BANDWIDTH_LOG_TAU, (1 - far) * (1 - late) * (1 - early)),
                                           (False, BANDWIDTH_LOG_U_FAR, BANDWIDTH_LOG_TAU, far * (1 - late)),
                                           (False, BANDWIDTH_LOG_U, BANDWIDTH_LOG_TAU_LATE, (1 - far) * late),
                                           (False, BANDWIDTH_LOG_U_FAR, BANDWIDTH_LOG_TAU_LATE, far * late)):
        share = np.broadcast_to(share, use.shape)
        if not np.any(share > 0):
            continue
        if front:
            fitted, node_sd, node_bias = _front_fit(baseline, log_u_photon, s_photon + log_u_photon, weight, lu_edges,
                                                    s_nodes)
        else:
            fitted, node_sd, node_bias = _kernel_fit(cells, u_width / _U_STEP, s_width / _TAU_STEP)
        bias = bias + np.where(share > 0, share * node_bias, 0.0)
        smoothed = smoothed + np.where(share > 0, share * fitted, 0.0)
        # the fits share their photons: the SD of the blend is at most the blend of the SDs
        spread = spread + np.where(share > 0, share * np.where(share > 0, node_sd, 0.0), 0.0)
    variance = spread**2
    relative_sd = np.sqrt(variance)
    control_centre = control_reflectance(baseline, u_nodes[:, None],
                              np.exp(s_nodes[None, :] + 2.0 * np.log(u_nodes)[:, None]))
    # before the first photon of a row (earlier than light arrives) and after its last one,
    # the photons report no light; the spline is given the row's edge values there (so it
    # does not ring), and the lookup reads 0 there, rising over front_ramp about the first
    reached = np.isfinite(smoothed) & np.isfinite(variance)
    first = np.where(use.any(axis=1), np.argmax(use, axis=1), use.shape[1])
    last = np.where(use.any(axis=1), use.shape[1] - 1 - np.argmax(use[:, ::-1], axis=1), -1)
    column = np.arange(use.shape[1])[None, :]
    inside = reached & (column >= first[:, None]) & (column <= last[:, None])
    ratio = np.where(inside, smoothed, np.nan)
    ratio = fill_rows(ratio)
    with np.errstate(divide="ignore"):
        log_f = np.log(np.clip(control_centre, 1e-300, None)) + ratio
    log_f = np.clip(log_f, -700.0, None)

    return TimeTable(u_nodes=u_nodes, s_nodes=s_nodes, log_f=log_f, inside=inside, relative_sd=relative_sd,
                     relative_bias=bias, counts=counts, tau_max=tau_max, u_max=float(u.max()) if u.size else 0.0)


def front_ramp(reached: np.ndarray, s_step: float) -> np.ndarray:
    """Weight (0–1) of the lookup's light on a grid (U, S): 1 where ``reached``, a ramp about a row's first photons.

    Where a finite baseline's first photons at a distance lie is known to about a cell, and a
    medium's light rises from nothing over a short span of path, not in a step.  About each
    row's first reached column the weight rises over :data:`FRONT_RAMP_LOG_TAU` in s (centred
    where the step stood, so the ramp spreads the light the step held) by the cubic smoothstep
    3x² − 2x³ (continuous in value and slope), which makes the lookup continuous in μs and t0
    where the step had made the fit's χ² jump.  After a row's last photon, and in rows without photons,
    the weight is 0.

    Parameters
    ----------
    reached : bool (U, S)
        Where the table holds the baseline's photons (each row's reached columns contiguous).
    s_step : float
        The grid's step in s.
    """
    reached = np.asarray(reached, bool)
    weight = reached.astype(float)
    columns = np.arange(reached.shape[1])
    span = FRONT_RAMP_LOG_TAU / float(s_step)
    has = reached.any(axis=1)
    first = np.argmax(reached, axis=1)
    # centred half a column before the first reached one, where the step stood as the table is
    # read (bilinearly, light kept above one half): the ramp spreads the light the step held
    # (3x² − 2x³ + its mirror = 1)
    edge = first[:, None] - 0.5
    x = np.clip((columns[None, :] - edge) / span + 0.5, 0.0, 1.0)
    ramp = x * x * (3.0 - 2.0 * x)
    in_ramp = has[:, None] & (columns[None, :] < edge + 0.5 * span) & (reached | (columns[None, :] < first[:, None]))
    return np.where(in_ramp, ramp, weight)
