"""Compiled evaluation of a rotor's shaft angle and blade-passing harmonics at emission times.

A simulated pass asks for them at every microphone's every sample (tens of millions of times);
numpy's transcendental functions and its temporaries made this two thirds of the simulation.
The arithmetic is the formula of :class:`flyover.forward.moving_source.RotorTones`, term by term.
"""

from __future__ import annotations

import math

import numba
import numpy as np


@numba.njit(cache=True, parallel=True)
def shaft_revolutions(t, grid, speed, cum, zero):
    """Revolutions at times ``t`` of a speed linear between ``grid`` times (``speed`` in rev/s,
    ``cum`` its integral up to each grid time), less ``zero`` (the integral up to t = 0). The
    grid must reach beyond every time."""
    out = np.empty(t.shape[0])
    last = grid.shape[0] - 2
    for i in numba.prange(t.shape[0]):
        k = min(max(np.searchsorted(grid, t[i], side="right") - 1, 0), last)
        at = speed[k] + (t[i] - grid[k]) * (speed[k + 1] - speed[k]) / (grid[k + 1] - grid[k])
        out[i] = cum[k] + (t[i] - grid[k]) * 0.5 * (speed[k] + at) - zero
    return out


@numba.njit(cache=True, parallel=True)
def add_rotor_harmonics(out, tau, rev, orders, amplitudes, starts, rates_hz, phases,
                        jitter_scale):
    """Add ``sum_h a_h cos(2 pi o_h rev + start_h + s sum_q sin(2 pi f_hq tau + phi_hq))`` to
    ``out`` (n,): harmonics h of shaft order ``orders[h]``, each with its own slow jitter."""
    two_pi = 2.0 * math.pi
    for i in numba.prange(tau.shape[0]):
        acc = 0.0
        for h in range(orders.shape[0]):
            jitter = 0.0
            for q in range(rates_hz.shape[1]):
                jitter += math.sin(two_pi * rates_hz[h, q] * tau[i] + phases[h, q])
            acc += amplitudes[h] * math.cos(two_pi * orders[h] * rev[i] + starts[h]
                                            + jitter_scale * jitter)
        out[i] += acc
