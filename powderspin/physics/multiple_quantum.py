"""Second-order quadrupolar frequencies of two-dimensional experiments, split by rank.

MQMAS correlates a symmetric multiple-quantum transition +m <-> -m (coherence
order p = 2m) with the central transition (CT) +1/2 <-> -1/2; STMAS correlates
the inner satellite transitions +-3/2 <-> +-1/2 (p = 1) with the CT.  To first
order the quadrupolar frequency of a symmetric transition cancels, and under
magic-angle spinning (MAS) the first-order frequency of the satellites
averages to zero.  What remains is the second-order term.

Derivation used here
--------------------
The high-field level energies (DEVELOPERS.md, "Physics formulas") give the
second-order offset of the level pair (m_hi, m_lo) as

    nu2 = c2 [ c_A A - c_B B / 4 ],   c2 = -K^2 / (2 nu0),  K = C_Q / (2I(2I-1)),

with A = V_xz^2 + V_yz^2, B = (V_xx - V_yy)^2 + 4 V_xy^2 (the laboratory-frame
EFG in units of its largest principal value) and c_A, c_B differences of the
level coefficients m (4X - 8m^2 - 1) and m (2X - 2m^2 - 1), X = I(I+1).  A and B
are quadratic in the EFG, so each is a sum of rank-0, rank-2 and rank-4 parts,
and each rank-L part is a fixed multiple of the same rank-L combination
[V x V]_L0 (the Clebsch-Gordan coefficients that couple the two rank-2
tensors do not depend on the transition).  The multiples are found here by
writing A and B for an axially symmetric EFG (eta = 0), where [V x V]_L0 is
proportional to the Legendre polynomial P_L(cos theta), as polynomials in
cos theta and expanding them in Legendre polynomials (numpy.polynomial).  So
for every transition

    nu2 = c2 sum_L Q_L(m_hi, m_lo) T_L,    Q_L = c_A a_L - c_B b_L / 4,

where a_L, b_L are the Legendre coefficients of A and B, T_0 = 1 + eta^2/3 (the
rank-0 part scales with Tr V^2), and for eta = 0, static, T_L = P_L(cos theta).
Spinning at an angle theta_R scales the rank-L part of the rotor average by
P_L(cos theta_R): at the magic angle P_2 = 0 and only the rank-0 and rank-4
parts remain.

Refocusing ratio and the sheared F1 scale
-----------------------------------------
The rank-4 parts of the two correlated transitions are proportional for every
crystallite: aniso(nu_t1) = R aniso(nu_CT) with R = Q_4(t1) / Q_4(CT).  The
sheared isotropic frequency

    nu_F1 = (nu_t1 - R nu_CT) / (p - R)

does not depend on the orientation.  A pure shift d (Hz) gives nu_t1 = p d and
nu_CT = d, hence nu_F1 = d: a site with C_Q = 0 lies on the diagonal
(delta_F1 = delta_F2 = delta_iso).  This is the convention of every output.
The centres of gravity of a site are

    delta_F2 = delta_iso + delta_QIS,
    delta_F1 = delta_iso + k_F1 delta_QIS,   k_F1 = (Q_0(t1)/Q_0(CT) - R) / (p - R),

with delta_QIS = 1e6 c2 (1 + eta^2/3) Q_0(CT) / nu0 the CT's quadrupolar-induced
shift (the powder centre of gravity of the 1D MAS CT line; A. Samoson, Chem.
Phys. Lett. 119 (1985) 29).  For I = 3/2, 3QMAS: R = -7/9 and k_F1 = -10/17.

Other F1 scales
---------------
The same sheared spectrum is drawn on other F1 scales in the literature; each
is a fixed multiple c of the isotropic one (F1_other = c F1_isotropic, the
same 0 ppm), derived here from R and p:

- ``"isotropic"`` (c = 1): the convention above.
- ``"t1_evolution"`` (c = p - R): the sheared t1 frequency nu_t1 - R nu_CT
  itself, not divided by p - R, i.e. F1 in units of the multiple-quantum
  (satellite) evolution per t1 increment; a pure shift lies at
  (p - R) delta_iso.
- ``"total_evolution"`` (c = (p - R) / (1 + |R|)): the sheared frequency per
  unit of the whole evolution time, t1 plus the |R| t1 over which the echo
  refocuses (F1 scaled by 1 + |k|, k = R in the literature's notation).

:attr:`TwoDimensionalScale.f1_scale_factor` gives c; every output names the
scale it uses.  Sign conventions of the coherence order differ between
authors; here p > 0, and c > 0 for every transition of I <= 9/2.

References
----------
L. Frydman, J. S. Harwood, J. Am. Chem. Soc. 117 (1995) 5367 (MQMAS);
A. Medek, J. S. Harwood, L. Frydman, J. Am. Chem. Soc. 117 (1995) 12779;
Z. Gan, J. Am. Chem. Soc. 122 (2000) 3242 (STMAS);
S. E. Ashbrook, S. Wimperis, Prog. Nucl. Magn. Reson. Spectrosc. 45 (2004) 53
(review: refocusing ratios, shearing and referencing conventions).
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction

import numpy as np
from numpy.polynomial import Polynomial, legendre

__all__ = [
    "EXPERIMENTS",
    "TwoDimensionalScale",
    "allowed_mq_orders",
    "rank_coefficients",
    "two_dimensional_scale",
    "isotropic_shifts_ppm",
    "F1_SCALES",
]

#: two-dimensional experiments (``"1d"`` is the ordinary spectrum)
EXPERIMENTS = ("1d", "mqmas", "stmas")

#: F1 scales of a sheared 2D spectrum: name -> plain description (factors: TwoDimensionalScale.f1_scale_factor)
F1_SCALES = {
    "isotropic": "F1 = (nu_t1 - R nu_CT) / (p - R): a site with C_Q = 0 lies on the diagonal (factor 1)",
    "t1_evolution": ("F1 = nu_t1 - R nu_CT, the sheared t1 frequency in units of the multiple-quantum (satellite) "
                     "evolution: factor p - R on the isotropic scale"),
    "total_evolution": ("F1 = (nu_t1 - R nu_CT) / (1 + |R|), per unit of the whole evolution time t1 + |R| t1: "
                        "factor (p - R) / (1 + |R|) on the isotropic scale"),
}


def _invariant_legendre() -> tuple[np.ndarray, np.ndarray]:
    """Legendre coefficients (L = 0..4) of A and B for an axial EFG, B0 at theta from its z axis."""
    c2 = Polynomial([0.0, 0.0, 1.0])  # cos^2 theta
    s2 = 1.0 - c2
    vzz = c2 - 0.5 * s2  # V = diag(-1/2, -1/2, 1), b = (sin theta, 0, cos theta)
    vb2 = 0.25 * s2 + c2  # |V b|^2
    a = vb2 - vzz * vzz
    b = 2.0 * 1.5 - 3.0 * vzz * vzz - 4.0 * a  # 2 Tr V^2 - 3 V_zz^2 - 4 A, Tr V^2 = 3/2
    out = []
    for p in (a, b):
        leg = legendre.poly2leg(p.coef)
        out.append(np.pad(leg, (0, 5 - leg.size)))
    return out[0], out[1]


#: Legendre coefficients (L = 0..4) of A and B, computed once (immutable)
_LEGENDRE_AB = tuple(tuple(float(x) for x in c) for c in _invariant_legendre())


def _level_terms(spin: float, m: float) -> tuple[float, float]:
    x = spin * (spin + 1.0)
    return m * (4 * x - 8 * m * m - 1), m * (2 * x - 2 * m * m - 1)


def rank_coefficients(spin: float, m_hi: float, m_lo: float) -> tuple[float, float, float]:
    """Rank-0, rank-2 and rank-4 coefficients of the second-order offset of a level pair.

    The second-order quadrupolar part of the offset E(m_hi) - E(m_lo) -
    (m_hi - m_lo) nu0 is ``c2 sum_L Q_L T_L`` with ``c2 = -K^2 / (2 nu0)``,
    ``K = C_Q / (2I(2I-1))``, ``T_0 = 1 + eta^2/3`` and, for eta = 0 with B0 at
    theta from the EFG's z axis, ``T_L = P_L(cos theta)`` (module notes).

    Parameters
    ----------
    spin : float
        Nuclear spin I.
    m_hi, m_lo : float
        The two levels (m_hi = m, m_lo = -m for a symmetric multiple-quantum
        transition; m_lo = m_hi - 1 for a single-quantum one).

    Returns
    -------
    tuple of 3 float
        (Q_0, Q_2, Q_4), dimensionless.

    References
    ----------
    S. E. Ashbrook, S. Wimperis, Prog. Nucl. Magn. Reson. Spectrosc. 45 (2004) 53.

    Examples
    --------
    >>> q_ct = rank_coefficients(1.5, 0.5, -0.5)
    >>> q_3q = rank_coefficients(1.5, 1.5, -1.5)
    >>> round(q_3q[2] / q_ct[2], 12)      # -7/9 (Frydman and Harwood 1995)
    -0.777777777778
    """
    la, lb = (np.array(c) for c in _LEGENDRE_AB)
    ah, bh = _level_terms(spin, m_hi)
    al, bl = _level_terms(spin, m_lo)
    ca, cb = ah - al, bh - bl
    q = ca * la - 0.25 * cb * lb
    return float(q[0]), float(q[2]), float(q[4])


def allowed_mq_orders(spin: float) -> tuple[int, ...]:
    """Coherence orders p = 2m of the symmetric transitions +m <-> -m with m > 1/2.

    Parameters
    ----------
    spin : float
        Nuclear spin I.

    Returns
    -------
    tuple of int
        (3, 5, ..., 2I) for a half-integer spin >= 3/2; empty otherwise (an
        integer spin has no central transition to correlate with).

    Examples
    --------
    >>> allowed_mq_orders(2.5), allowed_mq_orders(1.5), allowed_mq_orders(1.0)
    ((3, 5), (3,), ())
    """
    two_i = int(round(2 * spin))
    if two_i % 2 == 0 or two_i < 3:
        return ()
    return tuple(range(3, two_i + 1, 2))


@dataclass(frozen=True)
class TwoDimensionalScale:
    """The transitions of a 2D experiment, its refocusing ratio and its sheared F1 scale.

    Attributes
    ----------
    experiment : str
        ``"mqmas"`` or ``"stmas"``.
    spin : float
        Nuclear spin I.
    order : int
        Coherence order p of the t1 transition (2m for MQMAS, 1 for STMAS).
    t1_pairs : tuple of (float, float)
        The level pairs (m_hi, m_lo) that evolve in t1, each with equal weight
        (MQMAS: (m, -m); STMAS: (3/2, 1/2) and (-1/2, -3/2)).
    ratio : float
        R = Q_4(t1) / Q_4(CT): the rank-4 part of the t1 frequency over that of the CT.
    f1_qis_factor : float
        k_F1: the F1 quadrupolar-induced shift over the F2 one (the CT's).

    Examples
    --------
    >>> s = two_dimensional_scale(2.5, "mqmas", 3)
    >>> s.ratio_fraction, s.f1_qis_fraction
    ('19/12', '-10/17')
    """

    experiment: str
    spin: float
    order: int
    t1_pairs: tuple
    ratio: float
    f1_qis_factor: float

    @property
    def ratio_fraction(self) -> str:
        """R as a fraction (the coefficients are rational).

        Returns
        -------
        str
        """
        return str(Fraction(self.ratio).limit_denominator(10000))

    @property
    def f1_qis_fraction(self) -> str:
        """k_F1 as a fraction.

        Returns
        -------
        str
        """
        return str(Fraction(self.f1_qis_factor).limit_denominator(10000))

    def f1_scale_factor(self, name: str = "isotropic") -> float:
        """The factor c of an F1 scale: F1 on that scale = c F1 on the isotropic scale (same 0 ppm).

        Parameters
        ----------
        name : {"isotropic", "t1_evolution", "total_evolution"}
            See :data:`F1_SCALES`.

        Returns
        -------
        float
            1, p - R or (p - R) / (1 + |R|).

        Raises
        ------
        ValueError
            An unknown name (the message lists the allowed ones).

        References
        ----------
        S. E. Ashbrook, S. Wimperis, Prog. Nucl. Magn. Reson. Spectrosc. 45 (2004) 53 (F1 scaling conventions).

        Examples
        --------
        >>> s = two_dimensional_scale(1.5, "mqmas", 3)
        >>> [str(Fraction(s.f1_scale_factor(n)).limit_denominator(1000)) for n in F1_SCALES]
        ['1', '34/9', '17/8']
        """
        p, r = self.order, self.ratio
        if name == "isotropic":
            return 1.0
        if name == "t1_evolution":
            return float(p - r)
        if name == "total_evolution":
            return float((p - r) / (1.0 + abs(r)))
        raise ValueError(f"f1 scale {name!r} is not one of " + ", ".join(repr(k) for k in F1_SCALES))

    def describe(self, f1_scale: str = "isotropic") -> dict:
        """The convention as metadata: formulas in words and the numbers that enter them.

        Parameters
        ----------
        f1_scale : str, optional
            The F1 scale (:data:`F1_SCALES`) the metadata describes.

        Returns
        -------
        dict

        Examples
        --------
        >>> two_dimensional_scale(1.5, "mqmas", 3).describe()["refocusing_ratio"]
        '-7/9'
        >>> two_dimensional_scale(1.5, "mqmas", 3).describe("t1_evolution")["f1_scale_factor"]
        '34/9'
        """
        c = self.f1_scale_factor(f1_scale)
        cf = str(Fraction(c).limit_denominator(10000))
        pairs = ", ".join(f"{_frac(a)} <-> {_frac(b)}" for a, b in self.t1_pairs)
        return {
            "experiment": self.experiment,
            "t1_transitions": pairs,
            "coherence_order": self.order,
            "refocusing_ratio": self.ratio_fraction,
            "f1_scale": f1_scale,
            "f1_scale_factor": cf,
            "f1_qis_factor": self.f1_qis_fraction,
            "f1_scale_description": F1_SCALES[f1_scale],
            "f1_definition": ((f"nu_F1 = (nu_t1 - R nu_CT) / (p - R) with R = {self.ratio_fraction}, "
                               f"p = {self.order}: a site with C_Q = 0 lies on the diagonal") if f1_scale == "isotropic"
                              else (f"nu_F1 = ({cf}) (nu_t1 - R nu_CT) / (p - R) with R = {self.ratio_fraction}, "
                                    f"p = {self.order}: a site with C_Q = 0 lies at F1 = ({cf}) delta_iso")),
            "f2_centre_of_gravity": "delta_F2 = delta_iso + delta_QIS",
            "f1_centre_of_gravity": (f"delta_F1 = delta_iso + ({self.f1_qis_fraction}) delta_QIS"
                                     if f1_scale == "isotropic" else
                                     f"delta_F1 = ({cf}) [delta_iso + ({self.f1_qis_fraction}) delta_QIS]"),
            "delta_QIS": ("-(3/40) (P_Q/nu0)^2 [I(I+1) - 3/4] / [I^2 (2I-1)^2] 1e6 ppm, "
                          "P_Q = C_Q sqrt(1 + eta^2/3)"),
        }


def _frac(m: float) -> str:
    return str(Fraction(m).limit_denominator(4))


def two_dimensional_scale(spin: float, experiment: str, mq_order: int = 3) -> TwoDimensionalScale:
    """Refocusing ratio R and the sheared F1 scale of an MQMAS or STMAS experiment.

    Parameters
    ----------
    spin : float
        Nuclear spin I (half-integer, >= 3/2).
    experiment : {"mqmas", "stmas"}
    mq_order : int, optional
        Coherence order p of the MQMAS transition (3, 5, ..., 2I); not used
        for STMAS.

    Returns
    -------
    TwoDimensionalScale

    Raises
    ------
    ValueError
        An integer or spin-1/2 nucleus, an unknown experiment, or an order
        the spin does not have (the message names ``mq_order`` and the range).

    References
    ----------
    L. Frydman, J. S. Harwood, J. Am. Chem. Soc. 117 (1995) 5367; Z. Gan,
    J. Am. Chem. Soc. 122 (2000) 3242; S. E. Ashbrook, S. Wimperis, Prog.
    Nucl. Magn. Reson. Spectrosc. 45 (2004) 53.

    Examples
    --------
    >>> [two_dimensional_scale(2.5, "mqmas", p).ratio_fraction for p in (3, 5)]
    ['19/12', '-25/12']
    """
    orders = allowed_mq_orders(spin)
    if not orders:
        raise ValueError(f"experiment = {experiment!r} needs a half-integer spin of at least 3/2 "
                         f"(a central transition to correlate with); this nucleus has I = {_frac(spin)}")
    if experiment == "mqmas":
        if isinstance(mq_order, bool) or int(mq_order) != mq_order or int(mq_order) not in orders:
            raise ValueError(f"mq_order = {mq_order!r} is not available for I = {_frac(spin)}; allowed: "
                             + ", ".join(str(p) for p in orders) + " (odd orders 3 to 2I)")
        p = int(mq_order)
        m = p / 2.0
        pairs = ((m, -m),)
    elif experiment == "stmas":
        p = 1
        pairs = ((1.5, 0.5), (-0.5, -1.5))
    else:
        raise ValueError(f"experiment = {experiment!r} is not one of 'mqmas', 'stmas'")
    q_ct = rank_coefficients(spin, 0.5, -0.5)
    q_t1 = rank_coefficients(spin, *pairs[0])
    r = q_t1[2] / q_ct[2]
    k = (q_t1[0] / q_ct[0] - r) / (p - r)
    return TwoDimensionalScale(experiment, float(spin), p, pairs, r, k)


def isotropic_shifts_ppm(scale: TwoDimensionalScale, cq_mhz: float, eta_q: float, nu0_hz: float,
                         shift_ppm: float = 0.0) -> tuple[float, float]:
    """A site's centres of gravity (ppm) in F1 and F2 of the sheared spectrum (infinite-rate MAS).

    Parameters
    ----------
    scale : TwoDimensionalScale
    cq_mhz : float
        C_Q (MHz).
    eta_q : float
        Asymmetry eta_Q.
    nu0_hz : float
        Larmor (reference) frequency (Hz).
    shift_ppm : float, optional
        Isotropic shift delta_iso (ppm).

    Returns
    -------
    (delta_F1, delta_F2) : tuple of float
        ppm: delta_iso + k_F1 delta_QIS and delta_iso + delta_QIS.

    References
    ----------
    A. Samoson, Chem. Phys. Lett. 119 (1985) 29 (delta_QIS of the CT).

    Examples
    --------
    >>> s = two_dimensional_scale(1.5, "mqmas", 3)
    >>> f1, f2 = isotropic_shifts_ppm(s, 2.0, 0.0, 105.8e6, 10.0)
    >>> round((f1 - 10.0) / (f2 - 10.0), 9)     # -10/17
    -0.588235294
    """
    spin = scale.spin
    k = cq_mhz * 1e6 / (2 * spin * (2 * spin - 1))
    c2 = -k * k / (2.0 * nu0_hz)
    q_ct = rank_coefficients(spin, 0.5, -0.5)[0]
    qis = 1e6 * c2 * (1.0 + eta_q * eta_q / 3.0) * q_ct / nu0_hz
    return shift_ppm + scale.f1_qis_factor * qis, shift_ppm + qis
