"""The moving-source engine: de-Dopplerized delay-and-sum on the vehicle grid, per window.

For grid point g (a body point moved and turned with the track) and microphone m, sound emitted
at tau reaches m at ``t = tau + T`` (closed-form travel time in the pass's uniform wind). The
de-Dopplerized signal of m for g is ``a_gm(tau) = r (1 - M_r)^2 p_m(tau + T) / G`` (r = c T, the
path in the moving air), read from the calibrated channel with 4-point Lagrange interpolation (or
4x band-limited oversampling first).
Band powers are formed in source time from the windowed spectra of these signals:

    full map:      P = sum_band |sum_m w_m A_gm|^2 / (sum w)^2
    diagonal removed:  P = (sum_band |sum_m w_m A_gm|^2 - sum_m w_m^2 sum_band |A_gm|^2)
                           / ((sum w)^2 - sum w^2)

with A the spectrum of a, compensated for the ISO 9613-1 absorption of the measured path at the
frequency the sound has in the air, f / (1 - M_r) (M_r relative to the moving medium; the fixed
microphone then receives f / (dt/dtau)). A point source at g in free field, without
noise, gives back its source signal (pressure at 1 m): the maps are in source strength at 1 m.

Error budget of the interpolation (received frequency f, sample rate fs, nu = f / fs): 4-point
Lagrange is worst at a half-sample delay, where it attenuates by (9 cos(pi nu) - cos(3 pi nu)) / 8:
0.030 dB at 0.1 fs, 0.074 dB at 0.125 fs, 0.15 dB at 0.15 fs, 1.07 dB at 0.25 fs (linear
interpolation: 0.44 dB at 0.1 fs). Averaged over random delays the loss is about half that. The
'sinc' option first oversamples each channel 4x (:func:`oversampled`: a 257-tap Kaiser-windowed
low-pass, flat within 0.001 dB to 0.45 fs and 90 dB down on the images from 0.55 fs), so the
cubic step sees nu / 4: 0.0001 dB at 0.1 fs and 0.030 dB at 0.4 fs (0.04 dB at 0.45 fs).
The kernels round the fractional read position to 1/4096 sample (tabulated weights): an
added error below 2 pi nu / 8192 of the signal's peak, 1e-4 at 0.135 fs.
Bands whose highest received frequency passes ``ACCURATE_FRACTION`` of fs (worst-case loss
0.1 dB) are flagged invalid. Delays between the coarse nodes (every ``node_step``
samples) are linear: with a reception-time curvature V^2 / (c r) of 0.1 1/s the error is below
1e-6 s, a phase error under 0.02 rad at 3 kHz.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np
import scipy.fft

from flyover.acoustics.atmosphere import Atmosphere
from flyover.geometry.windows import Window
from flyover.imaging import _kernels
from flyover.model.timebase import ArrayClock
from flyover.imaging.chain import BandPowers, ChainSettings, band_bins, spectral_weights
from flyover.imaging.ground_gains import ground_gains, ground_q
from flyover.imaging.reception import (ImagePaths, ReceptionGeometry, absorption_gains,
                                      subset)


OVERSAMPLING = 4


@functools.cache
def _oversampling_taps() -> np.ndarray:
    """Anti-imaging filter of the 4x oversampling: cut-off at the original Nyquist frequency
    (0.25 of the new one); 257 taps with Kaiser beta 9 put the transition between 0.45 and 0.55
    fs. Made on first use: scipy.signal's import costs every job that only reads the methods'
    names 0.4 s."""
    from scipy.signal import firwin
    return firwin(257, 1.0 / OVERSAMPLING, window=("kaiser", 9.0))


# Fractional read positions and weights of the mean over them: Gauss-Legendre on [0, 1].
_DELAY_NODES = tuple(0.5 * a for a in np.polynomial.legendre.leggauss(8) + np.array([[1], [0]]))


def interpolation_response(frequency_hz, sample_rate_hz: float, interpolation: str):
    """The chain's interpolation as a gain on a received line, averaged over the fractional
    read position (which sweeps through [0, 1) many times in a window as the delay changes).

    4-point Lagrange read at ``i + d`` turns ``exp(i 2 pi nu k)`` into ``H(nu, d) exp(i 2 pi nu
    (i + d))`` with ``H = sum_k L_k(d) exp(i 2 pi nu (k - d))``; this is the mean of H over d
    (8-point Gauss-Legendre: H is smooth in d), nu the received frequency over the rate it is
    read at (a quarter of it after the 'sinc' option's oversampling, whose filter is flat
    there). The steering model of
    the point-spread applies it to the beam (coherent part) and its square to the autopowers.

    Parameters
    ----------
    frequency_hz : array_like
        Received frequencies.
    interpolation : {'cubic', 'sinc'}

    Returns
    -------
    complex ndarray, shape of ``frequency_hz``
    """
    nu = np.asarray(frequency_hz, float) / sample_rate_hz
    if interpolation == "sinc":
        nu = nu / OVERSAMPLING
    d, weight = _DELAY_NODES
    lagrange = _kernels.lagrange_weights(d).T                                     # (4, n_d)
    # exp(i 2 pi nu (k - d)) = exp(i 2 pi nu)^k exp(-i 2 pi nu d): 9 exponentials, not 32.
    per_tap = np.exp(-2j * np.pi * nu[..., None] * d) @ (lagrange * weight).T    # (..., 4)
    step = np.exp(2j * np.pi * nu)
    return (per_tap[..., 0] / step + per_tap[..., 1]
            + step * (per_tap[..., 2] + step * per_tap[..., 3]))


def oversampled(signals) -> np.ndarray:
    """Signals (..., n) at ``OVERSAMPLING`` times their rate (float32, (..., n * OVERSAMPLING)):
    sample k of the input lands on sample ``OVERSAMPLING * k``; content to 0.45 of the input rate
    keeps its amplitude within 0.001 dB."""
    from scipy.signal import resample_poly
    return resample_poly(np.asarray(signals, np.float32), OVERSAMPLING, 1, axis=-1,
                         window=_oversampling_taps()).astype(np.float32)


def dedopplerized_signals(signals_pa, first_frame, geometry: ReceptionGeometry,
                          clock: ArrayClock, window: Window, settings: ChainSettings,
                          points=slice(None)) -> np.ndarray:
    """The de-Dopplerized signal of every microphone for some grid points.

    Parameters
    ----------
    signals_pa : float32 array (n_mics, n_span)
        Calibrated pressure, row m read from frame ``first_frame[m]`` on.
    first_frame : int array, shape (n_mics,)
    points : slice or index array
        Grid points (rows of the geometry) to compute.

    Returns
    -------
    float32 array (n_points, n_mics, window.n_samples)
    """
    return _read_points(_reading(signals_pa, first_frame, clock, settings), geometry, window,
                        settings, points)


def _read_points(reading, geometry: ReceptionGeometry, window: Window, settings: ChainSettings,
                 points, *, q: int = 1) -> np.ndarray:
    """:func:`dedopplerized_signals` from the signals as read (:func:`_reading`), which a
    caller going through a window's points chunk by chunk forms once; every ``q``-th emission
    sample (``q`` divides the node step), (n_points, n_mics, ceil(n_samples / q))."""
    sig, origin, scale = reading
    rx = (geometry.reception_s[points] - origin[:, None]) * scale[:, None]
    _check_reads(rx, sig)
    amp = geometry.amplitude[points].astype(np.float32)
    out = np.empty((rx.shape[0], rx.shape[1], -(-window.n_samples // q)), dtype=np.float32)
    _kernels.dedoppler_cubic(sig, np.ascontiguousarray(rx), amp, settings.node_step // q, out)
    return out


def _reading(signals_pa, first_frame, clock: ArrayClock, settings: ChainSettings):
    """The signals as the kernels read them (float32, oversampled for 'sinc'), and per
    microphone the time of their sample 0 and their samples per second: reception time t is
    read at ``(t - origin) * scale``."""
    sig = np.asarray(signals_pa, dtype=np.float32)
    rate = np.asarray(clock.rate_hz, float)
    origin = clock.sample_time_s(np.asarray(first_frame, float)[:, None])[:, 0]
    if settings.interpolation == "sinc":
        return oversampled(sig), origin, rate * OVERSAMPLING
    return sig, origin, rate


def _check_reads(rx_ends, sig) -> None:
    """Reading positions (any shape, first and last nodes suffice) inside the signals."""
    if rx_ends.min() < 1 or rx_ends.max() > sig.shape[1] - 3:
        raise ValueError("reception positions outside the span read for the window")


def window_band_powers(signals_pa, first_frame, geometry: ReceptionGeometry,
                       clock: ArrayClock, window: Window, settings: ChainSettings,
                       atmosphere: Atmosphere, *, workers: int = 1) -> BandPowers:
    """Band powers on every grid point of the geometry, with and without diagonal removal.

    ``signals_pa`` (n_mics, n_span) and ``first_frame`` (n_mics,) as in
    :func:`dedopplerized_signals`. The microphones are summed before any spectrum is taken
    (:func:`_summed_band_powers`; under raised microphones the reflection is undone line by
    line on the beam and the autopowers); :func:`_per_microphone_band_powers`, from every
    microphone's own spectrum, is the direct definition it is tested against.
    """
    w = np.asarray(settings.weights, dtype=np.float64)
    used = np.flatnonzero(w > 0)
    chain = _UsedChain(
        np.asarray(signals_pa)[used], np.asarray(first_frame)[used],
        subset(geometry, (slice(None), used)) if len(used) < len(w) else geometry,
        clock.take(used), w[used],
        absorption_gains(settings, atmosphere, geometry)[:, used])
    return _summed_band_powers(chain, window, settings, atmosphere, workers=workers)


@dataclass(frozen=True)
class _UsedChain:
    """The used microphones' part of a window: signals, first frames, geometry, clock,
    weights (n_used,) and absorption gains (n_grid, n_used, n_bands)."""

    signals: np.ndarray
    first_frame: np.ndarray
    geometry: ReceptionGeometry
    clock: ArrayClock
    weights: np.ndarray
    gain: np.ndarray


# Largest error, relative to the largest gain, of the low-rank form of the weighted absorption
# gains that the summed chain applies (3e-4: 0.003 dB on a single gain; a focused beam's error
# is far smaller). Over 35 m to 5 kHz two terms meet it (1.5e-4), three give 4e-6.
GAIN_TOLERANCE = 3e-4


def gain_terms(weighted) -> tuple[np.ndarray, np.ndarray]:
    """The weighted gains (n_grid, n_mics, n_bands) as ``sum_k coef[g, k, m] basis[k, b]``
    with the fewest band profiles ``basis`` (orthonormal rows, shared by every point and
    microphone: the principal directions of all their band profiles) that keep every gain
    within ``GAIN_TOLERANCE`` of the largest.

    Returns
    -------
    coef : float32 array (n_grid, n_terms, n_mics)
    basis : ndarray, shape (n_terms, n_bands)
    """
    flat = weighted.reshape(-1, weighted.shape[-1])
    # The principal directions from the n_bands x n_bands Gram matrix: far cheaper than an SVD
    # of the tall matrix, and exact enough for the leading terms kept.
    _, vectors = np.linalg.eigh(flat.T @ flat)
    directions = vectors[:, ::-1].T
    top = np.abs(flat).max()
    for k in range(1, len(directions) + 1):
        projected = flat @ directions[:k].T
        if np.abs(projected @ directions[:k] - flat).max() <= GAIN_TOLERANCE * top:
            break
    coef = projected.reshape(weighted.shape[:2] + (k,)).transpose(0, 2, 1)
    return np.ascontiguousarray(coef, np.float32), directions[:k]


def _summed_band_powers(chain: _UsedChain, window: Window, settings: ChainSettings,
                        atmosphere: Atmosphere, *, workers: int = 1) -> BandPowers:
    """The maps with the microphones summed in the time domain, in source time at a reduced
    rate where the bands allow it.

    The beam of band b at point g, ``sum_m w_m G_gm(b) A_gm(f)``, needs the weighted gains
    ``w_m G_gm(b)`` (n_mics x n_bands) per point; in a low-rank form ``sum_k U_gk(m) V_k(b)``
    (:func:`gain_terms`), the beam is ``sum_k V_k(b) F_gk(f)`` with F_gk the spectrum of
    ``sum_m U_gk(m) a_gm`` (:func:`_kernels.dedoppler_summed`): a few spectra per point
    instead of one per microphone.

    Under raised microphones each line's beam power is divided by the ground's expected gain at
    its point (:func:`ground_gains`), as :func:`_per_microphone_band_powers` does it; so are the
    autopowers, per line: the reference's line i, warped to ``i s``, takes the gain of the line
    nearest there within its band (:func:`_kernels.warped_line_autos`).

    The de-Dopplerized sums are formed at 1/q of the recording rate (:func:`decimation`):
    the channels are first low-passed, flat to the highest band's top as received, so that
    nothing folds into the bands; the interpolation still reads them at the full rate.

    The autopowers ``sum_m w_m^2 G_gm(b)^2 P_gm(b)`` need each channel's band power P_gm(b)
    for every point. Point g's de-Dopplerized signal of microphone m is a reference point r's
    one, rescaled and time-warped: ``a_gm(tau) = rho a_rm(s tau + c)`` with ``rho = A_gm /
    A_rm`` and ``s = (dt/dtau)_gm / (dt/dtau)_rm`` at the window centre, so its band [f1, f2)
    holds the power of r's band [f1 / s, f2 / s), times rho^2. The reference (the middle row
    of the geometry) is de-Dopplerized once, its spectra's cumulative power read at the
    warped band edges.
    """
    geo = chain.geometry
    n_grid, n_mics = geo.doppler_center.shape
    w = chain.weights
    s1, s2 = float(w.sum()), float((w ** 2).sum())
    q, pass_hz, stop_hz = decimation(settings, geo, window.sample_rate_hz)
    signals = chain.signals if q == 1 else lowpassed(chain.signals, pass_hz, stop_hz,
                                                     window.sample_rate_hz)
    chain = _UsedChain(signals, chain.first_frame, geo, chain.clock, w, chain.gain)
    n_out, rate_hz = -(-window.n_samples // q), window.sample_rate_hz / q
    win, norm = spectral_weights(n_out)
    bins = band_bins(settings.bands, n_out, rate_hz)
    n_b = len(bins)
    weighted = w[None, :, None] * chain.gain.astype(float)              # (n_g, n_m, n_b)
    coef, basis = gain_terms(weighted)                           # (n_g, k, n_m), (k, n_b)
    k = len(basis)
    # The reference's per-microphone power per line.
    ref = n_grid // 2
    each = np.eye(n_mics, dtype=np.float32)[None]
    reading = _reading(signals, chain.first_frame, chain.clock, settings)
    a_ref = _dedopplerized_sums(reading, geo, settings, [ref], each, q, n_out)[0] * win
    power = np.abs(scipy.fft.rfft(a_ref, axis=-1, workers=workers)) ** 2 * norm
    amp = geo.amplitude_center
    rho2 = (amp / amp[ref]) ** 2
    warp = geo.doppler_center / geo.doppler_center[ref]                  # s, (n_g, n_m)
    auto_coef = weighted ** 2 * rho2[..., None]
    ground = None
    if geo.image is None:
        autos = _warped_band_autos(power, warp, auto_coef, settings.bands, rate_hz / n_out)
    else:
        # The reflection undone per line: Q at every line the bands hold, the autopowers
        # divided line by line (in place of the band sums).
        freqs = np.fft.rfftfreq(n_out, 1.0 / rate_hz)
        ground = _GroundDivision(
            geo.image, ground_q(geo.image, freqs, atmosphere.c_m_s, settings.ground), freqs,
            np.asarray(w, np.float32), window.n_samples / window.sample_rate_hz, power, warp,
            np.ascontiguousarray(auto_coef), np.array([[b.start, b.stop] for b in bins],
                                                      np.int64),
            np.stack([settings.bands.lower_hz, settings.bands.upper_hz], axis=1)
            / (rate_hz / n_out))
    full = np.empty((n_grid, n_b))
    diag = np.empty((n_grid, n_b))
    chunk = max(1, settings.chunk_points * n_mics * q // (2 * k))
    for c0 in range(0, n_grid, chunk):
        pts = slice(c0, min(c0 + chunk, n_grid))
        sums = _dedopplerized_sums(reading, geo, settings, pts, coef[pts], q, n_out)
        spec = scipy.fft.rfft(sums * win, axis=-1, workers=workers)      # (n_c, k, n_f)
        if ground is not None:
            full[pts], diag[pts] = ground.maps(spec, basis, bins, norm, pts, s1, s2)
            continue
        beam_power = np.empty((spec.shape[0], n_b))
        for b, sl in enumerate(bins):
            beam = np.einsum("k,gkf->gf", basis[:, b].astype(np.complex64), spec[:, :, sl])
            beam_power[:, b] = (beam.real ** 2 + beam.imag ** 2).sum(-1, dtype=float) * norm
        full[pts] = beam_power / s1 ** 2
        diag[pts] = (beam_power - autos[pts]) / (s1 ** 2 - s2)
    return BandPowers(full, diag)


def _warped_band_autos(power, warp, auto_coef, bands, spacing_hz: float) -> np.ndarray:
    """The autopowers per point and band (n_g, n_bands): the reference's power per line and
    microphone (n_m, n_lines) read between its band edges warped by ``warp`` (n_g, n_m),
    weighted by ``auto_coef`` (n_g, n_m, n_bands)."""
    n_mics, n_b = power.shape[0], len(bands)
    cumulative = np.concatenate([np.zeros((n_mics, 1)), np.cumsum(power, axis=-1)], axis=-1)
    # Lines below a warped edge x: ceil(x / spacing), as band_bins counts them; each distinct
    # band edge once (adjacent bands share theirs), read from the flattened cumulative sums.
    edges, at = np.unique(np.concatenate([bands.lower_hz, bands.upper_hz]), return_inverse=True)
    count = np.multiply.outer(1.0 / (warp * spacing_hz), edges)           # (n_g, n_m, n_e)
    np.ceil(count, out=count)
    np.clip(count, 0, power.shape[-1], out=count)
    below = cumulative.ravel()[count.astype(np.intp)
                               + (np.arange(n_mics) * cumulative.shape[1])[None, :, None]]
    band_power = below[..., at[n_b:]] - below[..., at[:n_b]]
    return np.einsum("gmb,gmb->gb", auto_coef, band_power)


@dataclass(frozen=True)
class _GroundDivision:
    """What the summed chain needs, for one window under raised microphones, to divide each
    line of the beam and of the warped autopowers by the ground's expected gains.

    Attributes
    ----------
    image : ImagePaths
        Of every grid point, (n_g, n_m).
    q : complex ndarray (n_m, n_lines)
        The ground's Q at every line (:func:`ground_q`).
    freqs : ndarray (n_lines,)
    weights : float32 ndarray (n_m,)
    duration_s : float
    power : ndarray (n_m, n_lines)
        The reference point's power per line and microphone.
    warp : ndarray (n_g, n_m)
        dt/dtau of each point over the reference's.
    auto_coef : ndarray (n_g, n_m, n_bands)
        The autopowers' weights (w G rho)^2.
    lines : int64 ndarray (n_bands, 2)
        Each band's first line and the line past its last.
    edges : ndarray (n_bands, 2)
        Band edges in lines.
    """

    image: ImagePaths
    q: np.ndarray
    freqs: np.ndarray
    weights: np.ndarray
    duration_s: float
    power: np.ndarray
    warp: np.ndarray
    auto_coef: np.ndarray
    lines: np.ndarray
    edges: np.ndarray

    def maps(self, spec, basis, bins, norm: float, pts, s1: float,
             s2: float) -> tuple[np.ndarray, np.ndarray]:
        """The full and diagonal-removed maps (n_c, n_bands) of the points ``pts`` from their
        sums' spectra ``spec`` (n_c, k, n_lines) and the gains' band profiles ``basis``."""
        image = self.image.take(pts)
        n_c, n_b = spec.shape[0], len(bins)
        full = np.zeros((n_c, n_b))
        removed = np.zeros((n_c, n_b))
        first = int(self.lines[0, 0])
        inverse = np.zeros((n_c, max(int(self.lines[-1, 1]) - first, 0)))  # 1 / removed gain
        for b, sl in enumerate(bins):
            if sl.stop <= sl.start:
                continue
            g_full, g_removed = ground_gains(image, self.q[:, sl], self.freqs[sl],
                                             self.duration_s, self.weights)
            beam = np.einsum("k,gkf->gf", basis[:, b].astype(np.complex64), spec[:, :, sl])
            beam_power = (beam.real ** 2 + beam.imag ** 2).astype(np.float64)
            full[:, b] = (beam_power / g_full).sum(-1) * norm
            removed[:, b] = (beam_power / g_removed).sum(-1) * norm
            inverse[:, sl.start - first:sl.stop - first] = 1.0 / g_removed
        autos = np.zeros((n_c, n_b))
        _kernels.warped_line_autos(self.power, np.ascontiguousarray(self.warp[pts], float),
                                   np.ascontiguousarray(self.auto_coef[pts]), self.edges,
                                   self.lines, inverse, first, autos)
        return full / s1 ** 2, (removed - autos) / (s1 ** 2 - s2)


def _dedopplerized_sums(reading, geo: ReceptionGeometry, settings: ChainSettings, points, coef,
                        q: int, n_out: int) -> np.ndarray:
    """Weighted sums over microphones (n_points, n_sums, n_out) of the de-Dopplerized
    signals of some grid points, every q-th emission sample, from the signals as read
    (:func:`_reading`)."""
    sig, origin, scale = reading
    # Reception grows with emission time: the first and last nodes bound every read.
    _check_reads((geo.reception_s[points][..., [0, -1]] - origin[:, None]) * scale[:, None], sig)
    out = np.empty((len(coef), coef.shape[1], n_out), dtype=np.float32)
    _kernels.dedoppler_summed(sig, geo.reception_s[points], origin, scale,
                              geo.amplitude[points], coef, settings.node_step // q, out)
    return out


# Rate reductions of the summed chain, largest first (each must divide the node step).
DECIMATIONS = (4, 2)


# Margins: dt/dtau over the window beyond its centre values, and the low-pass's transition.
_DOPPLER_MARGIN = 0.03


_MIN_TRANSITION = 1.1

# Fewer points than this are de-Dopplerized at the full rate: the low-pass over every channel
# costs more than the reads it saves (one point, 48 microphones, 12800 samples: 4 ms of
# low-pass against 0.3 ms of reads saved).
DECIMATE_FROM_POINTS = 32


def decimation(settings: ChainSettings, geometry: ReceptionGeometry,
               sample_rate_hz: float) -> tuple[int, float, float]:
    """The rate reduction q of the summed chain for a window, and its low-pass edges (Hz).

    Source-time content to the highest band's top f_t must stay, and what lies above must
    fold, at the reduced rate fs / q, above f_t: so the channels, as received (frequency over
    dt/dtau), keep everything to ``f_t / min(dt/dtau)`` and stop from ``(fs / q - f_t) /
    max(dt/dtau)``. The largest q of ``DECIMATIONS`` with room for the transition is taken;
    1 (no low-pass) for the 'sinc' option, whose reach the low-pass would cut, and for fewer
    than ``DECIMATE_FROM_POINTS`` points, for which the low-pass costs more than it saves.

    Returns
    -------
    q : int
    pass_hz, stop_hz : float
        The low-pass edges (nan for q = 1).
    """
    d = geometry.doppler_center
    if settings.interpolation != "cubic" or d.shape[0] < DECIMATE_FROM_POINTS:
        return 1, np.nan, np.nan
    top = float(settings.bands.upper_hz[-1])
    pass_hz = top / (float(d.min()) * (1 - _DOPPLER_MARGIN))
    for q in DECIMATIONS:
        stop_hz = (sample_rate_hz / q - top) / (float(d.max()) * (1 + _DOPPLER_MARGIN))
        if settings.node_step % q == 0 and _MIN_TRANSITION * pass_hz <= stop_hz:
            return q, pass_hz, min(stop_hz, 0.5 * sample_rate_hz)
    return 1, np.nan, np.nan


def lowpassed(signals, pass_hz: float, stop_hz: float, sample_rate_hz: float) -> np.ndarray:
    """Channels (n_mics, n) low-passed without phase: gain 1 to ``pass_hz``, a raised-cosine
    roll-off to 0 at ``stop_hz`` (float32, same shape). Applied by FFT over the channel
    extended by its mirror image at both ends, which keeps the ends free of wrap-around;
    the first and last few periods of the transition width stay approximate (the chain reads
    them only at the window's tapered ends)."""
    x = np.asarray(signals, np.float32)
    n = x.shape[-1]
    ext = min(n - 1, max(1, int(8 * sample_rate_hz / (stop_hz - pass_hz))))
    padded = np.concatenate([x[:, ext:0:-1], x, x[:, -2:-ext - 2:-1]], axis=-1)
    size = scipy.fft.next_fast_len(padded.shape[-1], real=True)
    f = np.fft.rfftfreq(size, 1.0 / sample_rate_hz)
    t = np.clip((f - pass_hz) / (stop_hz - pass_hz), 0.0, 1.0)
    gain = 0.5 * (1.0 + np.cos(np.pi * t))
    y = scipy.fft.irfft(scipy.fft.rfft(padded, size, axis=-1) * gain, size, axis=-1)
    return y[:, ext:ext + n].astype(np.float32)


def _per_microphone_band_powers(chain: _UsedChain, window: Window, settings: ChainSettings,
                                atmosphere: Atmosphere, *, workers: int = 1,
                                reduce_rate: bool = True) -> BandPowers:
    """The maps from every microphone's spectrum per point: the beam and the autopowers per
    line, with the ground reflection of raised microphones undone per line (the reference
    the summed chain is tested against, with ``reduce_rate=False``).

    With ``reduce_rate`` the de-Dopplerized signals are formed at the summed chain's reduced
    rate (:func:`decimation`, after its low-pass): the same lines, a quarter of the reads and
    of the spectra's length where the bands allow it.
    """
    sub = chain.geometry
    n_grid = sub.reception_s.shape[0]
    w_used = chain.weights.astype(np.float32)
    s1, s2 = float(w_used.sum()), float((w_used.astype(float) ** 2).sum())
    gain = chain.gain
    q, pass_hz, stop_hz = (decimation(settings, sub, window.sample_rate_hz) if reduce_rate
                           else (1, np.nan, np.nan))
    signals = chain.signals if q == 1 else lowpassed(chain.signals, pass_hz, stop_hz,
                                                     window.sample_rate_hz)
    n_out, rate_hz = -(-window.n_samples // q), window.sample_rate_hz / q
    win, norm = spectral_weights(n_out)
    bins = band_bins(settings.bands, n_out, rate_hz)
    freqs = np.fft.rfftfreq(n_out, 1.0 / rate_hz)
    q_ground = (None if sub.image is None else
                ground_q(sub.image, freqs, atmosphere.c_m_s, settings.ground))
    n_b = len(bins)
    full = np.empty((n_grid, n_b))
    diag = np.empty((n_grid, n_b))
    reading = _reading(signals, chain.first_frame, chain.clock, settings)
    for c0 in range(0, n_grid, settings.chunk_points):
        pts = slice(c0, min(c0 + settings.chunk_points, n_grid))
        a = _read_points(reading, sub, window, settings, pts, q=q)
        a *= win
        spec = scipy.fft.rfft(a, axis=-1, workers=workers)          # (n_c, n_used, n_f)
        for b, s in enumerate(bins):
            band = spec[:, :, s] * gain[pts, :, b, None]
            beam = np.einsum("m,gmf->gf", w_used, band)
            beam_power = (beam.real ** 2 + beam.imag ** 2).astype(np.float64)     # (n_c, n_f)
            auto = np.einsum("m,gmf->gf", w_used ** 2,
                             (band.real ** 2 + band.imag ** 2).astype(np.float64))
            if q_ground is None:
                full[pts, b] = beam_power.sum(-1) * norm / s1 ** 2
                diag[pts, b] = (beam_power - auto).sum(-1) * norm / (s1 ** 2 - s2)
                continue
            g_full, g_removed = ground_gains(sub.image.take(pts), q_ground[:, s], freqs[s],
                                             window.n_samples / window.sample_rate_hz, w_used)
            full[pts, b] = (beam_power / g_full).sum(-1) * norm / s1 ** 2
            diag[pts, b] = ((beam_power - auto) / g_removed).sum(-1) * norm / (s1 ** 2 - s2)
    return BandPowers(full, diag)
