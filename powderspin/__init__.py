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
    "Measurement": "model", "Model": "model", "ModelError": "model", "Site": "model", "FitSettings": "model",
    "ParameterAddress": "model", "FreeParameter": "model", "TiedParameter": "model",
    "make_model": "modelfile", "make_site": "modelfile",
    "load_model": "modelfile", "parse_model": "modelfile", "model_to_toml": "modelfile", "write_model": "modelfile",
    "Nuclide": "nuclides", "get_nuclide": "nuclides", "list_nuclides": "nuclides",
    "plot_spectrum": "plotting", "save_plot": "plotting",
    "simulate": "simulation", "simulate_all": "simulation",
    "SiteJob": "site_lines", "SiteLines": "site_lines", "site_job": "site_lines", "compute_lines": "site_lines",
    "render_lines": "site_lines",
    "Spectrum": "spectrum",
    "fit": "fitting", "FitResult": "fitting", "FitError": "fitting", "write_result": "fitting",
    "read_spectrum": "data_io", "MeasuredSpectrum": "data_io", "DataError": "data_io",
    "plan": "planning", "Plan": "planning",
    "ShiftTensor": "tensors",
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
