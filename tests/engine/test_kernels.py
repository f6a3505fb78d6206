"""The consumer kernels (FFT, sidebands, binning) and broadening against slow twins and analytic results.

Check sources (named again beside each test):

* numpy.fft (an outside reference FFT);
* brute-force sideband evaluation and the explicitly gamma-averaged FID
  (``tests/reference/sidebands_numpy.py``; M. M. Maricq, J. S. Waugh, J. Chem.
  Phys. 70 (1979) 3300; M. H. Levitt, J. Magn. Reson. 82 (1989) 427);
* the Jacobi-Anger expansion exp(i b sin x) = sum_n J_n(b) exp(i n x) (standard
  result of frequency modulation), Bessel functions from scipy.special.jv;
* triangle interpolation from its definition (frequency linear over the
  triangle, intensity uniform in area; D. W. Alderman, M. S. Solum, D. M.
  Grant, J. Chem. Phys. 84 (1986) 3717), shared among the axis points by
  their linear hat functions, by exact polygon clipping and by random
  sampling, and sharp lines split by a dense hat matrix
  (``tests/reference/binning_numpy.py``);
* unit-area Lorentzian, Gaussian and Voigt profiles (scipy.special.voigt_profile).

Section numbers of textbooks are given from memory; every check here is against a
formula evaluated in the test or a library, never against a remembered number.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.special import jv, voigt_profile

from powderspin.engine import _kernels as _k
from powderspin.engine.frequencies import SiteFrame, perturbative_offsets
from powderspin.engine.lineshape import broaden
from powderspin.engine.spinning import rotor_lines
from powderspin.physics.tensors import efg_principal
from tests.reference.binning_numpy import bin_triangles, hat_weights, histogram_lines, triangle_weights_clipped
from tests.reference.perturbative_numpy import perturbative_transitions
from tests.reference.sidebands_numpy import gamma_averaged_fid, sideband_intensities, trig_interpolant

MAGIC = math.acos(1.0 / math.sqrt(3.0))


# ---------------------------------------------------------------------------
# FFT


@pytest.mark.parametrize("n", [2 ** k for k in range(11)])
def test_fft_matches_numpy(n):
    # Source: numpy.fft (unnormalised forward transform; numpy's ifft carries 1/n).
    rng = np.random.default_rng(n)
    x = rng.normal(size=n) + 1j * rng.normal(size=n)
    a = x.copy()
    _k._fft_inplace(a, False)
    np.testing.assert_allclose(a, np.fft.fft(x), rtol=0, atol=1e-12 * n)
    b = x.copy()
    _k._fft_inplace(b, True)
    np.testing.assert_allclose(b, np.fft.ifft(x) * n, rtol=0, atol=1e-12 * n)


# ---------------------------------------------------------------------------
# sidebands


@pytest.mark.parametrize("beta", [0.3, 1.0, 2.5, 6.0])
def test_sidebands_of_cosine_modulation_are_bessel(beta):
    # Source: Jacobi-Anger expansion (standard result of frequency modulation): nu(t) =
    # A cos(w_r t) gives xi = (A/nu_r) sin(w_r t) and |F_n|^2 = J_n(A/nu_r)^2 (scipy.special.jv).
    rate, p = 2000.0, 64
    phi = 2 * np.pi * np.arange(p) / p
    traj = (beta * rate * np.cos(phi) + 150.0)[None, None, :]
    mean, amp = rotor_lines(traj, rate)
    n = np.rint(np.fft.fftfreq(p, 1.0 / p))
    assert mean[0, 0] == pytest.approx(150.0, rel=1e-12)
    np.testing.assert_allclose(amp[0, 0], jv(n, beta) ** 2, rtol=0, atol=1e-12)
    assert amp[0, 0].sum() == pytest.approx(1.0, abs=1e-12)


def _csa_like(phi):
    # first-order shift anisotropy under spinning: harmonics 1 and 2 only (Maricq and Waugh)
    return 420.0 + 5200.0 * np.cos(phi + 0.4) - 3100.0 * np.cos(2 * phi - 1.1)


def _degree_four(phi):
    # second-order quadrupolar central transition under spinning: harmonics up to 4
    return (-900.0 + 2600.0 * np.cos(phi + 0.2) + 1800.0 * np.sin(2 * phi) - 1500.0 * np.cos(3 * phi - 0.7)
            + 1100.0 * np.cos(4 * phi + 2.0))


@pytest.mark.parametrize("traj_fn, rate", [(_csa_like, 2500.0), (_degree_four, 1700.0)])
def test_rotor_lines_match_brute_force_sidebands(traj_fn, rate):
    # Source: tests/reference/sidebands_numpy.py, (1) |F_n|^2 of exp(i xi) with xi from a
    # fine cumulative Simpson integration, (2) the explicit gamma average of the FID.
    p = 128
    phi = 2 * np.pi * np.arange(p) / p
    mean, amp = rotor_lines(traj_fn(phi)[None, None, :], rate)
    ref_mean, ref_amp = sideband_intensities(traj_fn, rate)
    assert mean[0, 0] == pytest.approx(ref_mean, abs=1e-9)
    bands = np.arange(-p // 2 + 1, p // 2)
    np.testing.assert_allclose(amp[0, 0, bands % p], ref_amp[bands % ref_amp.size], rtol=0, atol=1e-9)
    assert ref_amp[bands % ref_amp.size].sum() == pytest.approx(1.0, abs=1e-9)  # nothing beyond
    assert amp[0, 0].sum() == pytest.approx(1.0, abs=1e-12)
    # (2) explicit gamma average over 64 initial rotor phases and 4 rotor periods
    fid_mean, fid, off_band = gamma_averaged_fid(traj_fn, rate, bands=20)
    assert fid_mean == pytest.approx(ref_mean, abs=1e-9)
    assert off_band < 1e-9  # the gamma average leaves only the bands (Levitt 1989)
    for n, val in fid.items():
        assert abs(val.imag) < 1e-9
        assert amp[0, 0, n % p] == pytest.approx(val.real, abs=1e-9), n


def _perp(n):
    u = np.cross(n, [0.3, -0.8, 0.52])
    u /= np.linalg.norm(u)
    return u, np.cross(n, u)


@pytest.mark.parametrize("spin, cq_hz, rate", [(0.5, 0.0, 3000.0), (1.5, 3.0e6, 1500.0)])
def test_rotor_lines_on_producer_trajectories(spin, cq_hz, rate):
    # Source: end to end against the twins: perturbative kernel + rotor_lines versus
    # tests/reference/perturbative_numpy.py along our own rotor cone (different phase
    # origin; band intensities do not depend on it) + tests/reference/sidebands_numpy.py.
    nu0 = 1.0e8
    delta = np.array([[30.0, 12.0, -5.0], [12.0, -20.0, 8.0], [-5.0, 8.0, 45.0]])
    k = cq_hz / (2 * spin * (2 * spin - 1)) if spin > 0.5 else 0.0
    frame = SiteFrame(spin, nu0, k, efg_principal(0.3), delta, "hemisphere")
    rng = np.random.default_rng(1)
    p = 128
    for n in rng.normal(size=(2, 3)):
        n = n / np.linalg.norm(n)
        traj = perturbative_offsets(frame, n[None, :], [0.5], rotor_angle_rad=MAGIC, phases=p)
        mean, amp = rotor_lines(traj, rate)
        u, v = _perp(n)
        ph = 2 * np.pi * np.arange(32) / 32
        b = math.cos(MAGIC) * n + math.sin(MAGIC) * (np.cos(ph)[:, None] * u + np.sin(ph)[:, None] * v)
        samples = perturbative_transitions(spin, nu0, cq_hz, 0.3, delta, b, [0.5])[:, 0]
        ref_mean, ref_amp = sideband_intensities(trig_interpolant(samples), rate)
        assert mean[0, 0] == pytest.approx(ref_mean, abs=1e-7)
        bands = np.arange(-p // 2 + 1, p // 2)
        np.testing.assert_allclose(amp[0, 0, bands % p], ref_amp[bands % ref_amp.size], rtol=0, atol=1e-8)


@pytest.mark.parametrize("p, rate", [(12, 1000.0), (64, 0.0), (64, -5.0), (64, math.inf), (64, math.nan)])
def test_rotor_lines_rejects_bad_input(p, rate):
    with pytest.raises(ValueError):
        rotor_lines(np.zeros((1, 1, p)), rate)


# ---------------------------------------------------------------------------
# binning


def _points(x0, dx, nb):
    # axis point k sits at the centre of bin k
    return x0 + dx * (np.arange(nb) + 0.5)


def _tent(mean, amp, wt, tris, tw, rate, x0, dx, nb, nchunk=1, cutoff=0.0):
    # nchunk > 1: the triangles in that many parts, added (as the threads of lineshape.tent_binned do)
    mean, amp, wt = (np.ascontiguousarray(x, float) for x in (mean, amp, wt))
    tris, tw = np.ascontiguousarray(tris, np.int64), np.ascontiguousarray(tw, float)
    ext = _k._band_extent(amp)
    out = np.zeros(int(nb))
    for part in np.array_split(np.arange(tris.shape[0]), int(nchunk)):
        if part.size:
            a, b = part[0], part[-1] + 1
            out += _k._bin_tent(mean, amp, wt, ext, tris[a:b], tw[a:b], float(rate), float(x0), float(dx), int(nb),
                                float(cutoff))
    return out


def _octahedron_mesh(order):
    """Unit-sphere mesh: each octahedron face cut into order^2 triangles, projected outwards.

    Triangle weights are spherical solid angles / 4 pi (A. van Oosterom, J. Strackee,
    IEEE Trans. Biomed. Eng. 30 (1983) 125), so they sum to 1.
    """
    corners = np.array([[1, 0, 0], [0, 1, 0], [0, 0, 1], [-1, 0, 0], [0, -1, 0], [0, 0, -1]], float)
    faces = [(0, 1, 2), (1, 3, 2), (3, 4, 2), (4, 0, 2), (1, 0, 5), (3, 1, 5), (4, 3, 5), (0, 4, 5)]
    verts, index, tris = [], {}, []

    def vid(p):
        key = tuple(np.round(p / np.linalg.norm(p), 12))
        if key not in index:
            index[key] = len(verts)
            verts.append(np.array(key))
        return index[key]

    for a, b, c in faces:
        pa, pb, pc = corners[a], corners[b], corners[c]

        def pt(i, j):
            return pa + (pb - pa) * i / order + (pc - pa) * j / order

        for i in range(order):
            for j in range(order - i):
                tris.append((vid(pt(i, j)), vid(pt(i + 1, j)), vid(pt(i, j + 1))))
                if i + j < order - 1:
                    tris.append((vid(pt(i + 1, j)), vid(pt(i + 1, j + 1)), vid(pt(i, j + 1))))
    v = np.array(verts)
    t = np.array(tris)
    a, b, c = v[t[:, 0]], v[t[:, 1]], v[t[:, 2]]
    num = np.abs(np.einsum("ij,ij->i", a, np.cross(b, c)))
    den = 1 + np.einsum("ij,ij->i", a, b) + np.einsum("ij,ij->i", b, c) + np.einsum("ij,ij->i", c, a)
    omega = 2 * np.arctan2(num, den)
    return v, t, omega / (4 * np.pi)


def test_tent_binning_of_a_static_shift_pattern_on_a_sphere_mesh():
    # Source: triangle interpolation from its definition, exact polygon clipping
    # (tests/reference/binning_numpy.py); mesh built here with numpy.
    v, tris, tw = _octahedron_mesh(3)
    assert tw.sum() == pytest.approx(1.0, abs=1e-12)  # solid angles tile the sphere
    delta = np.array([[-40.0, 10.0, 0.0], [10.0, 15.0, 5.0], [0.0, 5.0, 60.0]])  # Hz here
    freq = np.einsum("ij,jk,ik->i", v, delta, v)[:, None]
    amp = np.ones((len(v), 1, 1))
    wt = np.ones((len(v), 1))
    x0, dx, nb = -80.0, 1.7, 100
    got = _tent(freq, amp, wt, tris, tw, 0.0, x0, dx, nb)
    ref = bin_triangles(freq, amp, wt, tris, tw, 0.0, _points(x0, dx, nb))
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-12)
    assert got.sum() == pytest.approx(1.0, abs=1e-12)


def test_tent_binning_random_triangles_with_sidebands_and_chunks():
    # Source: exact polygon clipping (tests/reference/binning_numpy.py); band n of a line
    # sits at mean + n nu_r, bands in FFT order; intensity = triangle weight times the mean
    # vertex intensity.
    rng = np.random.default_rng(2)
    nv, nt, p, ntri = 20, 2, 8, 16
    mean = rng.uniform(-30, 30, size=(nv, nt))
    amp = rng.random((nv, nt, p))
    amp /= amp.sum(axis=2, keepdims=True)
    wt = rng.uniform(0.2, 1.0, size=(nv, nt))
    tris = np.array([rng.choice(nv, 3, replace=False) for _ in range(ntri)])
    tw = rng.random(ntri)
    rate, x0, dx, nb = 11.3, -70.0, 1.3, 110
    got = _tent(mean, amp, wt, tris, tw, rate, x0, dx, nb)
    ref = bin_triangles(mean, amp, wt, tris, tw, rate, _points(x0, dx, nb))
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-12)
    for nchunk in (3, 8):
        np.testing.assert_allclose(_tent(mean, amp, wt, tris, tw, rate, x0, dx, nb, nchunk), got, rtol=0, atol=1e-12)
    # cutoff: contributions at or below it are left out
    cut = float(np.median(tw) * 0.08)
    got_c = _tent(mean, amp, wt, tris, tw, rate, x0, dx, nb, 1, cut)
    ref_c = bin_triangles(mean, amp, wt, tris, tw, rate, _points(x0, dx, nb), cutoff=cut)
    np.testing.assert_allclose(got_c, ref_c, rtol=0, atol=1e-12)
    assert got_c.sum() < got.sum()


def test_tent_binning_every_width_and_shape_matches_clipping():
    # Source: exact polygon clipping (tests/reference/binning_numpy.py).  The kernel uses
    # different closed forms for tents between two points, across one point, with short
    # sides and with long straight sides; widths from 0 to 40 points, peaks anywhere from
    # the low end to the high end, at quarter-step offsets, inside the axis and across
    # both of its ends, reach each of them.
    x0, dx, nb = -1.0, 0.8, 60
    points = _points(x0, dx, nb)
    for width in (0.0, 0.3, 0.999, 1.0, 1.5, 1.999, 2.0, 2.5, 5.0, 9.0, 14.0, 40.0):
        for peak in (0.0, 0.02, 0.3, 0.5, 0.98, 1.0):
            for start in (0.1, 0.35, 0.6, 0.85, 20.0, 20.25, -3.3, nb - 2.2, -width * 0.5, nb - width * 0.5):
                f1 = x0 + start * dx
                f = np.array([f1 + peak * width * dx, f1 + width * dx, f1])  # vertex order mixed
                got = _tent(f[:, None], np.ones((3, 1, 1)), np.ones((3, 1)), np.array([[0, 1, 2]]),
                            np.array([1.0]), 0.0, x0, dx, nb)
                ref = triangle_weights_clipped(f, points)
                np.testing.assert_allclose(got, ref, rtol=0, atol=1e-13, err_msg=f"{width} {peak} {start}")


def test_tent_binning_matches_random_sampling():
    # Source: the definition sampled directly: uniform random points in each triangle,
    # frequency interpolated linearly, histogrammed (tests/reference/binning_numpy.py).
    # Tolerance: 5 binomial standard deviations per bin for 2e5 samples per triangle
    # (variance sum_q w_q^2 p_q (1 - p_q) / N <= max(w) * expected / N).
    rng = np.random.default_rng(3)
    mean = np.array([[1.0], [7.5], [3.2], [-2.1], [12.0]])
    amp = np.ones((5, 1, 1))
    wt = np.ones((5, 1))
    tris = np.array([[0, 1, 2], [1, 3, 4], [0, 3, 4]])
    tw = np.array([0.5, 0.3, 0.2])
    x0, dx, nb = -4.0, 0.8, 22
    samples = 200_000
    got = _tent(mean, amp, wt, tris, tw, 0.0, x0, dx, nb)
    ref = bin_triangles(mean, amp, wt, tris, tw, 0.0, _points(x0, dx, nb), method="sampled",
                        samples=samples, rng=rng)
    sigma = np.sqrt(tw.max() * np.maximum(got, 1e-4) / samples)
    assert np.all(np.abs(got - ref) < 5 * sigma + 1e-12)


def test_tent_binning_degenerate_triangles():
    # Source: a flat triangle (f1 = f3) is a sharp line, split linearly between its two
    # neighbouring points (the hat functions' definition, tests/reference/binning_numpy.py;
    # linear interpolation keeps area and first moment); two equal frequencies against
    # exact polygon clipping (tests/reference/binning_numpy.py).
    x0, dx, nb = 0.0, 1.0, 20  # points at 0.5, 1.5, ...
    amp = np.ones((3, 1, 1))
    wt = np.ones((3, 1))
    tris = np.array([[0, 1, 2]])
    tw = np.array([0.7])
    # all three equal: 5.3 lies 0.8 of the way from point 4 (4.5) to point 5 (5.5)
    got = _tent(np.array([[5.3], [5.3], [5.3]]), amp, wt, tris, tw, 0.0, x0, dx, nb)
    expected = np.zeros(nb)
    expected[4], expected[5] = 0.7 * 0.2, 0.7 * 0.8
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-15)
    # equal to within rounding: the same split about the centroid
    got = _tent(np.array([[9.6], [9.6 + 1e-13], [9.6 - 1e-13]]), amp, wt, tris, tw, 0.0, x0, dx, nb)
    assert got[9] == pytest.approx(0.7 * 0.9, abs=1e-12) and got[10] == pytest.approx(0.7 * 0.1, abs=1e-12)
    assert got.sum() == pytest.approx(0.7, abs=1e-15)
    # a tiny triangle across a point: no jump from the sharp-line split
    for f in ([7.5 - 1e-10, 7.5, 7.5 + 2e-10], [7.5 - 3e-11, 7.5 - 3e-11, 7.5 + 1e-11]):
        got = _tent(np.array(f)[:, None], amp, wt, tris, tw, 0.0, x0, dx, nb)
        np.testing.assert_allclose(got, 0.7 * hat_weights(np.mean(f), _points(x0, dx, nb)), rtol=0, atol=1e-9)
    # two equal (lower pair, upper pair), in every vertex order
    for f in ([2.2, 2.2, 8.9], [2.2, 8.9, 8.9], [8.9, 2.2, 2.2], [8.9, 2.2, 8.9]):
        mean = np.array(f)[:, None]
        got = _tent(mean, amp, wt, tris, tw, 0.0, x0, dx, nb)
        ref = 0.7 * triangle_weights_clipped(f, _points(x0, dx, nb))
        np.testing.assert_allclose(got, ref, rtol=0, atol=1e-14)
        assert got.sum() == pytest.approx(0.7, abs=1e-14)


def test_tent_binning_lines_partly_off_the_axis():
    # Source: exact polygon clipping (tests/reference/binning_numpy.py); the share of the
    # points beyond either end of the axis is dropped, not piled onto the end points: each
    # axis point gets what it gets on a longer axis with the same points.
    x0, dx, nb = 0.0, 0.5, 30  # axis [0, 15], points 0.25 ... 14.75
    amp = np.ones((3, 1, 1))
    wt = np.ones((3, 1))
    tris = np.array([[0, 1, 2]])
    tw = np.array([1.0])
    wide_points = _points(-20.0, dx, 120)  # -19.75 ... 39.75, the axis points among them
    on_axis = (wide_points > 0.0) & (wide_points < 15.0)
    for f in ([-4.0, 3.0, 9.0], [6.0, 13.0, 21.0], [-5.0, 7.0, 20.0], [-9.0, -5.0, -1.0], [16.0, 18.0, 30.0],
              [-0.3, -0.1, 0.2], [14.6, 14.9, 15.2]):
        mean = np.array(f)[:, None]
        got = _tent(mean, amp, wt, tris, tw, 0.0, x0, dx, nb)
        ref = triangle_weights_clipped(f, _points(x0, dx, nb))
        np.testing.assert_allclose(got, ref, rtol=0, atol=1e-14)
        inside = triangle_weights_clipped(f, wide_points)[on_axis]
        assert got.sum() == pytest.approx(inside.sum(), abs=1e-13)


def test_histogram_binning_matches_numpy_histogram():
    # Source: numpy.histogram with weights (tests/reference/binning_numpy.py), bands at
    # mean + n nu_r; lines off the axis are dropped.
    rng = np.random.default_rng(4)
    nv, nt, p = 200, 3, 8
    mean = rng.uniform(-60, 60, size=(nv, nt))
    amp = rng.random((nv, nt, p))
    amp /= amp.sum(axis=2, keepdims=True)
    wt = rng.random((nv, nt))
    vw = rng.random(nv)
    rate, x0, dx, nb = 7.7, -50.0, 0.9, 100
    got = _k._bin_histogram(mean, amp, wt, vw, rate, x0, dx, nb)
    ref = histogram_lines(mean, amp, wt, vw, rate, _points(x0, dx, nb))
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-12)
    # static (one band)
    got1 = _k._bin_histogram(mean, amp[:, :, :1].copy(), wt, vw, rate, x0, dx, nb)
    ref1 = histogram_lines(mean, amp[:, :, :1], wt, vw, rate, _points(x0, dx, nb))
    np.testing.assert_allclose(got1, ref1, rtol=0, atol=1e-12)


# ---------------------------------------------------------------------------
# broadening


def _delta(n, i0):
    y = np.zeros(n)
    y[i0] = 1.0
    return y


def test_lorentzian_broadening_of_a_delta():
    # Source: unit-area Lorentzian (L/2pi) / (x^2 + (L/2)^2), FWHM L (Ernst, Bodenhausen,
    # Wokaun, Principles of NMR in One and Two Dimensions, sec. 4.2); area on the axis
    # = (1/pi) [atan(2 (b - x0)/L) - atan(2 (a - x0)/L)].
    n, dx, lw, i0 = 1024, 0.5, 12.0, 512
    y = broaden(_delta(n, i0), dx, lorentz_hz=lw)
    x = (np.arange(n) - i0) * dx
    g = (lw / (2 * np.pi)) / (x ** 2 + (lw / 2) ** 2)
    peak = g.max()
    np.testing.assert_allclose(y / dx, g, rtol=0, atol=1e-4 * peak)
    assert np.argmax(y) == i0
    a, b = x[0] - dx / 2, x[-1] + dx / 2
    area = (math.atan(2 * b / lw) - math.atan(2 * a / lw)) / math.pi
    # broaden() multiplies by the Lorentzian's Fourier transform on a grid padded to >= 4
    # axis widths W, i.e. it convolves with the Lorentzian periodised over >= 4 W; the
    # neighbouring images sit >= 3 W away and add back at most ~ 2 (L/2pi) W / (3W)^2
    # (plus farther images) of area: bound it by L / (4 pi W).
    width = n * dx
    assert abs(y.sum() - area) <= lw / (4 * math.pi * width)
    assert y.sum() < 1.0


def test_gaussian_broadening_of_a_delta_and_no_wraparound():
    # Source: unit-area Gaussian sqrt(4 ln2 / pi) / G exp(-4 ln2 x^2 / G^2), FWHM G.  Its
    # samples at spacing dx << G sum to 1/dx (Poisson summation: the aliases are ~exp(-30)).
    n, dx, gw = 512, 1.0, 9.0
    for i0 in (256, 4):
        y = broaden(_delta(n, i0), dx, gauss_hz=gw)
        x = (np.arange(n) - i0) * dx
        g = math.sqrt(4 * math.log(2) / math.pi) / gw * np.exp(-4 * math.log(2) * x ** 2 / gw ** 2)
        np.testing.assert_allclose(y / dx, g, rtol=0, atol=1e-10 * g.max())
        if i0 == 256:
            assert y.sum() == pytest.approx(1.0, abs=1e-12)
    # near the left edge: the part lost past it does not reappear at the right edge
    assert y.sum() < 0.9
    assert np.abs(y[-50:]).max() < 1e-12


def test_voigt_broadening_of_a_delta():
    # Source: scipy.special.voigt_profile(x, sigma, gamma), sigma = G / (2 sqrt(2 ln 2)),
    # gamma = L / 2 (half width of the Lorentzian).
    n, dx, lw, gw, i0 = 2048, 0.25, 3.0, 5.0, 1000
    y = broaden(_delta(n, i0), dx, lorentz_hz=lw, gauss_hz=gw)
    x = (np.arange(n) - i0) * dx
    ref = voigt_profile(x, gw / (2 * math.sqrt(2 * math.log(2))), lw / 2)
    np.testing.assert_allclose(y / dx, ref, rtol=0, atol=5e-5 * ref.max())


def test_broadening_conserves_area_away_from_edges():
    # Source: a unit-area kernel conserves the integral of a spectrum whose lines stay
    # far from the axis ends (convolution theorem).
    rng = np.random.default_rng(5)
    y = np.zeros(4096)
    y[1500:2600] = rng.random(1100)
    for lw, gw in ((0.0, 6.0), (0.0, 20.0), (4.0, 0.0), (4.0, 6.0)):
        out = broaden(y, 0.5, lorentz_hz=lw, gauss_hz=gw)
        # Lorentzian tails past the ends hold about (2/pi) (L/2) / distance of the area
        tail = (2 / math.pi) * (lw / 2) / (1500 * 0.5) if lw else 1e-12
        assert out.sum() == pytest.approx(y.sum(), rel=tail + 1e-12)
        assert out.sum() <= y.sum() * (1 + 1e-12)


def test_broadening_works_along_the_last_axis():
    # Several spectra in one array are broadened row by row, like one at a time.
    rng = np.random.default_rng(6)
    ys = rng.random((3, 256))
    out = broaden(ys, 0.7, lorentz_hz=2.0, gauss_hz=3.0)
    for row, y in zip(out, ys):
        np.testing.assert_allclose(row, broaden(y, 0.7, lorentz_hz=2.0, gauss_hz=3.0), rtol=0, atol=1e-14)


def test_broadening_input_checks():
    y = np.arange(8.0)
    out = broaden(y, 1.0)
    np.testing.assert_array_equal(out, y)
    assert out is not y
    with pytest.raises(ValueError, match="lorentz_hz"):
        broaden(y, 1.0, lorentz_hz=-1.0)
    with pytest.raises(ValueError, match="gauss_hz"):
        broaden(y, 1.0, gauss_hz=-0.5)


def test_band_summary_matches_numpy():
    """_band_summary vs a plain numpy reduction (its slow, obvious twin)."""
    rng = np.random.default_rng(11)
    amp = rng.random((37, 3, 16))
    w = rng.random((37, 3))
    mean = rng.normal(size=(37, 3)) * 1e3
    inten, pos, amax = _k._band_summary(amp, w, mean)
    assert np.allclose(inten, np.einsum("vt,vtp->p", w, amp), rtol=1e-13)
    assert np.allclose(pos, np.einsum("vt,vt,vtp->p", w, mean, amp), rtol=1e-12)
    assert np.array_equal(amax, amp.max(axis=(0, 1)))


def test_branch_free_sincos_matches_numpy():
    """_kernels._sincos vs numpy.cos/numpy.sin (the libm reference) over a wide range of arguments."""
    from numba import njit

    @njit
    def many(x):
        c = np.empty_like(x)
        s = np.empty_like(x)
        for i in range(x.size):
            c[i], s[i] = _k._sincos(x[i])
        return c, s

    rng = np.random.default_rng(5)
    for scale in (1.0, 10.0, 1e3, 1e5):
        x = rng.uniform(-scale, scale, 20000)
        c, s = many(x)
        tol = 2e-15 + 4e-16 * scale  # the argument itself carries a relative rounding of ~1e-16
        assert np.abs(c - np.cos(x)).max() < tol
        assert np.abs(s - np.sin(x)).max() < tol
    # exact quadrant boundaries
    x = np.arange(-8, 9) * (np.pi / 2)
    c, s = many(x)
    assert np.allclose(c, np.cos(x), atol=1e-15) and np.allclose(s, np.sin(x), atol=1e-15)


@pytest.mark.parametrize("p", [4, 8, 16, 64, 512])
def test_lane_fft_matches_numpy(p):
    """_fft_lanes_bitreversed (several signals at once, bit-reversed input) vs numpy.fft.fft."""
    rng = np.random.default_rng(p)
    x = rng.normal(size=(p, 5)) + 1j * rng.normal(size=(p, 5))
    rev, _ = _k._fft_tables(p)
    twr, twi = _k._stage_twiddles(p)
    re = np.ascontiguousarray(x.real[rev])
    im = np.ascontiguousarray(x.imag[rev])
    _k._fft_lanes_bitreversed(re, im, twr, twi)
    assert np.allclose(re + 1j * im, np.fft.fft(x, axis=0), atol=1e-11 * p)


def test_band_extent_matches_numpy():
    # Source: the definition, in numpy: the largest |n| (bands in FFT order) whose intensity is not zero.
    rng = np.random.default_rng(9)
    p = 32
    amp = np.zeros((5, 2, p))
    for i, e in enumerate([0, 1, 5, 16, 9]):
        n = np.fft.fftfreq(p, 1.0 / p).astype(int)
        amp[i, 0, np.abs(n) <= e] = rng.random(int((np.abs(n) <= e).sum())) + 0.1
    amp[3, 1, 16] = 1.0  # the Nyquist band alone
    n = np.abs(np.fft.fftfreq(p, 1.0 / p).astype(int))
    ref = np.array([[int(n[a > 0].max()) if (a > 0).any() else 0 for a in row] for row in amp])
    np.testing.assert_array_equal(_k._band_extent(amp), ref)
