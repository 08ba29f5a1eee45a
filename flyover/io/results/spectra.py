"""``spectra.csv``: the level rows of the windows nearest to chosen polar angles."""

from flyover.io.results import FigureFile, TableFile
from flyover.io.results.levels import LEVELS

SPECTRA_FIGURE = FigureFile("spectra.png", "region spectra")
SPECTRA = TableFile("spectra.csv", (("target_polar_deg", "deg, the angle asked for"),)
                    + LEVELS.columns, float_format="%.3f")
