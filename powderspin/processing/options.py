"""The processing settings: one frozen value, built from keyword options or a model's ``[processing]`` table.

Every key of the ``[processing]`` table is a row of
:data:`powderspin.model.schema.KEYS` (table ``"processing"``), with its unit,
default, range and meaning; :class:`ProcessingOptions` has one field per key
and checks each value against that row.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields
from typing import Mapping

from ..model.schema import keys_of

__all__ = ["ProcessingError", "ProcessingOptions"]


class ProcessingError(ValueError):
    """A processing option is outside its allowed range, or a step cannot be done with the data.

    A ``ValueError``: the message is one line naming the option, the value
    and what is allowed.

    Examples
    --------
    >>> str(ProcessingError("phase0_deg = 400 must be in [-360, 360]"))
    'phase0_deg = 400 must be in [-360, 360]'
    """


@dataclass(frozen=True)
class ProcessingOptions:
    """How a FID becomes a spectrum; every step can be switched off.

    The fields are the keys of the model file's ``[processing]`` table
    (:mod:`powderspin.model.schema`, table ``"processing"``), where their
    units, defaults, ranges and meanings are listed.  ``None`` means "from the
    data" (group delay, echo top) or "automatic" (zero filling).

    Examples
    --------
    >>> o = ProcessingOptions(exponential_hz=50.0)
    >>> o.phase, o.exponential_hz
    ('auto', 50.0)
    >>> ProcessingOptions.from_table({"baseline": "polynomial", "baseline_degree": 2}).baseline_degree
    2
    """

    row: int | None = None
    group_delay: str = "remove"
    group_delay_points: float | None = None
    echo: str = "none"
    echo_top_points: float | None = None
    left_shift_points: int = 0
    echo_train: str = "none"
    echo_period_us: float | None = None
    echo_count: int | None = None
    dc_offset: str = "tail"
    exponential_hz: float = 0.0
    gaussian_hz: float = 0.0
    zero_fill_points: int | None = None
    phase: str = "auto"
    phase0_deg: float = 0.0
    phase1_deg: float = 0.0
    fit_phase: str = "refine"
    baseline: str = "none"
    baseline_degree: int = 1
    referencing: str = "spectrometer"
    proton_mhz: float | None = None
    reference_mhz: float | None = None
    reference_shift_ppm: float | None = None

    def __post_init__(self):
        specs = keys_of("processing")
        for f in fields(self):
            spec = specs[f.name]
            value = getattr(self, f.name)
            if value is None:
                if spec.default is not None:
                    raise ProcessingError(f"processing: {f.name} needs a value ({spec.doc})")
                continue
            if spec.kind == "choice":
                if value not in spec.choices:
                    raise ProcessingError(f"processing: {f.name} = {value!r} must be one of "
                                          + ", ".join(repr(c) for c in spec.choices))
                continue
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(float(value)):
                raise ProcessingError(f"processing: {f.name} = {value!r} must be a number ({spec.unit or 'no unit'})")
            if spec.kind == "integer":
                if float(value) != int(value):
                    raise ProcessingError(f"processing: {f.name} = {value!r} must be a whole number")
                value = int(value)
            else:
                value = float(value)
            low_ok = value > spec.low if spec.low_open else value >= spec.low
            if not (low_ok and value <= spec.high):
                why = f" ({spec.why})" if spec.why else ""
                raise ProcessingError(f"processing: {f.name} = {value!r} must be in {spec.range_text()}"
                                      f"{' ' + spec.unit if spec.unit else ''}{why}")
            object.__setattr__(self, f.name, value)
        if self.referencing == "unified" and self.proton_mhz is None:
            raise ProcessingError("processing: referencing = 'unified' needs proton_mhz (the 1H frequency of "
                                  "tetramethylsilane on this magnet, MHz)")
        if self.referencing == "secondary" and (self.reference_mhz is None or self.reference_shift_ppm is None):
            raise ProcessingError("processing: referencing = 'secondary' needs reference_mhz (the frequency of the "
                                  "reference compound's line, MHz) and reference_shift_ppm (its shift)")
        if self.echo_train != "none" and self.echo_period_us is None:
            raise ProcessingError("processing: echo_train = "
                                  f"{self.echo_train!r} needs echo_period_us (the time from one echo top to the "
                                  "next, microseconds; in a model file it may be written once, as [measurement] "
                                  "echo_train_period_us)")

    @classmethod
    def from_table(cls, table: Mapping | None) -> "ProcessingOptions":
        """Options from a ``[processing]`` table (unknown keys refused, naming the allowed ones).

        Parameters
        ----------
        table : Mapping or None

        Returns
        -------
        ProcessingOptions

        Raises
        ------
        ProcessingError

        Examples
        --------
        >>> ProcessingOptions.from_table({"phase": "manual", "phase0_deg": 30}).phase0_deg
        30.0
        """
        table = dict(table or {})
        allowed = [f.name for f in fields(cls)]
        unknown = sorted(set(table) - set(allowed))
        if unknown:
            raise ProcessingError(f"processing: unknown key {unknown[0]!r}; the keys are {', '.join(allowed)}")
        return cls(**table)

    def changed(self) -> dict:
        """The options that differ from the defaults, as plain values.

        Returns
        -------
        dict

        Examples
        --------
        >>> ProcessingOptions(gaussian_hz=100.0).changed()
        {'gaussian_hz': 100.0}
        """
        base = ProcessingOptions()
        return {k: v for k, v in asdict(self).items() if v != getattr(base, k)}
