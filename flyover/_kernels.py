"""Compiled inner loops (numba). Arrays in, arrays out; no Python objects inside.

Set ``NUMBA_DISABLE_JIT=1`` to run them as plain Python for debugging.
"""

from __future__ import annotations

import numba
import numpy as np

SINC_HALF_WIDTH = 16       # taps each side: 32-tap windowed sinc
SINC_KAISER_BETA = 7.0     # about -70 dB for content below 0.4 fs (Kaiser's design formula)
SINC_TABLE_STEPS = 1024    # table points per sample; linear lookup error ~1e-6


def sinc_table(half_width: int = SINC_HALF_WIDTH, beta: float = SINC_KAISER_BETA,
               steps: int = SINC_TABLE_STEPS) -> np.ndarray:
    """Kaiser-windowed sinc sampled every 1/steps sample on [0, half_width], float64."""
    x = np.arange(half_width * steps + 2) / steps
    w = np.kaiser(2 * half_width * steps + 1, beta)[half_width * steps:]
    w = np.concatenate([w, [0.0]])
    return np.sinc(x) * w


@numba.njit(cache=True, fastmath=False)
def interp_sinc(signal, positions, table, half_width, steps):
    """Band-limited interpolation of a uniformly sampled signal at fractional sample positions.

    Positions closer than ``half_width`` samples to either end use the available taps only.
    """
    n = signal.shape[0]
    out = np.empty(positions.shape[0], dtype=np.float64)
    for k in range(positions.shape[0]):
        x = positions[k]
        i0 = int(np.floor(x))
        acc = 0.0
        for i in range(i0 - half_width + 1, i0 + half_width + 1):
            if i < 0 or i >= n:
                continue
            u = abs(x - i) * steps
            j = int(u)
            if j >= table.shape[0] - 1:
                continue
            f = u - j
            acc += signal[i] * (table[j] * (1.0 - f) + table[j + 1] * f)
        out[k] = acc
    return out


@numba.njit(cache=True)
def interp_cubic(signal, positions):
    """4-point (cubic) Lagrange interpolation at fractional sample positions (clamped at ends)."""
    n = signal.shape[0]
    out = np.empty(positions.shape[0], dtype=np.float64)
    for k in range(positions.shape[0]):
        x = positions[k]
        i = int(np.floor(x))
        if i < 1:
            i = 1
        elif i > n - 3:
            i = n - 3
        d = x - i
        ym1, y0, y1, y2 = signal[i - 1], signal[i], signal[i + 1], signal[i + 2]
        cm1 = -d * (d - 1.0) * (d - 2.0) / 6.0
        c0 = (d + 1.0) * (d - 1.0) * (d - 2.0) / 2.0
        c1 = -(d + 1.0) * d * (d - 2.0) / 2.0
        c2 = (d + 1.0) * d * (d - 1.0) / 6.0
        out[k] = cm1 * ym1 + c0 * y0 + c1 * y1 + c2 * y2
    return out


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
    n_grid, n_mics, n_nodes = rx_pos.shape
    n_out = out.shape[2]
    inv = 1.0 / step
    for g in numba.prange(n_grid):
        for m in range(n_mics):
            sig = signals[m]
            for j in range(n_nodes - 1):
                k0 = j * step
                if k0 >= n_out:
                    break
                k1 = min(k0 + step, n_out)
                p0 = rx_pos[g, m, j]
                dp = (rx_pos[g, m, j + 1] - p0) * inv
                a0 = amp[g, m, j]
                da = np.float32((amp[g, m, j + 1] - a0) * inv)
                # Walk the reception position incrementally: integer part and fraction apart,
                # so the loop needs no float-to-int conversion per sample.
                i = int(p0)
                frac = p0 - i
                a = a0
                for k in range(k0, k1):
                    d = np.float32(frac)
                    ym1 = sig[i - 1]
                    y0 = sig[i]
                    y1 = sig[i + 1]
                    y2 = sig[i + 2]
                    # 4-point Lagrange in Horner form (same polynomial, fewer operations).
                    c1 = y1 - np.float32(1.0 / 3.0) * ym1 - np.float32(0.5) * y0 \
                        - np.float32(1.0 / 6.0) * y2
                    c2 = np.float32(0.5) * (ym1 + y1) - y0
                    c3 = np.float32(1.0 / 6.0) * (y2 - ym1) + np.float32(0.5) * (y0 - y1)
                    out[g, m, k] = a * (((c3 * d + c2) * d + c1) * d + y0)
                    a += da
                    frac += dp
                    while frac >= 1.0:
                        frac -= 1.0
                        i += 1
