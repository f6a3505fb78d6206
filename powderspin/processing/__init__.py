"""Raw time-domain data to referenced spectra: phasing, baseline, referencing, echoes, stepped acquisitions.

Imports :mod:`powderspin.io` and :mod:`powderspin.physics`, never the fitting layer.

- :func:`process` (``pipeline.py``): the steps, each optional and recorded.
- :class:`ProcessingOptions` (``options.py``): the settings, one per key of
  the ``[processing]`` table (:mod:`powderspin.model.schema`).
- ``phasing.py``: zero/first-order phase, minimum-entropy automatic phasing.
- ``baseline.py``: signal-free regions and the baseline through them.
- ``referencing.py``: spectrometer, IUPAC unified and secondary referencing.
- ``echoes.py``: echo tops and CPMG/QCPMG echo co-addition.
- ``stepped.py``: frequency-stepped sub-spectra combined (sum or skyline).
"""

from .options import ProcessingError, ProcessingOptions
from .pipeline import process, processing_record
from .stepped import combine_stepped

__all__ = ["process", "processing_record", "ProcessingOptions", "ProcessingError", "combine_stepped"]
