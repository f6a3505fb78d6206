"""Finite-pulse excitation: the spin density matrix propagated through real pulses, crystallite by crystallite.

Conventions
-----------
* Basis |I, m>, m = I, I-1, ..., -I (index 0 is m = +I), as in :mod:`powderspin.physics.spin`.
* Rotating frame at the carrier (transmitter) frequency; frequencies in Hz.  During a pulse
  ``H = diag(D) + nu1 (cos(phi) Ix + sin(phi) Iy)``: D are the level energies of the secular interactions
  (first-order quadrupolar in the crystallite's laboratory-frame orientation, the shift relative to the
  carrier, and, by default, the second-order quadrupolar shift of each level), the RF field nu1 (Hz) along
  the phase phi.  Everything is static during the pulse (a pulse of microseconds is short next to a rotor
  period; under spinning the excitation is averaged over the rotor phase at which the pulse arrives).
* The levels D are built from the offsets of all single-quantum transitions of the site's own producer
  (perturbation theory or exact diagonalisation, :mod:`powderspin.engine.frequencies`):
  ``D(I) = 0, D(m-1) = D(m) - offset(m -> m-1)``, less the carrier.  So the pulse sees exactly the
  frequencies the spectrum shows.
* Propagator ``U = exp(-i 2 pi H t)``; start ``rho = Iz`` (the high-temperature thermal deviation, in
  units of its own scale); a 90 degree pulse along x takes Iz to -Iy.
* Observed signal of transition m -> m-1: ``c <m-1|rho|m>`` with ``c = <m|I+|m-1>`` (coherence order -1
  detected).  Its absorptive part relative to the ideal experiment is the transition's *excitation*:

  - single pulse: the reference is a hard 90 degree pulse of the same phase, amplitude
    ``-i exp(i phi1) c^2 / 2``; so a hard pulse of tip angle theta gives ``sin(theta)`` for every
    transition;
  - spin echo (pulse - tau - pulse): ideal coherence-pathway selection of the echo that refocuses each
    transition at the echo top, the +1 coherence ``|m><m-1|`` after the first pulse carried into the -1
    coherence ``|m-1><m|`` of the *same* transition by the second.  Transfers into other transitions
    refocus at other times (their first-order quadrupolar frequencies differ) and are not acquired; the
    delay's evolution is refocused exactly for the selected pathway, so tau does not enter.  The reference
    is a hard 90 (phase phi1) - 180 (phase phi2) echo, amplitude ``i exp(i (2 phi2 - phi1)) c^2 / 2``.

  Dispersive parts (from offsets during the pulse) are not kept: a spectrum is phased.  The dead time
  before acquisition is not modelled.

The same kernels serve multiple-quantum work: :func:`density_after_pulses` returns the density matrix after
back-to-back pulses (free evolution and pathway selection are the caller's), :func:`coherence_amplitudes`
the p-quantum elements, and :func:`pulse_propagators` the propagators for conversion efficiencies
(``|m><m'| -> U |m><m'| U^H``).

References
----------
A. Samoson, E. Lippmaa, Phys. Rev. B 28 (1983) 6565 (excitation of quadrupolar nuclei by finite pulses)
(from memory); D. Fenzke, D. Freude, T. Fröhlich, J. Haase, J. Magn. Reson. 57 (1984) 368 (nutation of
the central transition at (I + 1/2) nu1 in the selective limit) (from memory); G. Bodenhausen, H. Kogler,
R. R. Ernst, J. Magn. Reson. 58 (1984) 370 (coherence transfer pathways) (from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from . import _kernels as _k
from .frequencies import SiteFrame, checked_directions, exact_offsets, perturbative_offsets, upper_level_indices

__all__ = [
    "PulseSequence",
    "rotating_frame_levels",
    "pulse_propagators",
    "density_after_pulses",
    "coherence_amplitudes",
    "coherence_transfer",
    "transition_amplitudes",
    "transition_excitation",
    "site_excitation",
    "ct_selectivity_ratio",
    "quantitative_tip_limit_deg",
    "regime_note",
    "QUANTITATIVE_TOLERANCE",
    "PULSE_ROTOR_PHASES",
    "MultipleQuantumPulses",
    "mq_pathway_amplitudes",
    "pathway_signs",
    "mq_efficiency",
    "site_mq_efficiency",
]

#: largest relative difference allowed between the central-transition excitation in the selective and the
#: non-selective limits for a pulse to count as quantitative (see :func:`quantitative_tip_limit_deg`)
QUANTITATIVE_TOLERANCE = 0.05
#: rotor phases over which the excitation of a spinning sample is averaged (the pulse arrives at any phase)
PULSE_ROTOR_PHASES = 8


@dataclass(frozen=True)
class PulseSequence:
    """A single pulse or a spin echo with real pulses (hashable; part of a site's job).

    Parameters
    ----------
    kind : {"single", "echo"}
        One pulse, or pulse - tau - pulse with ideal selection of the refocused pathway.
    nu1_hz : float
        RF field strength nu1 = gamma B1 / 2 pi (Hz).
    lengths_s : tuple of float
        Pulse length(s) (s): one for "single", two for "echo".
    phases_deg : tuple of float
        Pulse phase(s) (degrees, 0 = x); same count as ``lengths_s``.
    carrier_offset_hz : float
        The carrier's offset (Hz) from the zero of the producer's frequencies (subtracted from every level
        offset): 0 puts the carrier on the line's isotropic position in the perturbative route.

    Examples
    --------
    >>> seq = PulseSequence("single", 100e3, (1e-6,))
    >>> round(seq.tip_angles_deg[0], 6)
    36.0
    """

    kind: str
    nu1_hz: float
    lengths_s: tuple
    phases_deg: tuple = (0.0, 0.0)
    carrier_offset_hz: float = 0.0

    def __post_init__(self):
        if self.kind not in ("single", "echo"):
            raise ValueError(f"pulse sequence kind = {self.kind!r} is not one of 'single', 'echo'")
        need = 1 if self.kind == "single" else 2
        lengths = tuple(float(x) for x in self.lengths_s)
        if len(lengths) != need:
            raise ValueError(f"a {self.kind!r} sequence needs {need} pulse length(s), got {len(lengths)}")
        if not all(math.isfinite(x) and x >= 0 for x in lengths):
            raise ValueError(f"pulse lengths {lengths} must be finite and >= 0 (s)")
        if not (math.isfinite(self.nu1_hz) and self.nu1_hz >= 0):
            raise ValueError(f"nu1_hz = {self.nu1_hz!r} must be finite and >= 0")
        ph = tuple(float(x) for x in self.phases_deg)
        ph = (ph + (0.0, 0.0))[:need] if len(ph) < need else ph[:need]
        object.__setattr__(self, "lengths_s", lengths)
        object.__setattr__(self, "phases_deg", ph)
        object.__setattr__(self, "nu1_hz", float(self.nu1_hz))
        object.__setattr__(self, "carrier_offset_hz", float(self.carrier_offset_hz))

    @property
    def tip_angles_deg(self) -> tuple:
        """Non-selective tip angle of each pulse, 360 nu1 t (degrees).

        Returns
        -------
        tuple of float
        """
        return tuple(360.0 * self.nu1_hz * t for t in self.lengths_s)

    def as_list(self) -> list:
        """JSON-ready form (for job keys).

        Returns
        -------
        list

        Examples
        --------
        >>> PulseSequence("single", 5e4, (2e-6,)).as_list()
        ['single', 50000.0, [2e-06], [0.0], 0.0]
        """
        return [self.kind, self.nu1_hz, list(self.lengths_s), list(self.phases_deg), self.carrier_offset_hz]


def _spin_tables(spin: float):
    d = int(round(2 * spin)) + 1
    mz = spin - np.arange(d, dtype=float)
    m = mz[:-1]
    ix_off = 0.5 * np.sqrt(spin * (spin + 1.0) - m * (m - 1.0))
    return d, np.ascontiguousarray(mz), np.ascontiguousarray(ix_off)


def _levels(levels_hz) -> tuple[np.ndarray, float]:
    lv = np.ascontiguousarray(np.asarray(levels_hz, dtype=float))
    if lv.ndim != 2 or lv.shape[1] < 2:
        raise ValueError(f"levels_hz must have shape (N, 2I+1) with 2I+1 >= 2, got shape {lv.shape}")
    if not np.all(np.isfinite(lv)):
        raise ValueError("levels_hz must be finite")
    return lv, (lv.shape[1] - 1) / 2.0


def rotating_frame_levels(frame: SiteFrame, directions, *, method: str = "perturbation", rotor_angle_rad: float = 0.0,
                          phases: int = 1, carrier_offset_hz: float = 0.0, second_order: bool = True) -> np.ndarray:
    """Level energies (Hz) in the rotating frame at the carrier, per orientation (and rotor phase).

    Parameters
    ----------
    frame : SiteFrame
        The site (:func:`powderspin.engine.frequencies.site_frame`).
    directions : array_like, shape (N, 3)
        B0 directions (static) or rotor axes (spinning) in the crystallite frame.
    method : {"perturbation", "exact"}
        The producer of the transition offsets.
    rotor_angle_rad : float, optional
        Rotor angle; with ``phases`` > 1 the levels are given at that many equally spaced rotor phases.
    phases : int, optional
    carrier_offset_hz : float, optional
        Carrier offset from the producer's zero (Hz).
    second_order : bool, optional
        Keep the second-order quadrupolar level shifts (perturbative route only).

    Returns
    -------
    numpy.ndarray, shape (N * phases, 2I+1)
        ``D[:, a]`` for m = I - a; ``D(I) = 0`` before the carrier term, consecutive differences the
        transition offsets less the carrier.  Rows ordered orientation-major (row ``i * phases + k``).

    Examples
    --------
    >>> from powderspin.model.values import Site
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> from powderspin.engine.frequencies import site_frame
    >>> f = site_frame(Site(cq_mhz=3.0), get_nuclide("27Al"), 14.1)
    >>> d = rotating_frame_levels(f, [[0, 0, 1]], second_order=False)
    >>> (d[0, :-1] - d[0, 1:]).round(1).tolist()     # offsets of 5/2:3/2 ... -3/2:-5/2: 2 nu_Q ... -2 nu_Q
    [900000.0, 450000.0, 0.0, -450000.0, -900000.0]
    """
    ax = checked_directions(directions)
    spin = frame.spin
    m_all = [spin - i for i in range(int(round(2 * spin)))]
    if method == "exact":
        off, _ = exact_offsets(frame, ax, m_all, rotor_angle_rad=rotor_angle_rad, phases=phases)
    elif method == "perturbation":
        off = perturbative_offsets(frame, ax, m_all, rotor_angle_rad=rotor_angle_rad, phases=phases,
                                   second_order=second_order)
    else:
        raise ValueError(f"method = {method!r} is not one of 'perturbation', 'exact'")
    off = np.moveaxis(off, 2, 1).reshape(-1, len(m_all)) - float(carrier_offset_hz)  # (N*P, 2I)
    lv = np.zeros((off.shape[0], len(m_all) + 1))
    lv[:, 1:] = -np.cumsum(off, axis=1)
    return lv


def pulse_propagators(levels_hz, nu1_hz: float, length_s: float, phase_deg: float = 0.0) -> np.ndarray:
    """Propagator of one pulse, exp(-i 2 pi H t), for each row of levels.

    Parameters
    ----------
    levels_hz : array_like, shape (N, 2I+1)
        Rotating-frame level energies (:func:`rotating_frame_levels`).
    nu1_hz : float
        RF field (Hz).
    length_s : float
        Pulse length (s).
    phase_deg : float, optional
        Pulse phase (degrees, 0 = x).

    Returns
    -------
    numpy.ndarray, shape (N, 2I+1, 2I+1), complex

    See Also
    --------
    density_after_pulses, coherence_amplitudes

    Examples
    --------
    >>> u = pulse_propagators(np.zeros((1, 2)), 250e3, 1e-6)   # a hard 90 degree pulse on spin 1/2
    >>> np.round(np.abs(u[0]) ** 2, 12).tolist()
    [[0.5, 0.5], [0.5, 0.5]]
    """
    lv, spin = _levels(levels_hz)
    _, mz, ix_off = _spin_tables(spin)
    return _k._pulse_propagators(lv, ix_off, mz, float(nu1_hz), math.radians(phase_deg), float(length_s))


def density_after_pulses(levels_hz, pulses) -> np.ndarray:
    """Density matrix after back-to-back pulses, starting from Iz.

    Parameters
    ----------
    levels_hz : array_like, shape (N, 2I+1)
        Rotating-frame level energies (:func:`rotating_frame_levels`).
    pulses : sequence of (nu1_hz, length_s, phase_deg)
        The pulses in order.  Free evolution between pulses is diagonal in this basis
        (``rho[a, b] * exp(-i 2 pi (D_a - D_b) t)``); apply it, and any pathway selection, between calls.

    Returns
    -------
    numpy.ndarray, shape (N, 2I+1, 2I+1), complex
        ``rho[a, b]`` is the element |m_a><m_b|, coherence order ``m_a - m_b``.

    See Also
    --------
    coherence_amplitudes, pulse_propagators

    Examples
    --------
    >>> rho = density_after_pulses(np.zeros((1, 2)), [(250e3, 1e-6, 0.0)])   # Iz -> -Iy on spin 1/2
    >>> np.round(rho[0].imag, 12).tolist()
    [[0.0, 0.5], [-0.5, 0.0]]
    """
    lv, spin = _levels(levels_hz)
    _, mz, ix_off = _spin_tables(spin)
    p = [tuple(float(x) for x in q) for q in pulses]
    if not p:
        raise ValueError("pulses: give at least one (nu1_hz, length_s, phase_deg)")
    nu1 = np.array([q[0] for q in p])
    t = np.array([q[1] for q in p])
    ph = np.radians([q[2] for q in p])
    return _k._density_after_pulses(lv, ix_off, mz, nu1, ph, t)


def coherence_amplitudes(rho, order: int) -> tuple[np.ndarray, np.ndarray]:
    """The p-quantum elements of density matrices: rho[a, b] with m_a - m_b = p.

    Parameters
    ----------
    rho : array_like, shape (N, 2I+1, 2I+1)
    order : int
        Coherence order p (-2I ... 2I).

    Returns
    -------
    amplitudes : numpy.ndarray, shape (N, 2I+1-|p|), complex
    m_pairs : numpy.ndarray, shape (2I+1-|p|, 2)
        (m_a, m_b) of each column.

    Examples
    --------
    >>> rho = density_after_pulses(np.zeros((1, 4)), [(250e3, 1e-6, 0.0)])
    >>> amp, pairs = coherence_amplitudes(rho, -1)
    >>> pairs.tolist()
    [[0.5, 1.5], [-0.5, 0.5], [-1.5, -0.5]]
    """
    r = np.asarray(rho)
    d = r.shape[-1]
    spin = (d - 1) / 2.0
    p = int(order)
    if abs(p) > d - 1:
        raise ValueError(f"order = {order!r} must be within +-{d - 1} for spin {spin:g}")
    a = np.arange(d)
    b = a + p  # m_a - m_b = p with m = I - index
    keep = (b >= 0) & (b < d)
    a, b = a[keep], b[keep]
    mz = spin - np.arange(d, dtype=float)
    return r[:, a, b], np.stack([mz[a], mz[b]], axis=1)


def coherence_transfer(propagators, source, target) -> np.ndarray:
    """Amplitude with which a pulse carries the element |m_a><m_b| into |m_c><m_d|: U[c, a] conj(U[d, b]).

    For multiple-quantum work: e.g. the conversion of triple-quantum coherence ``(3/2, -3/2)`` into the
    observed central-transition coherence ``(-1/2, 1/2)`` (order -1).

    Parameters
    ----------
    propagators : array_like, shape (N, 2I+1, 2I+1)
        From :func:`pulse_propagators`.
    source, target : (float, float)
        (m_a, m_b) and (m_c, m_d).

    Returns
    -------
    numpy.ndarray, shape (N,), complex

    See Also
    --------
    pulse_propagators, coherence_amplitudes

    Examples
    --------
    >>> u = pulse_propagators(np.zeros((1, 2)), 500e3, 1e-6)     # a hard 180 degree pulse on spin 1/2
    >>> round(float(abs(coherence_transfer(u, (0.5, -0.5), (-0.5, 0.5))[0])), 12)   # +1 -> -1 completely
    1.0
    """
    u = np.asarray(propagators)
    d = u.shape[-1]
    spin = (d - 1) / 2.0

    def index(m):
        i = spin - float(m)
        if abs(i - round(i)) > 1e-9 or not 0 <= round(i) < d:
            raise ValueError(f"m = {m!r} is not a level of spin {spin:g}")
        return int(round(i))

    a, b = index(source[0]), index(source[1])
    c, e = index(target[0]), index(target[1])
    return u[:, c, a] * np.conj(u[:, e, b])


def transition_amplitudes(levels_hz, sequence: PulseSequence, m_upper) -> np.ndarray:
    """Complex signal amplitude c <m-1|rho|m> of each transition after the sequence.

    Parameters
    ----------
    levels_hz : array_like, shape (N, 2I+1)
    sequence : PulseSequence
        (its ``carrier_offset_hz`` is not used here: the levels already carry the carrier.)
    m_upper : sequence of float
        Upper level m of each transition m -> m-1.

    Returns
    -------
    numpy.ndarray, shape (N, len(m_upper)), complex

    Examples
    --------
    >>> a = transition_amplitudes(np.zeros((1, 2)), PulseSequence("single", 250e3, (1e-6,)), [0.5])
    >>> np.round(a, 12).tolist()     # -i c^2 / 2 for a hard 90 degree pulse along x
    [[-0.5j]]
    """
    lv, spin = _levels(levels_hz)
    _, mz, ix_off = _spin_tables(spin)
    upper = np.ascontiguousarray(upper_level_indices(spin, m_upper), dtype=np.int64)
    ph = [math.radians(x) for x in sequence.phases_deg]
    t = sequence.lengths_s
    echo = sequence.kind == "echo"
    return _k._excitation_amplitudes(lv, ix_off, mz, sequence.nu1_hz, ph[0], t[0], ph[1] if echo else 0.0,
                                     t[1] if echo else 0.0, echo, upper)


def _reference_phase(sequence: PulseSequence) -> complex:
    ph = [math.radians(x) for x in sequence.phases_deg]
    if sequence.kind == "single":
        return -1j * complex(math.cos(ph[0]), math.sin(ph[0]))
    return 1j * complex(math.cos(2 * ph[1] - ph[0]), math.sin(2 * ph[1] - ph[0]))


def transition_excitation(levels_hz, sequence: PulseSequence, m_upper) -> np.ndarray:
    """Excitation of each transition relative to the ideal experiment (absorptive part).

    Parameters
    ----------
    levels_hz : array_like, shape (N, 2I+1)
    sequence : PulseSequence
    m_upper : sequence of float

    Returns
    -------
    numpy.ndarray, shape (N, len(m_upper))
        1 for the ideal experiment (a hard 90 degree pulse; a hard 90-180 echo for the central transition);
        ``sin(theta)`` for a hard pulse of tip angle theta.

    References
    ----------
    D. Fenzke et al., J. Magn. Reson. 57 (1984) 368 (from memory).

    Examples
    --------
    >>> e = transition_excitation(np.zeros((1, 6)), PulseSequence("single", 100e3, (0.5e-6,)), [2.5, 1.5, 0.5])
    >>> np.round(e, 9).tolist()     # no interactions: sin(18 deg) for every transition
    [[0.309016994, 0.309016994, 0.309016994]]
    """
    lv, spin = _levels(levels_hz)
    amp = transition_amplitudes(lv, sequence, m_upper)
    m = np.asarray(m_upper, dtype=float).reshape(-1)
    ideal = 0.5 * (spin * (spin + 1.0) - m * (m - 1.0))
    return (amp / _reference_phase(sequence)).real / ideal


def site_excitation(frame: SiteFrame, directions, m_upper, sequence: PulseSequence, *,
                    method: str = "perturbation", rotor_angle_rad: float = 0.0, spinning: bool = False,
                    rotor_phases: int = PULSE_ROTOR_PHASES) -> np.ndarray:
    """Excitation of a site's transitions for each orientation (averaged over the rotor phase when spinning).

    Parameters
    ----------
    frame : SiteFrame
    directions : array_like, shape (N, 3)
        B0 directions (static) or rotor axes (spinning).
    m_upper : sequence of float
    sequence : PulseSequence
    method : {"perturbation", "exact"}
    rotor_angle_rad : float, optional
    spinning : bool, optional
        Average over ``rotor_phases`` rotor phases at which the pulse may arrive.
    rotor_phases : int, optional

    Returns
    -------
    numpy.ndarray, shape (N, len(m_upper))

    See Also
    --------
    transition_excitation, rotating_frame_levels

    Examples
    --------
    >>> from powderspin.model.values import Site
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> from powderspin.engine.frequencies import site_frame
    >>> f = site_frame(Site(cq_mhz=0.001), get_nuclide("27Al"), 14.1)
    >>> e = site_excitation(f, [[0, 0, 1]], [0.5], PulseSequence("single", 100e3, (2.5e-6,)))
    >>> round(float(e[0, 0]), 4)     # a hard 90 degree pulse
    1.0
    """
    ax = checked_directions(directions)
    p = int(rotor_phases) if spinning else 1
    lv = rotating_frame_levels(frame, ax, method=method, rotor_angle_rad=rotor_angle_rad if spinning else 0.0,
                               phases=p, carrier_offset_hz=sequence.carrier_offset_hz)
    e = transition_excitation(lv, sequence, m_upper)
    return e.reshape(ax.shape[0], p, -1).mean(axis=1)


def ct_selectivity_ratio(spin: float, tip_deg: float) -> float:
    """Central-transition excitation in the selective limit over that in the non-selective limit.

    For a single pulse of non-selective tip angle theta = 360 nu1 t, the central transition's signal is
    ``sin(theta)`` when nu1 >> nu_Q and ``sin((I + 1/2) theta) / (I + 1/2)`` when nu_Q >> nu1.  Sites whose
    couplings lie anywhere between can differ in excitation by up to this ratio.

    Parameters
    ----------
    spin : float
        Half-integer spin I.
    tip_deg : float
        Non-selective tip angle (degrees).

    Returns
    -------
    float
        1 for a small tip angle.

    References
    ----------
    D. Fenzke, D. Freude, T. Fröhlich, J. Haase, J. Magn. Reson. 57 (1984) 368 (from memory).

    Examples
    --------
    >>> round(ct_selectivity_ratio(2.5, 10.0), 4)
    0.9598
    """
    th = math.radians(tip_deg)
    s = math.sin(th)
    k = spin + 0.5
    if abs(s) < 1e-300:
        return 1.0
    return math.sin(k * th) / (k * s)


def quantitative_tip_limit_deg(spin: float, tolerance: float = QUANTITATIVE_TOLERANCE) -> float:
    """Largest non-selective tip angle at which relative central-transition intensities are quantitative.

    The selective/non-selective ratio of :func:`ct_selectivity_ratio` is
    ``1 - ((I + 1/2)^2 - 1) theta^2 / 6 + O(theta^4)``; the limit is the tip angle where it falls to
    ``1 - tolerance`` (solved exactly, not from the expansion).  For I = 5/2 and 5 % this is about
    11 degrees, about a third of the selective 90 degree pulse pi / (2 (I + 1/2)): the common-practice rule of
    a pulse shorter than about a third of the central-transition 90 degree pulse (from memory; e.g.
    A. Samoson, E. Lippmaa, Phys. Rev. B 28 (1983) 6565).

    Parameters
    ----------
    spin : float
        Half-integer spin I > 1/2.
    tolerance : float, optional
        Allowed relative difference between the extreme excitations.

    Returns
    -------
    float
        Degrees.

    Examples
    --------
    >>> round(quantitative_tip_limit_deg(2.5), 2)
    11.17
    """
    from scipy.optimize import brentq

    k = spin + 0.5
    if k <= 1.0:
        return 180.0
    hi = 90.0 / k  # the ratio falls monotonically from 1 to 1/k's neighbourhood up to the selective 90
    if ct_selectivity_ratio(spin, hi) > 1.0 - tolerance:
        return hi
    return float(brentq(lambda t: ct_selectivity_ratio(spin, t) - (1.0 - tolerance), 1e-9, hi, xtol=1e-12))


def regime_note(spin: float, sequence: PulseSequence, tolerance: float = QUANTITATIVE_TOLERANCE) -> str:
    """A plain warning when the pulses are outside the quantitative short-pulse regime ("" when inside).

    Quadrupolar sites of different C_Q are excited alike only while the non-selective tip angle
    ``360 nu1 t`` is below :func:`quantitative_tip_limit_deg`; beyond it, populations from the ideal model are
    biased towards the sites with the smaller couplings (or larger, past the selective 90 degree pulse).  An
    echo's relative intensities depend on C_Q whatever the pulse lengths.  The rule concerns the central
    transition of half-integer spins; spin 1/2 and integer spins get no note.

    Parameters
    ----------
    spin : float
    sequence : PulseSequence
    tolerance : float, optional

    Returns
    -------
    str

    References
    ----------
    D. Fenzke et al., J. Magn. Reson. 57 (1984) 368; A. Samoson, E. Lippmaa, Phys. Rev. B 28 (1983) 6565
    (both from memory).

    Examples
    --------
    >>> regime_note(2.5, PulseSequence("single", 50e3, (0.5e-6,)))
    ''
    >>> regime_note(2.5, PulseSequence("single", 50e3, (3e-6,)))[:60]
    'the pulse (non-selective tip angle 54 deg) is not in the qua'
    """
    if spin <= 0.5 or abs(spin - round(spin)) < 1e-9:  # the rule is about the central transition
        return ""
    tip = sequence.tip_angles_deg[0]
    limit = quantitative_tip_limit_deg(spin, tolerance)
    if sequence.kind == "echo":
        return (f"a spin echo (first pulse {tip:.3g} deg non-selective tip angle) excites sites of different C_Q "
                "differently: populations are quantitative only with the pulses modelled (they are), not from an "
                "ideal-excitation fit")
    if tip <= limit:
        return ""
    ratio = ct_selectivity_ratio(spin, tip)
    return (f"the pulse (non-selective tip angle {tip:.3g} deg) is not in the quantitative short-pulse regime: "
            f"for I = {spin:g} the central transition of a site with large C_Q is excited {ratio:.3g} times as "
            f"much as one with small C_Q; below {limit:.3g} deg they agree within {tolerance:.0%} "
            "(populations corrected for excitation are reported when the pulse is modelled)")


# ---------------------------------------------------------------------------
# multiple-quantum (MQMAS) excitation and conversion


@dataclass(frozen=True)
class MultipleQuantumPulses:
    """Finite excitation and conversion pulses of an MQMAS experiment (hashable; part of a 2D site's key).

    Coherence pathway 0 -> +-p -> -1 (``"two-pulse"``) or 0 -> +-p -> 0 -> -1 (``"z-filter"``, the last pulse
    a weak central-transition-selective one).  Only the symmetric p-quantum coherence |p/2><-p/2| (or its
    conjugate) is followed through t1: it is the one the sheared F1 dimension shows.  All pulses have phase x;
    phase cycling is modelled as ideal selection of the pathway.

    Parameters
    ----------
    kind : {"two-pulse", "z-filter"}
    order : int
        Coherence order p (odd, 3 to 2I).
    echo_order : int
        The t1 coherence order (+p or -p) of the echo pathway: the one whose rank-4 phase is refocused at
        t2 = |R| t1 > 0.  An order-q coherence |a><b| evolves as exp(-i 2 pi (E_a - E_b) t) and the
        observed -1 coherence |-1/2><1/2| as exp(+i 2 pi nu_CT t2), so the echo is 0 -> +p -> -1 when R > 0
        (e.g. I = 5/2, p = 3) and 0 -> -p -> -1 when R < 0 (I = 3/2, p = 3).
    pathway : {"echo", "antiecho", "both"}
        The pathway acquired; ``"both"`` is the mean of the two, each in its own receiver phase (the
        absorptive part of amplitude-modulated data after hypercomplex processing).
    nu1_hz : float
        RF field of the excitation and conversion pulses (Hz).
    excite_s, convert_s : float
        Their lengths (s).
    selective_nu1_hz, selective_s : float or None
        RF field (Hz) and length (s) of the z-filter's central-transition pulse.
    carrier_offset_hz : float
        Carrier offset from the zero of the producer's frequencies (Hz); 0: on resonance.

    Examples
    --------
    >>> s = MultipleQuantumPulses("two-pulse", 3, -3, "echo", 100e3, 3.5e-6, 1.2e-6)
    >>> s.t1_orders
    (-3,)
    """

    kind: str
    order: int
    echo_order: int
    pathway: str
    nu1_hz: float
    excite_s: float
    convert_s: float
    selective_nu1_hz: float | None = None
    selective_s: float | None = None
    carrier_offset_hz: float = 0.0

    def __post_init__(self):
        if self.kind not in ("two-pulse", "z-filter"):
            raise ValueError(f"MQMAS pulses kind = {self.kind!r} is not one of 'two-pulse', 'z-filter'")
        if self.pathway not in ("echo", "antiecho", "both"):
            raise ValueError(f"pathway = {self.pathway!r} is not one of 'echo', 'antiecho', 'both'")
        p = int(self.order)
        if p < 3 or p % 2 == 0 or abs(int(self.echo_order)) != p:
            raise ValueError(f"order = {self.order!r} must be odd and >= 3, echo_order = +-order")
        for name in ("nu1_hz", "excite_s", "convert_s"):
            v = float(getattr(self, name))
            if not (math.isfinite(v) and v >= 0):
                raise ValueError(f"{name} = {getattr(self, name)!r} must be finite and >= 0")
            object.__setattr__(self, name, v)
        if self.kind == "z-filter":
            for name in ("selective_nu1_hz", "selective_s"):
                v = getattr(self, name)
                if v is None or not (math.isfinite(float(v)) and float(v) >= 0):
                    raise ValueError(f"a z-filter needs {name} (finite, >= 0), got {v!r}")
                object.__setattr__(self, name, float(v))
        object.__setattr__(self, "carrier_offset_hz", float(self.carrier_offset_hz))

    @property
    def t1_orders(self) -> tuple:
        """The t1 coherence orders acquired (one, or both for ``pathway = "both"``).

        Returns
        -------
        tuple of int
        """
        e = int(self.echo_order)
        return {"echo": (e,), "antiecho": (-e,), "both": (e, -e)}[self.pathway]

    def describe(self) -> dict:
        """The pulses as metadata (lengths in us, fields in kHz, the pathway in words).

        Returns
        -------
        dict
        """
        p = int(self.order)
        paths = {q: (f"0 -> {q:+d} -> -1" if self.kind == "two-pulse" else f"0 -> {q:+d} -> 0 -> -1")
                 for q in (p, -p)}
        out = {"sequence": self.kind, "rf_khz": self.nu1_hz / 1e3, "excite_us": self.excite_s * 1e6,
               "convert_us": self.convert_s * 1e6, "pathway": self.pathway,
               "echo_pathway": paths[int(self.echo_order)], "antiecho_pathway": paths[-int(self.echo_order)]}
        if self.kind == "z-filter":
            out["selective_rf_khz"] = self.selective_nu1_hz / 1e3
            out["selective_us"] = self.selective_s * 1e6
        return out


def _index_of(spin: float, m: float) -> int:
    return int(round(spin - m))


def mq_pathway_amplitudes(levels_hz, sequence: MultipleQuantumPulses) -> np.ndarray:
    """Complex CT signal of the two MQMAS pathways, t1 order +p and -p, for each row of levels.

    ``A = c <-1/2| rho |1/2>`` (c = <1/2|I+|-1/2> = I + 1/2) after the pathway: rho1 = U1 Iz U1^H, its element
    |m><-m| (order +p, m = p/2) or |-m><m| (order -p) alone carried by the conversion pulse U2 into
    |-1/2><1/2| (two-pulse), or into the populations and from them by the selective pulse U3 (z-filter).
    Free evolution in t1 and during the z-filter is not included (its phase is the F1 and F2 frequency).

    Parameters
    ----------
    levels_hz : array_like, shape (N, 2I+1)
        Rotating-frame level energies (:func:`rotating_frame_levels`).
    sequence : MultipleQuantumPulses

    Returns
    -------
    numpy.ndarray, shape (N, 2), complex
        Column 0: t1 order +p; column 1: t1 order -p.

    See Also
    --------
    mq_efficiency, pulse_propagators, coherence_transfer

    Examples
    --------
    >>> s = MultipleQuantumPulses("two-pulse", 3, -3, "echo", 100e3, 3.5e-6, 1.2e-6)
    >>> float(np.abs(mq_pathway_amplitudes(np.zeros((1, 4)), s)).max()) < 1e-15   # no coupling: no 3Q coherence
    True
    """
    lv, spin = _levels(levels_hz)
    p = int(sequence.order)
    if p > 2 * spin + 1e-9:
        raise ValueError(f"order {p} is above 2I = {2 * spin:g}")
    _, mz, ix_off = _spin_tables(spin)
    hi, lo = _index_of(spin, p / 2.0), _index_of(spin, -p / 2.0)
    ct_lo, ct_hi = _index_of(spin, -0.5), _index_of(spin, 0.5)  # |-1/2><1/2|
    zfilter = sequence.kind == "z-filter"
    nu_sel = float(sequence.selective_nu1_hz) if zfilter else 0.0
    t_sel = float(sequence.selective_s) if zfilter else 0.0
    # one fused kernel: the hard pulses share one eigendecomposition, only the pathway's elements are formed
    return _k._mq_pathway_amplitudes(lv, ix_off, mz, float(sequence.nu1_hz), float(sequence.excite_s),
                                     float(sequence.convert_s), zfilter, nu_sel, t_sel, hi, lo, ct_lo, ct_hi)


def pathway_signs(spin: float, sequence: MultipleQuantumPulses) -> tuple[float, float]:
    """The receiver sign of each pathway (t1 order +p, -p): its sign in the short-pulse limit.

    The receiver phase of a phase-cycled pathway is set once for the experiment.  We take, for each pathway,
    the phase in which its signal is positive in absorption when every pulse is short: a crystallite with
    first-order splitting nu_Q = nu1 / 10 on resonance, excitation and conversion pulses of 10 degrees
    (360 nu1 t), and for the z-filter a selective pulse (nu1_sel = nu_Q / 100) of 10 degrees on the central
    transition.  The result depends on the sequence kind only (x pulses: the order-p element of a rotated Iz
    carries i^p, each transfer p -> p' carries i^(p' - p), so the phase is -i for every pathway; the sign is
    that of the product of the short-pulse matrix elements): (-1, +1) for two pulses, (-1, -1) with a z-filter.
    ``tests/engine/test_mq_pulses.py`` checks it against the propagated short pulses for I = 3/2 to 9/2.  Longer
    pulses may then invert a crystallite's signal, as they do in the spectrometer.

    Parameters
    ----------
    spin : float
    sequence : MultipleQuantumPulses

    Returns
    -------
    (float, float)

    Examples
    --------
    >>> pathway_signs(1.5, MultipleQuantumPulses("two-pulse", 3, -3, "echo", 100e3, 3.5e-6, 1.2e-6))
    (-1.0, 1.0)
    """
    if sequence.kind == "z-filter":
        return (-1.0, -1.0)
    return (-1.0, 1.0)


def mq_efficiency(levels_hz, sequence: MultipleQuantumPulses) -> np.ndarray:
    """Excitation x conversion efficiency of the acquired MQMAS pathway(s), per row of levels.

    The absorptive part (reference phase -i, that of every x-pulse pathway ending in order -1 when the pulses
    are hard) of :func:`mq_pathway_amplitudes`, in the receiver sign of :func:`pathway_signs`, relative to the
    central-transition signal of a hard 90 degree pulse (c^2 / 2).  With ``pathway = "both"`` the mean of the
    two pathways.

    Parameters
    ----------
    levels_hz : array_like, shape (N, 2I+1)
    sequence : MultipleQuantumPulses

    Returns
    -------
    numpy.ndarray, shape (N,)

    References
    ----------
    L. Frydman, J. S. Harwood, J. Am. Chem. Soc. 117 (1995) 5367; J.-P. Amoureux, C. Fernandez,
    S. Steuernagel, J. Magn. Reson. A 123 (1996) 116 (z-filter); G. Bodenhausen, H. Kogler, R. R. Ernst,
    J. Magn. Reson. 58 (1984) 370 (coherence transfer pathways) (all from memory).

    Examples
    --------
    >>> lv = (250e3 * np.array([1.0, -1.0, -1.0, 1.0]))[None, :]    # I = 3/2, nu_Q = 500 kHz, B0 along z
    >>> s = MultipleQuantumPulses("two-pulse", 3, -3, "echo", 100e3, 3.5e-6, 1.2e-6)
    >>> bool(mq_efficiency(lv, s)[0] > 0)
    True
    """
    lv, spin = _levels(levels_hz)
    amp = 1j * mq_pathway_amplitudes(lv, sequence)  # absorptive part: the real part of i A
    signs = pathway_signs(spin, sequence)
    c2 = (spin + 0.5) ** 2 / 2.0
    cols = {int(sequence.order): 0, -int(sequence.order): 1}
    parts = [signs[cols[q]] * amp[:, cols[q]].real for q in sequence.t1_orders]
    return np.mean(parts, axis=0) / c2


def site_mq_efficiency(frame: SiteFrame, directions, sequence: MultipleQuantumPulses, *,
                       method: str = "perturbation", rotor_angle_rad: float = 0.0, spinning: bool = True,
                       rotor_phases: int = PULSE_ROTOR_PHASES, block: int = 2048) -> np.ndarray:
    """MQMAS pathway efficiency of a site for each orientation, averaged over the rotor phase of the pulses.

    The pulses are static (a few microseconds next to a rotor period).  All of them arrive at the same rotor
    phase: exact for rotor-synchronised t1 (t1 a whole number of periods) and a short z-filter delay; an
    approximation for a free t1.  The average over the rotor phase multiplies the rotor-averaged sideband
    intensities of F2 (the correlation between the two over the rotor phase is not kept).

    Parameters
    ----------
    frame : SiteFrame
    directions : array_like, shape (N, 3)
        Rotor axes in the crystallite frame.
    sequence : MultipleQuantumPulses
    method : {"perturbation", "exact"}
    rotor_angle_rad : float, optional
    spinning : bool, optional
    rotor_phases : int, optional
    block : int, optional
        Directions per block (Ctrl-C is answered between blocks).

    Returns
    -------
    numpy.ndarray, shape (N,)

    See Also
    --------
    mq_efficiency, site_excitation

    Examples
    --------
    >>> from powderspin.model.values import Site
    >>> from powderspin.physics.nuclides import get_nuclide
    >>> from powderspin.engine.frequencies import site_frame
    >>> f = site_frame(Site(cq_mhz=2.5), get_nuclide("23Na"), 9.4)
    >>> s = MultipleQuantumPulses("two-pulse", 3, -3, "echo", 100e3, 3.5e-6, 1.2e-6)
    >>> site_mq_efficiency(f, [[0, 0, 1], [1, 0, 0]], s, rotor_angle_rad=0.9553).shape
    (2,)
    """
    ax = checked_directions(directions)
    p = int(rotor_phases) if spinning else 1
    out = np.empty(ax.shape[0])
    for a in range(0, ax.shape[0], max(1, int(block))):
        b = min(ax.shape[0], a + max(1, int(block)))
        lv = rotating_frame_levels(frame, ax[a:b], method=method, rotor_angle_rad=rotor_angle_rad if spinning else 0.0,
                                   phases=p, carrier_offset_hz=sequence.carrier_offset_hz)
        out[a:b] = mq_efficiency(lv, sequence).reshape(b - a, p).mean(axis=1)
    return out
