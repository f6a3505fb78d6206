"""The explorer's colours (one place, shared by the page and the downloaded figure)."""

#: measured spectrum
DATA_COLOUR = "#2b2d42"
#: the simulated sum
SIMULATION_COLOUR = "#e07a1f"
#: data minus simulation
RESIDUAL_COLOUR = "#5a7d5a"
#: one colour per site component
COMPONENT_COLOURS = ("#3a86a8", "#9b5de5", "#c0392b", "#2a9d8f", "#b5838d", "#6d6875", "#8a9a2b", "#d4a017")
#: the page's panels and accents
PANEL_BACKGROUND = "#f4f1ea"
ACCENT = "#1f6f78"
ERROR_COLOUR = "#b00020"
