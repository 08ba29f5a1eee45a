"""flyover: moving-source array processing for outdoor flyover noise campaigns.

The core (frames, track, atmosphere, bands, propagation, simulate, ...) works on numpy arrays in
SI units and never touches files; :mod:`flyover.io` reads and writes; :mod:`flyover.pipeline`
holds the entry points the workflow calls.

The names below are loaded on first use (PEP 562): every workflow job imports some module of
the package, and importing the face eagerly pulled in scipy and pyproj for each of them.
"""

from importlib import import_module

__version__ = "0.1.0"

# Public name -> the module that defines it.
_FACE = {
    "Atmosphere": "flyover.acoustics.atmosphere",
    "absorption_db_per_m": "flyover.acoustics.atmosphere",
    "speed_of_sound_m_s": "flyover.acoustics.atmosphere",
    "a_weighting_db": "flyover.acoustics.bands",
    "c_weighting_db": "flyover.acoustics.bands",
    "third_octave_bands": "flyover.acoustics.bands",
    "SiteFrame": "flyover.geometry.frames",
    "fit_track": "flyover.geometry.track",
    "FlyoverInputError": "flyover.model.errors",
}

__all__ = sorted(_FACE) + ["__version__"]


def __getattr__(name: str):
    if name in _FACE:
        value = getattr(import_module(_FACE[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'flyover' has no attribute {name!r}")


def __dir__():
    return __all__
