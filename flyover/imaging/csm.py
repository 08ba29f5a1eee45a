"""The frequency-domain engine: cross-spectral matrices of signals de-Dopplerized to one focus
point per window, steering vectors of the vehicle grid relative to that point, and the maps of
conventional beamforming, functional beamforming and CLEAN-SC on them.

This is the hybrid time-frequency approach (Guerin & Siller 2008): every channel is
de-Dopplerized once, toward the focus point (the body origin in the grid's plane), with the
time-domain kernel and its amplitude factor r (1 - M_r)^2 / G, so that a source at the focus
point appears in every channel as its own signal s(tau). A source at grid point g then appears in
channel m advanced by ``d_gm = (t_fm - t_gm) / (dt/dtau)_gm`` (the reception times of sound
emitted at the window centre, their difference turned into the source's time) and scaled by
``A_fm / A_gm`` (the amplitude factors): its steering vector, in the numpy FFT convention, is

    v_gm(f) = (A_fm / A_gm) exp(+i 2 pi f d_gm).

Beamforming uses the weights ``w = v / (v^H v)`` (Sarradj 2012's formulation III: the output is
the source's own power at the grid point, whatever the distances; its peak may sit a little off
the source where the distances across the array differ, which source power integration over a
region does not mind, while the levels are what flyover reports):

    full:              P(g, f) = w^H C w
    diagonal removed:  P(g, f) = (v^H C v - sum_m |v_m|^2 C_mm) / ((v^H v)^2 - sum_m |v_m|^4)

Both are computed per frequency line as matrix products (steering matrix against the CSM) and
summed into one-third-octave bands. The geometry is frozen at the window centre: the steering
of points away from the focus is exact there and drifts by the change of ``d_gm`` over the
window (under a sample for drone-sized grids and 0.25 s windows).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flyover.acoustics.atmosphere import Atmosphere
from flyover.imaging import _kernels
from flyover.imaging.chain import band_bins, BandPowers, ChainSettings
from flyover.imaging.dedoppler import dedopplerized_signals
from flyover.imaging.reception import reception_geometry, ReceptionGeometry, subset

# Welch blocks of the CSM: Hann-windowed, 50 % overlap.
BLOCK_OVERLAP = 0.5
# Lines stepped by products between exact steering vectors (rounding grows by ~1e-16 a step).
RESTEP_LINES = 32


@dataclass(frozen=True)
class Steering:
    """The lines of a window's analysed bands and the steering of some points toward them.

    Attributes
    ----------
    frequency_hz : ndarray, shape (n_lines,)
        Lines of the Welch blocks inside the analysed bands (source frequency).
    band_of_line : ndarray of int, shape (n_lines,)
    amplitude_ratio : ndarray, shape (n_points, n_mics)
        A_fm / A_gm.
    advance_s : ndarray, shape (n_points, n_mics)
        d_gm = (t_fm - t_gm) / (dt/dtau)_gm at the window centre.
    """

    frequency_hz: np.ndarray
    band_of_line: np.ndarray
    amplitude_ratio: np.ndarray
    advance_s: np.ndarray

    def vectors(self, line: int, points=slice(None)) -> np.ndarray:
        """Steering vectors v (n_points, n_mics) of one line."""
        return (self.amplitude_ratio[points]
                * np.exp(2j * np.pi * self.frequency_hz[line] * self.advance_s[points]))

    def each_line(self, points=slice(None)):
        """Yield the steering vectors (n_points, n_mics) of every line in order, as
        :meth:`vectors` gives them: a line one line spacing above the previous one is stepped
        from it by one complex product instead of an exponential (the cost of the maps'
        steering otherwise), and computed afresh every ``RESTEP_LINES`` lines."""
        f = self.frequency_hz
        ratio, advance = self.amplitude_ratio[points], self.advance_s[points]
        spacing = float(np.min(np.diff(f))) if len(f) > 1 else 0.0
        step = v = None
        for k in range(len(f)):
            if (v is not None and k % RESTEP_LINES
                    and abs(f[k] - f[k - 1] - spacing) <= 1e-9 * spacing):
                if step is None:
                    step = np.exp(2j * np.pi * spacing * advance)
                v = v * step
            else:
                v = ratio * np.exp(2j * np.pi * f[k] * advance)
            yield v

    def line_vector(self, line: int) -> np.ndarray:
        """The vector (n_mics,) of one line of a single source: the steering's one point, or,
        with a point per band (a source placed per band), that of the line's band."""
        row = 0 if len(self.amplitude_ratio) == 1 else int(self.band_of_line[line])
        return self.vectors(line, [row])[0]


@dataclass(frozen=True)
class Focus:
    """A window de-Dopplerized toward one body point: the geometry of that point (used
    microphones only), the used microphones and the Welch blocks' lines."""

    geometry: ReceptionGeometry
    used: np.ndarray
    block_samples: int
    lines: np.ndarray
    frequency_hz: np.ndarray
    band_of_line: np.ndarray

    def steering(self, points_geometry: ReceptionGeometry) -> Steering:
        """The steering of points (their geometry over all microphones) toward this focus."""
        rx_f, amp_f = self.geometry.reception_center_s, self.geometry.amplitude_center
        rx_g = points_geometry.reception_center_s[:, self.used]
        amp_g = points_geometry.amplitude_center[:, self.used]
        # A reception-time difference is an emission-time difference over dt/dtau.
        return Steering(self.frequency_hz, self.band_of_line, amp_f / amp_g,
                        (rx_f - rx_g) / points_geometry.doppler_center[:, self.used])


def block_samples(n_samples: int, settings: ChainSettings) -> int:
    """Samples per Welch block: the settings' or a quarter of the window (7 blocks at 50 %)."""
    return int(settings.csm_block_samples or max(16, n_samples // 4))


def window_focus(*, track, window, mic_enu_m, atmosphere: Atmosphere, settings: ChainSettings,
                 focus_body_m) -> Focus:
    """The focus point's geometry and the lines of the window's Welch blocks."""
    used = np.flatnonzero(np.asarray(settings.weights) > 0)
    geo = reception_geometry(track, window, [focus_body_m], mic_enu_m, atmosphere,
                             settings.pressure_gain, node_step=settings.node_step)
    n = block_samples(window.n_samples, settings)
    bins = band_bins(settings.bands, n, window.sample_rate_hz)
    lines = np.concatenate([np.arange(b.start, b.stop) for b in bins]).astype(int)
    band_of_line = np.concatenate([np.full(b.stop - b.start, k) for k, b in enumerate(bins)])
    freqs = np.fft.rfftfreq(n, 1.0 / window.sample_rate_hz)[lines]
    return Focus(subset(geo, (slice(None), used)), used, n, lines, freqs,
                 band_of_line.astype(int))


def window_csm(signals_pa, first_frame, focus: Focus, *, window, clock,
               atmosphere: Atmosphere, settings: ChainSettings) -> tuple[np.ndarray, np.ndarray]:
    """Every used channel de-Dopplerized to the focus point, Welch cross-spectral matrices.

    Parameters
    ----------
    signals_pa : float32 array (n_mics, n_frames)
        Calibrated pressure, row m from frame ``first_frame[m]`` on.

    Returns
    -------
    csm : ndarray, shape (n_lines, n_used, n_used), complex128
        One-sided cross-power per line (Pa^2 of source strength at 1 m).
    factor : ndarray, shape (n_lines, n_used, n_blocks), complex128
        The scaled block spectra: ``csm = factor @ factor^H`` per line (rank n_blocks).
    """
    used = focus.used
    a = dedopplerized_signals(np.asarray(signals_pa)[used], np.asarray(first_frame)[used],
                              focus.geometry, clock.take(used), window, settings)[0]
    n = focus.block_samples
    hop = max(1, int(round(n * (1 - BLOCK_OVERLAP))))
    starts = np.arange(0, window.n_samples - n + 1, hop)
    win = np.hanning(n + 1)[:n]
    norm = 2.0 / (n * np.sum(win ** 2))
    blocks = a[:, starts[:, None] + np.arange(n)[None, :]].astype(float) * win
    spec = np.fft.rfft(blocks, axis=-1)[:, :, focus.lines]                 # (n_m, n_blk, L)
    if settings.absorption:
        spec = spec * _absorption_gain(atmosphere, focus, focus.frequency_hz)[:, None, :]
    factor = spec.transpose(2, 0, 1) * np.sqrt(norm / len(starts))
    return factor @ factor.conj().transpose(0, 2, 1), factor


def _absorption_gain(atmosphere: Atmosphere, focus: Focus, freqs):
    """Amplitude gains (n_used, n_lines) undoing the measured path's absorption at the focus
    point's geometry, at the frequency in the air f / (1 - M_r), as the time-domain chain."""
    mach = focus.geometry.mach_r_center[0]
    distance = focus.geometry.distance_center_m[0]
    alpha = atmosphere.absorption_db_per_m(freqs[None, :] / (1.0 - mach[:, None]))
    return 10.0 ** (alpha * distance[:, None] / 20.0)


def _normalisers(p2) -> tuple[np.ndarray, np.ndarray]:
    """(v^H v)^2 and (v^H v)^2 - sum |v|^4 per point from |v|^2 (n_points, n_mics), the
    same on every line: the full and diagonal-removed scales."""
    s = p2.sum(axis=1)
    return s ** 2, s ** 2 - (p2 ** 2).sum(axis=1)


def _quadratic_forms(v, matrix) -> np.ndarray:
    """v^H C v per point (n_points,) of a Hermitian C: one matrix product, then a real dot
    product per row (the imaginary part is zero); in the precision of v."""
    v = np.ascontiguousarray(v)
    cv = np.ascontiguousarray(v @ np.asarray(matrix, v.dtype).T)
    real = v.real.dtype
    return np.einsum("gi,gi->g", v.view(real), cv.view(real), dtype=float)


def conventional_maps(csm, steering: Steering, n_bands: int, *, factor=None) -> BandPowers:
    """Conventional beamforming per line, summed into bands: (n_points, n_bands) each.

    ``factor`` (n_lines, n_mics, r), where given, is the CSM as ``factor @ factor^H`` (a Welch
    CSM: its r block spectra); the beam power ``v^H C v`` is then ``|factor^H v|^2``, r / n_mics
    of the work of the full product, and equal to it."""
    n_points = steering.amplitude_ratio.shape[0]
    full = np.zeros((n_points, n_bands))
    removed = np.zeros((n_points, n_bands))
    p2 = steering.amplitude_ratio ** 2
    n_full, n_removed = _normalisers(p2)
    for k, (band, v) in enumerate(zip(steering.band_of_line, steering.each_line())):
        if factor is None:
            quad = _quadratic_forms(v, csm[k])
        else:
            projected = np.ascontiguousarray(v.conj() @ factor[k])
            quad = np.einsum("gi,gi->g", projected.view(float), projected.view(float))
        auto = p2 @ csm[k].diagonal().real
        full[:, band] += quad / n_full
        removed[:, band] += (quad - auto) / n_removed
    return BandPowers(full, removed)


def _unit_source_lines(steering: Steering, source: Steering) -> tuple[np.ndarray, np.ndarray]:
    """|v^H u|^2 per point and line (n_points, n_lines) of a unit source with steering u
    (``source``: one point, or one per band) on the points of ``steering``, and |u|^2 per line
    and microphone (n_lines, n_mics).

    ``v^H u = sum_m |v_m| |u_m| exp(i 2 pi f (d_um - d_vm))`` per line, compiled
    (:func:`flyover.imaging._kernels.line_beam_powers`)."""
    n_points, n_mics = steering.amplitude_ratio.shape
    lines = np.arange(len(steering.frequency_hz))
    rows = len(source.amplitude_ratio)
    quad = np.empty((n_points, len(lines)))
    for row in range(rows):
        mine = lines if rows == 1 else lines[steering.band_of_line == row]
        f = np.ascontiguousarray(steering.frequency_hz[mine])
        out = np.empty((1, n_points, len(f)))
        _kernels.line_beam_powers(
            (steering.amplitude_ratio * source.amplitude_ratio[row])[None],
            (source.advance_s[row] - steering.advance_s)[None], f[None],
            np.ones((1, len(f), n_mics), complex), out)
        quad[:, mine] = out[0]
    u2 = source.amplitude_ratio ** 2
    return quad, (u2[[0] * len(lines)] if rows == 1 else u2[steering.band_of_line])


def _band_sums(per_line, band_of_line, n_bands) -> np.ndarray:
    """Values per point and line (n_points, n_lines) summed into bands (n_points, n_bands)."""
    per_band = np.zeros((len(band_of_line), n_bands))
    per_band[np.arange(len(band_of_line)), band_of_line] = 1.0
    return per_line @ per_band


def conventional_point_spread(steering: Steering, source: Steering,
                              n_bands: int) -> tuple[BandPowers, np.ndarray]:
    """The maps of a unit point source (1 Pa^2 per line; its CSM is u u^H with u its own
    steering vector, ``source`` of one point or one per band) on the points of ``steering``,
    from the steering vectors alone, and its band powers (the number of lines per band). The
    autopowers ``sum |v_m|^2 |u_m|^2`` are the same on every line of a source position."""
    p2 = steering.amplitude_ratio ** 2
    n_full, n_removed = _normalisers(p2)
    quad, u2 = _unit_source_lines(steering, source)
    auto = p2 @ u2.T                                                   # (n_points, n_lines)
    bands = steering.band_of_line
    full = _band_sums(quad, bands, n_bands) / n_full[:, None]
    removed = _band_sums(quad - auto, bands, n_bands) / n_removed[:, None]
    return BandPowers(full, removed), np.bincount(bands, minlength=n_bands).astype(float)


def functional_point_spread(steering: Steering, source: Steering, n_bands: int,
                            exponent: float) -> np.ndarray:
    """The functional map (n_points, n_bands) of a unit point source, as
    :func:`functional_maps` forms it from its CSM u u^H, in closed form: the CSM has the one
    eigenvalue |u|^2, so ``(e^H C^(1/nu) e)^nu / (v^H v) = |u|^2 (|v^H u|^2 / (|v|^2
    |u|^2))^nu / |v|^2``."""
    norm2 = (steering.amplitude_ratio ** 2).sum(axis=1)[:, None]
    quad, u2 = _unit_source_lines(steering, source)
    size = u2.sum(axis=1)[None, :]                                     # |u|^2 per line
    pattern = np.clip(quad / (norm2 * size), 0.0, 1.0)
    return _band_sums(size * pattern ** exponent / norm2, steering.band_of_line, n_bands)


# Eigenvalues below this share of the largest count as zero in functional beamforming.
EIGEN_FLOOR = 1e-12


def functional_maps(csm, steering: Steering, n_bands: int, exponent: float) -> np.ndarray:
    """Functional beamforming (Dougherty 2014) per line, summed into bands (n_points, n_bands):
    ``(e^H C^(1/nu) e)^nu / (v^H v)`` with ``e = v / |v|`` the unit steering vector, C^(1/nu)
    from the eigenvalues of the (Hermitian, full) CSM, negative ones set to zero. A lone source
    keeps its power at its peak (the 1 / (v^H v) of formulation III) and its side lobes fall as
    the nu-th power of the normalised beam pattern."""
    n_points = steering.amplitude_ratio.shape[0]
    out = np.zeros((n_points, n_bands))
    norm2 = (steering.amplitude_ratio ** 2).sum(axis=1)
    for k, (band, v) in enumerate(zip(steering.band_of_line, steering.each_line())):
        lam, vec = np.linalg.eigh(csm[k])
        # Eigenvalues at round-off level (or negative) are zero: their 1/nu-th roots would not.
        lam = np.where(lam > EIGEN_FLOOR * lam.max(), lam, 0.0)
        root = (vec * lam ** (1.0 / exponent)) @ vec.conj().T
        # (e^H R e) with e = v / |v|: the quadratic form of v over |v|^2.
        quad = _quadratic_forms(v, root) / norm2
        out[:, band] += np.clip(quad, 0.0, None) ** exponent / norm2
    return out


@dataclass(frozen=True)
class CleanResult:
    """CLEAN-SC of a window, per band (n_points, n_bands): the clean map (each found source's
    re-fitted power at its grid point: a clean beam one grid cell wide), the diagonal-removed
    residual map after them, the number of sources removed per line (n_lines,), and the clean
    and residual maps as the iterations removed them (before the re-fit)."""

    clean: np.ndarray
    residual: np.ndarray
    iterations: np.ndarray
    removed_clean: np.ndarray
    removed_residual: np.ndarray


# CLEAN-SC stops on a line when the peak falls below this share of the first one (30 dB): what
# is left there is the residual's, not a source's.
CLEAN_FLOOR = 1e-3


def clean_sc(csm, steering: Steering, n_bands: int, *, loop_gain: float = 0.3,
             max_sources: int = 200, lines_per_batch: int = 32, factor=None) -> CleanResult:
    """CLEAN-SC (Sijtsma 2007) with diagonal removal, per frequency line.

    Each iteration finds the peak of the diagonal-removed map, takes the source component
    coherent with it, ``h = D w / P_max + diag(|h|^2) w`` (iterated; w = v / (v^H v) of the
    peak, so that h is the source's steering vector for a lone source), adds ``loop_gain P_max``
    to the clean map at the peak and removes ``loop_gain P_max h h^H`` from the CSM (its
    diagonal kept at zero). It stops when the peak falls below ``CLEAN_FLOOR`` of the first,
    when the residual CSM's off-diagonal magnitude no longer decreases, when no coherent
    component is found, or after ``max_sources`` iterations. The powers of the points found
    are then fitted again as incoherent sources (:func:`_refit`), and the residual is what they
    leave; the maps as removed are kept too. The starting maps come from ``factor`` where
    given (as in :func:`conventional_maps`). The map is updated from h alone
    (no new product with the CSM), so an iteration costs O(n_points n_mics) per line; the
    iterations are compiled (:func:`flyover.imaging._kernels.clean_lines`), the lines of a
    batch in parallel, and so are the batch's steering vectors
    (:func:`flyover.imaging._kernels.steering_lines`).
    """
    n_points = steering.amplitude_ratio.shape[0]
    n_lines = len(steering.band_of_line)
    clean = np.zeros((n_points, n_bands))
    residual = np.zeros((n_points, n_bands))
    removed_clean = np.zeros((n_points, n_bands))
    removed_residual = np.zeros((n_points, n_bands))
    iterations = np.zeros(n_lines, int)
    ratio = np.ascontiguousarray(steering.amplitude_ratio, float)
    advance = np.ascontiguousarray(steering.advance_s, float)
    # |v| is the same on every line.
    p2_line = steering.amplitude_ratio ** 2
    s2_line = p2_line.sum(axis=1)
    n_removed_line = _normalisers(p2_line)[1]
    # The map updates read a line's steering vectors each iteration: in single precision they
    # move half the memory (their rounding, 1e-7, is far below the floor). The batch's arrays
    # are allocated once: fresh pages for every batch cost as much as filling them.
    batch = min(lines_per_batch, n_lines)
    planes_all = np.empty((batch, n_points, 3, ratio.shape[1]), np.float32)
    quad_all = np.empty((batch, n_points))
    for lo in range(0, n_lines, lines_per_batch):
        lines = np.arange(lo, min(lo + lines_per_batch, n_lines))
        c = len(lines)
        planes, quad = planes_all[:c], quad_all[:c]
        # The block spectra as planes (line, block, real / imaginary, microphone); none for a
        # CSM given without them.
        f = (np.zeros((c, ratio.shape[1], 0), np.complex64) if factor is None
             else factor[lines])
        blocks = np.ascontiguousarray(np.stack([f.real, f.imag], axis=2).transpose(0, 3, 2, 1),
                                      np.float32)
        _kernels.steering_lines(ratio, advance, steering.frequency_hz[lines], planes, blocks,
                                quad)
        d = csm[lines].copy()
        d[:, np.arange(d.shape[1]), np.arange(d.shape[1])] = 0.0
        if factor is None:
            # v^H D v = (conj v)^H conj(D) (conj v) for Hermitian D.
            quad = np.stack([_quadratic_forms(planes[k, :, 0] + 1j * planes[k, :, 1],
                                              d[k].conj()) for k in range(c)])
        else:
            # v^H D v = |F^H v|^2 - sum |v|^2 diag(C).
            quad = quad - csm[lines].diagonal(axis1=1, axis2=2).real @ p2_line.T
        pmap = quad / n_removed_line
        start = pmap.copy()
        found = np.zeros((c, n_points))
        _kernels.clean_lines(planes, s2_line, n_removed_line, d, pmap, loop_gain, max_sources,
                             CLEAN_FLOOR, found, iterations[lo:lo + c])
        bands = steering.band_of_line[lines]
        for b in np.unique(bands):
            removed_clean[:, b] += found[bands == b].sum(axis=0)
            removed_residual[:, b] += pmap[bands == b].sum(axis=0)
        # The residual: what the re-fitted sources leave of the starting maps; a line whose
        # fit cannot be solved keeps its powers and its residual as removed.
        solved = np.zeros(c, bool)
        for k, line in enumerate(lines):
            fit = _refit(found[k], start[k], ratio, advance, steering.frequency_hz[line],
                         n_removed_line)
            if fit is not None:
                found[k], solved[k] = fit, True
        residual_maps = start
        _kernels.remove_point_sources(planes, found * solved[:, None], n_removed_line,
                                      residual_maps)
        residual_maps[~solved] = pmap[~solved]
        pmap = residual_maps
        for b in np.unique(bands):
            clean[:, b] += found[bands == b].sum(axis=0)
            residual[:, b] += pmap[bands == b].sum(axis=0)
    return CleanResult(clean, residual, iterations, removed_clean, removed_residual)


# Ridge of the re-fit's normal equations, relative to their mean diagonal: found points a grid
# step apart have nearly equal steering vectors.
REFIT_RIDGE = 1e-9


def _refit(found, start_map, ratio, advance_s, frequency_hz: float,
           n_removed) -> np.ndarray | None:
    """One line's clean powers re-fitted (n_points,), or None where the fit cannot be solved.

    CLEAN-SC removes with each source the part of the CSM coherent with it; with a finite
    number of averages, incoherent sources still share a random cross-spectrum, so removing a
    strong source takes a share of a weak one's power along (2-3 dB for a source 16 dB below
    its neighbour with 7 Welch blocks). With the positions found, the powers are fitted again
    as incoherent point sources, non-negative least squares on the diagonal-removed CSM:
    ``min || D - sum_k p_k (v_k v_k^H - diag) ||_F``, whose normal equations need only the
    found points' steering vectors (Gram matrix ``|v_k^H v_l|^2 - sum_m |v_km|^2 |v_lm|^2``)
    and the starting map (``v_k^H D v_k``). The random cross-spectrum then averages out instead
    of being removed. The found points' steering vectors (from ``ratio`` and ``advance_s``,
    (n_points, n_mics), at ``frequency_hz``) are formed in double precision: found neighbours
    a grid step apart at low frequency have nearly equal ones, and in single precision their
    Gram matrix came out indefinite (16 of 340 lines of a window). The residual map after
    the fitted sources is formed for a whole batch of lines at once
    (:func:`flyover.imaging._kernels.remove_point_sources`).
    """
    j = np.flatnonzero(found > 0)
    if not j.size:
        return found
    vj = ratio[j] * np.exp(-2j * np.pi * frequency_hz * advance_s[j])
    p2 = ratio[j] ** 2
    gram = np.abs(vj.conj() @ vj.T) ** 2 - p2 @ p2.T
    rhs = start_map[j] * n_removed[j]
    gram = gram + REFIT_RIDGE * np.trace(gram) / len(j) * np.eye(len(j))
    try:
        lower = np.linalg.cholesky(gram)
    except np.linalg.LinAlgError:
        return None
    from scipy.linalg import solve_triangular  # scipy.optimize: slow to import, rarely needed
    from scipy.optimize import nnls
    powers, _ = nnls(lower.T, solve_triangular(lower, rhs, lower=True), maxiter=50 * len(j))
    out = np.zeros_like(found)
    out[j] = powers
    return out
