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
from functools import cache, cached_property

import numpy as np
from threadpoolctl import ThreadpoolController

from flyover.acoustics.atmosphere import Atmosphere
from flyover.geometry.track import TrackModel
from flyover.geometry.windows import Window
from flyover.imaging.chain import BandPowers, ChainSettings
from flyover.imaging.reception import reception_geometry, ReceptionGeometry, required_frames
from flyover.imaging.integration import (SHIFT_DIRECTIONS, region_powers, region_verdicts,
                                         shift_changes_db, shift_distances_m)
from flyover.imaging.planning import HALF_POWER
from flyover.geometry.vehicle import Region
from flyover.model.constants import TOTAL  # the key of all regions together in region_power
from flyover.model.timebase import ArrayClock



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
    centre_geometry : ReceptionGeometry
        Of every grid point at the first and last nodes and the centre (``ends_only``): what
        the frequency-domain methods need.
    points_body_m : ndarray, shape (n_grid, 3)
        The grid points.
    first_frame : int array, shape (n_mics,)
        First frame each microphone's recorder reads for the window.
    n_frames : int
        Frames read from there.
    diagonal_removal : bool
        Whether levels come from the diagonal-removed maps.
    workers : int
        Threads for FFTs.

    Values derived from the window once and shared by its unit sources are kept by
    :meth:`derived`.
    """

    window: Window
    track: TrackModel
    clock: ArrayClock
    atmosphere: Atmosphere
    mic_enu_m: np.ndarray
    settings: ChainSettings
    centre_geometry: ReceptionGeometry
    points_body_m: np.ndarray
    first_frame: np.ndarray
    n_frames: int
    diagonal_removal: bool = True
    workers: int = 1
    _derived: dict = field(default_factory=dict, init=False, repr=False, compare=False)

    def derived(self, key, make: Callable[[], object]):
        """``make()``, computed on the first call with ``key`` (hashable) and kept with the
        context: what every unit source of a window would otherwise compute again (the focus
        of the frequency-domain methods, the grid side of the time-domain steering model)."""
        if key not in self._derived:
            self._derived[key] = make()
        return self._derived[key]

    @cached_property
    def geometry(self) -> ReceptionGeometry:
        """Of every grid point at every node (the time-domain chain's), computed when first
        asked for."""
        s = self.settings
        return reception_geometry(self.track, self.window, self.points_body_m, self.mic_enu_m,
                                  self.atmosphere, s.pressure_gain, node_step=s.node_step,
                                  image_mic_enu_m=s.image_mic_enu_m)


@dataclass(frozen=True)
class PointSpread:
    """A unit point source through a method's chain.

    Attributes
    ----------
    maps : BandPowers
        On the grid points asked for, shape (n_points, n_bands) each.
    source_power_pa2 : ndarray, shape (n_bands,)
        The unit source's own band power at 1 m in the window.
    main_lobe : BandPowers or None
        Where the maps hold more than the source's main lobe (over raised microphones, the
        ground path's image), the free-field maps whose main lobe the half-power test reads;
        given for a source at one position (a region centre), None where the maps are it.
    """

    maps: BandPowers
    source_power_pa2: np.ndarray
    main_lobe: BandPowers | None = None


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
        body point ``body_m`` ((3,), or (n_bands, 3): a position per band) mapped on the grid
        points ``points`` (indices into the context's geometry) through the identical chain;
        ``seed`` makes a simulated signal repeatable.
    spectrum_samples : callable or None
        ``spectrum_samples(n_samples, settings) -> int``: the length of the spectra its bands
        are formed from (None: the whole window), for the bands' line count.
    raised_microphones : bool
        Whether it models the ground reflection of raised microphones (the campaign file is
        refused otherwise).
    point_spreads : callable or None
        ``point_spreads(bodies_m, points, context, seeds) -> list of PointSpread``: several
        unit sources at once (``bodies_m`` (n_sources, n_bands, 3)), each as
        ``point_spread`` gives it, where the method can share their work (see
        :meth:`spreads`).
    """

    name: str
    summary: str
    band_maps: Callable[[np.ndarray, WindowContext], BandPowers]
    point_spread: Callable[[np.ndarray, np.ndarray, WindowContext, int], PointSpread]
    spectrum_samples: Callable[[int, ChainSettings], int] | None = None
    raised_microphones: bool = False
    point_spreads: Callable[..., list[PointSpread]] | None = None

    def spreads(self, bodies_m, points, context: WindowContext, seeds) -> list[PointSpread]:
        """Unit sources at ``bodies_m`` (n_sources, n_bands, 3): by ``point_spreads`` where
        the method has it, else one ``point_spread`` after another."""
        if self.point_spreads is not None:
            return self.point_spreads(bodies_m, points, context, seeds)
        return [self.point_spread(b, points, context, k) for b, k in zip(bodies_m, seeds)]


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
    verdicts : dict of str -> RegionVerdict
        Per region (not ``TOTAL``): whether its level can be given, and why not.
    """

    window: Window
    full: np.ndarray
    diagonal_removed: np.ndarray
    region_power: dict
    region_map_sum: dict
    region_psf_sum: dict
    unit_power: dict
    region_residual: dict = field(default_factory=dict)
    verdicts: dict = field(default_factory=dict)


def window_context(window: Window, *, track: TrackModel, clock: ArrayClock,
                   atmosphere: Atmosphere, mic_enu_m, grid_points_m, settings: ChainSettings,
                   diagonal_removal: bool = True, workers: int = 1) -> WindowContext:
    """The centre geometry of a window's grid points and the recording frames it needs (the
    full geometry follows when a method asks for it)."""
    geo = reception_geometry(track, window, grid_points_m, mic_enu_m, atmosphere,
                             settings.pressure_gain, node_step=settings.node_step,
                             image_mic_enu_m=settings.image_mic_enu_m, ends_only=True)
    first, n = required_frames(geo, clock, settings.interpolation)
    return WindowContext(window, track, clock, atmosphere, np.asarray(mic_enu_m, float),
                         settings, geo, np.asarray(grid_points_m, float), first, n,
                         diagonal_removal, workers)


@cache
def _thread_pools() -> ThreadpoolController:
    # Scanned once (a scan takes milliseconds), when numpy's and scipy's BLAS are loaded: the
    # imaging modules import both.
    return ThreadpoolController()


def blas_on_one_thread():
    """A context in which BLAS (numpy's and scipy's) runs on one thread.

    Imaging is parallel in its compiled kernels (numba, ``context.workers`` threads), and its
    BLAS products are small. Idle OpenBLAS threads spin-wait after each product and take the
    cores the kernels need: with both pools on 2 cores, a window of CLEAN-SC took 2.2x as long
    and the frequency-domain unit sources 3x (benchmarks/bench_methods.py)."""
    return _thread_pools().limit(limits=1, user_api="blas")


def image_window(signals_pa, context: WindowContext, *, method: ImagingMethod, grid_points_m,
                 regions: dict[str, Region]) -> WindowMaps:
    """Maps of one window, the power of each region (source power integration) and whether
    each region's level can be given.

    Parameters
    ----------
    signals_pa : float32 array (n_mics, context.n_frames)
        Calibrated pressure, row m from frame ``context.first_frame[m]`` on.
    context : WindowContext
    method : ImagingMethod
    grid_points_m : ndarray, shape (n_grid, 3)
        The body points of the context's geometry.
    regions : dict of str -> Region

    Notes
    -----
    Besides the unit sources at the region centres, each region's unit source is moved forward,
    back, to starboard and to port (a quarter wavelength for its own level, within its region
    to its -1 dB contour for its neighbours':
    :func:`flyover.imaging.integration.shift_distances_m`), and the leakage solve repeated: a
    real source sits somewhere in its region, and where that moves a level by more than
    ``SHIFT_TOLERANCE_DB`` (a weak region beside a strong one, whose leakage into it the
    unit source cannot pin down), the level is not given. Pairs of regions
    are resolved where their midpoint lies outside both unit sources' half-power main lobes
    (the planning criterion, with this window's geometry: foreshortening included); see
    :func:`flyover.imaging.integration.region_verdicts` for the rest. BLAS runs on one thread
    meanwhile (:func:`blas_on_one_thread`).
    """
    with blas_on_one_thread():
        return _image_window(signals_pa, context, method=method, grid_points_m=grid_points_m,
                             regions=regions)


def _image_window(signals_pa, context: WindowContext, *, method: ImagingMethod, grid_points_m,
                  regions: dict[str, Region]) -> WindowMaps:
    bp = method.band_maps(signals_pa, context)
    use_removed = context.diagonal_removal
    pts = np.asarray(grid_points_m, float)
    names = list(regions)
    n_r, n_b = len(names), len(context.settings.bands)
    masks = [np.flatnonzero(regions[n].contains(pts)) for n in names]
    centres = np.array([regions[n].center_m for n in names], float)
    pairs = [(i, j) for i in range(n_r) for j in range(i + 1, n_r)]
    middles = [int(np.argmin(np.linalg.norm(pts - 0.5 * (centres[i] + centres[j]), axis=1)))
               for i, j in pairs]
    evaluate = np.unique(np.concatenate(masks + [np.array(middles, int)]))
    where = [np.searchsorted(evaluate, m) for m in masks]

    def seed(j):
        return 7919 * (context.window.index + 1) + j

    def column(psf):
        """Region sums of a unit source's maps per unit power (n_b, n_r)."""
        m = psf.maps.diagonal_removed if use_removed else psf.maps.full
        return np.stack([m[k].sum(axis=0) for k in where], axis=-1) / psf.source_power_pa2[
            :, None]

    # coupling[b, i, j]: region i's summed map of the unit source at region j's centre, per unit
    # power (see flyover.imaging.integration.region_powers).
    coupling = np.empty((n_b, n_r, n_r))
    units, psf_sums, residual_psf, lobes = {}, {}, {}, []
    for j, name in enumerate(names):
        psf = method.point_spread(regions[name].center_m, evaluate, context, seed(j))
        coupling[:, :, j] = column(psf)
        psf_maps = psf.maps.diagonal_removed if use_removed else psf.maps.full
        units[name] = psf.source_power_pa2
        psf_sums[name] = psf_maps[where[j]].sum(axis=0)
        if psf.maps.residual is not None:
            residual_psf[name] = psf.maps.residual[where[j]].sum(axis=0)
        # The conventional map of the unit source (a deconvolving method's residual map is
        # one) relative to its peak: the half-power test of the pairs.
        shape = psf.maps if psf.main_lobe is None else psf.main_lobe
        lobe = shape.residual if shape.residual is not None else (
            shape.diagonal_removed if use_removed else shape.full)
        lobes.append(lobe / lobe.max(axis=0))

    def integrate(found: BandPowers):
        """Summed maps, residual parts, solved powers and their total, of some maps."""
        sums = {n: (found.diagonal_removed if use_removed else found.full)[masks[j]].sum(
            axis=0) for j, n in enumerate(names)}
        parts = {}
        if found.residual is not None:
            # A deconvolving method's residual, integrated over the region against the unit
            # source's conventional map (source power integration, without leakage solving).
            for j, n in enumerate(names):
                with np.errstate(divide="ignore", invalid="ignore"):
                    part = found.residual[masks[j]].sum(axis=0) / residual_psf[n] * units[n]
                parts[n] = np.where(np.isfinite(part), part, 0.0)
        measured = np.stack([sums[n] for n in names], axis=-1)          # (n_b, n_r)
        solved, total = region_powers(coupling, measured)
        for j, n in enumerate(names):
            solved[:, j] += parts.get(n, 0.0)
        return sums, parts, measured, solved, total + sum(parts.values())

    map_sums, residuals, measured, solved, total = integrate(bp)
    wavelength = context.atmosphere.c_m_s / context.settings.bands.center_hz
    # The shift test's unit sources (a position per band each), all modelled at once.
    moves, tested = [], []
    for j, name in enumerate(names):
        extent = np.abs(np.diff([regions[name].x_m, regions[name].y_m], axis=1)[:, 0])
        own, reach = shift_distances_m(pts[masks[j]] - centres[j], lobes[j][where[j]],
                                       wavelength, np.repeat(extent / 2, 2))
        alone = np.arange(n_r) == j
        for direction, near, far in zip(SHIFT_DIRECTIONS, own, reach):
            tests = ([(near, alone), (far, ~alone)] if np.any(far > near) else
                     [(near, np.ones(n_r, bool))])
            for d, which in tests:
                moves.append((j, centres[j] + np.outer(d, direction)))
                tested.append(which)
    spreads = method.spreads(np.array([body for _, body in moves]).reshape(-1, n_b, 3),
                             evaluate, context, [seed(j) for j, _ in moves]) if moves else []
    shifted = []
    for (j, _), psf in zip(moves, spreads):
        moved = coupling.copy()
        moved[:, :, j] = column(psf)
        shifted.append(moved)
    # The shifts move the solve alone; a deconvolving method's residual part stays.
    parts = np.stack([residuals.get(n, np.zeros(n_b)) for n in names], axis=-1)
    changes = shift_changes_db(shifted, measured, solved - parts, parts, tested=tested)
    if bp.variant is not None:
        with np.errstate(divide="ignore", invalid="ignore"):
            change = np.abs(10.0 * np.log10(integrate(bp.variant)[3] / solved))
        changes = np.maximum(changes, np.where(np.isfinite(change), change, np.inf))
    resolved_pairs = np.zeros((n_b, n_r, n_r), bool)
    for (i, j), k in zip(pairs, middles):
        at = np.searchsorted(evaluate, k)
        resolved_pairs[:, i, j] = resolved_pairs[:, j, i] = (
            (lobes[i][at] < HALF_POWER) & (lobes[j][at] < HALF_POWER))
    verdicts = dict(zip(names, region_verdicts(
        solved, changes, resolved_pairs, by_dominance=context.settings.image_mic_enu_m is None)))
    powers = {n: solved[:, j] for j, n in enumerate(names)}
    powers[TOTAL] = total
    return WindowMaps(context.window, bp.full, bp.diagonal_removed, powers, map_sums, psf_sums,
                      units, residuals, verdicts)
