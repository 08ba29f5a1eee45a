"""Time-domain delay-and-sum on de-Dopplerized signals, band powers formed in source time.

Every microphone is de-Dopplerized to every grid point (:mod:`flyover.imaging.dedoppler`) and
band powers are formed from the windowed spectra of the sums, with and without diagonal removal.
The point-spread of a unit point source comes from the steering model of the chain
(:func:`modelled_point_spread`: the geometry at a few instants of the window, the absorption
of the source's path against the chain's compensation, the interpolation's mean loss, and over
raised microphones the ground's path with its delay's sweep, in expectation). A unit source
simulated with the forward model (:mod:`flyover.forward.moving_source`) and mapped by the
identical chain (:func:`simulated_point_spread`) is the reference the model is tested against.
"""

from __future__ import annotations

import numpy as np

from flyover.forward.moving_source import (Broadband, PointSource, Propagator, SourceSignal,
                                           received_pressure_pa)
from flyover.imaging import _kernels
from flyover.imaging.chain import band_bins, BandPowers, signal_band_power
from flyover.imaging.dedoppler import interpolation_response, window_band_powers
from flyover.imaging.ground_gains import ground_gains, ground_q, image_line_gains
from flyover.imaging.reception import absorption_gains, reception_geometry, subset, values_at
from flyover.imaging.methods import register
from flyover.imaging.window import ImagingMethod, PointSpread, WindowContext

UNIT_SOURCE_LEVEL_DB = 94.0  # band level at 1 m of the unit source (any value cancels)
# Lines per band the steering model evaluates (evenly spread; each stands for its share of the
# band's lines): a point-spread changes smoothly across a third-octave band.
MODEL_LINES_PER_BAND = 16
MODEL_INSTANTS = 3  # instants across the window the steering model is evaluated at


def band_maps(signals_pa, context: WindowContext) -> BandPowers:
    """Band power maps on every grid point of the context's geometry."""
    return window_band_powers(signals_pa, context.first_frame, context.geometry, context.clock,
                              context.window, context.settings, context.atmosphere,
                              workers=context.workers)


def point_spread(body_m, points, context: WindowContext, seed: int) -> PointSpread:
    """A unit point source at ``body_m`` mapped on ``points``, from the steering model
    (:func:`modelled_point_spread`; nothing random: ``seed`` is not used). Over raised
    microphones a source at one position (a region centre) also gives its free-field maps,
    whose main lobe the ground path's image does not blur."""
    body = np.asarray(body_m, float)
    psf = modelled_point_spread(body, points, context)
    if context.settings.image_mic_enu_m is None or body.ndim == 2:
        return psf
    return PointSpread(psf.maps, psf.source_power_pa2, main_lobe=modelled_point_spread(
        body, points, context, reflection=False).maps)


def point_spreads(bodies_m, points, context: WindowContext, seeds) -> list[PointSpread]:
    """Unit point sources at ``bodies_m`` (n_sources, n_bands, 3) mapped on ``points``, all
    from one evaluation of the steering model (:func:`modelled_point_spreads`)."""
    return modelled_point_spreads(bodies_m, points, context)


def modelled_point_spread(body_m, points, context: WindowContext, *,
                          reflection: bool = True) -> PointSpread:
    """The chain's maps of a unit point source from its steering, without simulating it.

    A source at s appears in grid point g's de-Dopplerized signal of microphone m as its own
    signal advanced by ``(t_gm - t_sm) / (dt/dtau)_sm`` (the difference of the reception times
    of sound emitted at one instant, in the source's time) and scaled by ``A_gm / A_sm`` (the
    amplitude factors), times the chain's absorption compensation of (g, m) against the source
    path's own absorption, and the interpolation's mean response at the received frequency. Per
    line (1 Pa^2 each) the beam is the weighted sum of these over microphones, the autopowers
    the weighted sum of their squares, exactly as :func:`window_band_powers` forms the maps. The
    geometry is taken at ``MODEL_INSTANTS`` instants across the window, their beam powers
    weighted by the window's squared taper.

    Over raised microphones each line also arrives by the ground, a copy of the source's own
    image-path gain whose delay sweeps over the window (:func:`image_line_gains`): the beam and
    autopowers are their expected values over the two paths, and each line is divided by the
    ground's expected gain at its point as the chain divides the maps
    (:func:`flyover.imaging.ground_gains.ground_gains`). The expectation is what a simulated
    unit source gives on average (:func:`simulated_point_spread`, the reference it is tested
    against), without the scatter of a single draw of broadband noise.

    Parameters
    ----------
    body_m : array_like, shape (3,) or (n_bands, 3)
        The source position, or one per band.
    points : index array
        Grid points of the context's geometry to map.
    reflection : bool
        Over raised microphones, the ground's path and the chain's division too; False for
        the free-field maps (its own lobe, unblurred by the image).

    Returns
    -------
    PointSpread
        Maps (len(points), n_bands); the source power per band is its number of lines.
    """
    bodies = np.broadcast_to(np.asarray(body_m, float), (len(context.settings.bands), 3))
    return modelled_point_spreads(bodies[None], points, context, reflection=reflection)[0]


def modelled_point_spreads(bodies_m, points, context: WindowContext, *,
                           reflection: bool = True) -> list[PointSpread]:
    """:func:`modelled_point_spread` of several sources, ``bodies_m`` (n_sources, n_bands, 3)
    (a position per band for each), in one pass: their paths in one geometry, their lines as
    sets of one kernel call per instant. Each source's maps are the ones it gets alone, bit
    for bit (every set is computed on its own)."""
    w, s = context.window, context.settings
    bands = s.bands
    n_b = len(bands)
    bodies = np.asarray(bodies_m, float).reshape(-1, 3)                  # (n_src * n_b, 3)
    n_src = len(bodies) // n_b
    weights = np.asarray(s.weights, float)
    used = np.flatnonzero(weights > 0)
    wt = weights[used]
    s1, s2 = wt.sum(), (wt ** 2).sum()
    images = (np.asarray(s.image_mic_enu_m, float)[used]
              if reflection and s.image_mic_enu_m is not None else None)
    source = reception_geometry(context.track, w, bodies, context.mic_enu_m[used],
                                context.atmosphere, s.pressure_gain, node_step=s.node_step,
                                image_mic_enu_m=images)
    # The geometry turns over the window: the beam is modelled at a few instants, each weighted
    # as the window's squared Hann taper weights the band power there.
    instants = w.start_s + (np.arange(MODEL_INSTANTS) + 0.5) / MODEL_INSTANTS * (
        w.n_samples / w.sample_rate_hz)
    taper = np.sin(np.pi * (np.arange(MODEL_INSTANTS) + 0.5) / MODEL_INSTANTS) ** 4
    taper /= taper.sum()
    # Evenly spaced lines across each band (the kernel steps their phases by products), each
    # standing for its share of the band's lines; bands with fewer lines are padded by
    # continuing their progression with no gain, so that all bands go through at once.
    spacing_hz = w.sample_rate_hz / w.n_samples
    lines = np.zeros(n_b)
    f = np.empty((n_b, MODEL_LINES_PER_BAND))
    modelled = np.zeros((n_b, MODEL_LINES_PER_BAND), bool)
    for b, sl in enumerate(band_bins(bands, w.n_samples, w.sample_rate_hz)):
        n_lines = max(sl.stop - sl.start, 0)
        n_model = min(n_lines, MODEL_LINES_PER_BAND)
        stride = n_lines // n_model if n_model else 1
        start = sl.start + (n_lines - 1 - stride * (n_model - 1)) // 2 if n_model else sl.start
        f[b] = spacing_hz * (start + stride * np.arange(MODEL_LINES_PER_BAND))
        modelled[b, :n_model] = True
        lines[b] = n_lines
    # The grid side is the same for every unit source of the window.
    at_g, gain, ground = context.derived(("modelled grid", np.asarray(points).tobytes()),
                                         lambda: _grid_model(context, points, used, instants,
                                                             f))
    # The sets of the kernel: every source's bands, source after source.
    f_sets = np.tile(f, (n_src, 1))
    at_s = [values_at(source, t) for t in instants]               # (n_sets, n_m) each
    u = interpolation_response(f_sets[:, None, :] / source.doppler_center[:, :, None],
                               w.sample_rate_hz, s.interpolation)         # (n_sets, n_m, n_f)
    if s.absorption:
        alpha = context.atmosphere.absorption_db_per_m(
            f_sets[:, None, :] / (1.0 - source.mach_r_center[:, :, None]))
        u = u * 10.0 ** (-alpha * source.distance_center_m[:, :, None] / 20.0)
    u = u * np.tile(modelled, (n_src, 1))[:, None, :]
    line_gain = np.ascontiguousarray(u.transpose(0, 2, 1), complex)       # (n_sets, n_f, n_m)
    u2 = np.abs(u) ** 2
    if source.image is None:
        image_gain = np.zeros((len(u), 0) + line_gain.shape[1:], complex)
    else:
        # Raised microphones: the source's lines also arrive by the ground (its own image
        # paths), the expected powers of the two paths together (steered_line_powers).
        z, sweep = image_line_gains(source.image, f_sets, w.n_samples / w.sample_rate_hz,
                                    context.atmosphere.c_m_s, s.ground)  # (n_sets, n_m, n_f)
        image_gain = np.ascontiguousarray(
            np.stack([u * z * sweep, u * z], axis=1).transpose(0, 1, 3, 2))
        u2 = u2 * (1.0 + 2.0 * (z * sweep).real + np.abs(z) ** 2)
    n_p = len(at_g[0][0])
    beam = np.zeros((len(u), n_p, MODEL_LINES_PER_BAND))
    auto = np.zeros_like(beam)
    band_gain = context.derived(("modelled band gains", np.asarray(points).tobytes()),
                                lambda: np.ascontiguousarray(gain.transpose(2, 0, 1) * wt))
    u2 = np.ascontiguousarray(u2.transpose(0, 2, 1))                 # (n_sets, n_f, n_m)
    doppler = np.ascontiguousarray(source.doppler_center, float)
    for weight, (rx_g, amp_g), (rx_s, amp_s) in zip(taper, at_g, at_s):
        # The source as each point's steering sees it: amplitude ratio and time advance (a
        # reception-time difference is an emission-time difference over dt/dtau).
        _kernels.steered_line_powers(*(np.ascontiguousarray(a, float) for a in (
            amp_g, rx_g, amp_s, rx_s)), doppler, band_gain, f_sets, line_gain, image_gain, u2,
            float(weight), beam, auto)
    share = np.divide(lines, modelled.sum(axis=1), out=np.zeros(n_b),
                      where=modelled.any(axis=1))
    beam = beam.reshape(n_src, n_b, n_p, MODEL_LINES_PER_BAND)
    full, removed = beam, beam - auto.reshape(beam.shape)
    if source.image is not None:
        # The chain divides each line of a map by the ground's expected gain at its point.
        full, removed = full / ground[0], removed / ground[1]
    full = share[:, None] * full.sum(axis=3) / s1 ** 2                  # (n_src, n_b, n_p)
    removed = share[:, None] * removed.sum(axis=3) / (s1 ** 2 - s2)
    return [PointSpread(BandPowers(full[k].T, removed[k].T), lines) for k in range(n_src)]


def _grid_model(context: WindowContext, points, used, instants, frequency_hz):
    """The grid points' side of the steering model, on the used microphones: their reception
    times and amplitude factors at ``instants`` ((n_p, n_m) pairs), the chain's absorption
    gains (n_p, n_m, n_bands) and, over raised microphones, the ground's expected gains by
    which the chain divides each line's full and diagonal-removed maps (two arrays (n_bands,
    n_p, n_lines) at the model's lines ``frequency_hz`` (n_bands, n_lines); None otherwise)."""
    grid = subset(subset(context.geometry, points), (slice(None), used))
    ground = None
    if grid.image is not None:
        s, w = context.settings, context.window
        weights = np.asarray(s.weights, np.float32)[used]
        # Q as the chain takes it: at the mean incidence of the whole grid's image paths.
        every = context.geometry.image.take((slice(None), used))
        gains = [ground_gains(grid.image, ground_q(every, f, context.atmosphere.c_m_s, s.ground),
                              f, w.n_samples / w.sample_rate_hz, weights) for f in frequency_hz]
        ground = tuple(np.stack(g) for g in zip(*gains))
    return ([values_at(grid, t) for t in instants],
            absorption_gains(context.settings, context.atmosphere, grid), ground)


def simulated_point_spread(body_m, points, context: WindowContext, seed: int) -> PointSpread:
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
                       raised_microphones=True, point_spreads=point_spreads))
