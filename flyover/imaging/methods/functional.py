"""Functional beamforming (Dougherty 2014) on the frequency-domain engine's CSMs: the
conventional map's side lobes raised to the power nu, a lone source's peak kept. Both maps of
its BandPowers are the functional map (it works on the full CSM)."""

from __future__ import annotations

import numpy as np

from flyover.imaging.csm import block_samples, functional_maps, functional_point_spread
from flyover.imaging.chain import BandPowers
from flyover.imaging.methods import register
from flyover.imaging.methods._frequency import csm_and_steering, unit_steering
from flyover.imaging.window import ImagingMethod, PointSpread, WindowContext


def band_maps(signals_pa, context: WindowContext) -> BandPowers:
    csm, steering, _ = csm_and_steering(signals_pa, context)
    m = functional_maps(csm, steering, len(context.settings.bands),
                        context.settings.tuning.functional_exponent)
    return BandPowers(m, m)


def point_spread(body_m, points, context: WindowContext, seed: int) -> PointSpread:
    grid, source = unit_steering(body_m, points, context)
    n_bands = len(context.settings.bands)
    m = functional_point_spread(grid, source, n_bands, context.settings.tuning.functional_exponent)
    return PointSpread(BandPowers(m, m),
                       np.bincount(source.band_of_line, minlength=n_bands).astype(float))


register(ImagingMethod("functional", "functional beamforming (Dougherty 2014) on cross-spectral "
                       "matrices of de-Dopplerized signals",
                       band_maps, point_spread, block_samples))
