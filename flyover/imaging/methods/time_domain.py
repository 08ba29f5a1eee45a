"""Time-domain delay-and-sum on de-Dopplerized signals, band powers formed in source time.

Every microphone is de-Dopplerized to every grid point (:mod:`flyover.imaging.dedoppler`) and
band powers are formed from the windowed spectra of the sums, with and without diagonal removal.
The point-spread of a unit point source is measured, not modelled: the source is simulated with
the forward model (:mod:`flyover.forward.moving_source`) through the window's geometry,
atmosphere and weights, and mapped by the identical chain.
"""

from __future__ import annotations

import numpy as np

from flyover.forward.moving_source import (Broadband, PointSource, Propagator, SourceSignal,
                                           received_pressure_pa)
from flyover.imaging.dedoppler import BandPowers, signal_band_power, subset, window_band_powers
from flyover.imaging.methods import register
from flyover.imaging.window import ImagingMethod, PointSpread, WindowContext

UNIT_SOURCE_LEVEL_DB = 94.0  # band level at 1 m of the unit source (any value cancels)


def band_maps(signals_pa, context: WindowContext) -> BandPowers:
    """Band power maps on every grid point of the context's geometry."""
    return window_band_powers(signals_pa, context.first_frame, context.geometry, context.clock,
                              context.window, context.settings, context.atmosphere,
                              workers=context.workers)


def point_spread(body_m, points, context: WindowContext, seed: int) -> PointSpread:
    """A broadband unit point source at ``body_m``, simulated and mapped on ``points``."""
    w, settings = context.window, context.settings
    bands = settings.bands
    top = min(0.4 * w.sample_rate_hz, bands.upper_hz[-1] * 1.25)
    source = PointSource("unit", tuple(body_m),
                         broadband=Broadband(UNIT_SOURCE_LEVEL_DB, 0.0, bands.lower_hz[0] * 0.8,
                                             top), seed=seed)
    signal = SourceSignal(source, w.sample_rate_hz, w.start_s - 1.0,
                          w.start_s + w.n_samples / w.sample_rate_hz + 1.0)
    medium = Propagator(context.mic_enu_m, context.atmosphere, settings.pressure_gain,
                        absorption=settings.absorption,
                        image_mic_enu_m=settings.image_mic_enu_m, ground=settings.ground)
    start_s = context.clock.sample_time_s(context.first_frame[:, None])[:, 0]
    received = received_pressure_pa(context.track, [signal], [np.asarray(body_m, float)], medium,
                                    context.clock.rate_hz, start_s,
                                    context.n_frames).astype(np.float32)
    maps = window_band_powers(received, context.first_frame, subset(context.geometry, points),
                              context.clock, w, settings, context.atmosphere,
                              workers=context.workers)
    return PointSpread(maps, signal_band_power(signal(w.emission_times_s), bands,
                                               w.sample_rate_hz))


register(ImagingMethod("time-domain", "delay-and-sum of de-Dopplerized signals per grid point, "
                       "band powers in source time", band_maps, point_spread,
                       raised_microphones=True))
