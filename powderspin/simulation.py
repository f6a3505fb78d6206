"""The simulation pipeline: model -> per-site lines -> binned, broadened spectrum.

One representation, two producers, one consumer (DEVELOPERS.md):

1. each site's tensors are written in its crystallite frame (:mod:`frequencies`);
2. an orientation set is chosen from the symmetry the interactions allow;
3. a producer (perturbative or exact) gives each transition's offset at every
   orientation and rotor phase;
4. the consumer takes rotor averages and sideband intensities
   (:mod:`spinning`; static is the one-sample case);
5. lines are binned with triangle interpolation, normalised, broadened and
   summed (:mod:`lineshape`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from . import __version__
from . import _kernels as _k
from .frequencies import (
    SiteFrame,
    exact_offsets,
    needs_exact,
    perturbative_offsets,
    site_frame,
    transition_intensity,
)
from .lineshape import Axis, bin_lines, broaden, make_axis
from .model import Model, ModelError, selected_transitions
from .orientations import OrientationSet, orientation_set_by_name, select_orientations
from .spectrum import SidebandRow, Spectrum
from .spinning import (
    MAX_AUTO_PHASES,
    choose_rotor_phases,
    perturbative_sidebands,
    rotor_lines,
)

__all__ = ["simulate", "SiteLines", "site_lines"]

#: phases used for the rotor average at infinite rate (the trajectory is a
#: trigonometric polynomial of degree <= 4, so 8 equally spaced phases give
#: its average exactly)
INFINITE_RATE_PHASES = 8
#: phases for the exact route at infinite rate (not a finite polynomial)
INFINITE_RATE_PHASES_EXACT = 32
#: tolerated fraction of a site's intensity in the outer quarter of the
#: sideband bands (where aliasing would first misplace intensity)
ALIAS_TOLERANCE = 1e-6
#: triangle-band contributions below this fraction of a site's area are skipped
#: (at most ~1e-6 of the area in all, far below any plotted feature)
BIN_CUTOFF = 1e-13
#: how much of the sphere each kind of orientation set covers (larger covers more)
_COVER = {"octant": 0, "hemisphere": 1, "sphere": 2}


@dataclass(frozen=True)
class SiteLines:
    """Per-orientation lines of one site (the consumer's output).

    Attributes
    ----------
    orientations : OrientationSet
        The n_v directions (rotor axis or B0 in the crystallite frame) and
        their weights.
    ms : tuple of float
        Upper level m of each transition m -> m-1.
    mean : ndarray (n_v, n_t)
        Line (centre-band) positions, Hz.
    amp : ndarray (n_v, n_t, P)
        Sideband intensities (P = 1 when static or infinitely fast).
    weights : ndarray (n_v, n_t)
        Transition weights, normalised so the site's lines sum to 1 over the
        orientation set.
    rate_hz : float
        Spinning rate (0 static, inf infinitely fast).
    method : str
        "perturbation" or "exact".
    phases : int
        Rotor phases sampled per period.
    band_intensity, band_position_hz, band_max : ndarray (P,) or None
        Per-band summaries over the powder: integrated intensity,
        intensity-weighted position sum (Hz) and largest single-line
        intensity of each band n (index ``n mod P``).

    References
    ----------
    M. H. Levitt, J. Magn. Reson. 82 (1989) 427 (gamma-averaged sideband
    intensities); M. Edén, M. H. Levitt, J. Magn. Reson. 132 (1998) 220
    (powder averaging).

    Examples
    --------
    >>> from powderspin.frequencies import site_frame
    >>> from powderspin.model import Measurement, Site
    >>> from powderspin.nuclides import get_nuclide
    >>> from powderspin.orientations import triangulated
    >>> from powderspin.tensors import ShiftTensor
    >>> f = site_frame(Site(shift=ShiftTensor(0.0, 50.0, 0.0)), get_nuclide("31P"), 9.4)
    >>> sl = site_lines(f, [0.5], Measurement(field_tesla=9.4), "perturbation",
    ...                 triangulated(8, "octant"))
    >>> sl.method, sl.phases, sl.mean.shape, sl.amp.shape
    ('perturbation', 1, (45, 1), (45, 1, 1))
    """

    orientations: OrientationSet
    ms: tuple
    mean: np.ndarray
    amp: np.ndarray
    weights: np.ndarray
    rate_hz: float
    method: str
    phases: int
    band_intensity: np.ndarray | None = None
    band_position_hz: np.ndarray | None = None
    band_max: np.ndarray | None = None

    def band_offsets(self) -> np.ndarray:
        """Offset (Hz) of each band from the centre band, ``n * rate_hz``.

        Returns
        -------
        numpy.ndarray, shape (P,)
            Band n at index ``n mod P`` (numpy FFT order); ``[0.0]`` when
            static or infinitely fast.

        References
        ----------
        M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70 (1979) 3300.

        Examples
        --------
        >>> from powderspin.frequencies import site_frame
        >>> from powderspin.model import Measurement, Site
        >>> from powderspin.nuclides import get_nuclide
        >>> from powderspin.orientations import triangulated
        >>> from powderspin.tensors import ShiftTensor
        >>> f = site_frame(Site(shift=ShiftTensor(0.0, 50.0, 0.0)), get_nuclide("31P"), 9.4)
        >>> meas = Measurement(field_tesla=9.4, spinning_hz=4000.0, rotor_phases=16)
        >>> sl = site_lines(f, [0.5], meas, "perturbation", triangulated(8, "octant"))
        >>> sl.band_offsets()[:3].tolist(), float(sl.band_offsets()[-1])
        ([0.0, 4000.0, 8000.0], -4000.0)
        """
        p = self.amp.shape[2]
        if p == 1 or not math.isfinite(self.rate_hz):
            return np.zeros(1)
        return np.fft.fftfreq(p, 1.0 / p) * self.rate_hz

    def frequency_range(self, cutoff: float = 1e-6) -> tuple[float, float]:
        """Lowest and highest frequency carrying intensity above ``cutoff``.

        Parameters
        ----------
        cutoff : float, optional
            Bands whose largest single-line intensity (fraction of 1) is at
            or below this are ignored.

        Returns
        -------
        tuple of 2 float
            (lowest, highest) line position (Hz offsets from nu_ref),
            sidebands included.

        References
        ----------
        M. H. Levitt, J. Magn. Reson. 82 (1989) 427.

        Examples
        --------
        >>> from powderspin.frequencies import site_frame
        >>> from powderspin.model import Measurement, Site
        >>> from powderspin.nuclides import get_nuclide
        >>> from powderspin.orientations import triangulated
        >>> from powderspin.tensors import ShiftTensor
        >>> f = site_frame(Site(shift=ShiftTensor(0.0, 50.0, 0.0)), get_nuclide("31P"), 9.4)
        >>> sl = site_lines(f, [0.5], Measurement(field_tesla=9.4), "perturbation",
        ...                 triangulated(8, "octant"))
        >>> [round(x / f.nu0_hz * 1e6, 6) for x in sl.frequency_range()]   # ppm: d_perp, d_par
        [-25.0, 50.0]
        """
        off = self.band_offsets()
        if self.amp.shape[2] == 1:
            keep = np.array([True])
        elif self.band_max is not None:
            keep = self.band_max > cutoff
        else:
            keep = self.amp.max(axis=(0, 1)) > cutoff
        lo = self.mean.min() + off[keep].min()
        hi = self.mean.max() + off[keep].max()
        return float(lo), float(hi)


def _pick_orientations(meas, symmetry: str, exact_spinning: bool) -> OrientationSet:
    o = meas.orientations
    interp = meas.binning == "interpolate"
    if isinstance(o, (int, np.integer)) and not isinstance(o, bool):
        return select_orientations(symmetry, int(o), interpolate=interp)
    if o in ("auto", "coarse", "medium", "fine"):
        acc = "coarse" if (o == "auto" and exact_spinning) else o
        return select_orientations(symmetry, acc, interpolate=interp)
    s = orientation_set_by_name(str(o))
    if _COVER[s.symmetry] < _COVER[symmetry]:
        raise ModelError(
            f"measurement: orientations = {o!r} covers only the {s.symmetry}, but these interactions "
            f"need a {symmetry} set (the shift and EFG tensors are not coaxial)"
        )
    return s


def _ideal_weights(spin: float, ms) -> np.ndarray:
    w = np.array([transition_intensity(spin, m) for m in ms])
    return w / w.sum()


def site_lines(
    frame: SiteFrame,
    ms,
    meas,
    method: str,
    orientations: OrientationSet | None = None,
) -> SiteLines:
    """Compute a site's lines for a measurement with a given producer.

    Parameters
    ----------
    frame : SiteFrame
        Site interactions (:func:`powderspin.frequencies.site_frame`).
    ms : sequence of float
        Upper levels of the transitions.
    meas : Measurement
        Spinning rate (Hz), rotor angle (degrees), rotor phases and
        orientation choice.
    method : {"perturbation", "exact"}
        The producer of the frequencies.
    orientations : OrientationSet, optional
        Defaults to the measurement's choice for the site's symmetry.

    Returns
    -------
    SiteLines
        Line positions (Hz), sideband intensities and weights per
        orientation and transition, normalised to a total of 1.

    References
    ----------
    M. H. Levitt, J. Magn. Reson. 82 (1989) 427 (sidebands); J. R. Carson,
    Proc. IRE 10 (1922) 57 (first guess of the number of rotor phases).

    Examples
    --------
    >>> from powderspin.frequencies import site_frame
    >>> from powderspin.model import Measurement, Site
    >>> from powderspin.nuclides import get_nuclide
    >>> from powderspin.orientations import triangulated
    >>> f = site_frame(Site(cq_mhz=3.0), get_nuclide("27Al"), 14.1)
    >>> meas = Measurement(field_tesla=14.1, spinning_hz=10000.0, rotor_phases=32)
    >>> sl = site_lines(f, [0.5], meas, "perturbation", triangulated(8, "octant"))
    >>> sl.amp.shape, round(float(sl.band_intensity.sum()), 9)
    ((45, 1, 32), 1.0)
    """
    rate = meas.spinning_hz
    theta = math.radians(meas.rotor_angle_deg)
    ms = tuple(float(m) for m in ms)
    exact = method == "exact"
    if orientations is None:
        oset = _pick_orientations(meas, frame.symmetry, exact and rate > 0)
    else:
        oset = orientations
        if _COVER[oset.symmetry] < _COVER[frame.symmetry]:
            raise ModelError(
                f"orientations: the set '{oset.name}' covers only the {oset.symmetry}, but this site needs a "
                f"{frame.symmetry} set (its shift and EFG tensors are not coaxial)"
            )
    dirs = oset.vectors
    ideal = _ideal_weights(frame.spin, ms)
    norm = sum(transition_intensity(frame.spin, m) for m in ms)

    def produce(phases: int, angle: float):
        if exact:
            off, inten = exact_offsets(frame, dirs, ms, rotor_angle_rad=angle, phases=phases)
            w = inten.mean(axis=2) / norm
            return off, w
        off = perturbative_offsets(frame, dirs, ms, rotor_angle_rad=angle, phases=phases)
        return off, np.broadcast_to(ideal, off.shape[:2]).copy()

    def spin_lines(phases: int):
        if exact:
            off, w = produce(phases, theta)
            mean, amp = rotor_lines(off, rate)
        else:
            mean, amp = perturbative_sidebands(frame, dirs, ms, rotor_angle_rad=theta, phases=phases, rate_hz=rate)
            w = np.broadcast_to(ideal, mean.shape).copy()
        return mean, amp, w

    if rate == 0.0:
        off, w = produce(1, 0.0)
        mean, amp, phases = off[:, :, 0].copy(), np.ones(off.shape[:2] + (1,)), 1
    elif math.isinf(rate):
        phases = INFINITE_RATE_PHASES_EXACT if exact else INFINITE_RATE_PHASES
        off, w = produce(phases, theta)
        mean, amp = off.mean(axis=2), np.ones(off.shape[:2] + (1,))
    else:
        if meas.rotor_phases == "auto":
            probe = perturbative_offsets(frame, dirs, ms, rotor_angle_rad=theta, phases=16)
            spread = float(np.max(np.abs(probe - probe.mean(axis=2, keepdims=True)))) if probe.size else 0.0
            phases = choose_rotor_phases(spread, rate)
            while True:
                mean, amp, w = spin_lines(phases)
                summary = _k._band_summary(amp, np.ascontiguousarray(oset.weights[:, None] * w), mean)
                nb = np.fft.fftfreq(phases, 1.0 / phases)
                aliased = summary[0][np.abs(nb) > 3 * phases / 8].sum() / summary[0].sum()
                if aliased <= ALIAS_TOLERANCE or phases >= MAX_AUTO_PHASES:
                    break
                phases *= 2
        else:
            phases = int(meas.rotor_phases)
            mean, amp, w = spin_lines(phases)
    # normalise so that the site's lines sum to 1 over the orientation set
    wv = np.ascontiguousarray(oset.weights[:, None] * w)
    inten, pos, amax = _k._band_summary(np.ascontiguousarray(amp), wv, np.ascontiguousarray(mean))
    total = float(inten.sum())
    if total > 0:
        w = w / total
        inten = inten / total
        pos = pos / total
    return SiteLines(oset, ms, mean, amp, w, rate, method, phases, inten, pos, amax)


def _resolution_hz(axis: Axis) -> float:
    return 0.5 * axis.dx_hz


def simulate(model: Model, *, orientations: OrientationSet | None = None) -> Spectrum:
    """Simulate the spectrum of a model.

    Parameters
    ----------
    model : Model
        Nucleus, measurement and sites (:func:`powderspin.model.load_model`).
    orientations : OrientationSet, optional
        Override the measurement's orientation choice.

    Returns
    -------
    Spectrum
        Axis in Hz and ppm, per-site and summed intensities (densities per ppm;
        each site integrates to its weight), the metadata that made it and,
        under finite-rate spinning, the sideband table.

    References
    ----------
    D. W. Alderman, M. S. Solum, D. M. Grant, J. Chem. Phys. 84 (1986) 3717
    (triangle interpolation); M. H. Levitt, J. Magn. Reson. 82 (1989) 427
    (sidebands); A. Samoson, Chem. Phys. Lett. 119 (1985) 29 (second-order
    quadrupolar shifts).

    Examples
    --------
    >>> from powderspin.model import parse_model
    >>> m = parse_model({"nucleus": "27Al",
    ...                  "measurement": {"field_tesla": 14.1, "points": 512},
    ...                  "site": [{"shift_ppm": 60.0, "cq_mhz": 3.0, "eta_q": 0.3}]})
    >>> spec = simulate(m)
    >>> round(spec.area(), 3)
    1.0
    """
    meas = model.measurement
    nuc = model.nucleus
    ms = selected_transitions(nuc.spin, meas.transitions)
    notes: list[str] = []
    frames = [site_frame(s, nuc, meas.field_tesla) for s in model.sites]
    nu_ref = frames[0].nu0_hz

    requested = meas.method
    lines: list[SiteLines] = []
    for fr in frames:
        method = "exact" if requested == "exact" and fr.k_hz != 0.0 else "perturbation"
        lines.append(site_lines(fr, ms, meas, method, orientations))

    def span_of(ls):
        lo = min(l.frequency_range()[0] for l in ls)
        hi = max(l.frequency_range()[1] for l in ls)
        widest = max(s.lorentz_hz + meas.lorentz_hz + 2 * math.hypot(s.gauss_hz, meas.gauss_hz)
                     for s in model.sites)
        return lo - 4 * widest, hi + 4 * widest

    axis = make_axis(meas.points, nu_ref, meas.center_ppm, meas.width_ppm, span_of(lines))

    if requested == "auto":
        theta = math.radians(meas.rotor_angle_deg)
        for i, (fr, site) in enumerate(zip(frames, model.sites)):
            if fr.k_hz == 0.0:
                continue
            if meas.is_static:
                err = needs_exact(fr, ms)
            else:
                err = needs_exact(fr, ms, rotor_angle_rad=theta, phases=8)
            tol = _resolution_hz(axis)
            if err > tol:
                notes.append(
                    f"site '{site.label}': second-order perturbation theory is off by up to {err:.3g} Hz "
                    f"(C_Q/nu0 = {abs(site.cq_hz) / fr.nu0_hz:.3g}), more than half a point "
                    f"({tol:.3g} Hz); using exact diagonalisation"
                )
                lines[i] = site_lines(fr, ms, meas, "exact", orientations)
        if meas.center_ppm is None or meas.width_ppm is None:
            axis = make_axis(meas.points, nu_ref, meas.center_ppm, meas.width_ppm, span_of(lines))

    ys = []
    sidebands: list[SidebandRow] = []
    for site, sl in zip(model.sites, lines):
        frac = bin_lines(axis, sl.mean, sl.amp, sl.weights, sl.orientations, meas.binning,
                         sl.rate_hz if math.isfinite(sl.rate_hz) else 0.0, BIN_CUTOFF)
        y = frac * site.weight / axis.dx_ppm
        lw = site.lorentz_hz + meas.lorentz_hz
        gw = math.hypot(site.gauss_hz, meas.gauss_hz)
        y = broaden(y, axis.dx_hz, lw, gw)
        ys.append(y)
        if sl.amp.shape[2] > 1:
            sidebands.extend(_sideband_rows(site.label, site.weight, sl, nu_ref))
    ys = np.array(ys)
    meta = {
        "powderspin_version": __version__,
        "nucleus": nuc.name,
        "spin": nuc.spin_label,
        "field_tesla": meas.field_tesla,
        "nu_ref_hz": nu_ref,
        "spinning_hz": "inf" if meas.is_infinite_rate else meas.spinning_hz,
        "rotor_angle_deg": meas.rotor_angle_deg if not meas.is_static else "n/a (static)",
        "transitions": [f"{_frac(m)}:{_frac(m - 1)}" for m in ms],
        "method": {s.label: l.method for s, l in zip(model.sites, lines)},
        "orientations": {s.label: f"{l.orientations.name} ({l.orientations.size} directions)"
                         for s, l in zip(model.sites, lines)},
        "rotor_phases": {s.label: l.phases for s, l in zip(model.sites, lines)},
        "binning": meas.binning,
        "lorentz_hz": meas.lorentz_hz,
        "gauss_hz": meas.gauss_hz,
        "points": axis.points,
        "intensity_units": "density per ppm; each site integrates to its weight",
        "notes": notes,
    }
    if model.source:
        meta["model"] = model.source
    return Spectrum(axis.hz, axis.ppm, ys.sum(axis=0), tuple(s.label for s in model.sites), ys, meta,
                    tuple(sidebands))


def _frac(m: float) -> str:
    if abs(m - round(m)) < 1e-12:
        return str(int(round(m)))
    return f"{int(round(2 * m))}/2"


def _sideband_rows(label: str, weight: float, sl: SiteLines, nu_ref: float, min_intensity: float = 1e-4):
    """Sideband table rows: integrated intensity per band and its intensity-weighted position."""
    p = sl.amp.shape[2]
    n = np.fft.fftfreq(p, 1.0 / p).astype(int)
    inten, pos = sl.band_intensity, sl.band_position_hz
    rows = []
    for k in np.argsort(n):
        if inten[k] < min_intensity or inten[k] <= 0:
            continue
        hz = pos[k] / inten[k] + n[k] * sl.rate_hz
        rows.append(SidebandRow(label, int(n[k]), float(hz), float(hz / nu_ref * 1e6), float(inten[k] * weight)))
    return rows
