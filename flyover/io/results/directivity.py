"""``directivity.csv``: level against polar angle, one row per region and window."""

from flyover.io.results import FigureFile, TableFile

DIRECTIVITY_FIGURE = FigureFile("directivity.png", "directivity")
DIRECTIVITY = TableFile("directivity.csv", (
    ("region", "region name, or 'total'"),
    ("window", "index"),
    ("polar_angle_deg", "deg"),
), float_format="%.3f", more_columns="one column per band, '<nominal>_hz', level in dB")
