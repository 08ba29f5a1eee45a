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
