"""Private numba kernels: arrays in, arrays out, no validation.

Every kernel here has a slow, obvious twin in ``tests/reference/`` that it is
checked against.  Units: Hz for frequencies, ppm for shift tensors, the EFG
principal values in units of V_zz.

Geometry shared by the producers
--------------------------------
An orientation is a unit vector ``n`` in the crystallite frame (the EFG
principal frame, or the shift frame when there is no quadrupole coupling).
Static: ``n`` is the direction of B0.  Spinning: ``n`` is the rotor axis and
B0, seen from the crystallite, precesses about it at the rotor angle:
``b(phi) = cos(theta_R) n + sin(theta_R) (cos(phi) u + sin(phi) v)`` with
``u, v`` an orthonormal pair perpendicular to ``n`` and ``phi`` the rotor
phase.  Only B0's direction ``b`` in the crystallite frame enters the
high-field frequencies, so one sampling routine serves static, spinning and
infinite-rate cases.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

__all__: list[str] = []


# ---------------------------------------------------------------------------
# geometry


@njit(cache=True)
def _perp3(n0, n1, n2):
    """An orthonormal pair (u, v) perpendicular to the unit vector n, v = n x u (scalars)."""
    ax, ay, az = abs(n0), abs(n1), abs(n2)
    # cross n with the coordinate axis least aligned with it
    if ax <= ay and ax <= az:
        u0, u1, u2 = 0.0, n2, -n1
    elif ay <= az:
        u0, u1, u2 = -n2, 0.0, n0
    else:
        u0, u1, u2 = n1, -n0, 0.0
    s = 1.0 / math.sqrt(u0 * u0 + u1 * u1 + u2 * u2)
    u0 *= s
    u1 *= s
    u2 *= s
    v0 = n1 * u2 - n2 * u1
    v1 = n2 * u0 - n0 * u2
    v2 = n0 * u1 - n1 * u0
    return u0, u1, u2, v0, v1, v2


@njit(cache=True)
def _perp_pair(n):
    """Array form of :func:`_perp3`."""
    u0, u1, u2, v0, v1, v2 = _perp3(n[0], n[1], n[2])
    return np.array([u0, u1, u2]), np.array([v0, v1, v2])


@njit(cache=True)
def _field_direction(n, u, v, cos_r, sin_r, phi, b):
    c = math.cos(phi)
    s = math.sin(phi)
    for k in range(3):
        b[k] = cos_r * n[k] + sin_r * (c * u[k] + s * v[k])


@njit(cache=True, inline="always")
def _cone_functions(n0, n1, n2, u0, u1, u2, w0, w1, w2, cos_r, cc, sn, v0, v1, v2, t2, shift_terms):
    """The four orientation functions the perturbative offsets are linear in.

    B0 direction b = cos_r n + cc u + sn w (cc, sn already include sin_r);
    returns V_zz, A = V_xz^2 + V_yz^2 = |V b|^2 - V_zz^2,
    B = (V_xx - V_yy)^2 + 4 V_xy^2 = 2 Tr V^2 - 3 V_zz^2 - 4 A and d_zz, with
    shift_terms = (d00, d11, d22, d01 + d10, d02 + d20, d12 + d21) of the shift tensor.
    """
    b0 = cos_r * n0 + cc * u0 + sn * w0
    b1 = cos_r * n1 + cc * u1 + sn * w1
    b2 = cos_r * n2 + cc * u2 + sn * w2
    b0s = b0 * b0
    b1s = b1 * b1
    b2s = b2 * b2
    vzz = v0 * b0s + v1 * b1s + v2 * b2s
    a = v0 * v0 * b0s + v1 * v1 * b1s + v2 * v2 * b2s - vzz * vzz
    bq = 2.0 * t2 - 3.0 * vzz * vzz - 4.0 * a
    dzz = (shift_terms[0] * b0s + shift_terms[1] * b1s + shift_terms[2] * b2s + shift_terms[3] * b0 * b1
           + shift_terms[4] * b0 * b2 + shift_terms[5] * b1 * b2)
    return vzz, a, bq, dzz


@njit(cache=True)
def _shift_terms(delta):
    return (delta[0, 0], delta[1, 1], delta[2, 2], delta[0, 1] + delta[1, 0], delta[0, 2] + delta[2, 0],
            delta[1, 2] + delta[2, 1])


@njit(cache=True, inline="always")
def _pair_coefficients(m, mm, x, quad_constant_hz, c2):
    """Coefficients of the offset of the level pair (m, mm) on (d_zz, V_zz, A, B).

    The offset E(m) - E(mm) - (m - mm) nu0 of the high-field formulas
    (DEVELOPERS.md, "Level energies") is linear in four orientation
    functions: c_cs * nu0 1e-6 d_zz + c1 V_zz + c_a A + c_b B, with
    E1(m) - E1(mm) = (3 K / 2) V_zz (m^2 - mm^2) and
    E2(m) - E2(mm) = c2 [ca A - cb B / 4], c2 = -K^2 / (2 nu0).
    Returns (m - mm, c1, c_a, c_b).
    """
    c1 = 1.5 * quad_constant_hz * (m * m - mm * mm)
    ca = m * (4 * x - 8 * m * m - 1) - mm * (4 * x - 8 * mm * mm - 1)
    cb = m * (2 * x - 2 * m * m - 1) - mm * (2 * x - 2 * mm * mm - 1)
    return m - mm, c1, c2 * ca, -0.25 * c2 * cb


# ---------------------------------------------------------------------------
# perturbative producer


@njit(cache=True, nogil=True)
def _perturbative_offsets(axes, cos_r, sin_r, nphase, efg_principal_values, delta, quad_constant_hz, nu0_hz, m_upper,
                          m_lower, spin, second_order):
    """Offsets (Hz) of transitions m_hi <-> m_lo for every orientation and rotor phase.

    The offset is E(m_hi) - E(m_lo) - (m_hi - m_lo) nu0: single-quantum
    transitions have m_lo = m_hi - 1, symmetric multiple-quantum ones
    m_lo = -m_hi.

    Returns an array (n_orient, n_trans, nphase).  First-order shift (all of
    the tensor's lab zz part), first-order quadrupolar and second-order
    quadrupolar terms (DEVELOPERS.md, 'Physics formulas' formulas, written with the
    rotation invariants of the EFG so only b = B0 direction is needed).

    Serial and without the GIL: callers split the orientations among threads
    (``threads.split_work``).
    """
    n_or = axes.shape[0]
    nt = m_upper.shape[0]
    out = np.empty((n_or, nt, nphase))
    x = spin * (spin + 1.0)
    t2 = efg_principal_values[0] ** 2 + efg_principal_values[1] ** 2 + efg_principal_values[2] ** 2
    c2 = -(quad_constant_hz * quad_constant_hz) / (2.0 * nu0_hz) if second_order else 0.0
    # per-transition coefficients on (d_zz, V_zz, A, B) for the pair of levels (m_hi, m_lo)
    dm = np.empty(nt)
    c1 = np.empty(nt)
    ca = np.empty(nt)
    cb = np.empty(nt)
    for t in range(nt):
        dm[t], c1[t], ca[t], cb[t] = _pair_coefficients(m_upper[t], m_lower[t], x, quad_constant_hz, c2)
    scale_cs = nu0_hz * 1e-6
    cph = np.empty(nphase)
    sph = np.empty(nphase)
    for p in range(nphase):
        cph[p] = math.cos(2.0 * math.pi * p / nphase)
        sph[p] = math.sin(2.0 * math.pi * p / nphase)
    v0, v1, v2 = efg_principal_values[0], efg_principal_values[1], efg_principal_values[2]
    shift_terms = _shift_terms(delta)
    for i in range(n_or):
        n0, n1, n2 = axes[i, 0], axes[i, 1], axes[i, 2]
        u0, u1, u2, w0, w1, w2 = _perp3(n0, n1, n2)
        for p in range(nphase):
            vzz, a, bq, dzz = _cone_functions(n0, n1, n2, u0, u1, u2, w0, w1, w2, cos_r, sin_r * cph[p],
                                              sin_r * sph[p], v0, v1, v2, t2, shift_terms)
            cs = scale_cs * dzz
            for t in range(nt):
                out[i, t, p] = dm[t] * cs + c1[t] * vzz + ca[t] * a + cb[t] * bq
    return out


# ---------------------------------------------------------------------------
# exact producer


@njit(parallel=True, cache=True)
def _cone_polynomial(axes, cos_r, sin_r, nphase, exponents, coef):
    """Homogeneous polynomials in B0's direction b, evaluated at every orientation and rotor phase.

    ``exponents`` (C, 3) holds the powers (a, b, c) of the monomials b_x^a b_y^b b_z^c, all of
    one even degree L; ``coef`` (R, C) one row of coefficients per polynomial.  b is sampled as
    in ``frequencies.exact_pair_offsets`` (``_field_direction``; static when cos_r = 1, nphase = 1).  Returns
    (n_orient, R, nphase).  On the unit sphere these monomials span the spherical harmonics of
    every even rank <= L, so they represent any smooth even function of b that far.
    """
    n_or = axes.shape[0]
    nr, nc = coef.shape
    deg = 0
    for c in range(nc):
        deg = max(deg, exponents[c, 0] + exponents[c, 1] + exponents[c, 2])
    out = np.empty((n_or, nr, nphase))
    dphi = 2.0 * math.pi / nphase
    for i in prange(n_or):
        n0, n1, n2 = axes[i, 0], axes[i, 1], axes[i, 2]
        u0, u1, u2, w0, w1, w2 = _perp3(n0, n1, n2)
        px = np.empty(deg + 1)
        py = np.empty(deg + 1)
        pz = np.empty(deg + 1)
        acc = np.empty(nr)
        for p in range(nphase):
            cc = sin_r * math.cos(p * dphi)
            sn = sin_r * math.sin(p * dphi)
            b0 = cos_r * n0 + cc * u0 + sn * w0
            b1 = cos_r * n1 + cc * u1 + sn * w1
            b2 = cos_r * n2 + cc * u2 + sn * w2
            px[0] = 1.0
            py[0] = 1.0
            pz[0] = 1.0
            for k in range(1, deg + 1):
                px[k] = px[k - 1] * b0
                py[k] = py[k - 1] * b1
                pz[k] = pz[k - 1] * b2
            for r in range(nr):
                acc[r] = 0.0
            for c in range(nc):
                mono = px[exponents[c, 0]] * py[exponents[c, 1]] * pz[exponents[c, 2]]
                for r in range(nr):
                    acc[r] += coef[r, c] * mono
            for r in range(nr):
                out[i, r, p] = acc[r]
    return out


@njit(cache=True)
def _least_squares(a, rhs):
    """Least-squares solution X of A X ~ B by Householder QR (A (m, n), m >= n, full rank).

    Written out because a LAPACK call from numpy starts BLAS threads, which on a busy
    machine costs a hundred times the arithmetic of these small systems.  Householder
    reflections (G. H. Golub, C. F. Van Loan, *Matrix Computations* (1996), sec. 5.3,
    from memory) reduce A to triangular R and apply the same reflections to B; X then
    follows by back substitution.
    """
    m, n = a.shape
    r = a.copy()
    b = rhs.copy()
    nr = b.shape[1]
    v = np.empty(m)
    for j in range(n):
        nrm = 0.0
        for i in range(j, m):
            nrm += r[i, j] * r[i, j]
        nrm = math.sqrt(nrm)
        if nrm == 0.0:
            continue
        alpha = -nrm if r[j, j] >= 0.0 else nrm
        vv = 0.0
        for i in range(j, m):
            v[i] = r[i, j]
        v[j] -= alpha
        for i in range(j, m):
            vv += v[i] * v[i]
        if vv == 0.0:
            continue
        f = 2.0 / vv
        for c in range(j, n):
            d = 0.0
            for i in range(j, m):
                d += v[i] * r[i, c]
            d *= f
            for i in range(j, m):
                r[i, c] -= d * v[i]
        for c in range(nr):
            d = 0.0
            for i in range(j, m):
                d += v[i] * b[i, c]
            d *= f
            for i in range(j, m):
                b[i, c] -= d * v[i]
    x = np.zeros((n, nr))
    for c in range(nr):
        for j in range(n - 1, -1, -1):
            d = b[j, c]
            for k in range(j + 1, n):
                d -= r[j, k] * x[k, c]
            x[j, c] = d / r[j, j]
    return x


# ---------------------------------------------------------------------------
# consumer: rotor average and sideband amplitudes


@njit(cache=True)
def _fft_inplace(a, inverse):
    """Iterative radix-2 FFT (length a power of 2), unnormalised.

    Forward: A_k = sum_j a_j exp(-2 pi i j k / n); inverse uses +i.
    """
    n = a.shape[0]
    j = 0
    for i in range(1, n):
        bit = n >> 1
        while j & bit:
            j ^= bit
            bit >>= 1
        j |= bit
        if i < j:
            tmp = a[i]
            a[i] = a[j]
            a[j] = tmp
    length = 2
    sign = 1.0 if inverse else -1.0
    while length <= n:
        ang = sign * 2.0 * math.pi / length
        wl = complex(math.cos(ang), math.sin(ang))
        half = length // 2
        for start in range(0, n, length):
            w = 1.0 + 0.0j
            for k in range(half):
                x = a[start + k]
                y = a[start + k + half] * w
                a[start + k] = x + y
                a[start + k + half] = x - y
                w *= wl
        length <<= 1


@njit(parallel=True, cache=True)
def _sideband_intensities(traj, rate_hz):
    """Rotor averages and gamma-averaged sideband intensities |F_n|^2.

    ``traj`` (n_orient, n_trans, P) holds offsets (Hz) at P equally spaced
    rotor phases over one period (P a power of 2).  With
    ``nu(t) - mean = sum_k c_k exp(i k w_r t)`` the phase is
    ``xi(t) = sum_k c_k / (i k nu_r) exp(i k w_r t)``; F_n are the Fourier
    coefficients of exp(i xi(t)).  Band n sits at mean + n nu_r and is stored at
    index n mod P (the FFT order).
    """
    n_or, nt, p = traj.shape
    mean = np.empty((n_or, nt))
    amp = np.empty((n_or, nt, p))
    for i in prange(n_or):
        buf = np.empty(p, dtype=np.complex128)
        for t in range(nt):
            for j in range(p):
                buf[j] = traj[i, t, j]
            _fft_inplace(buf, False)
            mean[i, t] = buf[0].real / p
            buf[0] = 0.0
            if p >= 2:
                buf[p // 2] = 0.0
            for k in range(1, p // 2):
                g = buf[k] / p / (1j * k * rate_hz)
                buf[k] = g
                buf[p - k] = np.conj(g)
            _fft_inplace(buf, True)  # xi at the phases
            for j in range(p):
                xi = buf[j].real
                buf[j] = complex(math.cos(xi), math.sin(xi))
            _fft_inplace(buf, False)
            inv = 1.0 / (p * p)
            for j in range(p):
                amp[i, t, j] = (buf[j].real ** 2 + buf[j].imag ** 2) * inv
    return mean, amp


# ---------------------------------------------------------------------------
# binning
#
# Axis point k sits at the bin centre x0 + (k + 0.5) dx.  In point units
# v = (f - x0) / dx - 0.5 point k sits at v = k.  Every contribution is shared
# among the points by the linear "hat" function of each point,
# h_k(v) = max(0, 1 - |v - k|) (linear interpolation, "cloud in cell";
# R. W. Hockney, J. W. Eastwood, Computer Simulation Using Particles (1981),
# from memory).  The hats sum to 1 and sum_k k h_k(v) = v, so area and
# first moment of every contribution are kept exactly; the share of points
# outside 0 .. nb-1 is lost.


@njit(cache=True)
def _tent_second_integral(t, a, d, ca, cb, cen, w):
    """Second antiderivative R(t) of a triangle density of area w on [0, d], peak at a.

    The density rises linearly on [0, a] and falls on [a, d]; cen = (a + d) / 3
    is its centroid, ca = w / (3 d a) and cb = w / (3 d b) with b = d - a.
    R is 0 for t <= 0, ca t^3 on the rising side, w (t - cen) + cb (d - t)^3
    on the falling side and w (t - cen) beyond d; a side of zero width is
    never evaluated, so its coefficient may be anything finite.
    """
    p = t if t > 0.0 else 0.0
    q = d - t if t < d else 0.0
    rise = ca * p * p * p
    fall = w * (t - cen) + cb * q * q * q
    return rise if t <= a else fall


@njit(cache=True)
def _tent_corner_points(buf, kfrom, kto, v1, a, d, b, ca, cb, w):
    """Hat integrals of a tent (see ``_add_tent``) at points kfrom <= k < kto, from R.

    ca = w / (3 d a), cb = w / (3 d b) (anything finite for a side of zero
    width).  The second differences of R are taken from the end of the tent
    nearer these points (they do not change under t -> d - t with a and b
    swapped), so rounding stays at the size of the values used.
    """
    if kto <= kfrom:
        return
    t = kfrom - v1
    if t + 0.5 * (kto - 1 - kfrom) <= 0.5 * d:
        cen = (a + d) / 3.0
        r0 = _tent_second_integral(t - 1.0, a, d, ca, cb, cen, w)
        r1 = _tent_second_integral(t, a, d, ca, cb, cen, w)
        for k in range(kfrom, kto):
            r2 = _tent_second_integral(k + 1.0 - v1, a, d, ca, cb, cen, w)
            buf[k] += r2 - 2.0 * r1 + r0
            r0 = r1
            r1 = r2
    else:
        cen = (b + d) / 3.0
        v3 = v1 + d
        r0 = _tent_second_integral(v3 - kfrom + 1.0, b, d, cb, ca, cen, w)
        r1 = _tent_second_integral(v3 - kfrom, b, d, cb, ca, cen, w)
        for k in range(kfrom, kto):
            r2 = _tent_second_integral(v3 - k - 1.0, b, d, cb, ca, cen, w)
            buf[k] += r2 - 2.0 * r1 + r0
            r0 = r1
            r1 = r2


@njit(cache=True)
def _split_tent_at_point(buf, x1, x2, x3, kc, w, nb):
    """Hat integrals of a tent that crosses one point kc and reaches no other.

    x1 <= x2 <= x3 are the vertices relative to point kc, -1 <= x1 < 0 < x3 <= 1.
    The hats are linear between neighbouring points, so each of the two pieces
    of the tent (left and right of kc) is shared from its own centroid: with
    first moments ml <= 0 and mr >= 0 about kc (ml + mr = w (x1 + x2 + x3) / 3),
    point kc - 1 gets -ml, point kc + 1 gets mr and point kc the rest.  The
    piece cut off by kc is a triangle with its apex at an end of the tent:
    ml = w x1^3 / (3 d a) when the cut is on the rising side, else
    mr = w x3^3 / (3 d b) (d = x3 - x1, a = x2 - x1, b = x3 - x2); written
    as products of ratios in [-1, 1] so that no product of small widths
    underflows.
    """
    d = x3 - x1
    m = w * (x1 + x2 + x3) / 3.0
    if x2 >= 0.0:
        ml = w * x1 * (x1 / d) * (x1 / (x2 - x1)) / 3.0
        mr = m - ml
    else:
        mr = w * x3 * (x3 / d) * (x3 / (x3 - x2)) / 3.0
        ml = m - mr
    if 0 <= kc - 1 < nb:
        buf[kc - 1] -= ml
    if 0 <= kc < nb:
        buf[kc] += w + ml - mr
    if 0 <= kc + 1 < nb:
        buf[kc + 1] += mr


@njit(cache=True)
def _tent_kink_points(buf, kfrom, kto, v1, tau, jump, a, d, up, down):
    """Hat integrals of a tent at points kfrom <= k < kto whose hats meet one corner only.

    The density (up * t rising, down * (d - t) falling, 0 outside) changes
    slope by ``jump`` at t = tau.  Over a hat that holds only this corner the
    density is a straight line plus jump * (t - tau)_+, and a ramp
    integrated against the hat centred at t_k gives its value at t_k plus
    (1 - |t_k - tau|)^3 / 6, so the point gets
    rho(t_k) + jump * (1 - |t_k - tau|)_+^3 / 6.
    """
    for k in range(kfrom, kto):
        t = k - v1
        rho = up * t if t <= a else down * (d - t)
        if rho < 0.0:
            rho = 0.0
        s = 1.0 - abs(t - tau)
        if s > 0.0:
            rho += jump * s * s * s / 6.0
        buf[k] += rho


@njit(cache=True)
def _tent_vertices(f1, f2, f3, x0, inv):
    """Three tent vertices (Hz, any order) sorted and in point units (point k at x0 + (k + 0.5) / inv)."""
    if f1 > f2:
        f1, f2 = f2, f1
    if f2 > f3:
        f2, f3 = f3, f2
    if f1 > f2:
        f1, f2 = f2, f1
    return (f1 - x0) * inv - 0.5, (f2 - x0) * inv - 0.5, (f3 - x0) * inv - 0.5


@njit(cache=True)
def _add_tent(buf, f1, f2, f3, w, x0, dx, nb):
    """Add one triangular density (vertices f1, f2, f3 in Hz, any order, area w) to the axis points.

    Sorts the vertices, turns them into point units and calls ``_add_tent_points``.
    """
    u1, u2, u3 = _tent_vertices(f1, f2, f3, x0, 1.0 / dx)
    _add_tent_points(buf, u1, u2, u3, w, nb)


@njit(cache=True)
def _add_tent_points(buf, v1, v2, v3, w, nb):
    """Add one triangular density of area w to the axis points; vertices v1 <= v2 <= v3 in point units.

    Point units: v = (f - x0) / dx - 1/2, so point k (the bin centre
    x0 + (k + 1/2) dx) sits at v = k.

    Point k receives the integral of the density times its hat function.  In
    point units with t = v - v1, d = v3 - v1, a = v2 - v1, b = v3 - v2 that is
    the second difference R(t+1) - 2 R(t) + R(t-1) of the density's second
    antiderivative R (piecewise cubic; ``_tent_second_integral``).  Where the
    hat lies on one straight side of the tent R is one cubic and the second
    difference is the density itself, 2 w t / (d a) rising or
    2 w (d - t) / (d b) falling, which is what is used there on long sides;
    next to a corner of a long side the density plus the corner's kink term
    (``_tent_kink_points``), elsewhere the rolling second differences of R
    (``_tent_corner_points``).
    A tent that lies between two neighbouring points is shared linearly from
    its centroid (v1 + v2 + v3) / 3, and one that crosses a single point is
    shared piece by piece (``_split_tent_at_point``): the same rule in closed
    form for the narrow tents that dominate sideband spectra.
    """
    if v3 <= -1.0 or v1 >= nb:
        return
    fl = math.floor(v1)
    if v3 <= fl + 1.0:  # between points fl and fl + 1: split from the centroid
        r = (v1 + v2 + v3) / 3.0 - fl
        j = int(fl)
        if j >= 0:
            buf[j] += w * (1.0 - r)
        if j + 1 < nb:
            buf[j + 1] += w * r
        return
    if v3 <= fl + 2.0:
        _split_tent_at_point(buf, v1 - fl - 1.0, v2 - fl - 1.0, v3 - fl - 1.0, int(fl) + 1, w, nb)
        return
    klo = int(fl) if fl > 0.0 else 0
    khi = nb - 1 if v3 >= nb - 1.0 else int(math.floor(v3)) + 1
    d = v3 - v1
    a = v2 - v1
    b = v3 - v2
    # d > 1 here; a side narrower than 1e-150 points holds R below 1e-300 w, so it
    # counts as zero width (no overflow of w / (3 d a), no inf * 0)
    ca = w / (3.0 * d * a) if a > 1e-150 else 0.0
    cb = w / (3.0 * d * b) if b > 1e-150 else 0.0
    up = 6.0 * ca  # the density is up * t on the rising side
    down = 6.0 * cb  # and down * (d - t) on the falling side
    k = klo
    # straight rising side: points with 1 <= t <= a - 1.  A side gets a loop of its own
    # (density values, closed forms at its corners) when it holds at least 3 points;
    # shorter ones are left to the rolling second differences (a speed choice; the
    # result is the same to rounding)
    lo = max(float(klo), math.ceil(v1 + 1.0))
    hi = min(float(khi), math.floor(v2 - 1.0))
    rising = hi - lo >= 2.0
    if rising:
        _tent_kink_points(buf, k, int(lo), v1, 0.0, up, a, d, up, down)
        for j in range(int(lo), int(hi) + 1):
            buf[j] += up * (j - v1)
        k = int(hi) + 1
    # straight falling side: points with a + 1 <= t <= d - 1
    lo = max(float(k), math.ceil(v2 + 1.0))
    hi = min(float(khi), math.floor(v3 - 1.0))
    if hi - lo >= 2.0:
        if rising:
            _tent_kink_points(buf, k, int(lo), v1, a, -(up + down), a, d, up, down)
        else:
            _tent_corner_points(buf, k, int(lo), v1, a, d, b, ca, cb, w)
        for j in range(int(lo), int(hi) + 1):
            buf[j] += down * (v3 - j)
        k = int(hi) + 1
        _tent_kink_points(buf, k, khi + 1, v1, d, down, a, d, up, down)
    else:
        _tent_corner_points(buf, k, khi + 1, v1, a, d, b, ca, cb, w)


@njit(cache=True, nogil=True)
def _band_extent(amp):
    """Extent of each line's bands (n_v, n_t): the largest |n| whose intensity is not zero.

    A line computed at fewer phases than P (``_perturbative_sidebands`` with ``adaptive``) has exact
    zeros beyond its own bands, found by scanning inwards from band P/2.
    """
    nv, nt, p = amp.shape
    ext = np.empty((nv, nt), dtype=np.int64)
    for i in range(nv):
        for t in range(nt):
            e = p // 2
            while e > 0 and amp[i, t, e] == 0.0 and amp[i, t, p - e] == 0.0:
                e -= 1
            ext[i, t] = e
    return ext


@njit(cache=True, nogil=True)
def _bin_tent(mean, amp, weights_t, ext, tris, tri_w, rate_hz, x0, dx, nb, cutoff):
    """Triangle ("tent") interpolation of every line onto the axis points.

    mean (n_v, n_t): line centres (Hz) per vertex and transition; amp
    (n_v, n_t, P): sideband intensities (P = 1 for static / infinite rate);
    weights_t (n_v, n_t): transition weights per vertex.  Each triangle
    contributes, for each line, a triangular density between its three
    vertex frequencies with area tri_w * mean vertex intensity, shared among
    the axis points x0 + (k + 0.5) dx by their hat functions
    (``_add_tent_points``).  Returns (nb,) summed intensities.

    Only the bands a triangle's vertices carry are visited: ``ext`` (n_v, n_t)
    is each line's band extent (``_band_extent``).  Serial and without the GIL:
    callers split the triangles among threads and add the results.
    """
    m = tris.shape[0]
    nt = mean.shape[1]
    p = amp.shape[2]
    inv = 1.0 / dx
    step_pts = rate_hz * inv  # one band further, in points
    buf = np.zeros(nb)
    for q in range(m):
        a = tris[q, 0]
        b = tris[q, 1]
        d = tris[q, 2]
        for t in range(nt):
            # vertex order and point coordinates once per line; bands only shift them
            u1, u2, u3 = _tent_vertices(mean[a, t], mean[b, t], mean[d, t], x0, inv)
            e = max(ext[a, t], max(ext[b, t], ext[d, t]))
            for q2 in range(min(p, 2 * e + 1)):
                # bands 0, 1, -1, 2, -2, ... out to the vertices' extent
                n2 = (q2 + 1) // 2
                s = n2 if q2 % 2 == 1 or q2 == 0 else p - n2
                w = (
                    amp[a, t, s] * weights_t[a, t]
                    + amp[b, t, s] * weights_t[b, t]
                    + amp[d, t, s] * weights_t[d, t]
                ) * (tri_w[q] / 3.0)
                if w <= cutoff:
                    continue
                n = s if s < (p + 1) // 2 else s - p
                sh = n * step_pts if p > 1 else 0.0
                _add_tent_points(buf, u1 + sh, u2 + sh, u3 + sh, w, nb)
    return buf


@njit(cache=True)
def _bin_histogram(mean, amp, weights_t, vert_w, rate_hz, x0, dx, nb):
    """Each vertex's lines shared linearly between the two axis points around them.

    A line at point coordinate v (point k at v = k, the bin centre
    x0 + (k + 0.5) dx) gives 1 - r of its weight to point floor(v) and r to
    floor(v) + 1, r = v - floor(v); shares of points off the axis are lost
    (the work array has one guard point at either end).
    """
    nv, nt = mean.shape
    p = amp.shape[2]
    pad = np.zeros(nb + 2)  # pad[k + 1] is point k
    inv = 1.0 / dx
    top = float(nb)
    for i in range(nv):
        for t in range(nt):
            for s in range(p):
                w = amp[i, t, s] * weights_t[i, t] * vert_w[i]
                if w == 0.0:
                    continue
                n = s if s < (p + 1) // 2 else s - p
                off = n * rate_hz if p > 1 else 0.0
                v = (mean[i, t] + off - x0) * inv + 0.5  # one more than the point coordinate
                if v > 0.0 and v < top + 1.0:
                    j = int(v)
                    r = v - j
                    pad[j] += w * (1.0 - r)
                    pad[j + 1] += w * r
    return pad[1:nb + 1].copy()


# ---------------------------------------------------------------------------
# fused perturbative producer + sideband consumer (finite-rate spinning)


@njit(cache=True)
def _fft_tables(p):
    """Bit-reversal permutation and twiddles exp(-2 pi i k / p), k < p/2."""
    rev = np.zeros(p, dtype=np.int64)
    bits = 0
    while (1 << bits) < p:
        bits += 1
    for i in range(p):
        r = 0
        x = i
        for _ in range(bits):
            r = (r << 1) | (x & 1)
            x >>= 1
        rev[i] = r
    half = max(p // 2, 1)
    tw = np.empty(half, dtype=np.complex128)
    for k in range(half):
        ang = -2.0 * math.pi * k / p
        tw[k] = complex(math.cos(ang), math.sin(ang))
    return rev, tw


@njit(cache=True, fastmath=True, inline="always")
def _sincos(x):
    """(cos x, sin x) to ~1e-15 absolute for |x| < 1e6, branch-free so loops vectorise.

    Cody-Waite reduction by pi/2 (three-part constant) and Taylor polynomials
    of degree 15 / 16 on [-pi/4, pi/4] (truncation error < 1e-16).
    """
    n = np.floor(x * 0.6366197723675814 + 0.5)
    r = x - n * 1.5707963267341256
    r = r - n * 6.077100506506192e-11
    r = r - n * 2.0222662487959506e-21
    r2 = r * r
    s = r * (1.0 + r2 * (-1.6666666666666666e-01 + r2 * (8.3333333333333332e-03 + r2 * (
        -1.9841269841269841e-04 + r2 * (2.7557319223985893e-06 + r2 * (-2.5052108385441720e-08 + r2 * (
            1.6059043836821613e-10 + r2 * (-7.6471637318198164e-13))))))))
    c = 1.0 + r2 * (-0.5 + r2 * (4.1666666666666664e-02 + r2 * (-1.3888888888888889e-03 + r2 * (
        2.4801587301587302e-05 + r2 * (-2.7557319223985888e-07 + r2 * (2.0876756987868100e-09 + r2 * (
            -1.1470745597729725e-11 + r2 * 4.7794773323873853e-14)))))))
    # quadrant q = n mod 4 and its bits, in floating point (no float -> int
    # conversion, which AVX2 cannot do on packed doubles)
    q = n - 4.0 * np.floor(n * 0.25)
    hq = np.floor(q * 0.5)
    sw = q - 2.0 * hq
    h1 = np.floor((q + 1.0) * 0.5)
    sgn_s = 1.0 - 2.0 * hq
    sgn_c = 1.0 - 2.0 * (h1 - 2.0 * np.floor(h1 * 0.5))
    return (c + sw * (s - c)) * sgn_c, (s + sw * (c - s)) * sgn_s


@njit(cache=True)
def _stage_twiddles(p):
    """Twiddles exp(-2 pi i k / L) for each radix-2 stage L = 2, 4, ..., p, concatenated.

    Stage with half-length h occupies [h - 1, 2h - 1).
    """
    twr = np.empty(max(p - 1, 1))
    twi = np.empty(max(p - 1, 1))
    h = 1
    while 2 * h <= p:
        for k in range(h):
            ang = -math.pi * k / h
            twr[h - 1 + k] = math.cos(ang)
            twi[h - 1 + k] = math.sin(ang)
        h *= 2
    return twr, twi


#: orientations processed side by side in the fused kernel (SIMD lanes)
_LANES = 8


@njit(cache=True, fastmath=True)
def _fft_lanes_bitreversed(re, im, twr, twi):
    """In-place forward radix-2 FFTs of ``_LANES`` signals at once.

    ``re`` and ``im`` have shape (P, _LANES) with the P samples of each lane in
    bit-reversed order; every butterfly runs over the lanes, which vectorises.
    """
    n = re.shape[0]
    nl = re.shape[1]  # a run-time trip count lets LLVM vectorise the lane loops
    h = 1
    if n >= 4:
        for a in range(0, n, 4):
            for l in range(nl):
                r0 = re[a, l] + re[a + 1, l]
                i0 = im[a, l] + im[a + 1, l]
                r1 = re[a, l] - re[a + 1, l]
                i1 = im[a, l] - im[a + 1, l]
                r2 = re[a + 2, l] + re[a + 3, l]
                i2 = im[a + 2, l] + im[a + 3, l]
                r3 = re[a + 2, l] - re[a + 3, l]
                i3 = im[a + 2, l] - im[a + 3, l]
                re[a, l] = r0 + r2
                im[a, l] = i0 + i2
                re[a + 2, l] = r0 - r2
                im[a + 2, l] = i0 - i2
                re[a + 1, l] = r1 + i3
                im[a + 1, l] = i1 - r3
                re[a + 3, l] = r1 - i3
                im[a + 3, l] = i1 + r3
        h = 4
    while 2 * h <= n:
        for start in range(0, n, 2 * h):
            for k in range(h):
                wr = twr[h - 1 + k]
                wi = twi[h - 1 + k]
                a = start + k
                b = a + h
                for l in range(nl):
                    xr = re[b, l] * wr - im[b, l] * wi
                    xi = re[b, l] * wi + im[b, l] * wr
                    re[b, l] = re[a, l] - xr
                    im[b, l] = im[a, l] - xi
                    re[a, l] += xr
                    im[a, l] += xi
        h *= 2


#: harmonics of a line's phase xi below this (radians) are left out of its sideband sum: dropping them
#: changes each band amplitude by less than their sum (|e^{i d} - 1| <= |d|), i.e. at the level of the
#: FFT's rounding; the trajectories of the fitted exact route carry such harmonics as rounding noise
_HARMONIC_FLOOR = 1e-13
#: a line computed at fewer phases than the site's (``adaptive``) keeps at most this fraction
#: of its intensity in the outer quarter of its own bands, else its phases are doubled
_LINE_ALIAS = 1e-12


@njit(cache=True)
def _level_tables(p):
    """e^{i phi_j} at the bit-reversed phases of every power of 2 from min(16, p) to p, concatenated.

    The table of P' phases starts at index P' - min(16, p).
    """
    p0 = min(16, p)
    zr = np.empty(2 * p)
    zi = np.empty(2 * p)
    pb = p0
    while pb <= p:
        rev, _ = _fft_tables(pb)
        for j in range(pb):
            ang = 2.0 * math.pi * rev[j] / pb
            zr[pb - p0 + j] = math.cos(ang)
            zi[pb - p0 + j] = math.sin(ang)
        pb *= 2
    return zr, zi


@njit(cache=True, inline="always")
def _line_phases(gr, gi, kk, nb, p):
    """First guess of the phases a block of lines needs: the site's rule on the block's own spread.

    ``gr + i gi`` (K, lanes) hold 2 g_k (g_k = c_k / (i k nu_r)), so the spread of the
    offsets in units of the rate is at most sum_k k |2 g_k|; the bands follow Carson's
    rule as in ``spinning.choose_rotor_phases``, with a margin of 4.
    """
    need = 0.0
    for l in range(nb):
        sp = 0.0
        for k in range(kk):
            sp += (k + 1) * math.sqrt(gr[k, l] * gr[k, l] + gi[k, l] * gi[k, l])
        need = max(need, sp)
    # four times the site's first-guess rule: the 1e-12 per-line check then rarely sends a block
    # round again (a failed try costs as much as the try that follows)
    bands = 2.0 * (need + 4.0)
    pb = min(16, p)
    while pb < 8.0 * bands and pb < p:
        pb *= 2
    return pb


@njit(cache=True, inline="always")
def _store_bands(amp_row, re, im, l, pb, p):
    """|F_n|^2 of lane l from a P' = pb point FFT into a row of P = p bands (band n at n mod P).

    Returns the fraction of the line's intensity in its outer quarter (|n| > 3 P' / 8).
    """
    inv = 1.0 / (pb * pb)
    for j in range(p):
        amp_row[j] = 0.0
    outer = 0.0
    total = 0.0
    half = pb // 2
    for j in range(pb):
        a = (re[j, l] * re[j, l] + im[j, l] * im[j, l]) * inv
        n = j if j < half else j - pb
        amp_row[n if n >= 0 else n + p] = a
        total += a
        if 8 * abs(n) > 3 * pb:
            outer += a
    return outer / total if total > 0.0 else 0.0


@njit(cache=True, fastmath=True, nogil=True)
def _perturbative_sidebands(axes, cos_r, sin_r, nphase, efg_principal_values, delta, quad_constant_hz, nu0_hz, m_upper,
                            spin, second_order,
                            rate_hz, adaptive=False):
    """Rotor averages and sideband intensities straight from the perturbative terms.

    Same physics as ``_perturbative_offsets`` followed by
    ``_sideband_intensities``, organised for speed: the four orientation
    functions the offsets are linear in (V_zz, the two second-order EFG
    invariants and d_zz) are trigonometric polynomials of degree <= 4 in the
    rotor phase, so 16 samples give their Fourier coefficients k = 0..4
    exactly; each transition's phase xi(t) is then summed from 4 harmonics at
    the P output phases, exponentiated and Fourier transformed.
    With ``adaptive`` each block of ``_LANES`` lines of one transition is
    computed at the fewest phases P' <= P its own manifold needs (first guess
    from its spread, doubled while more than ``_LINE_ALIAS`` of a line lies in
    its outer quarter of bands); the bands beyond P'/2 are zero.
    Returns mean (N, T) and amp (N, T, P).
    """
    n_or = axes.shape[0]
    nt = m_upper.shape[0]
    p = nphase
    ns = 16
    x = spin * (spin + 1.0)
    t2 = efg_principal_values[0] ** 2 + efg_principal_values[1] ** 2 + efg_principal_values[2] ** 2
    c2 = -(quad_constant_hz * quad_constant_hz) / (2.0 * nu0_hz) if second_order else 0.0
    scale_cs = nu0_hz * 1e-6
    # per-transition linear coefficients on (vzz, a, bq, dzz)
    coef = np.empty((nt, 4))
    for t in range(nt):
        dm, c1, ca, cb = _pair_coefficients(m_upper[t], m_upper[t] - 1.0, x, quad_constant_hz, c2)
        coef[t, 0] = c1
        coef[t, 1] = ca
        coef[t, 2] = cb
        coef[t, 3] = dm * scale_cs
    # sampling tables (16 phases) and harmonic tables at the P output phases
    cs16 = np.empty(ns)
    sn16 = np.empty(ns)
    for j in range(ns):
        cs16[j] = math.cos(2.0 * math.pi * j / ns)
        sn16[j] = math.sin(2.0 * math.pi * j / ns)
    # DFT tables for k = 0..4 on the 16 samples (1/16 included)
    dft_c = np.empty((5, ns))
    dft_s = np.empty((5, ns))
    for k in range(5):
        for j in range(ns):
            dft_c[k, j] = cs16[(j * k) % ns] / ns
            dft_s[k, j] = sn16[(j * k) % ns] / ns
    # harmonic tables at the output phases of every P' = 16 ... P, in bit-reversed order so the
    # exponentials land where the in-place FFT wants them (table of P' from index P' - 16)
    zr, zi = _level_tables(p)
    hre = np.empty((4, 2 * p))
    him = np.empty((4, 2 * p))
    for j in range(2 * p):
        cr = zr[j]
        ci = zi[j]
        ar = cr
        ai = ci
        for k in range(4):
            hre[k, j] = ar
            him[k, j] = ai
            ar, ai = ar * cr - ai * ci, ar * ci + ai * cr
    twr, twi = _stage_twiddles(p)
    mean = np.empty((n_or, nt))
    amp = np.empty((n_or, nt, p))
    inv = 1.0 / (p * p)
    v0, v1, v2 = efg_principal_values[0], efg_principal_values[1], efg_principal_values[2]
    shift_terms = _shift_terms(delta)
    # serial and without the GIL: the caller splits the orientations among threads (at multiples of
    # _LANES); one chunk here
    nchunk = 1
    step = n_or
    for c in range(nchunk):
        # per-chunk work buffers (no allocation per orientation, no sharing)
        f = np.empty((4, ns))
        fr = np.empty((_LANES, 4, 5))
        fi = np.empty((_LANES, 4, 5))
        re = np.empty((p, _LANES))
        im = np.empty((p, _LANES))
        gr = np.zeros((4, _LANES))
        gi = np.zeros((4, _LANES))
        i_end = min(n_or, (c + 1) * step)
        for blk in range(c * step, i_end, _LANES):
            nb = min(_LANES, i_end - blk)
            for l in range(nb):
                i = blk + l
                n0, n1, n2 = axes[i, 0], axes[i, 1], axes[i, 2]
                u0, u1, u2, w0, w1, w2 = _perp3(n0, n1, n2)
                for j in range(ns):
                    vzz, a, bq, dzz = _cone_functions(n0, n1, n2, u0, u1, u2, w0, w1, w2, cos_r,
                                                      sin_r * cs16[j], sin_r * sn16[j], v0, v1, v2, t2, shift_terms)
                    f[0, j] = vzz
                    f[1, j] = a
                    f[2, j] = bq
                    f[3, j] = dzz
                # Fourier coefficients k = 0..4 of the four functions
                for q in range(4):
                    for k in range(5):
                        sr = 0.0
                        si = 0.0
                        for j in range(ns):
                            sr += f[q, j] * dft_c[k, j]
                            si -= f[q, j] * dft_s[k, j]
                        fr[l, q, k] = sr
                        fi[l, q, k] = si
            for t in range(nt):
                for l in range(_LANES):
                    if l >= nb:
                        for k in range(4):
                            gr[k, l] = 0.0
                            gi[k, l] = 0.0
                        continue
                    m0 = 0.0
                    for q in range(4):
                        m0 += coef[t, q] * fr[l, q, 0]
                    mean[blk + l, t] = m0
                    # g_k = c_k / (i k nu_r); xi_j = sum_k 2 Re(g_k e^{i k phi_j})
                    for k in range(1, 5):
                        cr = 0.0
                        ci = 0.0
                        for q in range(4):
                            cr += coef[t, q] * fr[l, q, k]
                            ci += coef[t, q] * fi[l, q, k]
                        # (cr + i ci) / (i k nu) = (ci - i cr) / (k nu)
                        gr[k - 1, l] = 2.0 * ci / (k * rate_hz)
                        gi[k - 1, l] = -2.0 * cr / (k * rate_hz)
                nl = re.shape[1]
                pb = _line_phases(gr, gi, 4, nb, p) if adaptive else p
                while True:
                    o = pb - 16
                    for j in range(pb):
                        h0r, h1r, h2r, h3r = hre[0, o + j], hre[1, o + j], hre[2, o + j], hre[3, o + j]
                        h0i, h1i, h2i, h3i = him[0, o + j], him[1, o + j], him[2, o + j], him[3, o + j]
                        for l in range(nl):
                            xi = (gr[0, l] * h0r - gi[0, l] * h0i + gr[1, l] * h1r - gi[1, l] * h1i
                                  + gr[2, l] * h2r - gi[2, l] * h2i + gr[3, l] * h3r - gi[3, l] * h3i)
                            cx, sx = _sincos(xi)
                            re[j, l] = cx
                            im[j, l] = sx
                    _fft_lanes_bitreversed(re[:pb], im[:pb], twr, twi)
                    if pb == p:
                        for l in range(nb):
                            for j in range(p):
                                amp[blk + l, t, j] = (re[j, l] * re[j, l] + im[j, l] * im[j, l]) * inv
                        break
                    worst = 0.0
                    for l in range(nb):
                        worst = max(worst, _store_bands(amp[blk + l, t], re, im, l, pb, p))
                    if worst <= _LINE_ALIAS:
                        break
                    pb *= 2
    return mean, amp


@njit(cache=True, fastmath=True, nogil=True)
def _harmonic_sidebands(gr, gi, nphase, adaptive=False):
    """Sideband intensities |F_n|^2 from the Fourier components of each line's phase.

    Row r of ``gr + i gi`` (R, K) holds g_k, k = 1..K, of the accumulated phase
    xi(phi) = sum_k 2 Re(g_k e^{i k phi}) of one line (g_k = c_k / (i k nu_r) for a
    trajectory with Fourier components c_k).  xi is summed at the P = ``nphase``
    equally spaced phases (any K: a harmonic above P/2 is evaluated, not aliased),
    exponentiated and Fourier transformed, ``_LANES`` rows side by side as in
    ``_perturbative_sidebands`` (and, with ``adaptive``, each block at the fewest
    phases its lines need, as there).  A block's trailing harmonics below ``_HARMONIC_FLOOR``
    radians in all its rows are left out.  Returns amp (R, P), band n at index n mod P.
    """
    nrow, kk = gr.shape
    p = nphase
    p0 = min(16, p)
    twr, twi = _stage_twiddles(p)
    zr, zi = _level_tables(p)
    amp = np.empty((nrow, p))
    inv = 1.0 / (p * p)
    nblk = (nrow + _LANES - 1) // _LANES
    # serial and without the GIL: the caller splits the rows among threads
    nchunk = 1
    step = nblk
    for c in range(nchunk):
        re = np.empty((p, _LANES))
        im = np.empty((p, _LANES))
        hr = np.empty((kk, _LANES))
        hi = np.empty((kk, _LANES))
        er = np.empty(kk)
        ei = np.empty(kk)
        for blk in range(c * step, min(nblk, (c + 1) * step)):
            r0 = blk * _LANES
            nb = min(_LANES, nrow - r0)
            for k in range(kk):
                for l in range(_LANES):
                    if l < nb:
                        hr[k, l] = 2.0 * gr[r0 + l, k]
                        hi[k, l] = 2.0 * gi[r0 + l, k]
                    else:
                        hr[k, l] = 0.0
                        hi[k, l] = 0.0
            nl = re.shape[1]
            # the block's highest harmonic above _HARMONIC_FLOOR (the rest change no intensity beyond rounding)
            kb = kk
            while kb > 1:
                big = False
                for l in range(nb):
                    if abs(hr[kb - 1, l]) > _HARMONIC_FLOOR or abs(hi[kb - 1, l]) > _HARMONIC_FLOOR:
                        big = True
                if big:
                    break
                kb -= 1
            pb = _line_phases(hr, hi, kb, nb, p) if adaptive else p
            while True:
                o = pb - p0
                for j in range(pb):
                    # e^{i k phi_j}, k = 1..K, by repeated multiplication
                    cr = zr[o + j]
                    ci = zi[o + j]
                    er[0] = cr
                    ei[0] = ci
                    for k in range(1, kb):
                        er[k] = er[k - 1] * cr - ei[k - 1] * ci
                        ei[k] = er[k - 1] * ci + ei[k - 1] * cr
                    for l in range(nl):
                        re[j, l] = 0.0
                    for k in range(kb):
                        a = er[k]
                        b = ei[k]
                        for l in range(nl):
                            re[j, l] += hr[k, l] * a - hi[k, l] * b
                    for l in range(nl):
                        cx, sx = _sincos(re[j, l])
                        re[j, l] = cx
                        im[j, l] = sx
                _fft_lanes_bitreversed(re[:pb], im[:pb], twr, twi)
                if pb == p:
                    for l in range(nb):
                        for j in range(p):
                            amp[r0 + l, j] = (re[j, l] * re[j, l] + im[j, l] * im[j, l]) * inv
                    break
                worst = 0.0
                for l in range(nb):
                    worst = max(worst, _store_bands(amp[r0 + l], re, im, l, pb, p))
                if worst <= _LINE_ALIAS:
                    break
                pb *= 2
    return amp


@njit(cache=True, nogil=True)
def _band_summary(amp, weights, mean):
    """Per-band totals in one pass over the sideband intensities.

    amp (N, T, P), weights (N, T) (powder x transition weights), mean (N, T).
    Returns, for each band index p: the weighted intensity sum_v,t w amp,
    its weighted position sum w amp mean, and the largest amp over (v, t).
    Serial: one pass over memory, which a second thread does not speed up, and a
    parallel loop compiles five times longer.
    """
    n, nt, p = amp.shape
    out_i = np.zeros(p)
    out_p = np.zeros(p)
    out_m = np.zeros(p)
    for i in range(n):
        for t in range(nt):
            w = weights[i, t]
            wm = w * mean[i, t]
            for j in range(p):
                a = amp[i, t, j]
                out_i[j] += w * a
                out_p[j] += wm * a
                if a > out_m[j]:
                    out_m[j] = a
    return out_i, out_p, out_m


# ---------------------------------------------------------------------------
# finite pulses: propagators in the rotating frame
#
# The rotating-frame Hamiltonian during a pulse (Hz) is H = diag(D) + nu1 (cos(phi) Ix + sin(phi) Iy), with D the
# level energies (index a <-> m = I - a: offsets of the secular interactions) and the RF static during the pulse.
# Because D commutes with Iz, H = P (diag(D) + nu1 Ix) P^H with P = exp(-i phi Iz): the inner matrix is real,
# symmetric and tridiagonal, so one real eigendecomposition gives W = exp(-i 2 pi H0 t) and
# U[a, b] = exp(-i phi m_a) W[a, b] exp(+i phi m_b).


@njit(cache=True)
def _symmetric_eigen(a, lam, v):
    """Eigenvalues ``lam`` and eigenvectors (columns of ``v``) of the small real symmetric ``a`` (destroyed).

    Cyclic Jacobi rotations until the off-diagonal part is below 1e-17 of the Frobenius norm (G. H. Golub,
    C. F. Van Loan, *Matrix Computations*, 3rd ed. (1996), sec. 8.4 (from memory)): for the 2..10-level
    matrices of a pulse this is several times faster than a LAPACK call, and as accurate.
    """
    d = a.shape[0]
    for i in range(d):
        for j in range(d):
            v[i, j] = 0.0
        v[i, i] = 1.0
    fro = 0.0
    for i in range(d):
        for j in range(d):
            fro += a[i, j] * a[i, j]
    for _sweep in range(40):
        off = 0.0
        for p in range(d - 1):
            for q in range(p + 1, d):
                off += a[p, q] * a[p, q]
        if off <= 1e-34 * fro:
            break
        for p in range(d - 1):
            for q in range(p + 1, d):
                apq = a[p, q]
                if apq == 0.0:
                    continue
                tau = (a[q, q] - a[p, p]) / (2.0 * apq)
                if tau >= 0.0:
                    t = 1.0 / (tau + math.sqrt(1.0 + tau * tau))
                else:
                    t = -1.0 / (-tau + math.sqrt(1.0 + tau * tau))
                c = 1.0 / math.sqrt(1.0 + t * t)
                s = t * c
                for k in range(d):  # A J
                    akp = a[k, p]
                    akq = a[k, q]
                    a[k, p] = c * akp - s * akq
                    a[k, q] = s * akp + c * akq
                for k in range(d):  # J^T (A J)
                    apk = a[p, k]
                    aqk = a[q, k]
                    a[p, k] = c * apk - s * aqk
                    a[q, k] = s * apk + c * aqk
                for k in range(d):  # V J
                    vkp = v[k, p]
                    vkq = v[k, q]
                    v[k, p] = c * vkp - s * vkq
                    v[k, q] = s * vkp + c * vkq
    for i in range(d):
        lam[i] = a[i, i]


@njit(cache=True, inline="always")
def _pulse_inner(levels, ix_off, nu1, t, h, lam, vec, ek, w):
    """W = exp(-i 2 pi (diag(levels) + nu1 Ix) t) into ``w`` (complex d x d, symmetric); the rest are buffers."""
    d = levels.shape[0]
    for a in range(d):
        for b in range(d):
            h[a, b] = 0.0
        h[a, a] = levels[a]
    for a in range(d - 1):
        h[a, a + 1] = nu1 * ix_off[a]
        h[a + 1, a] = nu1 * ix_off[a]
    _symmetric_eigen(h, lam, vec)
    for k in range(d):
        ang = -2.0 * math.pi * lam[k] * t
        ek[k] = complex(math.cos(ang), math.sin(ang))
    for a in range(d):
        for b in range(a, d):
            acc = 0.0 + 0.0j
            for k in range(d):
                acc += vec[a, k] * vec[b, k] * ek[k]
            w[a, b] = acc
            w[b, a] = acc


@njit(parallel=True, cache=True)
def _pulse_propagators(levels, ix_off, mz, nu1, phase, t):
    """Propagators U (n, d, d) of one pulse for every row of ``levels`` (n, d); ``mz`` the m of each index."""
    n, d = levels.shape
    out = np.empty((n, d, d), dtype=np.complex128)
    nchunk = min(n, 64)
    for c in prange(nchunk):
        h = np.empty((d, d))
        lam = np.empty(d)
        vec = np.empty((d, d))
        ek = np.empty(d, dtype=np.complex128)
        w = np.empty((d, d), dtype=np.complex128)
        for i in range(c * n // nchunk, (c + 1) * n // nchunk):
            _pulse_inner(levels[i], ix_off, nu1, t, h, lam, vec, ek, w)
            for a in range(d):
                for b in range(d):
                    ang = phase * (mz[b] - mz[a])
                    out[i, a, b] = w[a, b] * complex(math.cos(ang), math.sin(ang))
    return out


@njit(parallel=True, cache=True)
def _density_after_pulses(levels, ix_off, mz, nu1, phase, t):
    """Density matrices (n, d, d) after back-to-back pulses k = 0.. (nu1[k], phase[k], t[k]) from rho = Iz."""
    n, d = levels.shape
    npulse = nu1.shape[0]
    out = np.empty((n, d, d), dtype=np.complex128)
    nchunk = min(n, 64)
    for c in prange(nchunk):
        h = np.empty((d, d))
        lam = np.empty(d)
        vec = np.empty((d, d))
        ek = np.empty(d, dtype=np.complex128)
        w = np.empty((d, d), dtype=np.complex128)
        u = np.empty((d, d), dtype=np.complex128)
        rho = np.empty((d, d), dtype=np.complex128)
        tmp = np.empty((d, d), dtype=np.complex128)
        for i in range(c * n // nchunk, (c + 1) * n // nchunk):
            for a in range(d):
                for b in range(d):
                    rho[a, b] = 0.0
                rho[a, a] = mz[a]
            for k in range(npulse):
                _pulse_inner(levels[i], ix_off, nu1[k], t[k], h, lam, vec, ek, w)
                for a in range(d):
                    for b in range(d):
                        ang = phase[k] * (mz[b] - mz[a])
                        u[a, b] = w[a, b] * complex(math.cos(ang), math.sin(ang))
                for a in range(d):  # tmp = U rho
                    for b in range(d):
                        acc = 0.0 + 0.0j
                        for q in range(d):
                            acc += u[a, q] * rho[q, b]
                        tmp[a, b] = acc
                for a in range(d):  # rho = tmp U^H
                    for b in range(d):
                        acc = 0.0 + 0.0j
                        for q in range(d):
                            acc += tmp[a, q] * u[b, q].conjugate()
                        rho[a, b] = acc
            for a in range(d):
                for b in range(d):
                    out[i, a, b] = rho[a, b]
    return out


@njit(parallel=True, cache=True)
def _excitation_amplitudes(levels, ix_off, mz, nu1, phase1, t1, phase2, t2, echo, upper):
    """Complex signal amplitude of each transition (n, T) after a single pulse or a spin echo.

    Single pulse: A = c <m-1| rho1 |m>, c = <m|I+|m-1>, rho1 = U1 Iz U1^H.  Echo (ideal selection of the pathway
    that refocuses transition m -> m-1 at the echo top): the +1 coherence <m|rho1|m-1> carried into the -1
    coherence of the same transition by the second pulse, A = c <m|rho1|m-1> U2[m-1, m] conj(U2[m, m-1]).
    ``upper`` holds the index of level m of each transition (level m-1 is the next index).
    """
    n, d = levels.shape
    nt = upper.shape[0]
    out = np.empty((n, nt), dtype=np.complex128)
    nchunk = min(n, 64)
    for c in prange(nchunk):
        h = np.empty((d, d))
        lam = np.empty(d)
        vec = np.empty((d, d))
        ek = np.empty(d, dtype=np.complex128)
        w = np.empty((d, d), dtype=np.complex128)
        w2 = np.empty((d, d), dtype=np.complex128)
        for i in range(c * n // nchunk, (c + 1) * n // nchunk):
            _pulse_inner(levels[i], ix_off, nu1, t1, h, lam, vec, ek, w)
            if echo:
                _pulse_inner(levels[i], ix_off, nu1, t2, h, lam, vec, ek, w2)
            for j in range(nt):
                b = upper[j]  # level m
                a = b + 1  # level m-1
                # (W Iz W^H)[a, b], then the phase of P: exp(-i phi (m_a - m_b)) = exp(+i phi)
                acc = 0.0 + 0.0j
                for q in range(d):
                    acc += w[a, q] * mz[q] * w[b, q].conjugate()
                r_ab = acc * complex(math.cos(phase1), math.sin(phase1))
                cj = 2.0 * ix_off[b]
                if echo:
                    tr = w2[a, b] * w2[b, a].conjugate() * complex(math.cos(2.0 * phase2), math.sin(2.0 * phase2))
                    out[i, j] = cj * r_ab.conjugate() * tr
                else:
                    out[i, j] = cj * r_ab
    return out


# ---------------------------------------------------------------------------
# multiple-quantum (MQMAS) pathways, fused
#
# The hard excitation and conversion pulses share one Hamiltonian H0 = diag(D) + nu1 Ix (all pulses are along x,
# so no phase factors), so one eigendecomposition H0 = V diag(lam) V^T serves both: U(t) = V diag(exp(-i 2 pi lam
# t)) V^T.  Only a few elements of each propagator enter a pathway, each a sum over the d eigenvectors, so the
# d x d propagators are never formed.  The inner matrix is tridiagonal, which the eigensolver below uses.


@njit(cache=True, inline="always")
def _pythag(a, b):
    """sqrt(a^2 + b^2) without overflow; the plain form when it is safe (several times faster than hypot)."""
    if abs(a) < 1e150 and abs(b) < 1e150:
        return math.sqrt(a * a + b * b)
    return math.hypot(a, b)


@njit(cache=True)
def _tridiagonal_eigen(diag, off, lam, v):
    """Eigenvalues ``lam`` and eigenvectors (columns of ``v``) of a real symmetric tridiagonal matrix.

    ``diag`` (d) is its diagonal and ``off[k]`` (k < d - 1) the element (k, k + 1); both are destroyed
    (``off`` needs length d).  Implicit QL iterations with Wilkinson's shift, the plane rotations accumulated
    into ``v`` (J. H. Wilkinson, *The Algebraic Eigenvalue Problem* (1965), ch. 8; G. H. Golub, C. F. Van Loan,
    *Matrix Computations*, 3rd ed. (1996), sec. 8.3 (both from memory)): O(d^2) per iteration and about two
    iterations per eigenvalue, against O(d^3) per sweep for Jacobi on the full matrix.
    """
    d = diag.shape[0]
    for i in range(d):
        for j in range(d):
            v[i, j] = 0.0
        v[i, i] = 1.0
    off[d - 1] = 0.0
    for l in range(d):
        for _it in range(64):
            m = l  # the first negligible off-diagonal element at or below l splits the matrix
            while m < d - 1:
                if abs(off[m]) <= 2.2e-16 * (abs(diag[m]) + abs(diag[m + 1])):
                    break
                m += 1
            if m == l:
                break
            g = (diag[l + 1] - diag[l]) / (2.0 * off[l])  # Wilkinson's shift from the leading 2 x 2 block
            r = _pythag(g, 1.0)
            g = diag[m] - diag[l] + off[l] / (g + (r if g >= 0.0 else -r))
            s = 1.0
            c = 1.0
            p = 0.0
            i = m - 1
            split = False
            while i >= l:  # chase the bulge upwards with plane rotations
                f = s * off[i]
                b = c * off[i]
                r = _pythag(f, g)
                off[i + 1] = r
                if r == 0.0:  # an off-diagonal element underflowed: the matrix split
                    diag[i + 1] -= p
                    off[m] = 0.0
                    split = True
                    break
                s = f / r
                c = g / r
                g = diag[i + 1] - p
                r = (diag[i] - g) * s + 2.0 * c * b
                p = s * r
                diag[i + 1] = g + p
                g = c * r - b
                for k in range(d):
                    f = v[k, i + 1]
                    v[k, i + 1] = s * v[k, i] + c * f
                    v[k, i] = c * v[k, i] - s * f
                i -= 1
            if split:
                continue
            diag[l] -= p
            off[l] = g
            off[m] = 0.0
    for i in range(d):
        lam[i] = diag[i]


@njit(cache=True, inline="always")
def _rf_eigen(levels, ix_off, nu1, dg, of, lam, v):
    """Eigendecomposition of diag(levels) + nu1 Ix (real, symmetric, tridiagonal) into ``lam``, ``v``."""
    d = levels.shape[0]
    for a in range(d):
        dg[a] = levels[a]
        of[a] = nu1 * ix_off[a] if a < d - 1 else 0.0
    _tridiagonal_eigen(dg, of, lam, v)


@njit(cache=True, inline="always")
def _phasors(lam, t, e):
    """e[k] = exp(-i 2 pi lam[k] t) (the polynomial ``_sincos`` where it is accurate, |angle| < 1e6)."""
    for k in range(lam.shape[0]):
        ang = -2.0 * math.pi * lam[k] * t
        if abs(ang) < 1e6:
            c, s = _sincos(ang)
            e[k] = complex(c, s)
        else:
            e[k] = complex(math.cos(ang), math.sin(ang))


@njit(cache=True, inline="always")
def _element(v, e, a, b):
    """(V diag(e) V^T)[a, b]: one element of a propagator from its eigendecomposition."""
    acc = 0.0 + 0.0j
    for k in range(v.shape[1]):
        acc += v[a, k] * v[b, k] * e[k]
    return acc


@njit(parallel=True, cache=True)
def _mq_pathway_amplitudes(levels, ix_off, mz, nu1, t_excite, t_convert, zfilter, nu1_sel, t_sel, hi, lo, ct_lo,
                           ct_hi):
    """Complex CT signal (n, 2) of the MQMAS pathways with t1 order +p (column 0) and -p (column 1).

    ``A = c <-1/2| rho |1/2>``, c = <1/2|I+|-1/2> = 2 ix_off[ct_hi]: rho1 = U1 Iz U1^H, its element (hi, lo)
    (order +p) or (lo, hi) (order -p) alone carried by U2 into (ct_lo, ct_hi) (two-pulse) or into the populations
    and from them by U3 (z-filter).  U1, U2 share the eigendecomposition of diag(levels) + nu1 Ix; U3 is that of
    the selective pulse (nu1_sel).  All pulses along x.
    """
    n, d = levels.shape
    out = np.empty((n, 2), dtype=np.complex128)
    cc = 2.0 * ix_off[ct_hi]
    nchunk = min(n, 64)
    for ch in prange(nchunk):
        dg = np.empty(d)
        of = np.empty(d)
        lam = np.empty(d)
        v = np.empty((d, d))
        v3 = np.empty((d, d))
        e = np.empty(d, dtype=np.complex128)
        u_hi = np.empty(d, dtype=np.complex128)
        u_lo = np.empty(d, dtype=np.complex128)
        w_hi = np.empty(d, dtype=np.complex128)
        w_lo = np.empty(d, dtype=np.complex128)
        for i in range(ch * n // nchunk, (ch + 1) * n // nchunk):
            lv = levels[i]
            _rf_eigen(lv, ix_off, nu1, dg, of, lam, v)
            # excitation: rows hi and lo of U1, then rho1[hi, lo] = sum_q U1[hi, q] m_q conj(U1[lo, q])
            _phasors(lam, t_excite, e)
            for q in range(d):
                u_hi[q] = _element(v, e, hi, q)
                u_lo[q] = _element(v, e, lo, q)
            r = 0.0 + 0.0j
            for q in range(d):
                r += u_hi[q] * mz[q] * u_lo[q].conjugate()
            r_conj = r.conjugate()  # rho1[lo, hi] (rho1 is Hermitian)
            # conversion: U2 (symmetric: V diag V^T)
            _phasors(lam, t_convert, e)
            if not zfilter:
                out[i, 0] = cc * r * _element(v, e, ct_lo, hi) * _element(v, e, ct_hi, lo).conjugate()
                out[i, 1] = cc * r_conj * _element(v, e, ct_lo, lo) * _element(v, e, ct_hi, hi).conjugate()
                continue
            for q in range(d):  # columns hi and lo of U2
                w_hi[q] = _element(v, e, q, hi)
                w_lo[q] = _element(v, e, q, lo)
            _rf_eigen(lv, ix_off, nu1_sel, dg, of, lam, v3)
            _phasors(lam, t_sel, e)
            s0 = 0.0 + 0.0j
            s1 = 0.0 + 0.0j
            for q in range(d):  # populations |q><q| after U2, read out by rows ct_lo and ct_hi of U3
                t3 = _element(v3, e, ct_lo, q) * _element(v3, e, ct_hi, q).conjugate()
                s0 += t3 * (w_hi[q] * w_lo[q].conjugate())
                s1 += t3 * (w_lo[q] * w_hi[q].conjugate())
            out[i, 0] = cc * r * s0
            out[i, 1] = cc * r_conj * s1
    return out


# ---------------------------------------------------------------------------
# two-dimensional binning (MQMAS, STMAS)


@njit(parallel=True, cache=True)
def _bin_tent_2d(mean, amp, weights, f1, w1, tris, tri_w, rate_hz, x0, dx, nb, y0, dy, nb1, nchunk, cutoff):
    """Lines of a 2D experiment onto an (F1, F2) grid: tents in F2, hat sharing in F1.

    mean (n_v,): F2 (central-transition) line centres per vertex (Hz); amp
    (n_v, P): F2 sideband intensities (P = 1 at infinite rate); weights (n_v,):
    the CT weight per vertex; f1 (n_v, n_t1): sheared F1 positions per vertex
    and t1 transition (Hz); w1 (n_t1,): weight of each t1 transition.  Each
    triangle and t1 transition gives, in F2, the same tent as ``_bin_tent``
    (``_add_tent_points``) and, in F1, the triangle's mean F1 position shared
    linearly between the two neighbouring F1 points (point j at y0 + (j + 1/2)
    dy), so area and first moment are kept in both dimensions.  Returns
    (nb1, nb) summed intensities.
    """
    m = tris.shape[0]
    nt1 = f1.shape[1]
    p = amp.shape[1]
    bufs = np.zeros((nchunk, nb1, nb))
    step = (m + nchunk - 1) // nchunk
    inv = 1.0 / dx
    inv1 = 1.0 / dy
    step_pts = rate_hz * inv
    for c in prange(nchunk):
        lo = c * step
        hi = min(m, lo + step)
        for q in range(lo, hi):
            a = tris[q, 0]
            b = tris[q, 1]
            d = tris[q, 2]
            u1, u2, u3 = _tent_vertices(mean[a], mean[b], mean[d], x0, inv)
            for t in range(nt1):
                r = ((f1[a, t] + f1[b, t] + f1[d, t]) / 3.0 - y0) * inv1 - 0.5
                if r <= -1.0 or r >= nb1:
                    continue
                j = int(math.floor(r))
                fr = r - j
                for s in range(p):
                    w = (amp[a, s] * weights[a] + amp[b, s] * weights[b] + amp[d, s] * weights[d]) * (
                        tri_w[q] / 3.0) * w1[t]
                    if abs(w) <= cutoff:  # finite-pulse efficiencies may be negative
                        continue
                    n = s if s < (p + 1) // 2 else s - p
                    sh = n * step_pts if p > 1 else 0.0
                    if j >= 0 and fr < 1.0:
                        _add_tent_points(bufs[c, j], u1 + sh, u2 + sh, u3 + sh, w * (1.0 - fr), nb)
                    if j + 1 < nb1 and fr > 0.0:
                        _add_tent_points(bufs[c, j + 1], u1 + sh, u2 + sh, u3 + sh, w * fr, nb)
    out = np.zeros((nb1, nb))
    for c in range(nchunk):
        for i in range(nb1):
            for k in range(nb):
                out[i, k] += bufs[c, i, k]
    return out


@njit(parallel=True, cache=True)
def _bin_tent_2d_pairs(mean, f1, amp, d2, d1, weights, w1, tris, tri_w, x0, dx, nb, y0, dy, nb1, nchunk, cutoff):
    """2D binning of band pairs: each (F1 band, F2 band) of each crystallite with its own signed weight.

    mean (n_v,): F2 centre-band position per vertex (Hz); f1 (n_v, n_t1): sheared F1
    centre-band position (Hz); amp (n_v, n_t1, Q): the real weight of band pair q;
    d2, d1 (Q,): the pair's offsets (Hz) in F2 and in sheared F1; weights (n_v,):
    the CT weight per vertex; w1 (n_t1,): share of each t1 transition.  Each triangle
    and pair adds the F2 tent (``_add_tent_points``) shifted by d2 to the two F1 rows
    around its mean F1 position plus d1, shared linearly.  Contributions with
    |weight| <= cutoff are skipped (weights may be negative).  Returns (nb1, nb).
    """
    m = tris.shape[0]
    nt1 = f1.shape[1]
    q_n = amp.shape[2]
    bufs = np.zeros((nchunk, nb1, nb))
    step = (m + nchunk - 1) // nchunk
    inv = 1.0 / dx
    inv1 = 1.0 / dy
    for c in prange(nchunk):
        lo = c * step
        hi = min(m, lo + step)
        for q in range(lo, hi):
            a = tris[q, 0]
            b = tris[q, 1]
            d = tris[q, 2]
            u1, u2, u3 = _tent_vertices(mean[a], mean[b], mean[d], x0, inv)
            for t in range(nt1):
                fc = (f1[a, t] + f1[b, t] + f1[d, t]) / 3.0
                for s in range(q_n):
                    w = (amp[a, t, s] * weights[a] + amp[b, t, s] * weights[b] + amp[d, t, s] * weights[d]) * (
                        tri_w[q] / 3.0) * w1[t]
                    if abs(w) <= cutoff:
                        continue
                    r = (fc + d1[s] - y0) * inv1 - 0.5
                    if r <= -1.0 or r >= nb1:
                        continue
                    j = int(math.floor(r))
                    fr = r - j
                    sh = d2[s] * inv
                    if j >= 0 and fr < 1.0:
                        _add_tent_points(bufs[c, j], u1 + sh, u2 + sh, u3 + sh, w * (1.0 - fr), nb)
                    if j + 1 < nb1 and fr > 0.0:
                        _add_tent_points(bufs[c, j + 1], u1 + sh, u2 + sh, u3 + sh, w * fr, nb)
    out = np.zeros((nb1, nb))
    for c in range(nchunk):
        for i in range(nb1):
            for k in range(nb):
                out[i, k] += bufs[c, i, k]
    return out
