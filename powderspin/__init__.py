"""powderspin: solid-state NMR powder patterns of quadrupolar and shift-anisotropic nuclei.

Quick start
-----------
>>> import powderspin as ps
>>> model = ps.make_model("27Al", {"field_tesla": 14.1, "spinning_hz": "inf", "points": 1024},
...                       [{"label": "AlO6", "shift_ppm": 8.0, "cq_mhz": 5.5, "eta_q": 0.6}])
>>> spectrum = ps.simulate(model)
>>> round(spectrum.area(), 3)
1.0
"""

__version__ = "0.1.0"

from .io import model_to_toml, write_model  # noqa: E402
from .model import Measurement, Model, ModelError, Site, load_model, make_model, make_site, parse_model  # noqa: E402
from .nuclides import Nuclide, get_nuclide, list_nuclides  # noqa: E402
from .plotting import plot_spectrum, save_plot  # noqa: E402
from .simulation import simulate  # noqa: E402
from .spectrum import Spectrum  # noqa: E402
from .tensors import ShiftTensor  # noqa: E402

__all__ = [
    "Measurement", "Model", "ModelError", "Site", "load_model", "make_model", "make_site", "parse_model",
    "Nuclide", "get_nuclide", "list_nuclides", "plot_spectrum", "save_plot", "simulate", "Spectrum",
    "ShiftTensor", "model_to_toml", "write_model", "__version__",
]
