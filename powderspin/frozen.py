"""Frozen values that pickle: read-only mappings inside frozen dataclasses survive a trip to another process.

Several result values (:class:`~powderspin.engine.spectrum.Spectrum`,
:class:`~powderspin.planning.results.RateResult`, :class:`~powderspin.planning.results.Plan`,
:class:`~powderspin.fitting.result.FitResult`, ...) keep their mappings read-only by wrapping them in
``types.MappingProxyType`` in ``__post_init__``.  A mapping proxy cannot be pickled, so without help such a value
could not be sent to a Dask worker, returned from one, or saved with :mod:`pickle`.  Their ``__reduce__`` is
:func:`reduce_through_init`: the value is rebuilt through its own constructor from its fields, every mapping proxy
(at any depth inside tuples, lists and dicts) carried as a plain dict marked to become a proxy again.  The
constructor's checks run again on the way in, so an unpickled value is one the constructor accepts.
"""

from __future__ import annotations

from dataclasses import fields
from types import MappingProxyType

__all__ = ["reduce_through_init"]


class _ReadOnly(dict):
    """A mapping that was a ``MappingProxyType`` before pickling (a dict that pickles)."""


def _outward(v):
    if isinstance(v, MappingProxyType):
        return _ReadOnly({k: _outward(x) for k, x in v.items()})
    if type(v) is tuple:
        return tuple(_outward(x) for x in v)
    if type(v) is list:
        return [_outward(x) for x in v]
    if type(v) is dict:
        return {k: _outward(x) for k, x in v.items()}
    return v


def _inward(v):
    if isinstance(v, _ReadOnly):
        return MappingProxyType({k: _inward(x) for k, x in v.items()})
    if type(v) is tuple:
        return tuple(_inward(x) for x in v)
    if type(v) is list:
        return [_inward(x) for x in v]
    if type(v) is dict:
        return {k: _inward(x) for k, x in v.items()}
    return v


def _rebuild(cls, values: dict):
    """``cls(**values)``, the marked mappings read-only again (unpickling, see :func:`reduce_through_init`)."""
    return cls(**{k: _inward(v) for k, v in values.items()})


def reduce_through_init(value):
    """``__reduce__`` of a frozen dataclass whose ``__post_init__`` wraps mappings read-only.

    Parameters
    ----------
    value : dataclass instance
        Every field must be an ``__init__`` argument (the value is rebuilt
        through its constructor).

    Returns
    -------
    tuple
        ``(rebuild, (type, fields))`` for :mod:`pickle`.

    Examples
    --------
    >>> import pickle
    >>> from powderspin.engine.spectrum import Spectrum
    >>> s = Spectrum([-1.0, 0.0, 1.0], [-1e-6, 0.0, 1e-6], [0.0, 1.0, 0.0], ("a",), [[0.0, 1.0, 0.0]],
    ...              {"nucleus": "31P", "nu_ref_hz": 1e6})
    >>> t = pickle.loads(pickle.dumps(s))
    >>> type(t.metadata).__name__, dict(t.metadata) == dict(s.metadata), t.intensity.flags.writeable
    ('mappingproxy', True, False)
    """
    out = {}
    for f in fields(value):
        if not f.init:
            raise TypeError(f"{type(value).__name__}.{f.name} is not an __init__ field; it cannot be rebuilt")
        out[f.name] = _outward(getattr(value, f.name))
    return (_rebuild, (type(value), out))
