"""powderspin: solid-state NMR powder patterns of quadrupolar and shift-anisotropic nuclei."""

__version__ = "0.1.0"
