"""A piecewise cubic on evenly spaced knots evaluated at every sample, compiled with numba.

The simulator interpolates each path's emission time and amplitude, solved every few dozen
samples, to every sample of every microphone: scipy's evaluation of these (its ``PPoly``) took a
tenth of a pass's simulation, and its (samples, microphones) output another twentieth to copy
into microphone order. This kernel sums the same terms in the same order (constant term first,
powers of the offset from the knot), so that its values are scipy's bit for bit
(tests/test_simulate.py).
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True, parallel=True)
def cubic_at_samples(c, first_knot, knot_step, n_samples):
    """Values (n_rows, n_samples) at samples 0, 1, ... of piecewise cubics whose pieces start
    at ``first_knot + i * knot_step`` (integers); ``c`` (4, n_pieces, n_rows) holds the
    coefficients, highest power first (``scipy.interpolate.PPoly.c``). Samples before the
    first piece or after the last use that piece."""
    n_pieces, n_rows = c.shape[1], c.shape[2]
    out = np.empty((n_rows, n_samples))
    for r in numba.prange(n_rows):
        for k in range(n_samples):
            i = (k - first_knot) // knot_step
            if i < 0:
                i = 0
            elif i > n_pieces - 1:
                i = n_pieces - 1
            s = float(k - (first_knot + i * knot_step))
            value = 0.0
            power = 1.0
            for p in range(4):
                value = value + c[3 - p, i, r] * power
                power *= s
            out[r, k] = value
    return out
