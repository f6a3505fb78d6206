"""Rotor tables: the rotors a plan may recommend, with typical top rates and sample volumes (not ratings).

The built-in table (``powderspin/data/rotors.toml``) lists common outer
diameters with *typical* maximum rates and sample volumes, values of the
trade written from memory: they are not ratings.  A laboratory's own table
(a TOML file of the same form) replaces it.  The sample volume is the
planner's proxy for signal.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Any

__all__ = ["PlanError", "Rotor", "RotorTable", "default_rotor_table", "load_rotor_table"]


class PlanError(ValueError):
    """A plan cannot be made with the given model, fields, rates, rotors or settings.

    A ``ValueError`` subclass whose one-line message names the option or file,
    the value and what is allowed.

    Parameters
    ----------
    message : str

    Examples
    --------
    >>> str(PlanError("fields: give at least one field"))
    'fields: give at least one field'
    """


@dataclass(frozen=True)
class Rotor:
    """A magic-angle-spinning rotor: name, typical top rate and sample volume.

    Attributes
    ----------
    name : str
        Name used on the command line, e.g. ``"3.2 mm"``.
    outer_diameter_mm : float or None
        Outer diameter (mm).
    max_rate_hz : float
        Typical highest spinning rate (Hz).  Not a rating: the manufacturer's
        rating for the actual rotor, cap and probe decides.
    sample_volume_ul : float
        Typical sample volume (microlitres), the planner's proxy for signal.

    Examples
    --------
    >>> r = default_rotor_table().find("3.2")
    >>> r.name, r.max_rate_hz
    ('3.2 mm', 24000.0)
    """

    name: str
    outer_diameter_mm: float | None
    max_rate_hz: float
    sample_volume_ul: float


@dataclass(frozen=True)
class RotorTable:
    """The rotors a plan may recommend.

    Attributes
    ----------
    rotors : tuple of Rotor
    source : str
        ``"built-in"`` or the file read.
    description : str
        What the figures are (the built-in table: typical values of the
        trade, from memory, not ratings).

    Examples
    --------
    >>> t = default_rotor_table()
    >>> [r.name for r in t.reaching(60000.0)]
    ['1.3 mm', '0.7 mm']
    """

    rotors: tuple
    source: str
    description: str

    def find(self, name) -> Rotor:
        """The rotor called ``name`` (``"3.2 mm"``, ``"3.2mm"`` or ``"3.2"``).

        Parameters
        ----------
        name : str or float

        Returns
        -------
        Rotor

        Raises
        ------
        PlanError
            For a name the table does not have (the message lists them).

        Examples
        --------
        >>> default_rotor_table().find("0.7mm").sample_volume_ul
        0.6
        """
        key = _rotor_key(name)
        for r in self.rotors:
            if _rotor_key(r.name) == key:
                return r
        raise PlanError(f"rotors: unknown rotor {str(name)!r}; the rotor table ({self.source}) has "
                        + ", ".join(repr(r.name) for r in self.rotors))

    def reaching(self, rate_hz: float) -> tuple:
        """The rotors whose typical maximum rate is at least ``rate_hz``, largest sample volume first.

        Parameters
        ----------
        rate_hz : float

        Returns
        -------
        tuple of Rotor

        Examples
        --------
        >>> [r.name for r in default_rotor_table().reaching(30000.0)][:2]
        ['2.5 mm', '1.9 mm']
        """
        ok = [r for r in self.rotors if r.max_rate_hz >= rate_hz]
        return tuple(sorted(ok, key=lambda r: (-r.sample_volume_ul, r.max_rate_hz, r.name)))

    def largest_volume_ul(self) -> float:
        """The largest sample volume in the table (microlitres): the reference for relative signal.

        Returns
        -------
        float

        Examples
        --------
        >>> default_rotor_table().largest_volume_ul()
        300.0
        """
        return max(r.sample_volume_ul for r in self.rotors)


def _rotor_key(name) -> str:
    s = str(name).strip().lower().replace(" ", "")
    if s.endswith("mm"):
        s = s[:-2]
    try:
        return repr(float(s))
    except ValueError:
        return s


_ROTOR_KEYS = {"name", "outer_diameter_mm", "max_rate_hz", "sample_volume_ul"}
_ROTOR_LIMITS = {
    "outer_diameter_mm": (0.0, 50.0, "mm", "magic-angle-spinning rotors are a fraction of a millimetre to some "
                          "centimetres across"),
    "max_rate_hz": (0.0, 2.0e5, "Hz", "the fastest magic-angle-spinning rotors reach about 150 kHz (common practice)"),
    "sample_volume_ul": (0.0, 1.0e5, "microlitres", "a rotor holds at most some millilitres"),
}


def _rotor_table_from(data: Any, source: str) -> RotorTable:
    where = f"rotor table {source}"
    if not isinstance(data, dict):
        raise PlanError(f"{where} must be a TOML table with [[rotor]] entries")
    extra = sorted(set(data) - {"description", "rotor"})
    if extra:
        raise PlanError(f"{where}: unknown key {extra[0]!r}; allowed are 'description' and [[rotor]] tables")
    items = data.get("rotor")
    if not isinstance(items, list) or not items:
        raise PlanError(f"{where} has no [[rotor]] entries; give at least one with name, max_rate_hz and "
                        "sample_volume_ul")
    desc = data.get("description", "")
    if not isinstance(desc, str):
        raise PlanError(f"{where}: description must be text")
    rotors = []
    seen = {}
    for i, t in enumerate(items):
        w = f"{where}: rotor {i + 1}"
        if not isinstance(t, dict):
            raise PlanError(f"{w} must be a table of rotor keys")
        bad = sorted(set(t) - _ROTOR_KEYS)
        if bad:
            raise PlanError(f"{w}: unknown key {bad[0]!r}; allowed keys are {', '.join(sorted(_ROTOR_KEYS))}")
        name = t.get("name")
        if not isinstance(name, str) or not name.strip():
            raise PlanError(f"{w}: name must be a non-empty text, e.g. name = \"3.2 mm\"")
        w = f"{where}: rotor {name!r}"
        vals = {}
        for key, (lo, hi, unit, why) in _ROTOR_LIMITS.items():
            if key not in t:
                if key == "outer_diameter_mm":
                    vals[key] = None
                    continue
                raise PlanError(f"{w}: {key} is missing ({unit}); every rotor needs max_rate_hz and sample_volume_ul")
            v = t[key]
            if isinstance(v, bool) or not isinstance(v, (int, float)):
                raise PlanError(f"{w}: {key} must be a number ({unit}), got {v!r}")
            if not (math.isfinite(v) and lo < v <= hi):
                raise PlanError(f"{w}: {key} = {v!r} is outside the allowed range ({lo:g}, {hi:g}] {unit} ({why})")
            vals[key] = float(v)
        k = _rotor_key(name)
        if k in seen:
            raise PlanError(f"{where}: the name {name!r} is given twice (rotors {seen[k]} and {i + 1})")
        seen[k] = i + 1
        rotors.append(Rotor(name.strip(), vals["outer_diameter_mm"], vals["max_rate_hz"], vals["sample_volume_ul"]))
    return RotorTable(tuple(rotors), source, desc)


def default_rotor_table() -> RotorTable:
    """The built-in rotor table: typical values of the trade (from memory), not ratings.

    Read from the package data file ``powderspin/data/rotors.toml``.

    Returns
    -------
    RotorTable

    See Also
    --------
    load_rotor_table : a laboratory's own table.

    Examples
    --------
    >>> [r.name for r in default_rotor_table().rotors][:3]
    ['7 mm', '4 mm', '3.2 mm']
    """
    text = resources.files("powderspin").joinpath("data", "rotors.toml").read_text(encoding="utf-8")
    return _rotor_table_from(tomllib.loads(text), "built-in")


def load_rotor_table(path) -> RotorTable:
    """Read a rotor table from a TOML file (it replaces the built-in one).

    The file holds an optional ``description`` and ``[[rotor]]`` tables with
    ``name`` (text, unique), ``max_rate_hz`` (Hz, in (0, 200000]),
    ``sample_volume_ul`` (microlitres, > 0) and optionally
    ``outer_diameter_mm``.

    Parameters
    ----------
    path : str or pathlib.Path

    Returns
    -------
    RotorTable

    Raises
    ------
    PlanError
        A missing or unreadable file, invalid TOML, an unknown or missing key,
        a value outside its range or a name given twice; the message names
        the file, the rotor and the key.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = pathlib.Path(d) / "lab.toml"
    ...     _ = p.write_text('[[rotor]]\\nname = "4 mm"\\nmax_rate_hz = 14000\\nsample_volume_ul = 50\\n')
    ...     [r.max_rate_hz for r in load_rotor_table(p).rotors]
    [14000.0]
    """
    p = Path(path)
    if not p.exists():
        raise PlanError(f"rotor table {str(p)!r} does not exist")
    if not p.is_file():
        raise PlanError(f"rotor table {str(p)!r} is not a regular file")
    try:
        raw = p.read_bytes()
        if len(raw) > 1 << 20:
            raise PlanError(f"rotor table {str(p)!r} is larger than 1 MB; a rotor table is a few lines of TOML")
        from ..model.modelfile import read_toml_text

        data = read_toml_text(raw.decode("utf-8-sig"), f"rotor table {str(p)!r}", PlanError)
    except UnicodeDecodeError:
        raise PlanError(f"rotor table {str(p)!r} is not UTF-8 text") from None
    except OSError as e:
        raise PlanError(f"rotor table {str(p)!r} cannot be read: {e.strerror or e}") from None
    return _rotor_table_from(data, repr(str(p)))
