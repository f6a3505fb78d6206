"""Nuclear data of the NMR nuclei that powderspin knows.

The table ``powderspin/data/nuclides.csv`` holds, per nucleus, the spin, the
IUPAC frequency ratio Xi, the sign of the magnetic moment, the spectroscopic
quadrupole moment and the natural abundance, with the sources named in the
file's comment block.  This module loads it once (read-only, cached) and
offers lookup by name, a reference-frequency calculator, a human-readable
summary of one nucleus and a text table of all of them.

Reference frequency
-------------------
powderspin measures every frequency as an offset from the reference frequency
``nu_ref`` of the nucleus at the given field (DEVELOPERS.md, 'Physics formulas'), taken
from the IUPAC unified scale:

    nu_ref = (Xi / 100) * nu_H(B0),   nu_H(B0) = (gamma_p / 2 pi) * B0

where Xi is the frequency ratio of the nucleus in its reference compound to
1H in dilute tetramethylsilane (TMS).  ``gamma_p / 2 pi`` is the CODATA
gyromagnetic ratio of the *bare* proton (``scipy.constants``, "proton
gyromag. ratio in MHz/T").  The 1H resonance of TMS is shielded by about
31 ppm relative to the bare proton, so ``nu_H`` is a ppm-level approximation
of the true 1H TMS frequency at B0; at the level of a spectrometer's field
calibration this is immaterial, and all shifts (ppm) are defined relative to
``nu_ref`` itself, so they are unaffected.

References
----------
.. [1] R. K. Harris, E. D. Becker, S. M. Cabral de Menezes, R. Goodfellow,
   P. Granger, "NMR nomenclature. Nuclear spin properties and conventions for
   chemical shifts", Pure Appl. Chem. 73 (2001) 1795.
.. [2] R. K. Harris, E. D. Becker, S. M. Cabral de Menezes, P. Granger,
   R. E. Hoffman, K. W. Zilm, "Further conventions for NMR shielding and
   chemical shifts", Pure Appl. Chem. 80 (2008) 59.
.. [3] P. Pyykko, "Year-2017 nuclear quadrupole moments", Mol. Phys. 116
   (2018) 1328.
.. [4] CODATA recommended values of the fundamental physical constants, as
   shipped in ``scipy.constants``.
"""

from __future__ import annotations

import csv
import difflib
import functools
import importlib.resources
import io
import math
import re
from dataclasses import dataclass
from fractions import Fraction
from types import MappingProxyType
from typing import Mapping

from scipy.constants import physical_constants

__all__ = [
    "Nuclide",
    "UnknownNuclideError",
    "get_nuclide",
    "list_nuclides",
    "nuclide_summary",
    "nuclide_table",
    "spin_from_label",
    "proton_gyromagnetic_ratio_mhz_per_t",
]

_TABLE_FILE = "nuclides.csv"

#: Full citations behind the short source keys used in the CSV file.
_CITATIONS: Mapping[str, str] = MappingProxyType(
    {
        "Harris2001": "R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795",
        "Harris2008": "R. K. Harris et al., Pure Appl. Chem. 80 (2008) 59",
        "Pyykko2018": "P. Pyykko, Mol. Phys. 116 (2018) 1328",
        "IUPAC1997": (
            "IUPAC 1997 isotopic compositions (K. J. R. Rosman, P. D. P. Taylor, "
            "Pure Appl. Chem. 70 (1998) 217) as tabulated in "
            "R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795"
        ),
    }
)

_COLUMNS = (
    "nuclide",
    "element",
    "mass_number",
    "spin",
    "xi_percent",
    "xi_reference",
    "gamma_sign",
    "quadrupole_moment_mb",
    "abundance_percent",
    "source_xi",
    "source_q",
    "source_abundance",
    "notes",
)

# "27Al", "27-Al", "27 al"  /  "Al27", "Al-27", "al 27"
_MASS_FIRST = re.compile(r"^\s*(\d{1,3})\s*[-_ ]?\s*([A-Za-z]{1,2})\s*$")
_SYMBOL_FIRST = re.compile(r"^\s*([A-Za-z]{1,2})\s*[-_ ]?\s*(\d{1,3})\s*$")
_SYMBOL_ONLY = re.compile(r"^\s*([A-Za-z]{1,2})\s*$")


class UnknownNuclideError(ValueError):
    """Raised when a nucleus name is malformed or not in the shipped table.

    A ``ValueError`` subclass; the message names the nucleus and suggests
    close matches from the table.

    Parameters
    ----------
    message : str
        The unknown name, suggestions and how to list the known nuclei.

    References
    ----------
    .. [1] R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (the nuclei
       and their names).

    Examples
    --------
    >>> try:
    ...     get_nuclide("27Xx")
    ... except UnknownNuclideError as e:
    ...     print(str(e).split(";")[0])
    unknown nucleus '27Xx'
    """


def proton_gyromagnetic_ratio_mhz_per_t() -> float:
    """Return the bare-proton gyromagnetic ratio gamma_p / 2 pi in MHz/T.

    Returns
    -------
    float
        CODATA value of gamma_p / 2 pi in MHz per tesla (about 42.577 MHz/T),
        read from ``scipy.constants.physical_constants``.  It refers to the
        bare proton; the 1H resonance of TMS lies about 31 ppm lower.

    References
    ----------
    .. [1] CODATA recommended values of the fundamental physical constants,
       via ``scipy.constants``.

    Examples
    --------
    >>> round(proton_gyromagnetic_ratio_mhz_per_t(), 3)
    42.577
    """
    return float(physical_constants["proton gyromag. ratio in MHz/T"][0])


def spin_from_label(label: str) -> float:
    """Convert a spin label such as ``"5/2"`` or ``"1"`` to a float.

    Parameters
    ----------
    label : str
        Nuclear spin quantum number I written as an integer (``"1"``) or a
        fraction with denominator 2 (``"5/2"``).  Must be a positive multiple
        of 1/2.

    Returns
    -------
    float
        The spin I, e.g. 2.5 for ``"5/2"``.

    Raises
    ------
    ValueError
        If ``label`` is not a positive integer or half-integer.

    References
    ----------
    .. [1] R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (spins of the
       NMR nuclei are integers or half-integers).

    Examples
    --------
    >>> spin_from_label("5/2")
    2.5
    >>> spin_from_label("1")
    1.0
    """
    if not isinstance(label, str):
        raise ValueError(
            f"spin label must be a string such as '5/2' or '1'; got {label!r}"
        )
    text = label.strip()
    if not re.fullmatch(r"\d+(/\d+)?", text):
        raise ValueError(
            f"spin label must look like '5/2' or '1' (a positive multiple of 1/2); "
            f"got {label!r}"
        )
    value = Fraction(text)
    if value <= 0 or (2 * value).denominator != 1:
        raise ValueError(
            f"spin label must be a positive multiple of 1/2 (1/2, 1, 3/2, ...); "
            f"got {label!r}"
        )
    return float(value)


@dataclass(frozen=True)
class Nuclide:
    """Nuclear properties of one NMR nucleus.

    Attributes
    ----------
    name : str
        Canonical label, mass number then symbol, e.g. ``"27Al"``.
    element : str
        Chemical symbol, e.g. ``"Al"``.
    mass_number : int
        Mass number A.
    spin : float
        Nuclear spin quantum number I, e.g. 2.5.
    spin_label : str
        The same spin as a fraction string, e.g. ``"5/2"``.
    xi_percent : float
        IUPAC frequency ratio Xi in percent: resonance frequency of this
        nucleus in its reference compound relative to 1H in dilute TMS.
    gamma_sign : int
        Sign (+1 or -1) of the magnetic moment, i.e. of gamma.
    quadrupole_moment_mb : float
        Spectroscopic electric quadrupole moment Q in millibarn
        (1 mb = 1e-31 m^2 = 0.1 fm^2); 0 for spin 1/2.
    abundance_percent : float
        Natural isotopic abundance in percent.
    reference_compound : str
        The reference compound that defines Xi (and delta = 0).
    sources : tuple of str
        Citations for Xi, Q and the abundance.
    notes : str
        Remarks on the row, e.g. values that are uncertain.

    References
    ----------
    .. [1] R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (Xi, spins,
       abundances).
    .. [2] P. Pyykko, Mol. Phys. 116 (2018) 1328 (quadrupole moments).

    Examples
    --------
    >>> o17 = get_nuclide("17O")
    >>> o17.spin, o17.multiplicity, o17.gamma_sign
    (2.5, 6, -1)
    """

    name: str
    element: str
    mass_number: int
    spin: float
    spin_label: str
    xi_percent: float
    gamma_sign: int
    quadrupole_moment_mb: float
    abundance_percent: float
    reference_compound: str
    sources: tuple[str, ...]
    notes: str = ""

    @property
    def is_quadrupolar(self) -> bool:
        """True for spin I > 1/2 (the nucleus has an electric quadrupole moment).

        Returns
        -------
        bool

        References
        ----------
        .. [1] P. Pyykko, Mol. Phys. 116 (2018) 1328.

        Examples
        --------
        >>> get_nuclide("17O").is_quadrupolar, get_nuclide("13C").is_quadrupolar
        (True, False)
        """
        return self.spin > 0.5

    @property
    def multiplicity(self) -> int:
        """Number of Zeeman levels, 2I + 1.

        Returns
        -------
        int

        References
        ----------
        .. [1] R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (spins).

        Examples
        --------
        >>> get_nuclide("27Al").multiplicity
        6
        """
        return int(round(2 * self.spin)) + 1

    @property
    def quadrupole_moment_fm2(self) -> float:
        """Quadrupole moment Q in fm^2 (1 mb = 0.1 fm^2).

        Returns
        -------
        float
            Q in fm^2 (signed; 0 for spin 1/2).

        References
        ----------
        .. [1] P. Pyykko, Mol. Phys. 116 (2018) 1328.

        Examples
        --------
        >>> o17 = get_nuclide("17O")
        >>> o17.quadrupole_moment_fm2 == o17.quadrupole_moment_mb / 10
        True
        """
        return self.quadrupole_moment_mb / 10.0

    @property
    def quadrupole_moment_barn(self) -> float:
        """Quadrupole moment Q in barn (1 b = 1000 mb = 100 fm^2).

        Returns
        -------
        float
            Q in barn (signed; 0 for spin 1/2).

        References
        ----------
        .. [1] P. Pyykko, Mol. Phys. 116 (2018) 1328.

        Examples
        --------
        >>> o17 = get_nuclide("17O")
        >>> o17.quadrupole_moment_barn == o17.quadrupole_moment_mb / 1000
        True
        """
        return self.quadrupole_moment_mb / 1000.0

    def larmor_hz(self, field_tesla: float) -> float:
        """Reference (Larmor) frequency of this nucleus at a given field.

        Parameters
        ----------
        field_tesla : float
            Static magnetic field B0 in tesla; finite and > 0 T.

        Returns
        -------
        float
            nu_ref = (Xi / 100) * (gamma_p / 2 pi) * B0 in Hz (a positive
            number; the sign of gamma is in ``gamma_sign``).  gamma_p is the
            CODATA bare-proton value, a ppm-level approximation of the 1H
            frequency of TMS (see the module notes).

        Raises
        ------
        ValueError
            If ``field_tesla`` is not a finite number > 0 T.

        References
        ----------
        .. [1] R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (the
           unified Xi scale).

        Examples
        --------
        >>> al = get_nuclide("27Al")
        >>> round(al.larmor_hz(14.1) / 1e6, 1)
        156.4
        """
        field = _checked_field(field_tesla)
        return (
            (self.xi_percent / 100.0)
            * proton_gyromagnetic_ratio_mhz_per_t()
            * 1e6
            * field
        )


def _checked_field(field_tesla: object) -> float:
    """Validate a magnetic field in tesla; return it as float."""
    if isinstance(field_tesla, bool):
        raise ValueError(
            f"field_tesla must be a finite number > 0 T; got {field_tesla!r}"
        )
    try:
        field = float(field_tesla)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise ValueError(
            f"field_tesla must be a finite number > 0 T; got {field_tesla!r}"
        ) from None
    if not math.isfinite(field) or field <= 0.0:
        raise ValueError(
            f"field_tesla must be a finite number > 0 T; got {field_tesla!r}"
        )
    return field


def _row_error(line: int, column: str, value: str, expected: str) -> ValueError:
    return ValueError(
        f"{_TABLE_FILE} line {line}: column '{column}' = {value!r}; expected {expected}"
    )


def _parse_row(row: Mapping[str, str], line: int) -> Nuclide:
    """Turn one CSV row into a validated Nuclide."""
    missing = [c for c in _COLUMNS if row.get(c) is None]
    if missing:
        raise _row_error(line, missing[0], "", "a value (row too short)")
    element = row["element"].strip()
    try:
        mass_number = int(row["mass_number"])
    except ValueError:
        raise _row_error(line, "mass_number", row["mass_number"], "an integer") from None
    name = row["nuclide"].strip()
    if name != f"{mass_number}{element}":
        raise _row_error(line, "nuclide", name, f"'{mass_number}{element}'")
    spin_label = row["spin"].strip()
    spin = spin_from_label(spin_label)
    floats = {}
    for column in ("xi_percent", "quadrupole_moment_mb", "abundance_percent"):
        try:
            floats[column] = float(row[column])
        except ValueError:
            raise _row_error(line, column, row[column], "a number") from None
    if not 0.0 < floats["xi_percent"] <= 100.0:
        raise _row_error(line, "xi_percent", row["xi_percent"], "a number in (0, 100]")
    if not 0.0 < floats["abundance_percent"] <= 100.0:
        raise _row_error(
            line, "abundance_percent", row["abundance_percent"], "a number in (0, 100]"
        )
    if spin == 0.5 and floats["quadrupole_moment_mb"] != 0.0:
        raise _row_error(
            line, "quadrupole_moment_mb", row["quadrupole_moment_mb"], "0 for spin 1/2"
        )
    if spin > 0.5 and floats["quadrupole_moment_mb"] == 0.0:
        raise _row_error(
            line, "quadrupole_moment_mb", row["quadrupole_moment_mb"],
            "a nonzero value for spin > 1/2",
        )
    if row["gamma_sign"].strip() not in ("1", "+1", "-1"):
        raise _row_error(line, "gamma_sign", row["gamma_sign"], "+1 or -1")
    gamma_sign = int(row["gamma_sign"])

    def cite(column: str, label: str) -> str | None:
        keys = [k.strip() for k in row[column].split(";") if k.strip()]
        if keys and all(k.startswith("n/a") for k in keys):
            return None
        for key in keys:
            if key not in _CITATIONS:
                raise _row_error(line, column, key, f"one of {sorted(_CITATIONS)}")
        return f"{label}: " + "; ".join(_CITATIONS[k] for k in keys)

    sources = tuple(
        s
        for s in (
            cite("source_xi", "Xi and reference compound"),
            cite("source_q", "quadrupole moment"),
            cite("source_abundance", "natural abundance"),
        )
        if s is not None
    )
    return Nuclide(
        name=name,
        element=element,
        mass_number=mass_number,
        spin=spin,
        spin_label=spin_label,
        xi_percent=floats["xi_percent"],
        gamma_sign=gamma_sign,
        quadrupole_moment_mb=floats["quadrupole_moment_mb"],
        abundance_percent=floats["abundance_percent"],
        reference_compound=row["xi_reference"].strip(),
        sources=sources,
        notes=row["notes"].strip(),
    )


@functools.lru_cache(maxsize=1)
def _table() -> tuple[Nuclide, ...]:
    """Load and validate the shipped CSV table once."""
    resource = importlib.resources.files("powderspin") / "data" / _TABLE_FILE
    text = resource.read_text(encoding="utf-8")
    lines = text.splitlines()
    body = [(n, ln) for n, ln in enumerate(lines, start=1)
            if ln.strip() and not ln.lstrip().startswith("#")]
    if not body:
        raise ValueError(f"{_TABLE_FILE}: no header line found")
    header_line = body[0][0]
    reader = csv.reader(io.StringIO("\n".join(ln for _, ln in body)))
    columns = next(reader)
    if tuple(c.strip() for c in columns) != _COLUMNS:
        raise ValueError(
            f"{_TABLE_FILE} line {header_line}: columns {columns}; expected {list(_COLUMNS)}"
        )
    nuclides = []
    seen = set()
    for (line, _), values in zip(body[1:], reader):
        if len(values) != len(_COLUMNS):
            raise ValueError(
                f"{_TABLE_FILE} line {line}: {len(values)} fields; expected {len(_COLUMNS)}"
            )
        nuclide = _parse_row(dict(zip(_COLUMNS, values)), line)
        if nuclide.name in seen:
            raise _row_error(line, "nuclide", nuclide.name, "a name not used before")
        seen.add(nuclide.name)
        nuclides.append(nuclide)
    return tuple(nuclides)


@functools.lru_cache(maxsize=1)
def _index() -> Mapping[str, Nuclide]:
    """Read-only map from lower-case canonical name to Nuclide."""
    return MappingProxyType({n.name.lower(): n for n in _table()})


def list_nuclides() -> tuple[Nuclide, ...]:
    """Return every nucleus in the shipped table, in table order.

    Returns
    -------
    tuple of Nuclide
        Ordered by mass number (the order of ``data/nuclides.csv``).

    References
    ----------
    .. [1] R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795.
    .. [2] P. Pyykko, Mol. Phys. 116 (2018) 1328.

    Examples
    --------
    >>> names = [n.name for n in list_nuclides()]
    >>> "27Al" in names and "1H" in names
    True
    """
    return _table()


def _parse_name(name: str) -> tuple[int | None, str | None]:
    """Split a nucleus name into (mass number, symbol); None where absent."""
    for pattern, mass_group, symbol_group in (
        (_MASS_FIRST, 1, 2),
        (_SYMBOL_FIRST, 2, 1),
    ):
        match = pattern.match(name)
        if match:
            return int(match.group(mass_group)), match.group(symbol_group).capitalize()
    match = _SYMBOL_ONLY.match(name)
    if match:
        return None, match.group(1).capitalize()
    return None, None


def _suggestions(name: str, mass: int | None, symbol: str | None) -> list[str]:
    """Names from the table that are close to an unknown ``name``."""
    table = _table()
    canonical = f"{mass}{symbol}" if mass is not None and symbol else name.strip()
    by_lower = {n.name.lower(): n.name for n in table}
    found: list[str] = []

    def add(candidate: str) -> None:
        if candidate not in found:
            found.append(candidate)

    for match in difflib.get_close_matches(
        canonical.lower(), list(by_lower), n=4, cutoff=0.6
    ):
        add(by_lower[match])
    for nuclide in table:
        if symbol is not None and nuclide.element == symbol:
            add(nuclide.name)
    for nuclide in table:
        if mass is not None and nuclide.mass_number == mass:
            add(nuclide.name)
    return found[:6]


def get_nuclide(name: str | Nuclide) -> Nuclide:
    """Look up a nucleus by name.

    Parameters
    ----------
    name : str or Nuclide
        Mass number and chemical symbol in either order, optionally joined by
        a hyphen, with the symbol in any case: ``"27Al"``, ``"Al27"``,
        ``"al-27"``, ``"27-Al"`` and ``"Al-27"`` all name aluminium-27.  A
        Nuclide is returned unchanged.

    Returns
    -------
    Nuclide
        The table entry.

    Raises
    ------
    UnknownNuclideError
        If the name is malformed or the nucleus is not in the table; the
        message suggests close matches that are in the table.

    References
    ----------
    .. [1] R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795.

    Examples
    --------
    >>> get_nuclide("al-27").name
    '27Al'
    >>> get_nuclide("Na23").spin_label
    '3/2'
    """
    if isinstance(name, Nuclide):
        return name
    if not isinstance(name, str):
        raise UnknownNuclideError(
            f"nucleus name must be a string such as '27Al'; got {name!r}"
        )
    mass, symbol = _parse_name(name)
    if mass is not None and symbol is not None:
        hit = _index().get(f"{mass}{symbol}".lower())
        if hit is not None:
            return hit
    suggestions = _suggestions(name, mass, symbol)
    hint = f"; did you mean {', '.join(suggestions)}?" if suggestions else ""
    if mass is None or symbol is None:
        form = "mass number and element symbol, e.g. '27Al' or 'Al-27'"
        raise UnknownNuclideError(
            f"unknown nucleus {name!r}: expected {form}{hint}"
        )
    raise UnknownNuclideError(
        f"unknown nucleus {name!r}{hint or '; no similar nucleus in the table'}"
        f" (powderspin nuclide --list, or list_nuclides() in Python, gives all {len(_table())} known nuclei)"
    )


def _format_number(value: float, digits: int = 6) -> str:
    return f"{value:.{digits}g}"


def nuclide_summary(nuclide: str | Nuclide, field_tesla: float) -> str:
    """Multi-line, human-readable summary of a nucleus at a given field.

    Parameters
    ----------
    nuclide : str or Nuclide
        The nucleus, by any name ``get_nuclide`` accepts, or a Nuclide.
    field_tesla : float
        Static magnetic field B0 in tesla; finite and > 0 T.

    Returns
    -------
    str
        Spin, number of levels, reference (Larmor) frequency in MHz at
        ``field_tesla``, sign of gamma, quadrupole moment in mb, fm^2 and
        barn, natural abundance, the reference compound, remarks and the
        sources.  No trailing newline.

    Raises
    ------
    UnknownNuclideError
        If the nucleus is not in the table.
    ValueError
        If ``field_tesla`` is not a finite number > 0 T.

    References
    ----------
    .. [1] R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795.
    .. [2] P. Pyykko, Mol. Phys. 116 (2018) 1328.

    Examples
    --------
    >>> text = nuclide_summary("27Al", 14.1)
    >>> text.splitlines()[0]
    '27Al: spin 5/2, quadrupolar (6 levels)'
    """
    nuc = get_nuclide(nuclide)
    field = _checked_field(field_tesla)
    nu_ref_mhz = nuc.larmor_hz(field) / 1e6
    nu_h_mhz = proton_gyromagnetic_ratio_mhz_per_t() * field
    kind = ", quadrupolar" if nuc.is_quadrupolar else ""
    lines = [
        f"{nuc.name}: spin {nuc.spin_label}{kind} ({nuc.multiplicity} levels)",
        f"  reference frequency at {_format_number(field)} T: {nu_ref_mhz:.4f} MHz"
        f"  (1H at {nu_h_mhz:.4f} MHz; Xi = {nuc.xi_percent:.6f} %)",
        f"  delta = 0 ppm defined by: {nuc.reference_compound}",
        f"  sign of gamma: {'+' if nuc.gamma_sign > 0 else '-'}",
    ]
    if nuc.is_quadrupolar:
        q_mb = nuc.quadrupole_moment_mb
        lines.append(
            f"  quadrupole moment Q: {_format_number(q_mb)} mb"
            f" = {_format_number(nuc.quadrupole_moment_fm2)} fm^2"
            f" = {_format_number(nuc.quadrupole_moment_barn)} b"
        )
    else:
        lines.append("  quadrupole moment Q: none (spin 1/2)")
    lines.append(f"  natural abundance: {_format_number(nuc.abundance_percent)} %")
    if nuc.notes:
        lines.append(f"  remarks: {nuc.notes}")
    lines.append(
        "  note: 1H frequency from the CODATA bare-proton gyromagnetic ratio"
        " (ppm-level approximation to 1H in TMS)"
    )
    lines.append("  sources:")
    lines.extend(f"    - {source}" for source in nuc.sources)
    return "\n".join(lines)


def nuclide_table(field_tesla: float = 1.0) -> str:
    """Readable text table of every nucleus in the shipped table.

    One line per nucleus, in table order (by mass number): name, spin, the
    frequency ratio Xi, the reference frequency at ``field_tesla``, the
    quadrupole moment and the natural abundance.  Meant for listing the
    known nuclei on a terminal.

    Parameters
    ----------
    field_tesla : float, optional
        Static magnetic field B0 in tesla at which the reference frequencies
        are given; finite and > 0 T.  Default 1 T, so the column is then
        the reference frequency per tesla.

    Returns
    -------
    str
        A caption line, a header line, a rule and one line per nucleus;
        columns separated by blanks, no trailing newline.  The frequency
        column is ``Nuclide.larmor_hz(field_tesla)`` in MHz; Q is in mb
        ("-" for spin 1/2); the abundance is in percent.

    Raises
    ------
    ValueError
        If ``field_tesla`` is not a finite number > 0 T.

    See Also
    --------
    nuclide_summary : all data and sources of one nucleus.
    list_nuclides : the same rows as Nuclide values.

    References
    ----------
    .. [1] R. K. Harris et al., Pure Appl. Chem. 73 (2001) 1795 (Xi, spins,
       abundances).
    .. [2] P. Pyykko, Mol. Phys. 116 (2018) 1328 (quadrupole moments).

    Examples
    --------
    >>> lines = nuclide_table(14.1).splitlines()
    >>> print(lines[1])
    nucleus   spin      Xi / %  MHz at 14.1 T     Q / mb  abundance / %
    >>> print(next(line for line in lines if line.startswith("27Al ")))
    27Al       5/2   26.056859       156.4304      146.6            100
    """
    field = _checked_field(field_tesla)
    table = _table()
    freq_head = f"MHz at {_format_number(field)} T"
    widths = (7, 5, 10, max(12, len(freq_head)), 9, 13)
    heads = ("nucleus", "spin", "Xi / %", freq_head, "Q / mb", "abundance / %")

    def line(cells: tuple[str, ...]) -> str:
        first = f"{cells[0]:<{widths[0]}}"
        rest = "  ".join(f"{c:>{w}}" for c, w in zip(cells[1:], widths[1:]))
        return f"{first}  {rest}"

    lines = [
        f"{len(table)} NMR nuclei; reference frequency nu_ref = (Xi / 100) x "
        f"{proton_gyromagnetic_ratio_mhz_per_t():.4f} MHz/T x {_format_number(field)} T",
        line(heads),
        line(tuple("-" * w for w in widths)),
    ]
    for nuc in table:
        q = _format_number(nuc.quadrupole_moment_mb) if nuc.is_quadrupolar else "-"
        lines.append(line((
            nuc.name,
            nuc.spin_label,
            f"{nuc.xi_percent:.6f}",
            f"{nuc.larmor_hz(field) / 1e6:.4f}",
            q,
            _format_number(nuc.abundance_percent),
        )))
    return "\n".join(lines)
