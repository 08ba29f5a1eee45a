"""Compiled inner loops (numba). Arrays in, arrays out; no Python objects inside.

Set ``NUMBA_DISABLE_JIT=1`` to run them as plain Python for debugging.
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(parallel=True, fastmath=True, cache=True)
def dedoppler_cubic(signals, rx_pos, amp, step, out):
    """De-Dopplerize every microphone for every grid point (time-domain, cubic Lagrange).

    For grid point g, microphone m and emission sample k, the reception position (fractional
    sample of ``signals``) and the amplitude factor are linear between coarse nodes every
    ``step`` samples, and the channel is read with 4-point Lagrange interpolation::

        out[g, m, k] = amp(g, m, k) * signals[m](rx_pos(g, m, k))

    Parameters
    ----------
    signals : float32 array (n_mics, n_span)
        Calibrated pressure (Pa) of the span read for the window.
    rx_pos : float64 array (n_grid, n_mics, n_nodes)
        Reception positions at the coarse nodes, in samples of ``signals``; every value must lie
        in [1, n_span - 3].
    amp : float32 array (n_grid, n_mics, n_nodes)
        r (1 - M_r)^2 / G (times any absorption or weight factor) at the nodes.
    step : int
        Emission samples between nodes.
    out : float32 array (n_grid, n_mics, n_out)
        Filled in place; n_out <= (n_nodes - 1) * step.
    """
    n_grid, n_mics, _ = rx_pos.shape
    for g in numba.prange(n_grid):
        for m in range(n_mics):
            _read_channel(signals[m], rx_pos[g, m], amp[g, m], step, out[g, m])


@numba.njit(fastmath=True, cache=True, inline="always")
def _read_channel(sig, rx_pos, amp, step, dst):
    """``dst`` = the channel ``sig`` read at the positions ``rx_pos`` and scaled by ``amp``,
    both given at nodes every ``step`` output samples and linear between them."""
    inv = 1.0 / step
    n_out = dst.shape[0]
    for j in range(rx_pos.shape[0] - 1):
        k0 = j * step
        if k0 >= n_out:
            break
        _read_segment(sig, rx_pos[j], (rx_pos[j + 1] - rx_pos[j]) * inv, amp[j],
                      np.float32((amp[j + 1] - amp[j]) * inv), dst, k0, min(k0 + step, n_out))


# Read positions are walked in fixed point, 32 bits of fraction: integer adds and shifts
# instead of float-to-int conversions per sample (the summed kernel 1.46x faster than with
# double positions). A stretch accumulates at most node_step * 2^-33 samples of rounding,
# 1.5e-8 at 128.
_FRACTION_BITS = np.uint64(32)
_ONE = 2.0 ** 32
# The fraction is rounded to 1 / 2^PHASE_BITS of a sample and the four Lagrange weights read
# from a table (64 kB): a timing error of at most 2^-13 sample, so an error below
# 2 pi nu 2^-13 of the signal's peak at nu = f / fs (1e-4 at the cubic read's accurate limit,
# 0.135 fs; an error of that size is 80 dB below the signal). 1.2x faster than evaluating
# the polynomial per sample, for the whole summed kernel.
PHASE_BITS = 12


def lagrange_weights(d) -> np.ndarray:
    """4-point Lagrange weights (..., 4) of the samples at -1, 0, 1, 2 for a read at the
    fraction ``d`` (0 <= d <= 1) past sample 0."""
    d = np.asarray(d, float)
    return np.stack([-d * (d - 1) * (d - 2) / 6, (d + 1) * (d - 1) * (d - 2) / 2,
                     -(d + 1) * d * (d - 2) / 2, (d + 1) * d * (d - 1) / 6], axis=-1)


def lagrange_table(bits: int = PHASE_BITS) -> np.ndarray:
    """:func:`lagrange_weights` for the fractions ``d = j / 2^bits``, j = 0 .. 2^bits (the
    last one is the next sample's d = 0), float32 (2^bits + 1, 4)."""
    return np.ascontiguousarray(lagrange_weights(np.arange(2 ** bits + 1) / 2 ** bits),
                                np.float32)


_LAGRANGE = lagrange_table()     # a global: numba compiles it in as a constant


@numba.njit(fastmath=True, cache=True, inline="always")
def _read_segment(sig, p0, dp, a0, da, dst, k0, k1):
    """``dst[k0:k1]`` = the channel ``sig`` read with 4-point Lagrange interpolation from
    position p0 on, dp samples further each output sample, times an amplitude a0 growing by
    da: one stretch between two nodes of the de-Dopplerization kernels. Sample indices are
    unsigned: the reads are checked before the kernels run, and numba then leaves out its
    negative-index handling of each read (8-15 % faster)."""
    a = np.float32(a0)
    pos = np.uint64(p0 * _ONE)
    step = np.uint64(dp * _ONE + 0.5)
    shift = _FRACTION_BITS - np.uint64(PHASE_BITS)
    half = np.uint64(1) << (shift - np.uint64(1))
    for k in range(k0, k1):
        i = pos >> _FRACTION_BITS
        # The fraction rounded to the table's phases: 0 .. 2^PHASE_BITS.
        j = ((pos + half) >> shift) - (i << np.uint64(PHASE_BITS))
        w = _LAGRANGE[j]
        dst[k] = a * (w[0] * sig[i - np.uint64(1)] + w[1] * sig[i]
                      + w[2] * sig[i + np.uint64(1)] + w[3] * sig[i + np.uint64(2)])
        a += da
        pos += step


@numba.njit(parallel=True, fastmath=True, cache=True)
def dedoppler_summed(signals, reception_s, origin_s, scale, amp, coef, step, out):
    """Weighted sums over microphones of the de-Dopplerized signals, per grid point::

        out[g, q, k] = sum_m coef[g, q, m] amp(g, m, k) signals[m](rx_pos(g, m, k))

    read as :func:`dedoppler_cubic` reads them, without keeping each microphone's signal; the
    reception positions are taken from the reception times at the nodes, ``rx_pos =
    (reception_s - origin_s[m]) * scale[m]`` (no array of them is formed).

    Parameters
    ----------
    signals, step
        As for :func:`dedoppler_cubic`.
    reception_s, amp : float64 arrays (n_grid, n_mics, n_nodes)
        Reception times (s) and amplitude factors at the nodes, any strides.
    origin_s, scale : float64 arrays (n_mics,)
        The time of sample 0 of each row of ``signals`` and its samples per second.
    coef : float32 array (n_grid, n_sums, n_mics)
        Weights of each sum.
    out : float32 array (n_grid, n_sums, n_out)
        Filled in place.
    """
    n_grid, n_mics, n_nodes = reception_s.shape
    n_sums = coef.shape[1]
    n_out = out.shape[2]
    for g in numba.prange(n_grid):
        out[g] = 0.0
        # One microphone's signal at a time, then added to the sums (vectorised): writing
        # the sums sample by sample is slower than the interpolation itself.
        buf = np.empty(n_out, np.float32)
        positions = np.empty(n_nodes)
        for m in range(n_mics):
            for j in range(n_nodes):
                positions[j] = (reception_s[g, m, j] - origin_s[m]) * scale[m]
            _read_channel(signals[m], positions, amp[g, m], step, buf)
            for q in range(n_sums):
                c = coef[g, q, m]
                if c == 0.0:
                    continue    # one microphone per sum (the reference's) adds nothing else
                row = out[g, q]
                for k in range(n_out):
                    row[k] += c * buf[k]


@numba.njit(parallel=True, cache=True)
def paths_on_grid(pos, vel, mics, wind, c, times, pressure_gain, reception, amplitude,
                  distance_end, mach_end, doppler_end):
    """Reception times and amplitude factors from every source point at every emission time to
    every microphone, and path length, M_r and dt/dtau at the last time: the compiled form of
    :func:`flyover.geometry.propagation.paths_between`, written straight into the chain's
    (point, microphone, time) layout.

    Parameters
    ----------
    pos, vel : float64 arrays (n_times, n_points, 3)
        Source positions (m) and velocities over the ground (m/s), site frame.
    mics : float64 array (n_mics, 3)
    wind : float64 array (3,)
    c : float
        Speed of sound in the medium at rest.
    times : float64 array (n_times,)
        Emission times.
    pressure_gain : float
    reception, amplitude : float64 arrays (n_points, n_mics, n_times)
        Filled in place: ``t + T`` and ``r (1 - M_r)^2 / G``.
    distance_end, mach_end, doppler_end : float64 arrays (n_points, n_mics)
        Filled in place: r, M_r and dt/dtau at the last time.
    """
    n_t, n_p = pos.shape[0], pos.shape[1]
    n_m = mics.shape[0]
    uu = wind[0] * wind[0] + wind[1] * wind[1] + wind[2] * wind[2]
    a = c * c - uu
    for p in numba.prange(n_p):
        for m in range(n_m):
            for t in range(n_t):
                d0 = mics[m, 0] - pos[t, p, 0]
                d1 = mics[m, 1] - pos[t, p, 1]
                d2 = mics[m, 2] - pos[t, p, 2]
                du = d0 * wind[0] + d1 * wind[1] + d2 * wind[2]
                dd = d0 * d0 + d1 * d1 + d2 * d2
                tt = (-du + np.sqrt(du * du + a * dd)) / a
                ct = c * tt
                # Unit propagation direction in the medium frame.
                n0 = (d0 - tt * wind[0]) / ct
                n1 = (d1 - tt * wind[1]) / ct
                n2 = (d2 - tt * wind[2]) / ct
                mr = (n0 * (vel[t, p, 0] - wind[0]) + n1 * (vel[t, p, 1] - wind[1])
                      + n2 * (vel[t, p, 2] - wind[2])) / c
                reception[p, m, t] = times[t] + tt
                amplitude[p, m, t] = ct * (1.0 - mr) ** 2 / pressure_gain
            distance_end[p, m] = ct
            mach_end[p, m] = mr
            doppler_end[p, m] = (1.0 - mr) / (1.0 + (n0 * wind[0] + n1 * wind[1]
                                                     + n2 * wind[2]) / c)


# pi / 2 in two parts (Cody-Waite): n * _HALF_PI_HI is exact for |n| < 2^20, so the reduced
# argument of _sincos keeps double precision up to |x| ~ 1e6 rad.
_HALF_PI_HI = 1.5707963267341256
_HALF_PI_LO = 6.077100506506192e-11


@numba.njit(fastmath=True, cache=True, inline="always")
def _sincos(x):
    """``(sin x, cos x)`` in double precision (within 1e-13 for |x| < 3000) from polynomials
    on the quarter period, branch-free: numba's own sine and cosine are scalar library calls
    that keep loops over them from vectorising. With them and the work arrays of
    ``_ITEMS_PER_TASK``, ``line_beam_powers`` ran 2.2x faster on the time-domain unit
    sources' shapes (the two were measured together).
    Taylor to x^13 / x^14: the first omitted term is below 1e-16 on |x| <= pi / 4."""
    n = np.floor(x * (2.0 / np.pi) + 0.5)
    r = (x - n * _HALF_PI_HI) - n * _HALF_PI_LO
    r2 = r * r
    s = r * (1.0 + r2 * (-1.0 / 6 + r2 * (1.0 / 120 + r2 * (-1.0 / 5040 + r2 * (
        1.0 / 362880 + r2 * (-1.0 / 39916800 + r2 / 6227020800))))))
    c = 1.0 + r2 * (-0.5 + r2 * (1.0 / 24 + r2 * (-1.0 / 720 + r2 * (1.0 / 40320 + r2 * (
        -1.0 / 3628800 + r2 * (1.0 / 479001600 - r2 / 87178291200))))))
    q = np.int64(n) & 3
    sine = s if q == 0 else (c if q == 1 else (-s if q == 2 else -c))
    cosine = c if q == 0 else (-s if q == 1 else (-c if q == 2 else s))
    return sine, cosine


@numba.njit(fastmath=True, cache=True, inline="always")
def _phase_steps(advance_s, spacing_hz, sign, a, sr, si):
    """Per microphone, ``a = sign 2 pi advance`` and the phase factor of one line spacing
    ``exp(i a spacing)`` (real part ``sr``, imaginary ``si``): what stepping lines starts
    from. All filled in place."""
    for m in range(a.shape[0]):
        a[m] = sign * 2.0 * np.pi * advance_s[m]
        si[m], sr[m] = _sincos(a[m] * spacing_hz)


@numba.njit(fastmath=True, cache=True, inline="always")
def _phasors(ratio, a, frequency_hz, zr, zi):
    """``z_m = ratio_m exp(i a_m f)`` (real part ``zr``, imaginary ``zi``), in place."""
    for m in range(a.shape[0]):
        y, x = _sincos(a[m] * frequency_hz)
        zr[m] = ratio[m] * x
        zi[m] = ratio[m] * y


# Items of a parallel loop that share one set of work arrays (instead of allocating them per
# item, thousands of times a call).
_ITEMS_PER_TASK = 64


@numba.njit(parallel=True, fastmath=True, cache=True)
def line_beam_powers(ratio, advance_s, frequency_hz, line_gain, out):
    """Beam power of a unit line source per grid point and line, from its steering, for
    several sets (e.g. one source position per band) at once::

        out[s, p, k] = | sum_m ratio[s, p, m] exp(i 2 pi f_sk advance[s, p, m])
                         line_gain[s, k, m] |^2

    A line one spacing (``f_s1 - f_s0``) above the previous one has its phase factors stepped
    from it by one complex product each (rounding grows by ~1e-16 a line); any other line is
    computed afresh. The microphones are the inner loop (independent, so it vectorises).

    Parameters
    ----------
    ratio, advance_s : float64 arrays (n_sets, n_points, n_mics)
        The source as seen by each point's steering: amplitude and time advance.
    frequency_hz : float64 array (n_sets, n_lines)
    line_gain : complex128 array (n_sets, n_lines, n_mics)
        What else the chain does to the line at each microphone (1 for nothing).
    out : float64 array (n_sets, n_points, n_lines)
        Filled in place.
    """
    n_s, n_p, n_m = ratio.shape
    n_items = n_s * n_p
    no_image = np.zeros((0, frequency_hz.shape[1], n_m), np.complex128)
    for task in numba.prange((n_items + _ITEMS_PER_TASK - 1) // _ITEMS_PER_TASK):
        work = np.empty((5, n_m))
        for sp in range(task * _ITEMS_PER_TASK, min(n_items, (task + 1) * _ITEMS_PER_TASK)):
            s = sp // n_p
            p = sp % n_p
            _unit_line_powers(ratio[s, p], advance_s[s, p], frequency_hz[s], line_gain[s],
                              no_image, work, out[s, p], 1.0, False)


@numba.njit(fastmath=True, cache=True, inline="always")
def _unit_line_powers(ratio, advance_s, f, line_gain, image_gain, work, dest, weight,
                      accumulate):
    """One point's beam power per line of :func:`line_beam_powers` (its ``out[s, p]``), into
    ``dest`` (n_lines,), or ``weight`` times it added to ``dest`` when ``accumulate``; with
    the ground's path too where ``image_gain`` (2, n_lines, n_mics) has rows
    (:func:`steered_line_powers`)."""
    n_f = f.shape[0]
    a, sr, si, zr, zi = work[0], work[1], work[2], work[3], work[4]
    spacing = f[1] - f[0] if n_f > 1 else 0.0
    _phase_steps(advance_s, spacing, 1.0, a, sr, si)
    for k in range(n_f):
        if k == 0 or abs(f[k] - f[k - 1] - spacing) > 1e-9 * abs(spacing):
            _phasors(ratio, a, f[k], zr, zi)
        if image_gain.shape[0] == 0:
            power = _direct_line(line_gain[k], zr, zi, sr, si)
        else:
            power = _two_path_line(line_gain[k], image_gain[0, k], image_gain[1, k], zr, zi,
                                   sr, si)
        if accumulate:
            dest[k] += weight * power
        else:
            dest[k] = power


@numba.njit(fastmath=True, cache=True, inline="always")
def _direct_line(gain, zr, zi, sr, si):
    """``|sum_m z_m g_m|^2`` of one line, the phasors z then stepped to the next line."""
    re = 0.0
    im = 0.0
    for m in range(zr.shape[0]):
        gr = gain[m].real
        gi = gain[m].imag
        re += zr[m] * gr - zi[m] * gi
        im += zi[m] * gr + zr[m] * gi
        r0 = zr[m]
        zr[m] = r0 * sr[m] - zi[m] * si[m]
        zi[m] = r0 * si[m] + zi[m] * sr[m]
    return re * re + im * im


@numba.njit(fastmath=True, cache=True, inline="always")
def _two_path_line(gain, swept, reflected, zr, zi, sr, si):
    """The expected power ``|A|^2 + 2 Re(conj(A) B) + |C|^2`` of one line (A, B, C the sums of
    z_m times ``gain``, ``swept`` and ``reflected``), the phasors then stepped."""
    ar = ai = br = bi = cr = ci = 0.0
    for m in range(zr.shape[0]):
        xr = zr[m]
        xi = zi[m]
        g = gain[m]
        h = swept[m]
        e = reflected[m]
        ar += xr * g.real - xi * g.imag
        ai += xi * g.real + xr * g.imag
        br += xr * h.real - xi * h.imag
        bi += xi * h.real + xr * h.imag
        cr += xr * e.real - xi * e.imag
        ci += xi * e.real + xr * e.imag
        zr[m] = xr * sr[m] - xi * si[m]
        zi[m] = xr * si[m] + xi * sr[m]
    return ar * ar + ai * ai + 2.0 * (ar * br + ai * bi) + cr * cr + ci * ci


@numba.njit(parallel=True, fastmath=True, cache=True)
def steered_line_powers(amp_g, rx_g, amp_s, rx_s, doppler_s, band_gain, frequency_hz,
                        line_gain, image_gain, u2, weight, beam, auto):
    """The time-domain unit source's beam and autopowers per point and line at one instant
    of the steering model, added with ``weight`` to ``beam`` and ``auto`` (n_sets, n_points,
    n_lines): :func:`line_beam_powers` with ``ratio = amp_g / amp_s * band_gain`` and
    ``advance = (rx_g - rx_s) / doppler_s`` formed per point, and the autopowers
    ``sum_m ratio^2 u2[s, k, m]``.

    Over raised microphones the line also reaches microphone m by the ground, as a copy of
    gain ``z_m`` whose delay sweeps over the window (window mean ``W_m`` of the sweep): with
    the direct sum ``A = sum_m p_m g_m`` (p the steering phasor, g ``line_gain``), ``B = sum_m
    p_m g_m z_m W_m`` and ``C = sum_m p_m g_m z_m`` (``image_gain[s, 0]`` holds ``g z W``,
    ``image_gain[s, 1]`` ``g z``), the expected beam power is ``|A|^2 + 2 Re(conj(A) B) +
    |C|^2`` (:func:`flyover.imaging.ground_gains.ground_gains` states the model); ``u2`` then
    holds ``|g|^2 (1 + 2 Re(z W) + |z|^2)``, the autopowers' share.

    Parameters
    ----------
    amp_g, rx_g : float64 arrays (n_points, n_mics)
        The grid points' amplitude factors and reception times (s).
    amp_s, rx_s, doppler_s : float64 arrays (n_sets, n_mics)
        The source's, and its dt/dtau.
    band_gain : float64 array (n_bands, n_points, n_mics)
        Of the grid points; set s takes row ``s % n_bands`` (the sets of several sources, each
        one set per band, follow one another).
    frequency_hz, line_gain
        As for :func:`line_beam_powers`.
    image_gain : complex128 array (n_sets, 2, n_lines, n_mics), or (n_sets, 0, n_lines, n_mics)
        The reflection's gains of raised microphones; none in free field and over ground plates.
    u2 : float64 array (n_sets, n_lines, n_mics)
        The squared line gains (the expected autopowers' per line and microphone), microphones
        last: the autopowers' sums run along them (1.4x the whole kernel against lines last).
    weight : float
    beam, auto : float64 arrays (n_sets, n_points, n_lines)
        Added to in place.
    """
    n_s = amp_s.shape[0]
    n_bands, n_p, n_m = band_gain.shape
    n_f = frequency_hz.shape[1]
    n_items = n_s * n_p
    for task in numba.prange((n_items + _ITEMS_PER_TASK - 1) // _ITEMS_PER_TASK):
        work = np.empty((5, n_m))
        ratio = np.empty(n_m)
        advance = np.empty(n_m)
        for sp in range(task * _ITEMS_PER_TASK, min(n_items, (task + 1) * _ITEMS_PER_TASK)):
            s = sp // n_p
            p = sp % n_p
            b = s % n_bands
            for m in range(n_m):
                ratio[m] = amp_g[p, m] / amp_s[s, m] * band_gain[b, p, m]
                advance[m] = (rx_g[p, m] - rx_s[s, m]) / doppler_s[s, m]
            _unit_line_powers(ratio, advance, frequency_hz[s], line_gain[s], image_gain[s],
                              work, beam[s, p], weight, True)
            for k in range(n_f):
                acc = 0.0
                for m in range(n_m):
                    acc += ratio[m] * ratio[m] * u2[s, k, m]
                auto[s, p, k] += weight * acc


@numba.njit(cache=True)
def coherent_component(dw, w, iterations, h):
    """The fixed point of ``h = dw + |h|^2 w`` (CLEAN-SC's source component with the CSM's
    diagonal restored), iterated from h = dw until the step falls below 1e-9 of h or
    ``iterations`` steps; whether it converged to finite values.

    Parameters
    ----------
    dw, w : complex128 arrays (n_mics,)
    iterations : int
    h : complex128 array (n_mics,)
        Filled in place.
    """
    n_m = len(dw)
    new = np.empty(n_m, np.complex128)
    h[:] = dw
    converged = False
    for _ in range(iterations):
        step = 0.0
        size = 0.0
        for m in range(n_m):
            x = h[m]
            new[m] = dw[m] + (x.real * x.real + x.imag * x.imag) * w[m]
            d = new[m] - x
            step += d.real * d.real + d.imag * d.imag
            size += new[m].real * new[m].real + new[m].imag * new[m].imag
        h[:] = new
        if not (np.isfinite(step) and np.isfinite(size)):
            return False                    # diverging: its squares overflow
        if np.sqrt(step) <= 1e-9 * np.sqrt(size):
            converged = True
            break
    for m in range(n_m):
        if not (np.isfinite(h[m].real) and np.isfinite(h[m].imag)):
            return False
    return converged


@numba.njit(parallel=True, fastmath=True, cache=True)
def steering_lines(ratio, advance_s, frequency_hz, planes, blocks, quad):
    """The conjugated steering vectors ``conj(v_gm(f)) = ratio[g, m] exp(-i 2 pi f
    advance[g, m])`` of a few lines as CLEAN-SC reads them (planes of the real part, the
    imaginary part and the squared magnitude per point, single precision), and with them the
    beam powers of a CSM given by its block spectra F, ``v^H F F^H v = sum_b |sum_m
    conj(v_gm) F_mb|^2``, while the vectors are at hand (no second pass over them).

    Lines evenly spaced (``f_k = f_0 + k (f_1 - f_0)``) are stepped by one complex product
    each from an exact first line; the products are formed in double precision.

    Parameters
    ----------
    ratio, advance_s : float64 arrays (n_points, n_mics)
    frequency_hz : float64 array (n_lines,)
    planes : float32 array (n_lines, n_points, 3, n_mics)
        Filled in place.
    blocks : float32 array (n_lines, n_blocks, 2, n_mics)
        Real and imaginary parts of each line's block spectra (none: n_blocks = 0).
    quad : float64 array (n_lines, n_points)
        Filled in place with the beam powers (zero without blocks).
    """
    n_g, n_m = ratio.shape
    n_f = frequency_hz.shape[0]
    spacing = frequency_hz[1] - frequency_hz[0] if n_f > 1 else 0.0
    even = True
    for k in range(1, n_f):
        if abs(frequency_hz[k] - frequency_hz[k - 1] - spacing) > 1e-9 * abs(spacing):
            even = False
    for task in numba.prange((n_g + _ITEMS_PER_TASK - 1) // _ITEMS_PER_TASK):
        work = np.empty((5, n_m))
        a, sr, si, zr, zi = work[0], work[1], work[2], work[3], work[4]
        for g in range(task * _ITEMS_PER_TASK, min(n_g, (task + 1) * _ITEMS_PER_TASK)):
            _steer_point(ratio[g], advance_s[g], frequency_hz, spacing, even, planes[:, g],
                         blocks, quad[:, g], a, sr, si, zr, zi)


@numba.njit(fastmath=True, cache=True, inline="always")
def _steer_point(ratio, advance_s, frequency_hz, spacing, even, planes, blocks, quad, a, sr,
                 si, zr, zi):
    """One point's lines of :func:`steering_lines` (its rows of ``planes`` and ``quad``),
    microphones inner: each line's values are written where they lie, in a row."""
    n_m = ratio.shape[0]
    _phase_steps(advance_s, spacing, -1.0, a, sr, si)
    for k in range(frequency_hz.shape[0]):
        if k == 0 or not even:
            _phasors(ratio, a, frequency_hz[k], zr, zi)
        else:
            for m in range(n_m):
                z0 = zr[m]
                zr[m] = z0 * sr[m] - zi[m] * si[m]
                zi[m] = z0 * si[m] + zi[m] * sr[m]
        for m in range(n_m):
            planes[k, 0, m] = zr[m]
            planes[k, 1, m] = zi[m]
            planes[k, 2, m] = ratio[m] * ratio[m]
        power = 0.0
        for b in range(blocks.shape[1]):
            re = 0.0
            im = 0.0
            for m in range(n_m):
                fr = blocks[k, b, 0, m]
                fi = blocks[k, b, 1, m]
                re += zr[m] * fr - zi[m] * fi
                im += zr[m] * fi + zi[m] * fr
            power += re * re + im * im
        quad[k] = power


# CLEAN-SC components held back before every point's map is brought up to date with them: at
# most this many, and only while the bound on how much they raise a map stays under
# CATCH_UP_SHARE of the last peak (above it, most points would need their exact value anyway).
PENDING_COMPONENTS = 16
CATCH_UP_SHARE = 0.25


# Without fastmath: reassociated (vectorised) in the compiling process and not once loaded
# from numba's cache, its single-precision sums came out in another order, and CLEAN-SC's
# levels on the demo moved by up to 0.1 dB with the state of the cache. The demo's pass took
# 20.6 s against 20.2 s.
@numba.njit(cache=True)
def _map_drop(line, g, since, n, hr, hi, weight, lift, n_removed_g):
    """How much pending components ``since..n-1`` lower point g's diagonal-removed map:
    ``(sum_i weight_i |v_g^H h_i|^2 - sum_m |v_gm|^2 (lift[n] - lift[since])_m) / n_removed_g``
    (single-precision products, microphones inner)."""
    n_m = line.shape[2]
    drop = 0.0
    for i in range(since, n):
        re = np.float32(0.0)
        im = np.float32(0.0)
        for m in range(n_m):
            re += line[g, 0, m] * hr[i, m] - line[g, 1, m] * hi[i, m]
            im += line[g, 0, m] * hi[i, m] + line[g, 1, m] * hr[i, m]
        drop += weight[i] * (re * re + im * im)
    for m in range(n_m):
        drop -= line[g, 2, m] * (lift[n, m] - lift[since, m])
    return drop / n_removed_g


# Reassociation (to vectorise sums) without assuming finite values: an overflowing removal
# must still be seen and refused.
_FINITE_UNSAFE_MATH = {"reassoc", "contract", "arcp", "nsz"}


@numba.njit(fastmath=_FINITE_UNSAFE_MATH, cache=True)
def _removed(d, h, gain, out):
    """``out = d - gain h h^H`` off the diagonal (zero on it) for Hermitian ``d``; the sum of
    the magnitudes of its off-diagonal entries (infinite or NaN if the product overflows)."""
    n_m = len(h)
    size = 0.0
    for m in range(n_m):
        out[m, m] = 0.0
        for n in range(m + 1, n_m):
            x = d[m, n] - gain * h[m] * h[n].conjugate()
            out[m, n] = x
            out[n, m] = x.conjugate()
            size += 2.0 * np.sqrt(x.real * x.real + x.imag * x.imag)
    return size


@numba.njit(cache=True)
def _catch_up_all(line, since, n, hr, hi, weight, lift, n_removed, pmap):
    """Every point's map brought up to date with the pending components (``since`` reset)."""
    for g in range(len(pmap)):
        if since[g] < n:
            pmap[g] -= _map_drop(line, g, since[g], n, hr, hi, weight, lift, n_removed[g])
        since[g] = 0


@numba.njit(parallel=True, cache=True)
def remove_point_sources(lines, powers, n_removed, pmap):
    """Each line's diagonal-removed map less that of incoherent point sources at grid points
    (the CSM ``sum_j p_j v_j v_j^H``)::

        pmap[k, g] -= sum_j powers[k, j] (|v_g^H v_j|^2 - sum_m |v_gm|^2 |v_jm|^2)
                      / n_removed[g]

    over the points j with ``powers[k, j] > 0``, in parallel over lines, with the products of
    CLEAN-SC's map updates (:func:`_map_drop`: single precision, microphones inner).

    Parameters
    ----------
    lines : float32 array (n_lines, n_points, 3, n_mics)
        As :func:`clean_lines` reads them.
    powers : float64 array (n_lines, n_points)
    n_removed : float64 array (n_points,)
    pmap : float64 array (n_lines, n_points)
        Reduced in place.
    """
    c, n_g, _, n_m = lines.shape
    for k in numba.prange(c):
        at = np.flatnonzero(powers[k] > 0)
        n = len(at)
        if n == 0:
            continue
        # The sources as pending components: h = v_j (the lines hold conj(v)).
        hr = np.empty((n, n_m), np.float32)
        hi = np.empty((n, n_m), np.float32)
        weight = np.empty(n)
        lift = np.zeros((n + 1, n_m))
        for i in range(n):
            weight[i] = powers[k, at[i]]
            for m in range(n_m):
                hr[i, m] = lines[k, at[i], 0, m]
                hi[i, m] = -lines[k, at[i], 1, m]
                lift[n, m] += weight[i] * (hr[i, m] * hr[i, m] + hi[i, m] * hi[i, m])
        _catch_up_all(lines[k], np.zeros(n_g, np.int64), n, hr, hi, weight, lift, n_removed,
                      pmap[k])


@numba.njit(parallel=True, cache=True)
def clean_lines(lines, s2, n_removed, d, pmap, loop_gain, max_sources, floor, found,
                iterations):
    """CLEAN-SC's iterations, every line of a batch on its own (in parallel): see
    :func:`flyover.imaging.csm.clean_sc`, whose numpy form is the reference in the tests.

    Per line k, until the map's peak falls below ``floor`` of its first peak, no coherent
    component converges, the removal would not lower the off-diagonal magnitude of ``d``, or
    after ``max_sources`` iterations: at the peak g (power P), ``w = v_g / s2[g]``, the
    component h of ``d w / P``, ``loop_gain P h h^H`` (off the diagonal) removed from
    ``d``, ``loop_gain P`` added to ``found`` at g and the component's map removed from
    ``pmap``.

    Parameters
    ----------
    lines : float32 array (n_lines, n_points, 3, n_mics)
        Per line and point, the real and imaginary parts of the conjugated steering vector
        and its squared magnitude, interleaved so that a point's map update reads one
        contiguous row.
    s2, n_removed : float64 arrays (n_points,)
        v^H v and the diagonal-removed normaliser.
    d : complex128 array (n_lines, n_mics, n_mics)
        The CSMs with zero diagonals; reduced in place.
    pmap : float64 array (n_lines, n_points)
        The diagonal-removed maps of ``d``; reduced in place.
    loop_gain, floor : float
    max_sources : int
    found : float64 array (n_lines, n_points)
        Clean powers, added to in place.
    iterations : int array (n_lines,)
        Sources removed per line, filled in place.
    """
    c, n_g, _, n_m = lines.shape
    # A point's map rises at most by weight max|h|^2 s2 / n_removed a component.
    rise = s2 / n_removed
    top_rise = rise.max()
    for k in numba.prange(c):
        iterations[k] = 0
        pmap_k = pmap[k]
        first = pmap_k.max()
        if not first > 0:
            continue
        size = 0.0
        for m in range(n_m):
            for n in range(n_m):
                size += abs(d[k, m, n])
        after = np.empty((n_m, n_m), np.complex128)
        w = np.empty(n_m, np.complex128)
        dw = np.empty(n_m, np.complex128)
        h = np.empty(n_m, np.complex128)
        # The pending components: h (single precision), weights, their cumulative weighted
        # |h|^2 and bound on the rise; a point's map is exact as of ``since``.
        hr = np.empty((PENDING_COMPONENTS, n_m), np.float32)
        hi = np.empty((PENDING_COMPONENTS, n_m), np.float32)
        weight = np.empty(PENDING_COMPONENTS)
        lift = np.zeros((PENDING_COMPONENTS + 1, n_m))
        bound = np.zeros(PENDING_COMPONENTS + 1)
        since = np.zeros(n_g, np.int64)
        n_pending = 0
        p_max = first
        for it in range(max_sources):
            if n_pending and top_rise * bound[n_pending] > CATCH_UP_SHARE * p_max:
                _catch_up_all(lines[k], since, n_pending, hr, hi, weight, lift, n_removed,
                              pmap_k)
                n_pending = 0
            # The peak: the highest bound made exact, then every point whose bound exceeds it.
            j = 0
            top = -np.inf
            for g in range(n_g):
                u = pmap_k[g] + rise[g] * (bound[n_pending] - bound[since[g]])
                if u > top:
                    top = u
                    j = g
            if since[j] < n_pending:
                pmap_k[j] -= _map_drop(lines[k], j, since[j], n_pending, hr, hi, weight, lift,
                                       n_removed[j])
                since[j] = n_pending
            p_max = pmap_k[j]
            for g in range(n_g):
                if (since[g] < n_pending and pmap_k[g] + rise[g] * (
                        bound[n_pending] - bound[since[g]]) > p_max):
                    pmap_k[g] -= _map_drop(lines[k], g, since[g], n_pending, hr, hi, weight,
                                           lift, n_removed[g])
                    since[g] = n_pending
                    if pmap_k[g] > p_max:
                        p_max = pmap_k[g]
                        j = g
            if not p_max > floor * first:
                break
            for m in range(n_m):
                w[m] = complex(lines[k, j, 0, m], -lines[k, j, 1, m]) / s2[j]
            for m in range(n_m):
                acc = 0j
                for n in range(n_m):
                    acc += d[k, m, n] * w[n]
                dw[m] = acc / p_max
            if not coherent_component(dw, w, 50, h):
                break
            gain = loop_gain * p_max
            new = _removed(d[k], h, gain, after)
            if not new < size:              # not lower (or overflowing): nothing removed
                break
            d[k] = after
            size = new
            found[k, j] += gain
            top_a2 = 0.0
            for m in range(n_m):
                hr[n_pending, m] = h[m].real
                hi[n_pending, m] = h[m].imag
                a2 = h[m].real * h[m].real + h[m].imag * h[m].imag
                lift[n_pending + 1, m] = lift[n_pending, m] + gain * a2
                top_a2 = max(top_a2, a2)
            weight[n_pending] = gain
            bound[n_pending + 1] = bound[n_pending] + gain * top_a2
            n_pending += 1
            iterations[k] = it + 1
            if n_pending == PENDING_COMPONENTS:
                _catch_up_all(lines[k], since, n_pending, hr, hi, weight, lift, n_removed,
                              pmap_k)
                n_pending = 0
        _catch_up_all(lines[k], since, n_pending, hr, hi, weight, lift, n_removed, pmap_k)


@numba.njit(cache=True, inline="always")
def _sin_pi(x):
    """sin(pi x), from x less its nearest integer (exact), so that it keeps its relative
    accuracy next to every integer."""
    n = np.floor(x + 0.5)
    s = np.sin(np.pi * (x - n))
    return -s if n % 2.0 != 0.0 else s


@numba.njit(cache=True, inline="always")
def _hann_squared_mean(x, sin_pi_x):
    """Mean of e^(-i 2 pi x u / T) over a window weighted by the squared periodic Hann window,
    from x and sin(pi x) (:func:`_sin_pi`): sinc(x) + 2/3 (sinc(x - 1) + sinc(x + 1)) +
    1/6 (sinc(x - 2) + sinc(x + 2)) (cos^4 is 3/8 + cos(2 pi u / T) / 2 + cos(4 pi u / T) / 8),
    the five sines one up to sign: sin(pi (x - k)) = (-1)^k sin(pi x)."""
    total = 0.0
    for k in range(-2, 3):
        d = x - k
        weight = 1.0 if k == 0 else (2.0 / 3.0 if abs(k) == 1 else 1.0 / 6.0)
        if d == 0.0:
            total += weight
        else:
            total += weight * (sin_pi_x if k % 2 == 0 else -sin_pi_x) / (np.pi * d)
    return total


@numba.njit(parallel=True, cache=True)
def warped_line_autos(power, warp, coef, edges, lines, inverse_gain, first_line, out):
    """The summed chain's autopowers divided line by line by the ground's expected gains: per
    point g and band b, ``sum_m coef[g, m, b] sum_i power[m, i] inverse_gain[g, j(i)]`` over
    the reference's lines i that a time warp by ``s = warp[g, m]`` takes into the band (the
    band sums' rule: ``edges[b, 0] <= i s < edges[b, 1]``, edges in lines), j(i) the band's
    line nearest ``i s``.

    Parameters
    ----------
    power : float64 array (n_mics, n_lines)
        The reference point's power per line and microphone.
    warp : float64 array (n_points, n_mics)
    coef : float64 array (n_points, n_mics, n_bands)
    edges : float64 array (n_bands, 2)
        Band edges in lines (frequency over the line spacing).
    lines : int64 array (n_bands, 2)
        Each band's first line and the line past its last.
    inverse_gain : float64 array (n_points, n_span)
        1 / gain of lines ``first_line`` on.
    first_line : int
    out : float64 array (n_points, n_bands)
        Filled in place.
    """
    n_p, n_m = warp.shape
    n_b = edges.shape[0]
    n_f = power.shape[1]
    for g in numba.prange(n_p):
        for b in range(n_b):
            out[g, b] = 0.0
        for m in range(n_m):
            s = warp[g, m]
            for b in range(n_b):
                lo = lines[b, 0]
                hi = lines[b, 1]
                if hi <= lo:
                    continue
                i0 = min(max(np.int64(np.ceil(edges[b, 0] / s)), 0), n_f)
                i1 = min(max(np.int64(np.ceil(edges[b, 1] / s)), 0), n_f)
                acc = 0.0
                for i in range(i0, i1):
                    j = min(max(np.int64(i * s + 0.5), lo), hi - 1)       # i s >= 0: rounded
                    acc += power[m, i] * inverse_gain[g, j - first_line]
                out[g, b] += coef[g, m, b] * acc


# Lines of a band are evenly spaced: the reflection's phase and the sweep's sine step from line
# to line by a rotation, taken afresh every LINE_RESTART lines (rounding then stays near 1e-14).
LINE_RESTART = 32


@numba.njit(parallel=True, cache=True)
def ground_power_gains(ratio, delay_s, delay_rate, q_re, q_im, freq_hz, duration_s, weights,
                       floor, full, removed):
    """The expected full and diagonal-removed map power relative to free field of a source at
    each grid point, per line, for microphones that also receive the ground's reflection
    (:func:`flyover.imaging.ground_gains.ground_gains` states the model).

    Parameters
    ----------
    ratio, delay_s, delay_rate : float64 arrays (n_points, n_mics)
    q_re, q_im : float64 arrays (n_mics, n_lines)
        The ground's Q per microphone and line.
    freq_hz : float64 array (n_lines,)
        Evenly spaced frequencies.
    duration_s : float
    weights : float64 array (n_mics,)
    floor : float
        The least relative power either gain may take.
    full, removed : float64 arrays (n_points, n_lines)
        Filled in place.
    """
    n_points, n_mics = ratio.shape
    n_lines = freq_hz.shape[0]
    df = freq_hz[1] - freq_hz[0] if n_lines > 1 else 0.0
    s1 = 0.0
    s2 = 0.0
    for m in range(n_mics):
        s1 += weights[m]
        s2 += weights[m] * weights[m]
    # Line by line with the microphones innermost: each microphone's terms are independent
    # (they vectorise, the sweep's divisions included) and are summed afterwards in
    # microphone order, as a loop over microphones, then lines, sums them: bit for bit.
    qr = np.ascontiguousarray(q_re.T)
    qi = np.ascontiguousarray(q_im.T)
    for g in numba.prange(n_points):
        state = np.empty((8, n_mics))
        step_c, step_s, sweep_c, sweep_s = state[0], state[1], state[2], state[3]
        c, s, sin_x, cos_x = state[4], state[5], state[6], state[7]
        terms = np.empty((4, n_mics))
        for m in range(n_mics):
            # The phase -2 pi f delay and the sweep's pi x (x = f rate T) step with the line.
            step_c[m] = np.cos(2.0 * np.pi * df * delay_s[g, m])
            step_s[m] = -np.sin(2.0 * np.pi * df * delay_s[g, m])
            x_step = df * delay_rate[g, m] * duration_s
            sweep_c[m] = np.cos(np.pi * x_step)
            sweep_s[m] = np.sin(np.pi * x_step)
        for j in range(n_lines):
            f = freq_hz[j]
            if j % LINE_RESTART == 0:
                for m in range(n_mics):
                    x = f * delay_rate[g, m] * duration_s
                    phase = -2.0 * np.pi * f * delay_s[g, m]
                    c[m] = np.cos(phase)
                    s[m] = np.sin(phase)
                    sin_x[m] = _sin_pi(x)
                    n = np.floor(x + 0.5)
                    cos_x[m] = np.cos(np.pi * (x - n))
                    if n % 2.0 != 0.0:
                        cos_x[m] = -cos_x[m]
            else:
                for m in range(n_mics):
                    c0, s0 = c[m], s[m]
                    c[m] = c0 * step_c[m] - s0 * step_s[m]
                    s[m] = s0 * step_c[m] + c0 * step_s[m]
                    sx, cx = sin_x[m], cos_x[m]
                    sin_x[m] = sx * sweep_c[m] + cx * sweep_s[m]
                    cos_x[m] = cx * sweep_c[m] - sx * sweep_s[m]
            for m in range(n_mics):
                w = weights[m]
                r = ratio[g, m]
                z_re = r * (qr[j, m] * c[m] - qi[j, m] * s[m])
                z_im = r * (qr[j, m] * s[m] + qi[j, m] * c[m])
                sweep = _hann_squared_mean(f * delay_rate[g, m] * duration_s, sin_x[m])
                terms[0, m] = w * z_re * sweep
                terms[1, m] = w * z_re
                terms[2, m] = w * z_im
                terms[3, m] = w * w * (1.0 + z_re * z_re + z_im * z_im + 2.0 * z_re * sweep)
            zw = 0.0            # Re sum w z W
            sz_re = 0.0         # sum w z
            sz_im = 0.0
            auto = 0.0
            for m in range(n_mics):
                zw += terms[0, m]
                sz_re += terms[1, m]
                sz_im += terms[2, m]
                auto += terms[3, m]
            beam = s1 * s1 + 2.0 * s1 * zw + sz_re * sz_re + sz_im * sz_im
            full[g, j] = max(beam / (s1 * s1), floor)
            removed[g, j] = max((beam - auto) / (s1 * s1 - s2), floor)
