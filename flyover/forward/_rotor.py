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


# The jitter's slow sinusoids, and each harmonic's phasor, are stepped from sample to sample by
# rotations (their sines and cosines by Taylor series), taken afresh every RESTART samples and
# across any larger step (a new microphone's run). The jitter's steps stay below MAX_STEP_RAD
# (its series exact to 1e-18 there); a harmonic's (its shaft angle's and jitter's: 0.19 rad for
# the demo's highest at 25.6 kHz) below MAX_PHASE_STEP_RAD, else it is taken afresh. Three
# harmonics of four jitter terms each, 20 M samples on one core: 0.8 s, from 2.1 s with a cosine
# per harmonic and sample (and the series' divisions); within 3e-12 of the term-by-term formula,
# whose own phase of 2.5e4 rad rounds at that level.
RESTART = 1024
MAX_STEP_RAD = 0.01
MAX_PHASE_STEP_RAD = 0.25


# Taylor coefficients of sin and cos (multiplied, not divided: a division costs several
# multiplications, and these series run tens of millions of times a pass).
_S3, _S5, _S7, _S9, _S11 = (-1 / 6, 1 / 120, -1 / 5040, 1 / 362880, -1 / 39916800)
_C2, _C4, _C6, _C8, _C10, _C12 = (-1 / 2, 1 / 24, -1 / 720, 1 / 40320, -1 / 3628800,
                                  1 / 479001600)


@numba.njit(cache=True, inline="always")
def _sin_cos_small(d):
    """sin and cos of |d| <= 0.25 by their Taylor series (to d^11 and d^12: error < 1e-17)."""
    d2 = d * d
    s = d * (1.0 + d2 * (_S3 + d2 * (_S5 + d2 * (_S7 + d2 * (_S9 + d2 * _S11)))))
    c = 1.0 + d2 * (_C2 + d2 * (_C4 + d2 * (_C6 + d2 * (_C8 + d2 * (_C10 + d2 * _C12)))))
    return s, c


@numba.njit(cache=True, inline="always")
def _sin_cos_tiny(d):
    """sin and cos of |d| <= 0.01 (to d^5 and d^6: error < 1e-18)."""
    d2 = d * d
    return d * (1.0 + d2 * (_S3 + d2 * _S5)), 1.0 + d2 * (_C2 + d2 * (_C4 + d2 * _C6))


@numba.njit(cache=True, parallel=True)
def add_rotor_harmonics(out, tau, rev, orders, amplitudes, starts, rates_hz, phases,
                        jitter_scale):
    """Add ``sum_h a_h cos(2 pi o_h rev + start_h + s sum_q sin(2 pi f_hq tau + phi_hq))`` to
    ``out`` (n,): harmonics h of shaft order ``orders[h]``, each with its own slow jitter."""
    two_pi = 2.0 * math.pi
    n_h, n_q = rates_hz.shape
    # The jitter's sinusoids as one row of lanes, rotated together (a loop the compiler
    # vectorizes).
    rates = np.ascontiguousarray(rates_hz).ravel()
    lane_phases = np.ascontiguousarray(phases).ravel()
    n_lanes = rates.shape[0]
    for block in numba.prange((tau.shape[0] + RESTART - 1) // RESTART):
        sin_j = np.empty(n_lanes)
        cos_j = np.empty(n_lanes)
        cos_h = np.empty(n_h)
        sin_h = np.empty(n_h)
        last_jitter = np.empty(n_h)
        lo = block * RESTART
        hi = min(lo + RESTART, tau.shape[0])
        for i in range(lo, hi):
            step = two_pi * (tau[i] - tau[i - 1]) if i > lo else 0.0
            fresh = i == lo or abs(step) * 3.0 > MAX_STEP_RAD
            turn = two_pi * (rev[i] - rev[i - 1]) if i > lo else 0.0
            if fresh:
                for lane in range(n_lanes):
                    angle = two_pi * rates[lane] * tau[i] + lane_phases[lane]
                    sin_j[lane] = math.sin(angle)
                    cos_j[lane] = math.cos(angle)
            else:
                for lane in range(n_lanes):
                    sd, cd = _sin_cos_tiny(step * rates[lane])
                    s_new = sin_j[lane] * cd + cos_j[lane] * sd
                    cos_j[lane] = cos_j[lane] * cd - sin_j[lane] * sd
                    sin_j[lane] = s_new
            acc = 0.0
            for h in range(n_h):
                jitter = 0.0
                for q in range(n_q):
                    jitter += sin_j[h * n_q + q]
                d = 0.0 if fresh else (orders[h] * turn
                                       + jitter_scale * (jitter - last_jitter[h]))
                if fresh or abs(d) > MAX_PHASE_STEP_RAD:
                    phase = two_pi * orders[h] * rev[i] + starts[h] + jitter_scale * jitter
                    cos_h[h] = math.cos(phase)
                    sin_h[h] = math.sin(phase)
                else:
                    sd, cd = _sin_cos_small(d)
                    c_new = cos_h[h] * cd - sin_h[h] * sd
                    sin_h[h] = sin_h[h] * cd + cos_h[h] * sd
                    cos_h[h] = c_new
                last_jitter[h] = jitter
                acc += amplitudes[h] * cos_h[h]
            out[i] += acc
