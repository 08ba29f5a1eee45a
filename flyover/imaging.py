"""One window, start to end: maps on the vehicle grid and the region powers behind the levels.

The unit point source of each region is simulated through the same geometry, atmosphere, weights
and chain as the measurement (design notes: source power integration), so that whatever the
chain does to a point source (main-lobe spread, diagonal removal, interpolation loss, residual
absorption error) cancels in the ratio.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .atmosphere import Atmosphere
from .campaign import Region
from .dedoppler import (ChainSettings, reception_geometry, required_frames, signal_band_power,
                        subset, window_band_powers)
from .levels import region_powers
from .simulate import Broadband, PointSource, Propagator, SourceSignal, received_pressure_pa
from .timebase import RecordingClock
from .track import TrackModel
from .windows import Window

UNIT_SOURCE_LEVEL_DB = 94.0  # band level at 1 m of the unit source (any value cancels)
TOTAL = "total"  # the key of all regions together in WindowMaps.region_power


@dataclass(frozen=True)
class WindowMaps:
    """Results of one window.

    Attributes
    ----------
    window : Window
    full, diagonal_removed : ndarray, shape (n_grid, n_bands)
        Band power maps (Pa^2 at 1 m) on the grid points.
    region_power : dict of str -> ndarray (n_bands,)
        Integrated band power at 1 m per region (with the chosen diagonal treatment), and
        under ``TOTAL`` that of all regions together.
    region_map_sum, region_psf_sum : dict of str -> ndarray (n_bands,)
        The two sums behind the ratio (for checks and reports).
    unit_power : dict of str -> ndarray (n_bands,)
    """

    window: Window
    full: np.ndarray
    diagonal_removed: np.ndarray
    region_power: dict
    region_map_sum: dict
    region_psf_sum: dict
    unit_power: dict


def frames_for_window(track: TrackModel, window: Window, grid_points_m, mic_enu_m,
                      atmosphere: Atmosphere, clock: RecordingClock, settings: ChainSettings):
    """The geometry of a window and the recording frames [first, first + n) it needs."""
    geo = reception_geometry(track, window, grid_points_m, mic_enu_m, atmosphere,
                             settings.pressure_gain, settings.node_step)
    first, n = required_frames(geo, clock, settings.interpolation)
    return geo, first, n


def image_window(signals_pa, first_frame: int, geometry, track: TrackModel, window: Window,
                 grid_points_m, regions: dict[str, Region], mic_enu_m, atmosphere: Atmosphere,
                 clock: RecordingClock, settings: ChainSettings, diagonal_removal: bool = True,
                 workers: int = 1) -> WindowMaps:
    """Maps of one window and the power of each region (source power integration).

    Parameters
    ----------
    signals_pa : float32 array (n_mics, n_frames)
        Calibrated pressure from ``first_frame`` on (see :func:`frames_for_window`).
    geometry : ReceptionGeometry
        Of all grid points (from :func:`frames_for_window`).
    """
    bp = window_band_powers(signals_pa, first_frame, geometry, clock, window, settings,
                            atmosphere, workers)
    maps = bp.diagonal_removed if diagonal_removal else bp.full
    pts = np.asarray(grid_points_m, float)
    n_frames = np.asarray(signals_pa).shape[1]
    names = list(regions)
    masks = [np.flatnonzero(regions[n].contains(pts)) for n in names]
    union = np.unique(np.concatenate(masks))
    where = {n: np.searchsorted(union, m) for n, m in zip(names, masks)}
    # coupling[b, i, j]: region i's summed map of the unit source at region j's centre, per unit
    # power (see flyover.levels.region_powers).
    n_r, n_b = len(names), len(settings.bands)
    coupling = np.empty((n_b, n_r, n_r))
    units, map_sums, psf_sums = {}, {}, {}
    for j, name in enumerate(names):
        unit = _unit_source(regions[name], settings, window, j)
        sig = SourceSignal(unit, window.sample_rate_hz, window.start_s - 1.0,
                           window.start_s + window.n_samples / window.sample_rate_hz + 1.0)
        prop = Propagator(np.asarray(mic_enu_m, float), atmosphere, settings.pressure_gain,
                          absorption=settings.absorption)
        start_s = float(clock.sample_time_s(first_frame))
        p_unit = received_pressure_pa(track, [sig], [regions[name].center_m], prop,
                                      clock.true_rate_hz, start_s, n_frames).astype(np.float32)
        psf = window_band_powers(p_unit, first_frame, subset(geometry, union), clock, window,
                                 settings, atmosphere, workers)
        psf_maps = psf.diagonal_removed if diagonal_removal else psf.full
        units[name] = signal_band_power(sig(window.emission_times_s), settings.bands,
                                        window.sample_rate_hz)
        for i, other in enumerate(names):
            coupling[:, i, j] = psf_maps[where[other]].sum(axis=0) / units[name]
        psf_sums[name] = psf_maps[where[name]].sum(axis=0)
        map_sums[name] = maps[masks[j]].sum(axis=0)
    measured = np.stack([map_sums[n] for n in names], axis=-1)          # (n_b, n_r)
    solved, total = region_powers(coupling, measured)
    powers = {n: solved[:, j] for j, n in enumerate(names)}
    powers[TOTAL] = total
    return WindowMaps(window, bp.full, bp.diagonal_removed, powers, map_sums, psf_sums, units)


def _unit_source(region: Region, settings: ChainSettings, window: Window, k: int) -> PointSource:
    bands = settings.bands
    top = min(0.4 * window.sample_rate_hz, bands.upper_hz[-1] * 1.25)
    return PointSource(f"unit-{region.name}", tuple(region.center_m),
                       broadband=Broadband(UNIT_SOURCE_LEVEL_DB, 0.0, bands.lower_hz[0] * 0.8, top),
                       seed=7919 * (window.index + 1) + k)
