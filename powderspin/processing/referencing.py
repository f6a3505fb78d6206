"""The ppm scale: which frequency is 0 ppm.

Three routes (``referencing`` in :class:`~powderspin.processing.options.ProcessingOptions`):

- ``"spectrometer"``: 0 ppm at the spectrometer's base frequency of the
  nucleus as the data state it (Bruker ``BF1``, Agilent/Varian ``reffrq``),
  i.e. the unified scale at the nominal field (module notes of
  :mod:`powderspin.io.raw`).
- ``"unified"``: the IUPAC unified scale from the measured 1H frequency of
  tetramethylsilane on the same magnet, nu_ref = (Xi / 100) nu_TMS(1H), with
  Xi from the nuclide table (R. K. Harris, E. D. Becker, S. M. Cabral de
  Menezes, R. Goodfellow, P. Granger, Pure Appl. Chem. 73 (2001) 1795;
  R. K. Harris et al., Pure Appl. Chem. 80 (2008) 59).
- ``"secondary"``: a reference compound whose line has the known shift
  delta_ref (ppm, on the unified scale) was observed at the absolute
  frequency nu_obs; then nu_ref = nu_obs / (1 + 1e-6 delta_ref), from the
  definition delta = (nu - nu_ref) / nu_ref (Harris et al. 2001).

Every point's shift is then ``1e6 (nu - nu_ref) / nu_ref`` with ``nu`` its
absolute frequency: the carrier plus the point's offset from it.
"""

from __future__ import annotations

import numpy as np

from ..physics.nuclides import get_nuclide
from .options import ProcessingError

__all__ = ["reference_frequency", "secondary_reference_hz", "unified_reference_hz", "tallest_line_hz"]


def unified_reference_hz(nucleus: str, proton_hz: float) -> float:
    """nu_ref = (Xi / 100) nu_TMS(1H): the unified scale from a measured 1H frequency.

    Parameters
    ----------
    nucleus : str
    proton_hz : float
        The 1H frequency of tetramethylsilane on the magnet (Hz).

    Returns
    -------
    float

    References
    ----------
    .. [1] R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795.

    Examples
    --------
    >>> round(unified_reference_hz("27Al", 400.13e6) / 1e6, 6)
    104.26131
    """
    return get_nuclide(nucleus).xi_percent / 100.0 * float(proton_hz)


def secondary_reference_hz(observed_hz: float, shift_ppm: float) -> float:
    """nu_ref = nu_obs / (1 + 1e-6 delta_ref): 0 ppm from a reference line of known shift.

    Parameters
    ----------
    observed_hz : float
        Absolute frequency of the reference compound's line (Hz).
    shift_ppm : float
        Its shift on the unified scale (ppm).

    Returns
    -------
    float

    Examples
    --------
    >>> secondary_reference_hz(100.0e6 * (1 + 7.0e-6), 7.0)
    100000000.0
    """
    return float(observed_hz) / (1.0 + 1e-6 * float(shift_ppm))


def reference_frequency(options, nucleus: str | None, base_hz: float | None, source: str) -> tuple[float, str]:
    """The frequency of 0 ppm for the chosen route, and a description of it.

    Parameters
    ----------
    options : ProcessingOptions
    nucleus : str or None
    base_hz : float or None
        The spectrometer's base frequency (Hz).
    source : str
        The data, for messages.

    Returns
    -------
    nu_ref_hz : float
    how : str

    Raises
    ------
    ProcessingError
        The route needs what the data do not state.

    Examples
    --------
    >>> from powderspin.processing.options import ProcessingOptions
    >>> reference_frequency(ProcessingOptions(), "27Al", 104.26e6, "x")
    (104260000.0, 'spectrometer base frequency 104.26 MHz')
    """
    route = options.referencing
    if route == "spectrometer":
        if base_hz is None:
            raise ProcessingError(f"{source}: the data state no base frequency; give carrier_mhz (and base_mhz), or "
                                  "use referencing = 'unified' or 'secondary'")
        return float(base_hz), f"spectrometer base frequency {base_hz / 1e6:.10g} MHz"
    if route == "unified":
        if nucleus is None:
            raise ProcessingError(f"{source}: referencing = 'unified' needs the nucleus; the data do not state it")
        xi = get_nuclide(nucleus).xi_percent
        return unified_reference_hz(nucleus, options.proton_mhz * 1e6), \
            f"IUPAC unified scale: Xi = {xi:.10g} % of the 1H frequency {options.proton_mhz:.10g} MHz"
    nu = secondary_reference_hz(options.reference_mhz * 1e6, options.reference_shift_ppm)
    return nu, (f"secondary reference: a line at {options.reference_mhz:.10g} MHz has "
                f"{options.reference_shift_ppm:.10g} ppm")


def tallest_line_hz(offset_hz: np.ndarray, real: np.ndarray) -> float:
    """Position of the tallest point of a spectrum, refined by a parabola through it and its neighbours.

    Parameters
    ----------
    offset_hz : ndarray
        Uniform, ascending axis (Hz).
    real : ndarray
        The real spectrum.

    Returns
    -------
    float
        The line's position on the axis (Hz).

    Examples
    --------
    >>> f = np.linspace(-1000, 1000, 2001)
    >>> round(tallest_line_hz(f, 1 / (1 + ((f - 12.3) / 20) ** 2)), 2)
    12.3
    """
    y = np.asarray(real, dtype=float)
    k = int(np.argmax(y))
    f = np.asarray(offset_hz, dtype=float)
    if 0 < k < y.size - 1:
        a, b, c = y[k - 1], y[k], y[k + 1]
        den = a - 2 * b + c
        delta = 0.5 * (a - c) / den if den != 0 else 0.0
        return float(f[k] + delta * (f[1] - f[0]))
    return float(f[k])
