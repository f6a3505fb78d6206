"""The one table of model-file keys: units, defaults, allowed ranges and meaning.

Everything that reads, writes, validates or documents a model file uses this
table: :mod:`powderspin.model.values` checks values against it,
:mod:`powderspin.model.modelfile` reads and writes TOML with it, and the README's
key reference is checked against it by the tests.  A key's range is what is
physically sensible, not just what the code can compute; the reason for each
limit is part of the table and appears in the error message.

Tables of a model file: the top level (``nucleus``), ``[measurement]`` (or
several ``[[measurement]]``), ``[[site]]`` and ``[fit]``.  A fit's result file
is a model file with a few more entries: ``scale`` and ``baseline`` in each
measurement (applied by every simulation), and ``stderr`` / ``interval``
sub-tables and ``[fit.result]``, which are read and ignored.  ``[processing]``
says how raw time-domain data are turned into a spectrum before a fit
(:mod:`powderspin.processing`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

__all__ = ["KeySpec", "KEYS", "key_spec", "keys_of", "REQUIRED", "FREE_TABLE_KEYS", "TIE_KEY",
           "key_reference_markdown"]


class _Required:
    """Marker for a key without a default (it must be given)."""

    def __repr__(self) -> str:
        return "REQUIRED"


#: default of a key that must be given
REQUIRED = _Required()

#: keys of an inline table that marks a free parameter
FREE_TABLE_KEYS = ("start", "min", "max")
#: key of an inline table that ties a parameter to another one
TIE_KEY = "same_as"


@dataclass(frozen=True)
class KeySpec:
    """One model-file key.

    Attributes
    ----------
    table : {"top", "measurement", "site", "fit", "processing"}
        Where the key lives.
    name : str
        The key.
    kind : str
        ``"number"``, ``"integer"``, ``"choice"``, ``"text"``, ``"angles"``
        (3 numbers), ``"principal"`` (3 numbers), ``"transitions"``,
        ``"orientations"``, ``"rotor_phases"``, ``"regions"``, ``"region"``,
        ``"numbers"`` (a list of numbers), ``"table"`` (a sub-table a fit
        writes, accepted on reading and not used), ``"distribution"`` (an
        inline table ``{ values = [...], weights = [...] }``).
    unit : str
        Unit (``""`` for dimensionless or text).
    default : object
        Default value; :data:`REQUIRED` when the key must be given, None when
        it is optional with no value.
    low, high : float
        Allowed range for numbers (inclusive unless ``low_open``).
    low_open : bool
        The lower limit itself is not allowed.
    choices : tuple of str
        Allowed words for ``"choice"`` keys (and the words accepted besides
        numbers for ``"orientations"``/``"rotor_phases"``).
    free : bool
        Whether the key may be a free or tied parameter in a fit.
    doc : str
        What the key means (one line, for the README table).
    why : str
        Why the range is what it is (appears in the error message).
    linked_to : str
        ``"table.key"`` of another key that holds the same quantity (a
        ``[processing]`` key and the ``[measurement]`` key that simulates what
        that processing makes).  Written in both places, the two must agree;
        written in one, the other takes it where it applies
        (:func:`powderspin.model.modelfile.reconcile_linked_keys`).  ``""`` for
        most keys.

    Examples
    --------
    >>> k = key_spec("measurement", "field_tesla")
    >>> k.unit, k.low, k.high
    ('T', 0.1, 40.0)
    """

    table: str
    name: str
    kind: str
    unit: str
    default: Any
    low: float = -math.inf
    high: float = math.inf
    low_open: bool = False
    choices: tuple = ()
    free: bool = False
    doc: str = ""
    why: str = ""
    linked_to: str = ""

    def range_text(self) -> str:
        """The allowed range as text, e.g. ``[0, 1]`` or ``(0, 40]``.

        Returns
        -------
        str

        Examples
        --------
        >>> key_spec("site", "eta_q").range_text()
        '[0, 1]'
        """
        lb = "(" if self.low_open else "["
        return f"{lb}{self.low:.10g}, {self.high:.10g}]"


_MAS_WHY = "the fastest magic-angle-spinning rotors reach about 150 kHz (common practice)"

#: Every model-file key.  Ranges are physical: a value outside them is a typo
#: or a unit mistake far more often than a real experiment.
KEYS: tuple[KeySpec, ...] = (
    # ---- top level
    KeySpec("top", "nucleus", "text", "", REQUIRED, doc="observed nucleus, e.g. \"27Al\""),
    # ---- measurement
    KeySpec("measurement", "field_tesla", "number", "T", REQUIRED, 0.1, 40.0,
            doc="magnetic field B0 (no default: the one number no default can guess)",
            why="NMR magnets span about 1 to 35 T (common practice)"),
    KeySpec("measurement", "spinning_hz", "number", "Hz", 0.0, 0.0, 2.0e5,
            doc="spinning rate; 0 = static, \"inf\" = infinitely fast",
            why=_MAS_WHY + "; use \"inf\" for the infinite-rate limit"),
    KeySpec("measurement", "rotor_angle_deg", "number", "deg", "magic", 0.0, 90.0,
            doc="angle between rotor axis and B0; default the magic angle 54.7356",
            why="angles beyond 90 deg repeat those below"),
    KeySpec("measurement", "transitions", "transitions", "", "central",
            doc="\"central\" (half-integer spins), \"all\", or a list of \"m1:m2\""),
    KeySpec("measurement", "method", "choice", "", "auto", choices=("auto", "perturbation", "exact"),
            doc="frequency producer: perturbation theory, exact diagonalisation, or chosen per site"),
    KeySpec("measurement", "points", "integer", "", 2048, 16, 1048576,
            doc="number of points of the spectral axis",
            why="fewer than 16 points cannot show a lineshape; more than 2^20 exceeds any acquisition"),
    KeySpec("measurement", "center_ppm", "number", "ppm", None, -1.0e6, 1.0e6,
            doc="axis centre; chosen from the lines when absent",
            why="offsets beyond +-1e6 ppm exceed the Larmor frequency itself"),
    KeySpec("measurement", "width_ppm", "number", "ppm", None, 0.0, 2.0e6, low_open=True,
            doc="axis full width; chosen from the lines when absent",
            why="a width beyond 2e6 ppm exceeds twice the Larmor frequency"),
    KeySpec("measurement", "orientations", "orientations", "", "auto",
            choices=("auto", "coarse", "medium", "fine"),
            doc="powder orientation set: \"auto\", \"coarse\", \"medium\", \"fine\", an accuracy level "
                "(subdivisions per octahedron edge, 1 to 1024) or a set name such as \"zcw-octant-6765\""),
    KeySpec("measurement", "binning", "choice", "", "interpolate", choices=("interpolate", "histogram"),
            doc="triangle interpolation between orientations, or a plain histogram"),
    KeySpec("measurement", "rotor_phases", "rotor_phases", "", "auto", 16, 65536, choices=("auto",),
            doc="rotor phases sampled per period under finite-rate spinning: \"auto\" or a power of 2",
            why="the sideband computation needs at least 16 phases; 65536 bounds memory"),
    KeySpec("measurement", "lorentz_hz", "number", "Hz", 0.0, 0.0, 1.0e7, free=True,
            doc="Lorentzian broadening (FWHM) applied to every site",
            why="a width beyond 10 MHz is wider than any solid-state spectrum"),
    KeySpec("measurement", "gauss_hz", "number", "Hz", 0.0, 0.0, 1.0e7, free=True,
            doc="Gaussian broadening (FWHM) applied to every site",
            why="a width beyond 10 MHz is wider than any solid-state spectrum"),
    KeySpec("measurement", "shift_offset_ppm", "number", "ppm", 0.0, -1.0e4, 1.0e4, free=True,
            doc="referencing offset added to every shift of this measurement",
            why="a referencing error beyond 1e4 ppm is a wrong nucleus or field"),
    KeySpec("measurement", "data", "text", "", None,
            doc="measured spectrum for fitting (path relative to the model file)"),
    KeySpec("measurement", "scale", "number", "", 1.0, -1.0e30, 1.0e30,
            doc="factor on the simulated spectrum (data units per density per ppm; a fit writes it)",
            why="a factor beyond 1e30 is a unit mistake"),
    KeySpec("measurement", "baseline", "numbers", "", None, -1.0e30, 1.0e30,
            doc="polynomial baseline [b0, b1, ...] added to the spectrum: sum b_k u^k with u running "
                "from -1 to 1 across the axis (a fit writes it)",
            why="coefficients beyond 1e30 are a unit mistake; at most 6 (order 5)"),
    # ---- measurement: acquisition (finite pulses, echo trains; powderspin.engine.pulses)
    KeySpec("measurement", "pulse_sequence", "choice", "", "ideal", choices=("ideal", "single", "echo"),
            doc="excitation: \"ideal\" (small-tip intensities, no pulse modelled), \"single\" (one pulse of "
                "pulse_us) or \"echo\" (pulse_us - delay - echo_pulse_us, the refocused echo)"),
    KeySpec("measurement", "pulse_us", "number", "us", None, 0.0, 1000.0, low_open=True,
            doc="length of the (first) pulse (with rf_khz and pulse_sequence \"single\" or \"echo\")",
            why="solid-state excitation pulses last 0.1 to a few hundred microseconds (common practice); "
                "beyond 1 ms relaxation during the pulse matters"),
    KeySpec("measurement", "echo_pulse_us", "number", "us", None, 0.0, 1000.0, low_open=True,
            doc="length of the refocusing pulse of an echo; twice pulse_us when absent",
            why="solid-state pulses last 0.1 to a few hundred microseconds (common practice)"),
    KeySpec("measurement", "rf_khz", "number", "kHz", None, 0.0, 1000.0, low_open=True,
            doc="RF field strength nu1 = gamma B1 / 2 pi of the pulses",
            why="solid-state probes reach RF fields of a few hundred kHz (common practice); 1 MHz bounds typos"),
    KeySpec("measurement", "carrier_ppm", "number", "ppm", None, -1.0e6, 1.0e6,
            doc="transmitter (carrier) position; absent: on resonance with each site's isotropic shift for the "
                "pulses, the axis centre for an echo train",
            why="offsets beyond +-1e6 ppm exceed the Larmor frequency itself"),
    KeySpec("measurement", "echo_train_period_us", "number", "us", None, 0.0, 1.0e6, low_open=True,
            doc="echo-to-echo period tau of a (Q)CPMG echo train: the spectrum becomes spikelets 1/tau apart "
                "(the same value as [processing] echo_period_us, taken from there when the data are processed)",
            why="echo periods span tens of microseconds to milliseconds (common practice); 1 s bounds typos",
            linked_to="processing.echo_period_us"),
    KeySpec("measurement", "echo_train_echoes", "integer", "", 32, 1, 100000,
            doc="number of echoes in the echo train that makes the spikelets (the same value as [processing] "
                "echo_count, taken from there when the data are processed into spikelets)",
            why="at least one echo; 1e5 echoes exceeds any acquisition", linked_to="processing.echo_count"),
    KeySpec("measurement", "echo_train_t2_ms", "number", "ms", None, 0.0, 1.0e5, low_open=True,
            doc="decay time constant T2 of the echo train's echo tops; absent: no decay",
            why="T2 beyond 100 s is longer than any solid's"),
    KeySpec("measurement", "echo_train_output", "choice", "", "spikelets", choices=("spikelets", "envelope"),
            doc="an echo train's spectrum: the spikelet comb, or the envelope through the spikelet tops"),
    KeySpec("measurement", "experiment", "choice", "", "1d", choices=("1d", "mqmas", "stmas"),
            doc="\"1d\" spectrum, or a sheared two-dimensional \"mqmas\" (multiple-quantum) or \"stmas\" "
                "(satellite-transition) spectrum correlated with the central transition"),
    KeySpec("measurement", "mq_order", "integer", "", 3, 3, 9,
            doc="coherence order p of the MQMAS transition +p/2 <-> -p/2 (odd, 3 to 2I)",
            why="the symmetric transitions of a half-integer spin have odd orders 3 to 2I, and I <= 9/2"),
    KeySpec("measurement", "f1_points", "integer", "", 256, 16, 65536,
            doc="number of points of the F1 (isotropic) axis of a 2D spectrum",
            why="fewer than 16 points cannot show a site; more than 65536 exceeds any t1 acquisition"),
    KeySpec("measurement", "f1_center_ppm", "number", "ppm", None, -1.0e6, 1.0e6,
            doc="F1 axis centre (sheared isotropic scale); chosen from the lines when absent",
            why="offsets beyond +-1e6 ppm exceed the Larmor frequency itself"),
    KeySpec("measurement", "f1_width_ppm", "number", "ppm", None, 0.0, 2.0e6, low_open=True,
            doc="F1 axis full width; chosen from the lines when absent",
            why="a width beyond 2e6 ppm exceeds twice the Larmor frequency"),
    KeySpec("measurement", "f1_lorentz_hz", "number", "Hz", 0.0, 0.0, 1.0e7,
            doc="Lorentzian broadening (FWHM) along F1 of a 2D spectrum, in Hz of the sheared F1 scale",
            why="a width beyond 10 MHz is wider than any solid-state spectrum"),
    KeySpec("measurement", "f1_gauss_hz", "number", "Hz", 0.0, 0.0, 1.0e7,
            doc="Gaussian broadening (FWHM) along F1 of a 2D spectrum, in Hz of the sheared F1 scale",
            why="a width beyond 10 MHz is wider than any solid-state spectrum"),
    KeySpec("measurement", "f1_referencing", "choice", "", None,
            choices=("isotropic", "t1_evolution", "total_evolution", "file"),
            doc="F1 scale of this measurement's 2D data file: \"isotropic\" (powderspin's sheared isotropic "
                "scale, a site with C_Q = 0 on the diagonal), \"t1_evolution\" (the sheared t1 frequency "
                "nu_t1 - R nu_CT: p - R times the isotropic scale), \"total_evolution\" (per unit of t1 + |R| t1: "
                "(p - R) / (1 + |R|) times it) or \"file\" (stated in the file's metadata); required to fit 2D "
                "data"),
    KeySpec("measurement", "t1_mode", "choice", "", "synchronised", choices=("synchronised", "free"),
            doc="t1 increments: \"synchronised\" with the rotor period (F1 sidebands fold onto the centre band) "
                "or \"free\" (F1 sidebands n nu_r / (p - R) apart)"),
    # ---- measurement: finite-pulse MQMAS excitation (powderspin.engine.pulses.MultipleQuantumPulses)
    KeySpec("measurement", "mq_pulses", "choice", "", "ideal", choices=("ideal", "two-pulse", "z-filter"),
            doc="MQMAS excitation: \"ideal\" (each site's 2D integral is its weight), \"two-pulse\" "
                "(excitation, t1, conversion) or \"z-filter\" (excitation, t1, conversion, selective CT pulse), "
                "propagated per crystallite with mq_rf_khz, mq_excite_us and mq_convert_us"),
    KeySpec("measurement", "mq_rf_khz", "number", "kHz", None, 0.0, 1000.0, low_open=True,
            doc="RF field nu1 of the MQMAS excitation and conversion pulses",
            why="solid-state probes reach RF fields of a few hundred kHz (common practice); 1 MHz bounds typos"),
    KeySpec("measurement", "mq_excite_us", "number", "us", None, 0.0, 1000.0, low_open=True,
            doc="length of the MQMAS excitation pulse (0 -> +-p)",
            why="MQ excitation pulses last about 1 to 10 microseconds (common practice); beyond 1 ms relaxation "
                "during the pulse matters"),
    KeySpec("measurement", "mq_convert_us", "number", "us", None, 0.0, 1000.0, low_open=True,
            doc="length of the MQMAS conversion pulse (+-p -> -1, or +-p -> 0 before a z-filter)",
            why="MQ conversion pulses last about 0.5 to 5 microseconds (common practice); beyond 1 ms relaxation "
                "during the pulse matters"),
    KeySpec("measurement", "mq_pathway", "choice", "", "echo", choices=("echo", "antiecho", "both"),
            doc="MQMAS coherence pathway 0 -> +-p -> -1 acquired: \"echo\" (the t1 order refocused at t2 = |R| t1: "
                "-p for R < 0, +p for R > 0), \"antiecho\", or \"both\" (their mean, each in its receiver phase)"),
    KeySpec("measurement", "zfilter_rf_khz", "number", "kHz", None, 0.0, 1000.0, low_open=True,
            doc="RF field nu1 of the z-filter's central-transition-selective pulse (mq_pulses = \"z-filter\")",
            why="selective pulses use a few to a few tens of kHz (common practice); 1 MHz bounds typos"),
    KeySpec("measurement", "zfilter_pulse_us", "number", "us", None, 0.0, 1.0e4, low_open=True,
            doc="length of the z-filter's selective pulse; absent: the selective 90 degree pulse "
                "1 / (4 (I + 1/2) nu1)",
            why="selective pulses last up to a few hundred microseconds (common practice); 10 ms bounds typos"),
    KeySpec("measurement", "stderr", "table", "", None,
            doc="standard errors of this measurement's fitted values (written by a fit; not used)"),
    KeySpec("measurement", "interval", "table", "", None,
            doc="16/84 % posterior intervals of this measurement's fitted values (written by a fit; not used)"),
    # ---- site
    KeySpec("site", "label", "text", "", None, doc="unique site name (default \"site N\")"),
    KeySpec("site", "weight", "number", "", 1.0, 0.0, 1.0e6, free=True,
            doc="relative population; the site's selected transitions integrate to it",
            why="weights are relative; 1e6 bounds typos"),
    KeySpec("site", "shift_ppm", "number", "ppm", 0.0, -1.0e5, 1.0e5, free=True,
            doc="isotropic shift delta_iso",
            why="even Knight and paramagnetic shifts stay within +-1e5 ppm (10 %)"),
    KeySpec("site", "cq_mhz", "number", "MHz", 0.0, -1.0e3, 1.0e3, free=True,
            doc="quadrupolar coupling constant C_Q = e^2 q Q / h (0 for spin 1/2)",
            why="|C_Q| beyond 1000 MHz is outside solid-state NMR"),
    KeySpec("site", "eta_q", "number", "", 0.0, 0.0, 1.0, free=True,
            doc="quadrupolar asymmetry eta_Q", why="|V_zz| >= |V_yy| >= |V_xx| by convention"),
    KeySpec("site", "span_ppm", "number", "ppm", None, 0.0, 1.0e5, free=True,
            doc="shift span Omega = d11 - d33 (with skew)",
            why="spans beyond 1e5 ppm are outside solid-state NMR"),
    KeySpec("site", "skew", "number", "", None, -1.0, 1.0, free=True,
            doc="shift skew kappa = 3 (d22 - d_iso) / Omega (with span_ppm)", why="by definition"),
    KeySpec("site", "aniso_ppm", "number", "ppm", None, -1.0e5, 1.0e5, free=True,
            doc="reduced anisotropy d_zz - d_iso (Haeberlen; with eta_cs)",
            why="anisotropies beyond 1e5 ppm are outside solid-state NMR"),
    KeySpec("site", "eta_cs", "number", "", None, 0.0, 1.0, free=True,
            doc="shift asymmetry (d_yy - d_xx) / (d_zz - d_iso) (Haeberlen; with aniso_ppm)",
            why="by definition"),
    KeySpec("site", "principal_ppm", "principal", "ppm", None, -1.0e5, 1.0e5,
            doc="principal values [d11, d22, d33] (fix the isotropic shift; no shift_ppm then)",
            why="shifts beyond +-1e5 ppm are outside solid-state NMR"),
    KeySpec("site", "euler_deg", "angles", "deg", (0.0, 0.0, 0.0), -360.0, 360.0, free=True,
            doc="ZYZ active Euler angles of the shift frame relative to the EFG frame",
            why="angles repeat every 360 deg"),
    KeySpec("site", "lorentz_hz", "number", "Hz", 0.0, 0.0, 1.0e7, free=True,
            doc="extra Lorentzian broadening (FWHM) of this site",
            why="a width beyond 10 MHz is wider than any solid-state spectrum"),
    KeySpec("site", "gauss_hz", "number", "Hz", 0.0, 0.0, 1.0e7, free=True,
            doc="extra Gaussian broadening (FWHM) of this site",
            why="a width beyond 10 MHz is wider than any solid-state spectrum"),
    # ---- site: distributions (disordered solids; powderspin.disorder.site)
    KeySpec("site", "shift_fwhm_ppm", "number", "ppm", 0.0, 0.0, 1.0e4, free=True,
            doc="Gaussian distribution of the isotropic shift (FWHM); a Gaussian broadening that scales "
                "with the field",
            why="a shift distribution wider than 1e4 ppm is not one site"),
    KeySpec("site", "czjzek_sigma_mhz", "number", "MHz", 0.0, 0.0, 200.0, free=True,
            doc="width sigma of the Czjzek distribution of EFG tensors (cq_mhz = 0: pure Czjzek; "
                "cq_mhz, eta_q set: extended Czjzek)",
            why="C_Q values reach about 5 sigma, and |C_Q| beyond 1000 MHz is outside solid-state NMR"),
    KeySpec("site", "cq_distribution_mhz", "distribution", "MHz", None, 0.0, 1.0e3,
            doc="explicit C_Q distribution { values = [...], weights = [...] } (MHz; replaces cq_mhz)",
            why="|C_Q| beyond 1000 MHz is outside solid-state NMR"),
    KeySpec("site", "eta_distribution", "distribution", "", None, 0.0, 1.0,
            doc="explicit eta_Q distribution { values = [...], weights = [...] } (replaces eta_q)",
            why="|V_zz| >= |V_yy| >= |V_xx| by convention"),
    KeySpec("site", "stderr", "table", "", None,
            doc="standard errors of this site's fitted values (written by a fit; not used)"),
    KeySpec("site", "interval", "table", "", None,
            doc="16/84 % posterior intervals of this site's fitted values (written by a fit; not used)"),
    # ---- fit
    KeySpec("fit", "regions", "regions", "ppm", None,
            doc="fit regions [[ppm_hi, ppm_lo], ...]; the whole data axis when absent"),
    KeySpec("fit", "f1_regions", "regions", "ppm", None,
            doc="2D data: F1 regions [[ppm_hi, ppm_lo], ...] whose F2 slices are fitted (regions then limits F2); "
                "every F1 row when neither this nor slice_f1_ppm is given"),
    KeySpec("fit", "slice_f1_ppm", "numbers", "ppm", None, -1.0e6, 1.0e6,
            doc="2D data: F1 positions of single F2 slices to fit (the data row nearest each), added to f1_regions",
            why="offsets beyond +-1e6 ppm exceed the Larmor frequency itself"),
    KeySpec("fit", "noise_region", "region", "ppm", None,
            doc="signal-free region [ppm_hi, ppm_lo] for the noise level; from the residual when absent"),
    KeySpec("fit", "baseline_order", "integer", "", None, 0, 5,
            doc="order of a polynomial baseline solved with the scale; none when absent",
            why="higher orders follow the lineshape instead of the baseline"),
    KeySpec("fit", "result", "table", "", None,
            doc="what a fit found (chi-square, correlations, warnings, ...); written by a fit, not used"),
    # ---- processing (raw time-domain data -> spectrum; powderspin.processing)
    KeySpec("processing", "row", "integer", "", None, 0, 1.0e6,
            doc="which FID of a series (ser file or arrayed fid) to process, counted from 0",
            why="rows are counted from 0"),
    KeySpec("processing", "group_delay", "choice", "", "remove", choices=("remove", "keep"),
            doc="remove the digital filter's group delay as an exact first-order phase after the transform"),
    KeySpec("processing", "group_delay_points", "number", "points", None, 0.0, 1.0e4,
            doc="group delay in dwell times; taken from the data's parameters when absent",
            why="digital filters delay the signal by tens to a few thousand points"),
    KeySpec("processing", "echo", "choice", "", "none", choices=("none", "half", "whole"),
            doc="echo data: start at the echo top (\"half\") or transform the whole echo about its top"),
    KeySpec("processing", "echo_top_points", "number", "points", None, 0.0, 1.0e7,
            doc="position of the echo top in dwell times from the first stored point; found from the "
                "largest magnitude when absent",
            why="an echo top lies within the recorded points"),
    KeySpec("processing", "left_shift_points", "integer", "points", 0, 0, 1.0e7,
            doc="points dropped from the start of the FID (the remaining delay is removed as a phase)",
            why="a shift lies within the recorded points"),
    KeySpec("processing", "echo_train", "choice", "", "none", choices=("none", "coadd", "spikelets"),
            doc="echo train (CPMG/QCPMG): co-add the echoes into one whole echo, or transform the whole "
                "train into a spikelet spectrum"),
    KeySpec("processing", "echo_period_us", "number", "us", None, 0.0, 1.0e6, low_open=True,
            doc="time from one echo top to the next in an echo train (microseconds); the same value as "
                "[measurement] echo_train_period_us (write it once: each takes it from the other)",
            why="echo periods are microseconds to a second", linked_to="measurement.echo_train_period_us"),
    KeySpec("processing", "echo_count", "integer", "", None, 1, 1.0e5,
            doc="number of echoes to co-add or to transform into spikelets; every echo in the data when absent; "
                "the same value as [measurement] echo_train_echoes (spikelets: each takes it from the other)",
            why="at least one echo", linked_to="measurement.echo_train_echoes"),
    KeySpec("processing", "dc_offset", "choice", "", "tail", choices=("tail", "none"),
            doc="subtract the mean of the last tenth of the FID (a receiver offset) before anything else"),
    KeySpec("processing", "exponential_hz", "number", "Hz", 0.0, 0.0, 1.0e6,
            doc="exponential apodisation: the Lorentzian full width at half height it adds",
            why="a broadening beyond 1 MHz hides any solid-state lineshape"),
    KeySpec("processing", "gaussian_hz", "number", "Hz", 0.0, 0.0, 1.0e6,
            doc="Gaussian apodisation: the Gaussian full width at half height it adds",
            why="a broadening beyond 1 MHz hides any solid-state lineshape"),
    KeySpec("processing", "zero_fill_points", "integer", "points", None, 16, 4194304,
            doc="points after zero filling; the next power of two at least twice the FID's when absent",
            why="at least 16 points; 2^22 bounds memory"),
    KeySpec("processing", "phase", "choice", "", "auto", choices=("auto", "entropy", "manual", "none"),
            doc="zero- and first-order phase: found from causality and the signal at the time origin (\"auto\"), "
                "by minimum entropy (\"entropy\"), given (phase0_deg, phase1_deg), or none"),
    KeySpec("processing", "phase0_deg", "number", "deg", 0.0, -360.0, 360.0,
            doc="zero-order phase correction (with phase = \"manual\")", why="phases repeat every 360 deg"),
    KeySpec("processing", "phase1_deg", "number", "deg", 0.0, -1.0e5, 1.0e5,
            doc="first-order phase correction: its change from the low- to the high-frequency edge of the "
                "spectral width, zero at the carrier (with phase = \"manual\")",
            why="more than 1e5 deg across the window is a wrong group delay"),
    KeySpec("processing", "fit_phase", "choice", "", "refine", choices=("refine", "keep"),
            doc="after automatic phasing (phase = \"auto\" or \"entropy\") of a FID or half echo, a fit refines "
                "the zero- and first-order phase against the model as two nuisance parameters, whose uncertainty "
                "enters the standard errors (\"refine\"), or takes the processed phase as exact (\"keep\")"),
    KeySpec("processing", "baseline", "choice", "", "none", choices=("none", "polynomial", "spline"),
            doc="baseline through automatically found signal-free regions (which are reported)"),
    KeySpec("processing", "baseline_degree", "integer", "", 1, 0, 8,
            doc="degree of the polynomial baseline", why="higher degrees follow the lineshape"),
    KeySpec("processing", "referencing", "choice", "", "spectrometer",
            choices=("spectrometer", "unified", "secondary"),
            doc="0 ppm at the spectrometer's base frequency, on the IUPAC unified scale from a measured 1H "
                "frequency (proton_mhz), or from a secondary reference (reference_mhz, reference_shift_ppm)"),
    KeySpec("processing", "proton_mhz", "number", "MHz", None, 1.0, 2000.0, low_open=True,
            doc="1H frequency of tetramethylsilane on this magnet (referencing = \"unified\")",
            why="NMR magnets span about 1 to 35 T, 40 to 1500 MHz for 1H (common practice)"),
    KeySpec("processing", "reference_mhz", "number", "MHz", None, 0.1, 2000.0,
            doc="frequency of the secondary reference compound's line on this magnet (referencing = "
                "\"secondary\")",
            why="NMR frequencies lie between about 0.1 and 2000 MHz (common practice)"),
    KeySpec("processing", "reference_shift_ppm", "number", "ppm", None, -1.0e5, 1.0e5,
            doc="shift of the secondary reference compound's line on the unified scale",
            why="shifts beyond +-1e5 ppm are outside solid-state NMR"),
)

#: defaults of the planner's options (here, so that the command line can show them without
#: importing the planner and the compiled kernels behind it)
PLAN_DEFAULT_THRESHOLD = 0.01
PLAN_DEFAULT_SNR = 100.0
PLAN_DEFAULT_RATE_COUNT = 20
PLAN_DEFAULT_MIN_RATE_HZ = 2000.0

_BY_TABLE: dict[str, dict[str, KeySpec]] = {}
for _k in KEYS:
    _BY_TABLE.setdefault(_k.table, {})[_k.name] = _k
del _k


def key_spec(table: str, name: str) -> KeySpec:
    """The :class:`KeySpec` of one key.

    Parameters
    ----------
    table : {"top", "measurement", "site", "fit"}
    name : str

    Returns
    -------
    KeySpec

    Raises
    ------
    KeyError
        For a key that does not exist.

    Examples
    --------
    >>> key_spec("site", "cq_mhz").unit
    'MHz'
    """
    return _BY_TABLE[table][name]


def keys_of(table: str) -> dict[str, KeySpec]:
    """All keys of one table, in table order.

    Parameters
    ----------
    table : {"top", "measurement", "site", "fit"}

    Returns
    -------
    dict of str to KeySpec

    Examples
    --------
    >>> list(keys_of("fit"))
    ['regions', 'f1_regions', 'slice_f1_ppm', 'noise_region', 'baseline_order', 'result']
    """
    return dict(_BY_TABLE.get(table, {}))


def _default_text(k: KeySpec) -> str:
    d = k.default
    if d is REQUIRED:
        return "required"
    if d is None:
        return "absent"
    if k.name == "rotor_angle_deg":
        return "54.7356 (the magic angle)"
    if isinstance(d, str):
        return f'"{d}"'
    if isinstance(d, tuple):
        return "[" + ", ".join(f"{x:g}" for x in d) + "]"
    return f"{d:.10g}"


def _range_text(k: KeySpec) -> str:
    if k.name == "rotor_phases":
        return '"auto", or a power of 2 in [16, 65536]'
    if k.name == "orientations":
        return '"auto" / "coarse" / "medium" / "fine", an integer in [1, 1024], or a set name'
    if k.name == "spinning_hz":
        return '0, [10, 200000] or "inf"'
    if k.kind in ("number", "integer", "angles", "principal") and math.isfinite(k.low):
        return k.range_text()
    if k.choices:
        return " / ".join(f'"{c}"' for c in k.choices)
    return "-"


def key_reference_markdown() -> str:
    """The README's key reference: one Markdown table row per key of :data:`KEYS`.

    Returns
    -------
    str
        The table (header, rule and rows), ending with a newline.

    Examples
    --------
    >>> key_reference_markdown().splitlines()[2].startswith("| top | `nucleus` |")
    True
    """
    lines = ["| table | key | unit | default | allowed | may be fitted | meaning |",
             "|---|---|---|---|---|---|---|"]
    for k in KEYS:
        lines.append(f"| {k.table} | `{k.name}` | {k.unit or '-'} | {_default_text(k)} | {_range_text(k)} | "
                     f"{'yes' if k.free else ''} | {k.doc} |")
    return "\n".join(lines) + "\n"


if __name__ == "__main__":  # pragma: no cover - prints the table for the README
    print(key_reference_markdown(), end="")


def field_hint(value: float) -> str:
    """A hint for a field that looks like a proton frequency in MHz (``400`` for 9.4 T), else ``""``.

    The field of a magnet whose protons resonate at f MHz is f / 42.577 T (the proton's
    gyromagnetic ratio, 42.577 MHz/T; CODATA 2018, from memory).

    Parameters
    ----------
    value : float
        The field that was given, in tesla.

    Returns
    -------
    str
        ``"; did you mean 9.4 T? (400 looks like a proton frequency in MHz)"`` or ``""``.

    Examples
    --------
    >>> field_hint(600)
    '; did you mean 14.1 T? (600 looks like a proton frequency in MHz, not a field in tesla)'
    >>> field_hint(9.4)
    ''
    """
    try:
        v = float(value)
    except (TypeError, ValueError):
        return ""
    tesla = v / PROTON_MHZ_PER_TESLA
    if not (100.0 <= v <= 1500.0 and 1.0 <= tesla <= 35.5):
        return ""
    return f"; did you mean {tesla:.1f} T? ({v:g} looks like a proton frequency in MHz, not a field in tesla)"


#: the proton's gyromagnetic ratio over 2 pi, MHz per tesla (CODATA 2018 value, 42.577478 MHz/T; from memory)
PROTON_MHZ_PER_TESLA = 42.577478
