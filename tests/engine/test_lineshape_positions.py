"""Line positions survive binning: areas and centres of gravity do not snap to the axis points.

Check sources (named again beside each test):

* linear ("hat") sharing between neighbouring points: the hats
  h_k(v) = max(0, 1 - |v - k|) add up to 1 and sum_k k h_k(v) = v, so any
  density shared by them keeps its area and first moment (elementary; the
  "cloud in cell" assignment of R. W. Hockney, J. W. Eastwood, Computer
  Simulation Using Particles (1981), from memory);
* the centre of gravity of a triangular density on [f1, f3] with its peak
  at f2 is (f1 + f2 + f3) / 3 (elementary geometry: the centroid of the
  triangle under it);
* an isotropic shift puts the line at nu_ref * delta_iso * 1e-6 Hz (the ppm
  scale, R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795);
* under magic-angle spinning a first-order shift anisotropy gives sharp
  sidebands at nu_iso + n nu_r, the centre band at the isotropic shift (the
  anisotropy averages to zero over a rotor period): M. M. Maricq,
  J. S. Waugh, J. Chem. Phys. 70 (1979) 3300.

The tolerance asked of every position is a hundredth of an axis step; a
line put whole into the bin that holds it is off by up to half a step.
"""

from __future__ import annotations

import numpy as np
import pytest

from powderspin.engine import _kernels as _k
from powderspin.model.modelfile import make_model
from powderspin.simulator import Simulator, simulate


def _tent(f, w, x0, dx, nb):
    """One triangle (vertex frequencies f) of weight w through the tent kernel."""
    mean = np.ascontiguousarray(np.asarray(f, float)[:, None])
    amp = np.ones((3, 1, 1))
    return _k._bin_tent(mean, amp, np.ones((3, 1)), _k._band_extent(amp), np.array([[0, 1, 2]], np.int64),
                        np.array([w]), 0.0, float(x0), float(dx), int(nb), 0.0)


def _first_moment(x, y):
    return float((x * y).sum() / y.sum())


# ---------------------------------------------------------------------------
# the kernel: one tent of any width at any sub-step position


@pytest.mark.parametrize("width", [0.0, 0.5, 1.0, 1.5, 2.0, 3.0])
@pytest.mark.parametrize("peak", [0.0, 0.3, 0.5, 1.0])
def test_tent_keeps_area_and_centre_of_gravity(width, peak):
    # Source: hats add up to 1 and reproduce linear functions (elementary), so the area w and
    # the centroid (f1 + f2 + f3) / 3 (elementary geometry) come out of the points exactly.
    x0, dx, nb = -3.0, 0.7, 40
    points = x0 + dx * (np.arange(nb) + 0.5)
    w = 0.37
    for j in range(20):  # 20 sub-step positions across one axis step
        f1 = 9.1 + j * dx / 20
        f = np.array([f1, f1 + peak * width * dx, f1 + width * dx])
        y = _tent(f, w, x0, dx, nb)
        assert y.sum() == pytest.approx(w, abs=1e-14)
        assert _first_moment(points, y) == pytest.approx(f.mean(), abs=1e-12 * dx)


@pytest.mark.parametrize("width", [0.999, 1.0, 1.001, 2.5])
def test_tent_moves_smoothly(width):
    # Source: a point's share is the integral of the shifted density against its hat, whose
    # slope is at most 1/dx, so moving a tent of weight w by s changes each share by at most
    # w s / dx (elementary); no jump where the kernel switches between its closed forms.
    x0, dx, nb = 0.0, 1.0, 16
    w, step = 1.0, 2e-4
    f1 = 5.9 + step * np.arange(int(2.2 / step))  # across two points and two bin edges
    ys = np.zeros((f1.size, nb))
    for j, a in enumerate(f1):
        _k._add_tent(ys[j], a, a + 0.4 * width, a + width, w, x0, dx, nb)
    assert np.abs(np.diff(ys, axis=0)).max() <= w * step / dx * (1 + 1e-6) + 1e-13
    assert ys.sum(axis=1) == pytest.approx(w, abs=1e-13)


# ---------------------------------------------------------------------------
# the public API: an isotropic line swept across one step, MAS sidebands


def _p31(meas, site):
    return make_model("31P", {"field_tesla": 9.4, "orientations": "coarse", **meas}, [site])


@pytest.mark.parametrize("binning", ["interpolate", "histogram"])
def test_isotropic_line_swept_across_one_step(binning):
    # Source: an isotropic shift delta puts the line at delta (ppm scale, R. K. Harris et al.,
    # Pure Appl. Chem. 73 (2001) 1795); its first moment, from the spectrum, must follow the
    # shift through every sub-step position, to a hundredth of a step.  A static site with
    # only an isotropic shift has one frequency for every orientation, so the small "coarse"
    # orientation set gives the same line as any other.
    points, width_ppm = 256, 20.0
    dx_ppm = width_ppm / points
    for j in range(21):
        shift = 3.0 + j * dx_ppm / 20
        spec = simulate(_p31({"points": points, "center_ppm": 0.0, "width_ppm": width_ppm, "binning": binning},
                             {"shift_ppm": shift}))
        assert spec.ppm[1] - spec.ppm[0] == pytest.approx(dx_ppm, rel=1e-9)
        assert _first_moment(spec.ppm, spec.intensity) == pytest.approx(shift, abs=dx_ppm / 100)
        assert _first_moment(spec.ppm, spec.site_intensities[0]) == pytest.approx(shift, abs=dx_ppm / 100)
        # and the same in Hz: the line sits at nu_ref * shift * 1e-6
        nu_ref = spec.hz[-1] / spec.ppm[-1] * 1e6
        dx_hz = spec.hz[1] - spec.hz[0]
        assert _first_moment(spec.hz, spec.intensity) == pytest.approx(nu_ref * shift * 1e-6, abs=dx_hz / 100)


@pytest.mark.parametrize("binning", ["interpolate", "histogram"])
@pytest.mark.parametrize("gauss_hz", [0.0, 4.0])
def test_mas_sideband_centres(binning, gauss_hz):
    # Source: M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70 (1979) 3300: under MAS a first-order
    # shift anisotropy gives sharp sidebands at nu_iso + n nu_r, the centre band at the
    # isotropic shift.  The first moment of each band's region (half a rate either side) must
    # sit there to a hundredth of an axis step.  The axis step (about 11 Hz) is not
    # commensurate with the rate, so the bands fall at many positions between the points.
    # Every orientation puts band n at the same frequency, so the small "coarse" set suffices
    # for positions; a Gaussian much narrower than the rate is symmetric and keeps them.
    rate, shift, points, width_ppm = 4321.0, 7.3, 8192, 560.0
    # bin averages: the binning keeps each band's area and centre (point samples of a line narrower than a
    # point, Simulator's default, do not)
    spec = Simulator(_p31({"spinning_hz": rate, "points": points, "center_ppm": 0.0, "width_ppm": width_ppm,
                           "binning": binning, "gauss_hz": gauss_hz},
                          {"shift_ppm": shift, "span_ppm": 160.0, "skew": 0.3}), point_values=False).spectrum()
    hz, y = spec.hz, spec.intensity
    dx = hz[1] - hz[0]
    nu_ref = hz[-1] / spec.ppm[-1] * 1e6
    iso = nu_ref * shift * 1e-6
    total = y.sum()
    checked, off_grid = 0, []
    for n in range(-8, 9):
        centre = iso + n * rate
        region = np.abs(hz - centre) < rate / 2
        if y[region].sum() < 1e-3 * total or centre - rate / 2 < hz[0] or centre + rate / 2 > hz[-1]:
            continue
        assert _first_moment(hz[region], y[region]) == pytest.approx(centre, abs=dx / 100), f"band {n}"
        checked += 1
        r = ((centre - hz[0]) / dx) % 1.0
        off_grid.append(min(r, 1.0 - r))
    assert checked >= 7
    # the test has teeth: some band lies far from every point (a whole-bin answer would miss)
    assert max(off_grid) > 0.25
