"""Compiled evaluation of a rotor's shaft angle and blade-passing harmonics at emission times.

A simulated pass asks for them at every microphone's every sample (tens of millions of times);
numpy's transcendental functions and its temporaries made this two thirds of the simulation.
The arithmetic is the formula of :class:`flyover.forward.moving_source.RotorTones`, term by term.
"""

from __future__ import annotations

import math

import numba
import numpy as np


# Serial: the tones step asks for a window's shaft angles at a time (a parallel loop's start
# would cost more than it).
@numba.njit(cache=True)
def shaft_revolutions(t, grid, speed, cum, zero):
    """Revolutions at times ``t`` of a speed linear between ``grid`` times (``speed`` in rev/s,
    ``cum`` its integral up to each grid time), less ``zero`` (the integral up to t = 0). The
    grid must reach beyond every time."""
    out = np.empty(t.shape[0])
    last = grid.shape[0] - 2
    for i in range(t.shape[0]):
        k = min(max(np.searchsorted(grid, t[i], side="right") - 1, 0), last)
        at = speed[k] + (t[i] - grid[k]) * (speed[k + 1] - speed[k]) / (grid[k + 1] - grid[k])
        out[i] = cum[k] + (t[i] - grid[k]) * 0.5 * (speed[k] + at) - zero
    return out


# The jitter's slow sinusoids are stepped from sample to sample by rotations through the small
# phase step (its sine and cosine by their Taylor series, exact to 1e-18 below MAX_STEP_RAD),
# taken afresh every RESTART samples and across any larger step (a new microphone's run): the
# kernel took 4.2 s instead of 7.3 s on a demo pass on one core, within 1e-14 of a sine each.
RESTART = 1024
MAX_STEP_RAD = 0.01


@numba.njit(cache=True, parallel=True)
def add_rotor_harmonics(out, tau, rev, orders, amplitudes, starts, rates_hz, phases,
                        jitter_scale):
    """Add ``sum_h a_h cos(2 pi o_h rev + start_h + s sum_q sin(2 pi f_hq tau + phi_hq))`` to
    ``out`` (n,): harmonics h of shaft order ``orders[h]``, each with its own slow jitter."""
    two_pi = 2.0 * math.pi
    n_h, n_q = rates_hz.shape
    for block in numba.prange((tau.shape[0] + RESTART - 1) // RESTART):
        sin_j = np.empty((n_h, n_q))
        cos_j = np.empty((n_h, n_q))
        lo = block * RESTART
        hi = min(lo + RESTART, tau.shape[0])
        for i in range(lo, hi):
            step = two_pi * (tau[i] - tau[i - 1]) if i > lo else 0.0
            fresh = i == lo or abs(step) * 3.0 > MAX_STEP_RAD
            acc = 0.0
            for h in range(n_h):
                jitter = 0.0
                for q in range(n_q):
                    if fresh:
                        angle = two_pi * rates_hz[h, q] * tau[i] + phases[h, q]
                        sin_j[h, q] = math.sin(angle)
                        cos_j[h, q] = math.cos(angle)
                    else:
                        d = step * rates_hz[h, q]
                        d2 = d * d
                        sd = d * (1.0 - d2 / 6.0 * (1.0 - d2 / 20.0))
                        cd = 1.0 - d2 / 2.0 * (1.0 - d2 / 12.0 * (1.0 - d2 / 30.0))
                        s_new = sin_j[h, q] * cd + cos_j[h, q] * sd
                        cos_j[h, q] = cos_j[h, q] * cd - sin_j[h, q] * sd
                        sin_j[h, q] = s_new
                    jitter += sin_j[h, q]
                acc += amplitudes[h] * math.cos(two_pi * orders[h] * rev[i] + starts[h]
                                                + jitter_scale * jitter)
            out[i] += acc
