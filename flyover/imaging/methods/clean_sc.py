"""CLEAN-SC (Sijtsma 2007) on the frequency-domain engine's CSMs: each window's sources found
and removed one by one, their powers re-fitted as incoherent sources and put on their grid
points (a clean beam one grid cell wide); the maps before the re-fit are its variant, and a
region level that differs between the two by more than 1 dB is not given. Its BandPowers
carry the clean map (``diagonal_removed``), the clean map plus the diagonal-removed residual
(``full``) and the residual itself. A unit source's clean map is its
power at the grid point where its conventional point-spread peaks, so source power integration
over a region is the sum of the clean powers found in it, plus the residual integrated over it
against the unit source's conventional map."""

from __future__ import annotations

import numpy as np

from flyover.imaging.csm import block_samples, clean_sc, conventional_point_spread
from flyover.imaging.chain import BandPowers
from flyover.imaging.methods import register
from flyover.imaging.methods._frequency import csm_and_steering, unit_steering
from flyover.imaging.window import ImagingMethod, PointSpread, WindowContext


def band_maps(signals_pa, context: WindowContext) -> BandPowers:
    csm, steering, factor = csm_and_steering(signals_pa, context)
    s = context.settings
    res = clean_sc(csm, steering, len(s.bands), loop_gain=s.tuning.clean_loop_gain,
                   max_sources=s.tuning.clean_max_sources, factor=factor)
    as_removed = BandPowers(res.removed_clean + res.removed_residual, res.removed_clean,
                            res.removed_residual)
    return BandPowers(res.clean + res.residual, res.clean, res.residual, as_removed)


def point_spread(body_m, points, context: WindowContext, seed: int) -> PointSpread:
    grid, source = unit_steering(body_m, points, context)
    n_bands = len(context.settings.bands)
    conventional, power = conventional_point_spread(grid, source, n_bands)
    clean = np.zeros_like(conventional.full)
    peak = np.argmax(conventional.full, axis=0)
    clean[peak, np.arange(n_bands)] = power
    return PointSpread(BandPowers(clean, clean, conventional.diagonal_removed), power)


register(ImagingMethod("clean-sc", "CLEAN-SC (Sijtsma 2007) on cross-spectral matrices of "
                       "de-Dopplerized signals; region levels are sums of clean sources",
                       band_maps, point_spread, block_samples))
