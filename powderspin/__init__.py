"""powderspin: solid-state NMR powder patterns of quadrupolar and shift-anisotropic nuclei.

The names below are imported on first use, so that ``import powderspin`` (and
commands such as ``powderspin nuclide``) do not pay for the compiled kernels.

Quick start
-----------
>>> import powderspin as ps
>>> model = ps.make_model("27Al", {"field_tesla": 14.1, "spinning_hz": "inf", "points": 1024},
...                       [{"label": "AlO6", "shift_ppm": 8.0, "cq_mhz": 5.5, "eta_q": 0.6}])
>>> spectrum = ps.simulate(model)
>>> round(spectrum.area(), 3)
1.0
"""

from __future__ import annotations

import importlib
from importlib import metadata as _metadata

try:
    __version__ = _metadata.version("powderspin")
except _metadata.PackageNotFoundError:  # pragma: no cover - an uninstalled source tree
    __version__ = "unknown"

#: public name -> module that holds it
_EXPORTS = {
    "Measurement": "model.values", "Model": "model.values", "ModelError": "model.values", "Site": "model.values",
    "FitSettings": "model.values", "ParameterAddress": "model.values", "FreeParameter": "model.values",
    "TiedParameter": "model.values",
    "make_model": "model.modelfile", "make_site": "model.modelfile", "load_model": "model.modelfile",
    "parse_model": "model.modelfile", "model_to_toml": "model.modelfile", "write_model": "model.modelfile",
    "Nuclide": "physics.nuclides", "get_nuclide": "physics.nuclides", "list_nuclides": "physics.nuclides",
    "plot_spectrum": "plotting.spectrum", "save_plot": "plotting.spectrum",
    "simulate": "simulator", "simulate_all": "simulator",
    "SiteJob": "engine.site_lines", "SiteLines": "engine.site_lines", "site_job": "engine.site_lines",
    "compute_lines": "engine.site_lines", "render_lines": "engine.site_lines",
    "Spectrum": "engine.spectrum",
    "fit": "fitting.fitter", "FitResult": "fitting.result", "FitError": "fitting.data",
    "write_result": "io.results",
    "read_spectrum": "io.spectra", "MeasuredSpectrum": "io.spectra", "DataError": "io.spectra",
    "write_jcamp": "io.spectra",
    "plan": "planning.planner", "Plan": "planning.results", "PlanError": "planning.rotors",
    "write_spectrum": "io.results", "write_plan_json": "io.results", "save_plan_plot": "plotting.plan",
    "save_report": "plotting.report", "Simulator": "simulator", "ProgressEvent": "progress",
    "ShiftTensor": "physics.tensors",
    "process": "processing.pipeline", "ProcessingOptions": "processing.options", "read_raw": "io.raw",
    "RawFID": "io.raw", "combine_stepped": "processing.stepped",
    # every public exception, so that callers can catch them by name
    "UnknownNuclideError": "physics.nuclides", "TensorError": "physics.tensors",
    "OrientationSetError": "physics.orientations", "DistributionError": "physics.distributions",
    "CacheError": "disorder.library", "OutputExistsError": "files", "OutputPathError": "files",
    "AxisUnitError": "io.spectra", "MismatchError": "fitting.data", "ProcessingError": "processing.options",
    "FitCancelled": "explorer.state",
    "OrientationSetFileMissing": "physics.orientations", "DamagedEntryWarning": "disorder.library",
    "Spectrum2D": "engine.spectrum2d", "read_spectrum_2d": "io.spectra2d", "MeasuredSpectrum2D": "io.spectra2d",
    "write_spectrum_2d": "io.spectra2d", "plot_spectrum_2d": "plotting.spectrum2d",
    "save_plot_2d": "plotting.spectrum2d",
    "fit_two_dimensional": "fitting.two_dimensional", "plan_f1_resolution": "planning.two_dimensional",
    "fit_series": "series.runner", "SeriesResult": "series.runner", "SeriesError": "series.inputs",
}

__all__ = sorted(_EXPORTS) + ["__version__"]


def __getattr__(name: str):
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'powderspin' has no attribute {name!r}")
    value = getattr(importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(_EXPORTS))
