"""Series of spectra: one model fitted to many spectra on Dask, with a table, trends, restarts and no lost work.

- :mod:`powderspin.series.inputs`: the files, globs or manifest, the series variables, content hashes;
- :mod:`powderspin.series.tasks`: one spectrum's fit, the Dask task (runs in a worker);
- :mod:`powderspin.series.runner`: :func:`fit_series`, the client, the table and the results folder.
"""

from .inputs import SeriesError
from .runner import SeriesResult, SeriesRow, fit_series

__all__ = ["fit_series", "SeriesResult", "SeriesRow", "SeriesError"]
