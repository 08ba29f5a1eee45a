"""Conventional beamforming on cross-spectral matrices of de-Dopplerized signals (the hybrid
time-frequency approach): :mod:`flyover.imaging.csm`. The point-spread of a unit source comes
from the steering vectors, without simulating it."""

from __future__ import annotations

from flyover.imaging.csm import block_samples, conventional_maps, conventional_point_spread
from flyover.imaging.chain import BandPowers
from flyover.imaging.methods import register
from flyover.imaging.methods._frequency import csm_and_steering, unit_steering
from flyover.imaging.window import ImagingMethod, PointSpread, WindowContext


def band_maps(signals_pa, context: WindowContext) -> BandPowers:
    csm, steering, factor = csm_and_steering(signals_pa, context)
    return conventional_maps(csm, steering, len(context.settings.bands), factor=factor)


def point_spread(body_m, points, context: WindowContext, seed: int) -> PointSpread:
    grid, source = unit_steering(body_m, points, context)
    maps, power = conventional_point_spread(grid, source, len(context.settings.bands))
    return PointSpread(maps, power)


register(ImagingMethod("frequency-domain", "conventional beamforming on cross-spectral matrices "
                       "of signals de-Dopplerized to the body origin",
                       band_maps, point_spread, block_samples))
