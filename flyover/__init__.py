"""flyover: moving-source array processing for outdoor flyover noise campaigns.

The core (frames, track, atmosphere, bands, propagation, simulate, ...) works on numpy arrays in
SI units and never touches files; :mod:`flyover.io` reads and writes; :mod:`flyover.stages` holds
the entry points the workflow calls.
"""

__version__ = "0.1.0"

from flyover.acoustics.atmosphere import Atmosphere, absorption_db_per_m, speed_of_sound_m_s
from flyover.acoustics.bands import a_weighting_db, c_weighting_db, third_octave_bands
from flyover.geometry.frames import SiteFrame
from flyover.geometry.track import fit_track
from flyover.model.errors import FlyoverInputError

__all__ = ["Atmosphere", "FlyoverInputError", "SiteFrame", "a_weighting_db",
           "absorption_db_per_m", "c_weighting_db", "fit_track", "speed_of_sound_m_s",
           "third_octave_bands", "__version__"]
