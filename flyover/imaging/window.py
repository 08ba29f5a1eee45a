"""One window, start to end, whatever the imaging method: maps on the vehicle grid and the region
powers behind the levels.

An imaging method (:mod:`flyover.imaging.methods`) gives two things for a window: band maps of
the measured signals on grid points, and the point-spread of a unit point source at a body point
through the identical chain. Source power integration (:mod:`flyover.imaging.integration`) then
divides the one by the other per region, so that whatever the chain does to a point source
(main-lobe spread, diagonal removal, interpolation loss, residual absorption error) cancels in
the ratio.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from flyover.acoustics.atmosphere import Atmosphere
from flyover.geometry.track import TrackModel
from flyover.geometry.windows import Window
from flyover.imaging.dedoppler import (BandPowers, ChainSettings, ReceptionGeometry,
                                       reception_geometry, required_frames)
from flyover.imaging.integration import region_powers
from flyover.model.campaign import Region
from flyover.sync.timebase import ArrayClock

TOTAL = "total"  # the key of all regions together in WindowMaps.region_power


@dataclass(frozen=True)
class WindowContext:
    """Everything about one window that the measurement and its unit sources share.

    Attributes
    ----------
    window : Window
    track : TrackModel
    clock : ArrayClock
    atmosphere : Atmosphere
    mic_enu_m : ndarray, shape (n_mics, 3)
    settings : ChainSettings
    geometry : ReceptionGeometry
        Of every grid point (from :func:`window_context`).
    first_frame : int array, shape (n_mics,)
        First frame each microphone's recorder reads for the window.
    n_frames : int
        Frames read from there.
    diagonal_removal : bool
        Whether levels come from the diagonal-removed maps.
    workers : int
        Threads for FFTs.
    """

    window: Window
    track: TrackModel
    clock: ArrayClock
    atmosphere: Atmosphere
    mic_enu_m: np.ndarray
    settings: ChainSettings
    geometry: ReceptionGeometry
    first_frame: np.ndarray
    n_frames: int
    diagonal_removal: bool = True
    workers: int = 1


@dataclass(frozen=True)
class PointSpread:
    """A unit point source through a method's chain.

    Attributes
    ----------
    maps : BandPowers
        On the grid points asked for, shape (n_points, n_bands) each.
    source_power_pa2 : ndarray, shape (n_bands,)
        The unit source's own band power at 1 m in the window.
    """

    maps: BandPowers
    source_power_pa2: np.ndarray


@dataclass(frozen=True)
class ImagingMethod:
    """One imaging method, registered by name in :mod:`flyover.imaging.methods`.

    Attributes
    ----------
    name : str
        What the campaign file's ``analysis.method`` names it by.
    summary : str
        One line for help texts and the report.
    band_maps : callable
        ``band_maps(signals_pa, context) -> BandPowers`` on every grid point of the context's
        geometry; ``signals_pa`` is float32 (n_mics, n_frames), row m from frame
        ``context.first_frame[m]``.
    point_spread : callable
        ``point_spread(body_m, points, context, seed) -> PointSpread``: a unit point source at
        body point ``body_m`` (3,) mapped on the grid points ``points`` (indices into the
        context's geometry) through the identical chain; ``seed`` makes its signal repeatable.
    spectrum_samples : callable or None
        ``spectrum_samples(n_samples, settings) -> int``: the length of the spectra its bands
        are formed from (None: the whole window), for the bands' line count.
    raised_microphones : bool
        Whether it models the ground reflection of raised microphones (the campaign file is
        refused otherwise).
    """

    name: str
    summary: str
    band_maps: Callable[[np.ndarray, WindowContext], BandPowers]
    point_spread: Callable[[np.ndarray, np.ndarray, WindowContext, int], PointSpread]
    spectrum_samples: Callable[[int, ChainSettings], int] | None = None
    raised_microphones: bool = False


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
    region_residual : dict of str -> ndarray (n_bands,)
        A deconvolving method's integrated residual per region (included in
        ``region_power``); empty for the other methods.
    """

    window: Window
    full: np.ndarray
    diagonal_removed: np.ndarray
    region_power: dict
    region_map_sum: dict
    region_psf_sum: dict
    unit_power: dict
    region_residual: dict = field(default_factory=dict)


def window_context(window: Window, *, track: TrackModel, clock: ArrayClock,
                   atmosphere: Atmosphere, mic_enu_m, grid_points_m, settings: ChainSettings,
                   diagonal_removal: bool = True, workers: int = 1) -> WindowContext:
    """The reception geometry of a window's grid points and the recording frames it needs."""
    geo = reception_geometry(track, window, grid_points_m, mic_enu_m, atmosphere,
                             settings.pressure_gain, node_step=settings.node_step,
                             image_mic_enu_m=settings.image_mic_enu_m)
    first, n = required_frames(geo, clock, settings.interpolation)
    return WindowContext(window, track, clock, atmosphere, np.asarray(mic_enu_m, float),
                         settings, geo, first, n, diagonal_removal, workers)


def image_window(signals_pa, context: WindowContext, *, method: ImagingMethod, grid_points_m,
                 regions: dict[str, Region]) -> WindowMaps:
    """Maps of one window and the power of each region (source power integration).

    Parameters
    ----------
    signals_pa : float32 array (n_mics, context.n_frames)
        Calibrated pressure, row m from frame ``context.first_frame[m]`` on.
    context : WindowContext
    method : ImagingMethod
    grid_points_m : ndarray, shape (n_grid, 3)
        The body points of the context's geometry.
    regions : dict of str -> Region
    """
    bp = method.band_maps(signals_pa, context)
    maps = bp.diagonal_removed if context.diagonal_removal else bp.full
    pts = np.asarray(grid_points_m, float)
    names = list(regions)
    masks = [np.flatnonzero(regions[n].contains(pts)) for n in names]
    union = np.unique(np.concatenate(masks))
    where = {n: np.searchsorted(union, m) for n, m in zip(names, masks)}
    # coupling[b, i, j]: region i's summed map of the unit source at region j's centre, per unit
    # power (see flyover.imaging.integration.region_powers).
    n_r, n_b = len(names), len(context.settings.bands)
    coupling = np.empty((n_b, n_r, n_r))
    units, map_sums, psf_sums, residuals = {}, {}, {}, {}
    for j, name in enumerate(names):
        psf = method.point_spread(regions[name].center_m, union, context,
                                  7919 * (context.window.index + 1) + j)
        psf_maps = psf.maps.diagonal_removed if context.diagonal_removal else psf.maps.full
        units[name] = psf.source_power_pa2
        for i, other in enumerate(names):
            coupling[:, i, j] = psf_maps[where[other]].sum(axis=0) / units[name]
        psf_sums[name] = psf_maps[where[name]].sum(axis=0)
        map_sums[name] = maps[masks[j]].sum(axis=0)
        if bp.residual is not None:
            # A deconvolving method's residual, integrated over the region against the unit
            # source's conventional map (source power integration, without leakage solving).
            with np.errstate(divide="ignore", invalid="ignore"):
                part = (bp.residual[masks[j]].sum(axis=0)
                        / psf.maps.residual[where[name]].sum(axis=0) * units[name])
            residuals[name] = np.where(np.isfinite(part), part, 0.0)
    measured = np.stack([map_sums[n] for n in names], axis=-1)          # (n_b, n_r)
    solved, total = region_powers(coupling, measured)
    powers = {n: solved[:, j] + residuals.get(n, 0.0) for j, n in enumerate(names)}
    powers[TOTAL] = total + sum(residuals.values()) if residuals else total
    return WindowMaps(context.window, bp.full, bp.diagonal_removed, powers, map_sums, psf_sums,
                      units, residuals)
