"""The per-site stage: a hashable job -> per-orientation lines -> a rendered lineshape.

Everything that changes a site's lines is in one frozen, hashable
:class:`SiteJob` (nucleus, field, spinning rate and angle, transitions, the
resolved method and orientation set, and the site's tensors).  The same value
keys the in-memory memo of a fit and the persistent lineshape library.

:func:`compute_lines` turns a job into :class:`SiteLines` (the producer and the
sideband consumer: line positions, sideband intensities and weights for every
orientation), and :func:`render_lines` turns lines into a lineshape on an axis
(binning with triangle interpolation, the site's weight, a translation, and
broadening).  Rendering can be repeated without recomputing frequencies: a
fit that changes only broadening, weights or an isotropic shift calls the
producers once.

Why the isotropic shift is a translation: for a single-quantum transition the
shift enters the high-field offset as ``nu0 * 1e-6 * d_zz``, whose isotropic
part is the same for every orientation and rotor phase, so it moves every line
and sideband by the same amount.  The exact route keeps it inside the
Hamiltonian (it changes the effective Zeeman frequency by a relative 1e-6 *
delta_iso, which scales the second-order terms), so a job of the exact route
carries the isotropic shift and a translation only adds what differs from it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from ..model.values import Measurement, ModelError, Site, selected_transitions
from ..physics.nuclides import Nuclide, get_nuclide
from ..physics.orientations import OrientationSet, orientation_set_by_name, select_orientations, symmetry_rank
from ..physics.tensors import ShiftTensor
from ..progress import emit
from . import _kernels as _k
from .frequencies import (
    SiteFrame,
    corrected_exact_offsets,
    exact_offsets,
    fit_exact_correction,
    perturbation_error_hz,
    perturbative_offsets,
    site_frame,
    transition_intensity,
)
from .lineshape import Axis, bin_lines, broaden, tent_binned
from .pulses import PulseSequence, site_excitation
from .spectrum import SidebandRow
from .spinning import (
    MAX_ROTOR_PHASES,
    choose_rotor_phases,
    perturbative_sidebands,
    rotor_lines,
    trajectory_sidebands,
)

__all__ = [
    "SiteJob",
    "choose_orientations",
    "ORIENTATION_TARGET",
    "ORIENTATION_TARGET_MAX",
    "SiteLines",
    "site_job",
    "choose_method",
    "compute_lines",
    "render_lines",
    "RenderedSite",
    "estimate_span_hz",
    "quadrupole_to_zeeman_ratio",
    "check_high_field",
    "STRONG_COUPLING_NOTE_RATIO",
    "STRONG_COUPLING_LIMIT_RATIO",
    "sideband_rows",
    "pulse_sequence",
]

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
#: largest sideband-intensity array kept in memory per site (bytes); beyond it
#: the lines are recomputed chunk by chunk when they are rendered
LINES_MEMORY_BUDGET = 512 * 1024 * 1024
#: phase points (orientations x transitions x phases) per chunk of work: small
#: enough that Ctrl-C and progress reports come quickly, and that a chunk's arrays (16 MB) stay
#: below the C library's threshold for fresh memory maps, so chunks reuse memory instead of
#: faulting in new pages (2^23 points took 15 % longer at 4096 phases)
_CHUNK_POINTS = 1 << 21
#: directions per block of finite-pulse excitation (a block takes well under a second)
_PULSE_BLOCK = 2048
#: accuracy target of ``orientations = "auto"``: estimated RMS difference from a converged
#: powder average, as a fraction of the lineshape's maximum, at the model's axis and broadening
ORIENTATION_TARGET = 3e-3
#: and the largest single-point difference allowed (fraction of the maximum): singularities such
#: as the horns of an eta = 0 pattern converge last
ORIENTATION_TARGET_MAX = 1e-2
#: the ladder of triangulated sets (subdivisions per octahedron edge) "auto" chooses from; each
#: step doubles the subdivisions, so the tent interpolation error (second order in the triangle
#: size) falls about fourfold per step
ORIENTATION_LADDER = (12, 24, 48, 96, 192, 384)
#: nu_Q / nu0 above which the terminal is told that the quadrupolar coupling
#: is no longer small next to the Zeeman interaction
STRONG_COUPLING_NOTE_RATIO = 0.1
#: nu_Q / nu0 above which a simulation is refused unless asked for: the levels
#: are then far from Zeeman states, so "transition m -> m-1", its offset from
#: nu_ref and its intensity |<m|I+|m-1>|^2 no longer describe a high-field
#: NMR spectrum
STRONG_COUPLING_LIMIT_RATIO = 0.5


# ---------------------------------------------------------------------------
# the job


@dataclass(frozen=True)
class SiteJob:
    """Everything that changes one site's lines in one measurement (hashable).

    Parameters
    ----------
    nucleus : str
        Nucleus name, e.g. ``"27Al"``.
    field_tesla : float
        B0 (T).
    spinning_hz : float
        0 static, a finite rate (Hz) or ``inf``.
    rotor_angle_deg : float
        Rotor angle (degrees); 0 for a static sample.
    transitions : tuple of float
        Upper level m of each transition m -> m-1.
    method : {"perturbation", "exact"}
        The producer (``"auto"`` is resolved before a job is made).
    orientations : str
        Name of the orientation set.
    rotor_phases : int or "auto"
        Rotor phases per period under finite-rate spinning (0 otherwise).
    cq_mhz, eta_q : float
        Quadrupolar coupling (MHz) and asymmetry (0 when C_Q = 0).
    aniso_ppm, eta_cs : float
        Shift anisotropy d_zz - d_iso (ppm) and asymmetry (Haeberlen).
    euler_deg : tuple of 3 float
        Shift frame relative to the EFG frame (degrees; zeros when either
        tensor has no orientation to refer to).
    iso_ppm : float
        Isotropic shift carried by the job: 0 for the perturbative route (a
        translation at render time), the site's shift for the exact route.
    pulse : PulseSequence or None
        Finite-pulse excitation (None: ideal small-tip intensities); its carrier
        offset is relative to the job's frequencies (see :func:`site_job`).

    Examples
    --------
    >>> from powderspin.model.values import Measurement, Site
    >>> job = site_job(Site(cq_mhz=3.0, eta_q=0.2), Measurement(14.1), get_nuclide("27Al"), "perturbation")
    >>> job.method, job.orientations, job.transitions
    ('perturbation', 'tri-octant-99', (0.5,))
    >>> job == site_job(Site(label="other", cq_mhz=3.0, eta_q=0.2, weight=5.0, shift=ShiftTensor(40.0)),
    ...                 Measurement(14.1, lorentz_hz=300.0), get_nuclide("27Al"), "perturbation")
    True
    """

    nucleus: str
    field_tesla: float
    spinning_hz: float
    rotor_angle_deg: float
    transitions: tuple
    method: str
    orientations: str
    rotor_phases: object
    cq_mhz: float = 0.0
    eta_q: float = 0.0
    aniso_ppm: float = 0.0
    eta_cs: float = 0.0
    euler_deg: tuple = (0.0, 0.0, 0.0)
    iso_ppm: float = 0.0
    pulse: PulseSequence | None = None

    def key(self) -> dict:
        """The job as a JSON-ready mapping (the lineshape library's key).

        Returns
        -------
        dict

        Examples
        --------
        >>> from powderspin.model.values import Measurement, Site
        >>> job = site_job(Site(cq_mhz=3.0), Measurement(9.4), get_nuclide("27Al"), "perturbation")
        >>> job.key()["nucleus"], job.key()["spinning_hz"]
        ('27Al', 0.0)
        """
        d = {f: getattr(self, f) for f in self.__dataclass_fields__}
        d["transitions"] = list(self.transitions)
        d["euler_deg"] = list(self.euler_deg)
        if self.pulse is None:
            del d["pulse"]  # ideal excitation: the key of every job made before pulses existed
        else:
            d["pulse"] = self.pulse.as_list()
        if math.isinf(self.spinning_hz):
            d["spinning_hz"] = "inf"
        return d

    @property
    def nuclide(self) -> Nuclide:
        """The :class:`~powderspin.physics.nuclides.Nuclide` of ``nucleus``.

        Returns
        -------
        Nuclide

        Examples
        --------
        >>> from powderspin.model.values import Measurement, Site
        >>> site_job(Site(), Measurement(9.4), get_nuclide("31P"), "perturbation").nuclide.spin
        0.5
        """
        return get_nuclide(self.nucleus)

    def frame(self) -> SiteFrame:
        """The site's tensors in its crystallite frame (for the producers).

        Returns
        -------
        SiteFrame

        Examples
        --------
        >>> from powderspin.model.values import Measurement, Site
        >>> f = site_job(Site(cq_mhz=3.0), Measurement(14.1), get_nuclide("27Al"), "perturbation").frame()
        >>> round(f.quad_constant_hz)
        150000
        """
        site = Site(shift=ShiftTensor(self.iso_ppm, self.aniso_ppm, self.eta_cs), cq_mhz=self.cq_mhz,
                    eta_q=self.eta_q, euler_deg=self.euler_deg)
        return site_frame(site, self.nuclide, self.field_tesla)


def _pick_orientations(meas: Measurement, symmetry: str, exact_spinning: bool) -> OrientationSet:
    o = meas.orientations
    interp = meas.binning == "interpolate"
    if isinstance(o, (int, np.integer)) and not isinstance(o, bool):
        return select_orientations(symmetry, int(o), interpolate=interp)
    if o in ("auto", "coarse", "medium", "fine"):
        # "auto" is resolved by accuracy in choose_orientations(); a job made without it uses "medium"
        return select_orientations(symmetry, "medium" if o == "auto" else o, interpolate=interp)
    s = orientation_set_by_name(str(o))
    _check_cover(s, symmetry, f"measurement: orientations = {o!r}")
    return s


def _check_cover(oset: OrientationSet, symmetry: str, where: str) -> None:
    if symmetry_rank(oset.symmetry) < symmetry_rank(symmetry):
        raise ModelError(
            f"{where}: the set '{oset.name}' covers only the {oset.symmetry}, but this site needs a "
            f"{symmetry} set (its shift and EFG tensors are not coaxial)"
        )


def site_job(site: Site, meas: Measurement, nucleus: Nuclide, method: str,
             orientations: OrientationSet | None = None, *, carry_shift: bool = False) -> SiteJob:
    """The job of one site in one measurement, for a given producer.

    Parameters
    ----------
    site : Site
        The site (its weight, label, broadening and, for the perturbative
        route, isotropic shift do not enter the job).
    meas : Measurement
        Field (T), spinning rate (Hz), rotor angle (degrees), transitions,
        orientation choice and rotor phases.
    nucleus : Nuclide
    method : {"perturbation", "exact"}
        The producer (see :func:`choose_method` for ``"auto"``).
    orientations : OrientationSet, optional
        Overrides the measurement's orientation choice.
    carry_shift : bool, optional
        Put the isotropic shift into the job for the perturbative route too
        (lines at their absolute positions, no translation when rendering).

    Returns
    -------
    SiteJob

    See Also
    --------
    compute_lines, choose_method

    Examples
    --------
    >>> from powderspin.model.values import Measurement, Site
    >>> job = site_job(Site(cq_mhz=3.0), Measurement(14.1, spinning_hz=10000.0), get_nuclide("27Al"),
    ...                "perturbation")
    >>> job.rotor_phases, round(job.rotor_angle_deg, 4)
    ('auto', 54.7356)
    """
    if method not in ("perturbation", "exact"):
        raise ModelError(f"method = {method!r} is not one of 'perturbation', 'exact' (resolve 'auto' first)")
    m_upper = selected_transitions(nucleus.spin, meas.transitions)
    quadrupolar = nucleus.spin > 0.5 and site.cq_mhz != 0.0
    if not quadrupolar:
        method = "perturbation"  # first-order shift is exact at high field
    frame = site_frame(site, nucleus, meas.field_tesla)
    exact_spinning = method == "exact" and meas.spinning_hz > 0
    if orientations is None:
        oset = _pick_orientations(meas, frame.symmetry, exact_spinning)
    else:
        oset = orientations
        _check_cover(oset, frame.symmetry, "orientations")
    rate = meas.spinning_hz
    static = rate == 0.0
    finite = not static and math.isfinite(rate)
    anisotropic = not site.shift.is_isotropic
    iso_job = site.shift.iso_ppm if (method == "exact" or carry_shift) else 0.0
    return SiteJob(
        nucleus=nucleus.name,
        field_tesla=meas.field_tesla,
        spinning_hz=rate,
        rotor_angle_deg=0.0 if static else meas.rotor_angle_deg,
        transitions=tuple(float(m) for m in m_upper),
        method=method,
        orientations=oset.name,
        rotor_phases=meas.rotor_phases if finite else 0,
        cq_mhz=site.cq_mhz if quadrupolar else 0.0,
        eta_q=site.eta_q if quadrupolar else 0.0,
        aniso_ppm=site.shift.aniso_ppm,
        eta_cs=site.shift.eta if anisotropic else 0.0,
        euler_deg=tuple(site.euler_deg) if (quadrupolar and anisotropic) else (0.0, 0.0, 0.0),
        iso_ppm=iso_job,
        pulse=pulse_sequence(site, meas, nucleus, iso_job),
    )


def pulse_sequence(site: Site, meas: Measurement, nucleus: Nuclide, job_iso_ppm: float = 0.0) -> PulseSequence | None:
    """The measurement's pulses as a :class:`~powderspin.engine.pulses.PulseSequence` for one site's job.

    The carrier offset is taken relative to the job's frequencies: the line sits at
    ``job offset + (delta_iso - job_iso_ppm) nu_ref 1e-6``, the carrier at ``carrier_ppm`` (or, when absent,
    at the site's isotropic shift: on resonance), so the rotating-frame offset is the job's offset less
    ``(carrier - delta_iso + job_iso_ppm) nu_ref 1e-6``.  On resonance the perturbative job does not depend on
    the isotropic shift.

    Parameters
    ----------
    site : Site
    meas : Measurement
    nucleus : Nuclide
    job_iso_ppm : float, optional
        Isotropic shift carried by the job (0 for the perturbative route).

    Returns
    -------
    PulseSequence or None
        None for ``pulse_sequence = "ideal"``.

    Examples
    --------
    >>> from powderspin.model.values import Measurement, Site
    >>> seq = pulse_sequence(Site(cq_mhz=3.0), Measurement(14.1, pulse_sequence="single", pulse_us=1.0, rf_khz=50.0),
    ...                      get_nuclide("27Al"))
    >>> seq.kind, seq.nu1_hz, seq.lengths_s, seq.carrier_offset_hz
    ('single', 50000.0, (1e-06,), 0.0)
    """
    if meas.pulse_sequence == "ideal":
        return None
    f = nucleus.larmor_hz(meas.field_tesla) * 1e-6
    carrier = meas.carrier_ppm if meas.carrier_ppm is not None else site.shift.iso_ppm
    offset = (carrier - site.shift.iso_ppm + job_iso_ppm) * f
    t1 = meas.pulse_us * 1e-6
    if meas.pulse_sequence == "single":
        lengths = (t1,)
    else:
        lengths = (t1, (meas.echo_pulse_us if meas.echo_pulse_us is not None else 2.0 * meas.pulse_us) * 1e-6)
    return PulseSequence(meas.pulse_sequence, meas.rf_khz * 1e3, lengths, (0.0, 0.0), 0.0 if offset == 0 else offset)


def choose_orientations(site: Site, meas: Measurement, nucleus: Nuclide, method: str, axis: Axis, *,
                        shift_hz: float = 0.0, lines_memo: dict | None = None,
                        target: float = ORIENTATION_TARGET) -> tuple[OrientationSet, float]:
    """Resolve ``orientations = "auto"``: the smallest set whose estimated error meets the target.

    For each set of :data:`ORIENTATION_LADDER` the site's lineshape is rendered
    on the model's axis with its broadening, by perturbation theory (the
    orientation-sampling error of the exact route follows the same frequency
    landscape), and compared with the lineshape from the next set, which has
    twice the subdivisions.  The tent interpolation converges as the square of
    the triangle size, so the error of the smaller set is estimated as 4/3 of
    the difference.  The first set whose estimated RMS error, relative to the
    lineshape's maximum, is at most ``target`` and whose largest estimated
    error is at most :data:`ORIENTATION_TARGET_MAX` is chosen.

    Parameters
    ----------
    site : Site
    meas : Measurement
    nucleus : Nuclide
    method : {"perturbation", "exact"}
        The producer the site will use.
    axis : Axis
        The axis (provisional when automatic) the spectrum is rendered on.
    shift_hz : float, optional
        The translation applied when rendering (Hz).
    lines_memo : dict, optional
        ``SiteJob -> SiteLines`` memo: the perturbative lines computed here are
        kept for reuse.
    target : float, optional
        Accuracy target (fraction of the maximum, RMS over the axis).

    Returns
    -------
    set : OrientationSet
    estimated_error : float
        The estimate for the chosen set (same measure as ``target``).

    References
    ----------
    D. W. Alderman, M. S. Solum, D. M. Grant, J. Chem. Phys. 84 (1986) 3717
    (triangle interpolation); L. F. Richardson, Phil. Trans. R. Soc. A 210
    (1911) 307 (error estimates from two step sizes) (from memory).

    Examples
    --------
    >>> from powderspin.engine.lineshape import make_axis
    >>> from powderspin.model.values import Measurement
    >>> from powderspin.model.modelfile import make_site
    >>> p = get_nuclide("31P")
    >>> ax = make_axis(1024, p.larmor_hz(9.4), center_ppm=0.0, width_ppm=300.0)
    >>> oset, err = choose_orientations(make_site(span_ppm=150.0, skew=0.3, gauss_hz=300.0),
    ...                                 Measurement(9.4, gauss_hz=0.0), p, "perturbation", ax)
    >>> err <= ORIENTATION_TARGET
    True
    """
    interp = meas.binning == "interpolate"
    frame = site_frame(site, nucleus, meas.field_tesla)
    lorentz = site.lorentz_hz + meas.lorentz_hz
    gauss = math.hypot(site.gauss_hz, meas.gauss_hz)
    known = []  # the previous set's lines: the next set holds its directions

    def shape(sub: int) -> tuple[OrientationSet, np.ndarray]:
        oset = select_orientations(frame.symmetry, sub, interpolate=interp)
        job = site_job(site, meas, nucleus, "perturbation", oset)
        lines = lines_memo.get(job) if lines_memo is not None else None
        memo: dict = {}
        if lines is None:
            # a set too large to keep is binned while it is computed (not computed again to render)
            shifted = _shifted(axis, shift_hz)
            lines, frac = _compute_lines(job, oset, None, "", LINES_MEMORY_BUDGET,
                                         render=(shifted, meas.binning, BIN_CUTOFF),
                                         known=known[-1] if known else None)
            if frac is not None:
                memo[_binned_key(job, shifted, meas.binning, BIN_CUTOFF)] = frac
            if lines_memo is not None:
                lines_memo[job] = lines
        y = render_lines(lines, axis, shift_hz=shift_hz, lorentz_hz=lorentz, gauss_hz=gauss,
                         binning=meas.binning, memo=memo).intensity
        known[:] = [lines]
        return oset, y

    prev_set, prev = shape(ORIENTATION_LADDER[0])
    err = math.inf
    for sub in ORIENTATION_LADDER[1:]:
        cur_set, cur = shape(sub)
        top = float(np.max(np.abs(cur)))
        if top <= 0:
            return prev_set, 0.0
        err = 4.0 / 3.0 * float(np.sqrt(np.mean((prev - cur) ** 2))) / top
        worst = 4.0 / 3.0 * float(np.max(np.abs(prev - cur))) / top
        if err <= target and worst <= ORIENTATION_TARGET_MAX:
            return prev_set, err
        prev_set, prev = cur_set, cur
    # the finest pair did not meet the target: use the finest set; its error is about a quarter
    return prev_set, err / 4.0


# ---------------------------------------------------------------------------
# strong coupling and the method decision


def quadrupole_to_zeeman_ratio(site: Site, nucleus: Nuclide, field_tesla: float) -> float:
    """nu_Q / nu0 with nu_Q = 3 |C_Q| / (2I(2I-1)): how far the high-field picture holds.

    Parameters
    ----------
    site : Site
    nucleus : Nuclide
    field_tesla : float
        B0 (T).

    Returns
    -------
    float
        0 for spin 1/2 or C_Q = 0.  Second-order perturbation theory needs it
        well below 0.1; the high-field picture itself (levels close to
        Zeeman states) needs it well below 1.

    References
    ----------
    A. Abragam, *The Principles of Nuclear Magnetism* (1961), chapter on
    electric quadrupole effects (from memory).

    Examples
    --------
    >>> from powderspin.model.values import Site
    >>> round(quadrupole_to_zeeman_ratio(Site(cq_mhz=500.0), get_nuclide("27Al"), 9.4), 2)
    0.72
    """
    spin = nucleus.spin
    if spin <= 0.5 or site.cq_mhz == 0.0:
        return 0.0
    nu_q = 3.0 * abs(site.cq_hz) / (2 * spin * (2 * spin - 1))
    return nu_q / nucleus.larmor_hz(field_tesla)


def check_high_field(sites, nucleus: Nuclide, field_tesla: float, *, allow_strong_coupling: bool = False
                     ) -> list[str]:
    """Say plainly where the high-field picture weakens; refuse where it fails.

    Parameters
    ----------
    sites : sequence of Site
    nucleus : Nuclide
    field_tesla : float
    allow_strong_coupling : bool, optional
        Compute even beyond :data:`STRONG_COUPLING_LIMIT_RATIO`.

    Returns
    -------
    list of str
        Notes for sites with nu_Q/nu0 above :data:`STRONG_COUPLING_NOTE_RATIO`.

    Raises
    ------
    ModelError
        For a site beyond the limit, unless allowed; the message names the
        site, the ratio, the limit and how to go on.

    Examples
    --------
    >>> from powderspin.model.values import Site
    >>> check_high_field([Site(cq_mhz=3.0)], get_nuclide("27Al"), 9.4)
    []
    """
    notes = []
    nu0 = nucleus.larmor_hz(field_tesla)
    for s in sites:
        r = quadrupole_to_zeeman_ratio(s, nucleus, field_tesla)
        if r <= STRONG_COUPLING_NOTE_RATIO:
            continue
        text = (f"site '{s.label}': the quadrupolar frequency nu_Q is {r:.2g} of the Larmor frequency "
                f"(C_Q = {s.cq_mhz:g} MHz, nu0 = {nu0 / 1e6:.4g} MHz at {field_tesla:g} T)")
        if r > STRONG_COUPLING_LIMIT_RATIO and not allow_strong_coupling:
            raise ModelError(
                text + f"; beyond nu_Q/nu0 = {STRONG_COUPLING_LIMIT_RATIO:g} the levels are far from Zeeman states "
                "and a high-field NMR spectrum no longer describes the sample (check cq_mhz and field_tesla; "
                "pass --allow-strong-coupling / allow_strong_coupling=True to compute anyway)"
            )
        notes.append(text + ": exact diagonalisation is used; intensities assume levels close to Zeeman states")
    return notes


def choose_method(site: Site, meas: Measurement, nucleus: Nuclide, resolution_hz: float) -> tuple[str, str]:
    """Resolve ``method = "auto"`` for one site: perturbation theory unless it is off by more than the resolution.

    Parameters
    ----------
    site : Site
    meas : Measurement
    nucleus : Nuclide
    resolution_hz : float
        Half an axis point (Hz): the error perturbation theory may make.

    Returns
    -------
    method : {"perturbation", "exact"}
    note : str
        Why the exact route was chosen (empty otherwise).

    References
    ----------
    J. A. Weil, J. R. Bolton, *Electron Paramagnetic Resonance* (2007)
    (exact diagonalisation of spin Hamiltonians) (from memory).

    Examples
    --------
    >>> from powderspin.model.values import Measurement, Site
    >>> al = get_nuclide("27Al")
    >>> choose_method(Site(cq_mhz=3.0), Measurement(14.1), al, 50.0)[0]
    'perturbation'
    >>> choose_method(Site(cq_mhz=40.0), Measurement(9.4), al, 50.0)[0]
    'exact'
    """
    if meas.method != "auto":
        return meas.method, ""
    if nucleus.spin <= 0.5 or site.cq_mhz == 0.0:
        return "perturbation", ""
    frame = site_frame(site, nucleus, meas.field_tesla)
    m_upper = selected_transitions(nucleus.spin, meas.transitions)
    if meas.is_static:
        err = perturbation_error_hz(frame, m_upper)
    else:
        err = perturbation_error_hz(frame, m_upper, rotor_angle_rad=math.radians(meas.rotor_angle_deg), phases=8)
    if err > resolution_hz:
        return "exact", (
            f"site '{site.label}': second-order perturbation theory is off by up to {err:.3g} Hz "
            f"(C_Q/nu0 = {abs(site.cq_hz) / frame.nu0_hz:.3g}), more than half a point ({resolution_hz:.3g} Hz); "
            "using exact diagonalisation"
        )
    return "perturbation", ""


def estimate_span_hz(site: Site, meas: Measurement, nucleus: Nuclide) -> tuple[float, float]:
    """A quick estimate of the frequency range (Hz) a site's lines cover.

    Perturbative offsets on the probe directions (and 8 rotor phases when
    spinning: the sideband manifold follows the static pattern's extent,
    M. M. Maricq, J. S. Waugh, J. Chem. Phys. 70 (1979) 3300).  Used to size
    a provisional axis before any lines are computed.

    Parameters
    ----------
    site : Site
    meas : Measurement
    nucleus : Nuclide

    Returns
    -------
    tuple of 2 float
        (lowest, highest) offset from nu_ref (Hz), isotropic shift included.

    Examples
    --------
    >>> from powderspin.model.values import Measurement
    >>> from powderspin.model.modelfile import make_site
    >>> lo, hi = estimate_span_hz(make_site(span_ppm=100.0, skew=0.0), Measurement(9.4), get_nuclide("31P"))
    >>> lo < 0 < hi
    True
    """
    from .frequencies import probe_directions

    frame = site_frame(site, nucleus, meas.field_tesla)
    m_upper = selected_transitions(nucleus.spin, meas.transitions)
    d = probe_directions()
    if meas.is_static:
        off = perturbative_offsets(frame, d, m_upper)
    else:
        off = perturbative_offsets(frame, d, m_upper, rotor_angle_rad=math.radians(meas.rotor_angle_deg), phases=8)
        if meas.is_infinite_rate:
            off = off.mean(axis=2)
    return float(off.min()), float(off.max())


# ---------------------------------------------------------------------------
# lines


@dataclass(frozen=True, eq=False)
class SiteLines:
    """Per-orientation lines of one site (the consumer's output).

    Attributes
    ----------
    job : SiteJob
        What was computed.
    orientations : OrientationSet
        The n_v directions (rotor axis or B0 in the crystallite frame) and
        their weights.
    transitions : tuple of float
        Upper level m of each transition m -> m-1.
    mean : ndarray (n_v, n_t)
        Line (centre-band) positions, Hz offsets from nu_ref at the job's
        isotropic shift.
    intensity : ndarray (n_v, n_t, P) or None
        Sideband intensities |F_n|^2 (P = 1 when static or infinitely fast),
        band n at index ``n mod P``; None when the array would exceed
        :data:`LINES_MEMORY_BUDGET` (rendering then recomputes it chunk by
        chunk).
    weights : ndarray (n_v, n_t)
        Transition weights, normalised so the site's lines sum to 1 over the
        orientation set.
    rate_hz : float
        Spinning rate (0 static, inf infinitely fast).
    method : str
        "perturbation" or "exact".
    phases : int
        Rotor phases sampled per period.
    band_intensity, band_position_hz, band_max : ndarray (P,)
        Per-band summaries over the powder: integrated intensity,
        intensity-weighted position sum (Hz) and largest single-line
        intensity of each band n (index ``n mod P``).
    notes : tuple of str
        What the user should know (aliasing at a fixed number of phases, ...).
    excited_fraction : float
        With finite pulses, the site's observed intensity over the ideal one (the lines then sum to it);
        1 for ideal excitation.

    References
    ----------
    M. H. Levitt, J. Magn. Reson. 82 (1989) 427 (gamma-averaged sideband
    intensities); M. Edén, M. H. Levitt, J. Magn. Reson. 132 (1998) 220
    (powder averaging).

    Examples
    --------
    >>> from powderspin.model.values import Measurement, Site
    >>> job = site_job(Site(shift=ShiftTensor(0.0, 50.0, 0.0)), Measurement(9.4, orientations=8),
    ...                get_nuclide("31P"), "perturbation")
    >>> sl = compute_lines(job)
    >>> sl.method, sl.phases, sl.mean.shape, sl.intensity.shape
    ('perturbation', 1, (45, 1), (45, 1, 1))
    """

    job: SiteJob
    orientations: OrientationSet
    transitions: tuple
    mean: np.ndarray
    intensity: np.ndarray | None
    weights: np.ndarray
    rate_hz: float
    method: str
    phases: int
    band_intensity: np.ndarray
    band_position_hz: np.ndarray
    band_max: np.ndarray
    notes: tuple = field(default=())
    excited_fraction: float = 1.0

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
        >>> from powderspin.model.values import Measurement, Site
        >>> meas = Measurement(9.4, spinning_hz=4000.0, rotor_phases=16, orientations=8)
        >>> sl = compute_lines(site_job(Site(shift=ShiftTensor(0.0, 50.0, 0.0)), meas, get_nuclide("31P"),
        ...                             "perturbation"))
        >>> sl.band_offsets()[:3].tolist(), float(sl.band_offsets()[-1])
        ([0.0, 4000.0, 8000.0], -4000.0)
        """
        p = self.phases
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
            (lowest, highest) line position (Hz offsets from nu_ref at the
            job's isotropic shift), sidebands included.

        Examples
        --------
        >>> from powderspin.model.values import Measurement, Site
        >>> job = site_job(Site(shift=ShiftTensor(0.0, 50.0, 0.0)), Measurement(9.4, orientations=8),
        ...                get_nuclide("31P"), "perturbation")
        >>> sl = compute_lines(job)
        >>> nu0 = get_nuclide("31P").larmor_hz(9.4)
        >>> [round(x / nu0 * 1e6, 6) for x in sl.frequency_range()]   # ppm: d_perp, d_par
        [-25.0, 50.0]
        """
        off = self.band_offsets()
        keep = np.array([True]) if self.phases == 1 else self.band_max > cutoff
        lo = self.mean.min() + off[keep].min()
        hi = self.mean.max() + off[keep].max()
        return float(lo), float(hi)


def _chunks(n: int, size: int):
    size = max(1, int(size))
    for start in range(0, n, size):
        yield start, min(n, start + size)


def _ideal_weights(spin: float, m_upper) -> np.ndarray:
    w = np.array([transition_intensity(spin, m) for m in m_upper])
    return w / w.sum()


class _Binner:
    """Bins lines while a pass produces them, in orientation order, keeping only a window of orientations.

    With ``"interpolate"`` a triangle is binned as soon as the chunk holding its last vertex has arrived
    (triangles sorted by their largest vertex index), and a vertex is dropped once no triangle still to
    come uses it: each orientation's lines are computed once and at most a chunk plus one row of the
    triangulation is held.  The result equals :func:`~powderspin.engine.lineshape.bin_lines` on the
    whole set (to rounding: the triangles are summed in another order).
    """

    def __init__(self, oset: OrientationSet, axis: Axis, binning: str, rate_hz: float, cutoff: float,
                 weights: np.ndarray | None = None):
        self.oset = oset
        self.axis = axis
        self.interpolate = binning == "interpolate"
        if binning not in ("interpolate", "histogram"):
            raise ValueError(f"binning = {binning!r} is not one of 'interpolate', 'histogram'")
        if self.interpolate and not oset.has_triangles:
            raise ValueError(f"binning = 'interpolate' needs a triangulated orientation set; '{oset.name}' has none "
                             "(use binning = 'histogram')")
        self.rate = float(rate_hz)
        self.cutoff = float(cutoff)
        self.weights = weights  # given: used instead of the pass's weights (already normalised lines)
        self.out = np.zeros(axis.points)
        if self.interpolate:
            tris = np.asarray(oset.triangles, dtype=np.int64)
            last = tris.max(axis=1)
            order = np.argsort(last, kind="stable")
            self.tris = np.ascontiguousarray(tris[order])
            self.tri_w = np.ascontiguousarray(np.asarray(oset.triangle_weights, dtype=float)[order])
            self.last = last[order]
            # the smallest vertex index any triangle from position j on still needs
            first = tris.min(axis=1)[order]
            self.needed_from = np.minimum.accumulate(first[::-1])[::-1] if first.size else first
            self.done = 0  # triangles binned so far (in sorted order)
            self.start = 0  # vertex index of the window's first row
            self.win = None  # (mean, amp, weights) of vertices start ... end

    def add(self, a: int, b: int, mean: np.ndarray, amp: np.ndarray, w: np.ndarray) -> None:
        """Lines (mean (n, T), amp (n, T, P), weights (n, T)) of orientations a ... b - 1, in order."""
        if self.weights is not None:
            w = self.weights[a:b]
        ax = self.axis
        mean = np.ascontiguousarray(mean, dtype=float)
        amp = np.ascontiguousarray(amp, dtype=float)
        w = np.ascontiguousarray(w, dtype=float)
        if not self.interpolate:
            vw = np.ascontiguousarray(self.oset.weights[a:b], dtype=float)
            self.out += _k._bin_histogram(mean, amp, w, vw, self.rate, ax.left_edge_hz, ax.dx_hz, ax.points)
            return
        if self.win is None:
            self.start = a
            self.win = (mean, amp, w)
        else:
            self.win = tuple(np.concatenate((x, y)) for x, y in zip(self.win, (mean, amp, w)))
        m = self.tris.shape[0]
        upto = int(np.searchsorted(self.last, b, side="left"))  # triangles whose vertices all arrived
        if upto > self.done:
            t = np.ascontiguousarray(self.tris[self.done:upto] - self.start)
            self.out += tent_binned(ax, *self.win, t, self.tri_w[self.done:upto], self.rate, self.cutoff)
            self.done = upto
        keep = int(self.needed_from[upto]) if upto < m else b
        if keep > self.start:
            self.win = tuple(np.ascontiguousarray(x[keep - self.start:]) for x in self.win)
            self.start = keep


class _Producer:
    """Lines of a job for any subset of its orientations (used by compute and by streamed rendering)."""

    def __init__(self, job: SiteJob, oset: OrientationSet):
        self.job = job
        self.oset = oset
        self.frame = job.frame()
        self.m_upper = job.transitions
        self.exact = job.method == "exact"
        self.theta = math.radians(job.rotor_angle_deg)
        self.rate = job.spinning_hz
        self.ideal = _ideal_weights(self.frame.spin, self.m_upper)
        self.norm = sum(transition_intensity(self.frame.spin, m) for m in self.m_upper)
        # the fast exact route: second order plus a fitted correction (None: diagonalise everywhere)
        self.correction = fit_exact_correction(self.frame, self.m_upper) if self.exact else None
        # phases that hold the corrected trajectory exactly (a trigonometric polynomial of the
        # correction's degree, at least the second order's 4)
        q = 16
        while self.correction is not None and q <= 2 * self.correction.degree:
            q *= 2
        self.exact_phases = q
        self.pulse = job.pulse

    def excitation(self, dirs: np.ndarray) -> np.ndarray:
        """Finite-pulse excitation (n, T) of the transitions for directions ``dirs`` (rotor-phase averaged).

        Computed in blocks of :data:`_PULSE_BLOCK` directions, so that Ctrl-C is answered within a fraction of a
        second.
        """
        out = np.empty((dirs.shape[0], len(self.m_upper)))
        for a, b in _chunks(dirs.shape[0], _PULSE_BLOCK):
            out[a:b] = site_excitation(self.frame, dirs[a:b], self.m_upper, self.pulse, method=self.job.method,
                                       rotor_angle_rad=self.theta, spinning=self.rate > 0)
        return out

    def chunk_size(self, phases: int) -> int:
        direct = self.exact and self.correction is None
        per = len(self.m_upper) * max(phases, 1) * (self.frame_dim() ** 2 if direct else 1)
        return max(16, _CHUNK_POINTS // per)

    def _exact(self, dirs: np.ndarray, rotor_angle_rad: float = 0.0, phases: int = 1):
        if self.correction is None:
            return exact_offsets(self.frame, dirs, self.m_upper, rotor_angle_rad=rotor_angle_rad, phases=phases)
        return corrected_exact_offsets(self.frame, dirs, self.m_upper, self.correction,
                                       rotor_angle_rad=rotor_angle_rad, phases=phases)

    def frame_dim(self) -> int:
        return int(round(2 * self.frame.spin + 1))

    def lines(self, dirs: np.ndarray, phases: int):
        """mean (n, T), intensity (n, T, P'), weights (n, T) for directions ``dirs``."""
        f, m_upper, rate = self.frame, self.m_upper, self.rate
        if rate == 0.0:
            if self.exact:
                off, inten = self._exact(dirs)
                w = inten[:, :, 0] / self.norm
            else:
                off = perturbative_offsets(f, dirs, m_upper)
                w = np.broadcast_to(self.ideal, off.shape[:2]).copy()
            return off[:, :, 0].copy(), np.ones(off.shape[:2] + (1,)), w
        if math.isinf(rate):
            if self.exact:
                q = phases if self.correction is None else max(phases, self.exact_phases)
                off, inten = self._exact(dirs, self.theta, q)
                w = inten.mean(axis=2) / self.norm
            else:
                off = perturbative_offsets(f, dirs, m_upper, rotor_angle_rad=self.theta, phases=phases)
                w = np.broadcast_to(self.ideal, off.shape[:2]).copy()
            return off.mean(axis=2), np.ones(off.shape[:2] + (1,)), w
        if self.exact:
            if self.correction is None:
                off, inten = exact_offsets(f, dirs, m_upper, rotor_angle_rad=self.theta, phases=phases)
                mean, amp = rotor_lines(off, rate)
            else:  # the trajectory at a few dozen phases holds it exactly; the bands follow at any P
                off, inten = self._exact(dirs, self.theta, self.exact_phases)
                mean, amp = trajectory_sidebands(off, rate, phases)
            w = inten.mean(axis=2) / self.norm
            return mean, amp, w
        mean, amp = perturbative_sidebands(f, dirs, m_upper, rotor_angle_rad=self.theta, phases=phases, rate_hz=rate)
        return mean, amp, np.broadcast_to(self.ideal, mean.shape).copy()

    def first_guess_phases(self) -> int:
        probe = perturbative_offsets(self.frame, self.oset.vectors[:: max(1, self.oset.size // 512)], self.m_upper,
                                     rotor_angle_rad=self.theta, phases=16)
        spread = float(np.max(np.abs(probe - probe.mean(axis=2, keepdims=True)))) if probe.size else 0.0
        return choose_rotor_phases(spread, self.rate)

    def reused_lines(self, dirs: np.ndarray, phases: int, rows: np.ndarray, known: SiteLines):
        """:meth:`lines` of ``dirs``, taking those with ``rows >= 0`` from ``known`` (perturbative lines of the
        same job on another set that holds these directions, at the same phases)."""
        have = rows >= 0
        if not have.any():
            return self.lines(dirs, phases)
        nt = len(self.m_upper)
        mean = np.empty((dirs.shape[0], nt))
        amp = np.empty((dirs.shape[0], nt, known.intensity.shape[2]))
        mean[have] = known.mean[rows[have]]
        amp[have] = known.intensity[rows[have]]
        if not have.all():
            m_c, a_c, _ = self.lines(dirs[~have], phases)
            mean[~have] = m_c
            amp[~have] = a_c
        return mean, amp, np.broadcast_to(self.ideal, mean.shape).copy()

    def pass_(self, phases: int, store: bool, progress=None, done0: int = 0, total: int = 0,
              binner: _Binner | None = None, known: tuple | None = None):
        """One pass over the orientation set at ``phases``: lines, band summaries, intensities if stored.

        ``binner`` (a :class:`_Binner`) receives every chunk of lines as it is computed; ``known =
        (rows, lines)`` gives the lines of the directions with ``rows >= 0`` (see :meth:`reused_lines`).
        """
        oset = self.oset
        n = oset.size
        nt = len(self.m_upper)
        p_out = phases if (self.rate > 0 and math.isfinite(self.rate)) else 1
        mean = np.empty((n, nt))
        w = np.empty((n, nt))
        amp = np.empty((n, nt, p_out)) if store else None
        inten = np.zeros(p_out)
        pos = np.zeros(p_out)
        amax = np.zeros(p_out)
        size = self.chunk_size(phases)
        ideal_total = 0.0
        for a, b in _chunks(n, size):
            if known is None:
                m_c, a_c, w_c = self.lines(oset.vectors[a:b], phases)
            else:
                m_c, a_c, w_c = self.reused_lines(oset.vectors[a:b], phases, known[0][a:b], known[1])
            if self.pulse is not None:
                ideal_total += float((oset.weights[a:b, None, None] * w_c[:, :, None] * a_c).sum())
                w_c = w_c * self.excitation(oset.vectors[a:b])
            mean[a:b] = m_c
            w[a:b] = w_c
            if store:
                amp[a:b] = a_c
            if binner is not None:
                binner.add(a, b, m_c, a_c, w_c)
            wv = oset.weights[a:b, None] * w_c
            if p_out == 1:  # one band: plain sums (a parallel kernel is not worth starting)
                i_c = np.array([wv.sum()])
                p_c = np.array([(wv * m_c).sum()])
                x_c = np.ones(1)
            else:
                i_c, p_c, x_c = _k._band_summary(np.ascontiguousarray(a_c), np.ascontiguousarray(wv),
                                                 np.ascontiguousarray(m_c))
            inten += i_c
            pos += p_c
            np.maximum(amax, x_c, out=amax)
            if progress is not None:
                progress(done0 + b, total)
        self.ideal_total = ideal_total
        return mean, amp, w, inten, pos, amax


def compute_lines(job: SiteJob, *, orientations: OrientationSet | None = None, progress=None, label: str = "",
                  memory_budget_bytes: int = LINES_MEMORY_BUDGET) -> SiteLines:
    """Compute a site's lines: producer (perturbative or exact) and sideband consumer.

    Parameters
    ----------
    job : SiteJob
    orientations : OrientationSet, optional
        The set itself, for a set that cannot be rebuilt from its name (its
        name must equal ``job.orientations``).
    progress : callable, optional
        Subscriber of the progress protocol (:class:`powderspin.progress.ProgressEvent`): stage
        ``"lines"``, unit orientations, after each chunk of orientations.
    label : str, optional
        The site's label, carried by the progress events.
    memory_budget_bytes : int, optional
        Largest sideband-intensity array kept in memory.

    Returns
    -------
    SiteLines
        Line positions (Hz), sideband intensities and weights per
        orientation and transition, normalised to a total of 1.

    Raises
    ------
    ModelError
        When the sideband manifold needs more than
        :data:`~powderspin.engine.spinning.MAX_ROTOR_PHASES` rotor phases.

    See Also
    --------
    site_job, render_lines

    References
    ----------
    M. H. Levitt, J. Magn. Reson. 82 (1989) 427 (sidebands); J. R. Carson,
    Proc. IRE 10 (1922) 57 (first guess of the number of rotor phases).

    Examples
    --------
    >>> from powderspin.model.values import Measurement, Site
    >>> meas = Measurement(14.1, spinning_hz=10000.0, rotor_phases=32, orientations=8)
    >>> sl = compute_lines(site_job(Site(cq_mhz=3.0), meas, get_nuclide("27Al"), "perturbation"))
    >>> sl.intensity.shape, round(float(sl.band_intensity.sum()), 9)
    ((45, 1, 32), 1.0)
    """
    return _compute_lines(job, orientations, progress, label, memory_budget_bytes)[0]


def _shared_rows(new: OrientationSet, old: OrientationSet) -> np.ndarray:
    """For each direction of ``new``, its row in ``old`` (the same direction to 1e-9), else -1."""
    keys_new = np.round(np.asarray(new.vectors) * 1e9).astype(np.int64)
    keys_old = np.round(np.asarray(old.vectors) * 1e9).astype(np.int64)
    _, inverse = np.unique(np.concatenate((keys_old, keys_new)), axis=0, return_inverse=True)
    inverse = inverse.reshape(-1)
    lookup = np.full(inverse.max() + 1 if inverse.size else 0, -1, dtype=np.int64)
    lookup[inverse[:old.size][::-1]] = np.arange(old.size)[::-1]
    return lookup[inverse[old.size:]]


def _compute_lines(job: SiteJob, orientations: OrientationSet | None, progress, label: str,
                   memory_budget_bytes: int, render: tuple | None = None,
                   known: SiteLines | None = None) -> tuple[SiteLines, np.ndarray | None]:
    """:func:`compute_lines`, and with ``render = (axis, binning, cutoff)`` lines too large to keep binned
    while they are computed (one pass instead of a pass and a streamed render).

    ``known``: stored perturbative lines of the same job on another set (the orientation choice's
    previous set, whose directions the next set holds); a pass at their phases takes the shared
    directions' lines from them.

    Returns the lines and, when they were binned here, the binned fractions (as
    :func:`~powderspin.engine.lineshape.bin_lines` of the normalised lines gives them; else None).
    """
    if orientations is None:
        oset = orientation_set_by_name(job.orientations)
    else:
        if orientations.name != job.orientations:
            raise ValueError(f"orientations: set '{orientations.name}' is not the job's '{job.orientations}'")
        oset = orientations
    prod = _Producer(job, oset)
    rate = job.spinning_hz
    shared = None
    if (known is not None and known.intensity is not None and not prod.exact and known.job.method == job.method
            and replace(known.job, orientations=job.orientations) == job):
        shared = _shared_rows(oset, known.orientations)
    if progress is not None:
        events = progress

        def progress(done, total):  # the producer's (done, total) as events of the progress protocol
            emit(events, "lines", done, total, label=label, unit="orientations")
    nt = len(job.transitions)
    notes: list[str] = []
    n = oset.size
    if rate == 0.0 or math.isinf(rate):
        phases = 1 if rate == 0.0 else (INFINITE_RATE_PHASES_EXACT if prod.exact else INFINITE_RATE_PHASES)
        mean, amp, w, inten, pos, amax = prod.pass_(phases, True, progress, 0, n)
        phases_out = 1
        binner = None
    else:
        fixed = job.rotor_phases != "auto"
        phases = int(job.rotor_phases) if fixed else prod.first_guess_phases()
        if phases > MAX_ROTOR_PHASES:
            raise ModelError(
                f"measurement: the sideband manifold at {rate:g} Hz needs about {phases} rotor phases "
                f"(rotor_phases), more than the {MAX_ROTOR_PHASES} allowed; spin faster, select fewer transitions, "
                "or use the static or infinite-rate limit"
            )
        passes = 0
        while True:
            store = n * nt * phases * 8 <= memory_budget_bytes
            binner = None if store or render is None else _Binner(oset, render[0], render[1], rate, render[2])
            reuse = None
            if shared is not None and known.phases == phases:
                reuse = (shared, known)
            mean, amp, w, inten, pos, amax = prod.pass_(phases, store, progress, passes * n, (passes + 1) * n,
                                                        binner, reuse)
            passes += 1
            nb = np.fft.fftfreq(phases, 1.0 / phases)
            total = inten.sum()
            aliased = inten[np.abs(nb) > 3 * phases / 8].sum() / total if total > 0 else 0.0
            if aliased <= ALIAS_TOLERANCE:
                break
            if fixed:
                notes.append(
                    f"rotor_phases = {phases}: {aliased:.2g} of the intensity lies in the outermost sidebands, "
                    "where aliasing misplaces it; use rotor_phases = \"auto\" or a larger power of 2"
                )
                break
            if phases * 2 > MAX_ROTOR_PHASES:
                raise ModelError(
                    f"measurement: the sideband manifold at {rate:g} Hz needs more than {MAX_ROTOR_PHASES} rotor "
                    f"phases (rotor_phases; {aliased:.2g} of the intensity would alias at {phases}); spin faster, "
                    "select fewer transitions, or use the static or infinite-rate limit"
                )
            phases *= 2
        phases_out = phases
    total = float(inten.sum())
    excited = 1.0
    if job.pulse is not None:  # normalised by the ideal intensity: the lines sum to the excited fraction
        excited = total / prod.ideal_total if prod.ideal_total > 0 else 0.0
        total = prod.ideal_total
    frac = binner.out if binner is not None else None
    if total > 0:
        w = w / total
        inten = inten / total
        pos = pos / total
        if frac is not None:
            frac = frac / total
    return SiteLines(job, oset, tuple(job.transitions), mean, amp, w, rate, job.method, phases_out,
                     inten, pos, amax, tuple(notes), excited), frac


# ---------------------------------------------------------------------------
# rendering


@dataclass(frozen=True)
class RenderedSite:
    """A site's lineshape on an axis.

    Attributes
    ----------
    intensity : ndarray (points,)
        Density per ppm; integrates to the site's weight (less what lies off
        the axis).
    lost_fraction : float
        Fraction of the site's intensity that falls off the axis (lines
        outside it, and broadening tails beyond its edges).

    Examples
    --------
    >>> RenderedSite(np.zeros(4), 0.0).lost_fraction
    0.0
    """

    intensity: np.ndarray
    lost_fraction: float


def _shifted(axis: Axis, shift_hz: float) -> Axis:
    """The axis in the lines' frame (lines translated by ``shift_hz`` = the axis moved the other way)."""
    return replace(axis, center_hz=axis.center_hz - float(shift_hz))


def _binned_key(job: SiteJob, shifted: Axis, binning: str, cutoff: float) -> tuple:
    """Key of binned lines in a render memo."""
    return ("binned", job, shifted, binning, cutoff)


def render_lines(lines: SiteLines, axis: Axis, *, shift_hz: float = 0.0, weight: float = 1.0,
                 lorentz_hz: float = 0.0, gauss_hz: float = 0.0, binning: str = "interpolate",
                 cutoff: float = BIN_CUTOFF, memo: dict | None = None) -> RenderedSite:
    """Turn lines into a lineshape: bin, weigh, translate and broaden.

    Parameters
    ----------
    lines : SiteLines
    axis : Axis
    shift_hz : float, optional
        Translation of every line (Hz): the isotropic shift not carried by
        the job, plus any referencing offset.
    weight : float, optional
        The site's weight (its lines integrate to it).
    lorentz_hz, gauss_hz : float, optional
        Broadening (FWHM, Hz).
    binning : {"interpolate", "histogram"}
    cutoff : float, optional
        Triangle contributions at or below this fraction are skipped.
    memo : dict, optional
        Memo of binned lines shared between calls, keyed by the job, the
        translated axis and the binning: a fit that changes only weights or
        broadening bins each site once.

    Returns
    -------
    RenderedSite

    See Also
    --------
    compute_lines, powderspin.engine.lineshape.bin_lines

    References
    ----------
    D. W. Alderman, M. S. Solum, D. M. Grant, J. Chem. Phys. 84 (1986) 3717
    (triangle interpolation).

    Examples
    --------
    >>> from powderspin.engine.lineshape import make_axis
    >>> from powderspin.model.values import Measurement, Site
    >>> job = site_job(Site(shift=ShiftTensor(0.0, 50.0, 0.3)), Measurement(9.4, orientations=16),
    ...                get_nuclide("31P"), "perturbation")
    >>> lines = compute_lines(job)
    >>> ax = make_axis(512, get_nuclide("31P").larmor_hz(9.4), center_ppm=10.0, width_ppm=200.0)
    >>> r = render_lines(lines, ax, shift_hz=ax.nu_ref_hz * 1e-6 * 10.0, weight=2.0, lorentz_hz=100.0)
    >>> round(float(r.intensity.sum() * ax.dx_ppm), 2)
    2.0
    """
    shifted = _shifted(axis, shift_hz)
    rate = lines.rate_hz if math.isfinite(lines.rate_hz) else 0.0
    key = _binned_key(lines.job, shifted, binning, cutoff)
    frac = memo.get(key) if memo is not None else None
    if frac is None:
        if lines.intensity is not None:
            frac = bin_lines(shifted, lines.mean, lines.intensity, lines.weights, lines.orientations, binning, rate,
                             cutoff)
        else:
            frac = _render_streamed(lines, shifted, binning, rate, cutoff)
        if memo is not None:
            frac.flags.writeable = False
            memo[key] = frac
    inside = float(frac.sum())
    y = frac * weight / axis.dx_ppm
    y = broaden(y, axis.dx_hz, lorentz_hz, gauss_hz)
    kept = float(y.sum() * axis.dx_ppm / weight) if weight > 0 else inside
    if lines.job.pulse is not None and lines.excited_fraction > 0:  # lost relative to what was excited
        inside /= lines.excited_fraction
        kept /= lines.excited_fraction
    return RenderedSite(y, max(0.0, 1.0 - min(inside, kept)))


def _render_streamed(lines: SiteLines, axis: Axis, binning: str, rate: float, cutoff: float) -> np.ndarray:
    """Bin lines whose sideband intensities were too large to keep, recomputing them chunk by chunk."""
    oset = lines.orientations
    prod = _Producer(lines.job, oset)
    binner = _Binner(oset, axis, binning, rate, cutoff, weights=lines.weights)
    for a, b in _chunks(oset.size, prod.chunk_size(lines.phases)):
        m_c, amp_c, _ = prod.lines(oset.vectors[a:b], lines.phases)
        binner.add(a, b, m_c, amp_c, None)
    return binner.out


# ---------------------------------------------------------------------------
# sideband table


def sideband_rows(label: str, weight: float, lines: SiteLines, nu_ref: float, shift_hz: float = 0.0,
                  min_intensity: float = 1e-4) -> list[SidebandRow]:
    """Sideband table rows of one site: integrated intensity per band and its intensity-weighted position.

    Parameters
    ----------
    label : str
        The site's label.
    weight : float
        The site's weight (the rows' intensities sum to it).
    lines : SiteLines
    nu_ref : float
        Reference frequency (Hz), for the ppm column.
    shift_hz : float, optional
        Translation applied when rendering (Hz).
    min_intensity : float, optional
        Bands below this fraction of the site are left out.

    Returns
    -------
    list of SidebandRow

    References
    ----------
    J. Herzfeld, A. E. Berger, J. Chem. Phys. 73 (1980) 6021.

    Examples
    --------
    >>> from powderspin.model.modelfile import make_model
    >>> m = make_model("31P", {"field_tesla": 9.4, "spinning_hz": 5000.0, "points": 512},
    ...                [{"span_ppm": 100.0, "skew": 0.0}])
    >>> from powderspin.simulator import simulate
    >>> rows = simulate(m).sidebands
    >>> sorted({r.order for r in rows})[:3]
    [-4, -3, -2]
    """
    p = lines.phases
    n = np.fft.fftfreq(p, 1.0 / p).astype(int)
    inten, pos = lines.band_intensity, lines.band_position_hz
    rows = []
    for k in np.argsort(n):
        if inten[k] < min_intensity or inten[k] <= 0:
            continue
        hz = pos[k] / inten[k] + n[k] * lines.rate_hz + shift_hz
        rows.append(SidebandRow(label, int(n[k]), float(hz), float(hz / nu_ref * 1e6), float(inten[k] * weight)))
    return rows
