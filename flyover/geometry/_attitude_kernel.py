"""Compiled spherical linear interpolation (imported only when an attitude is interpolated,
so steps that never do so skip loading numba)."""

from __future__ import annotations

import math

import numba
import numpy as np


# Serial: the imaging asks for a few attitudes thousands of times a pass, where starting a
# parallel loop costs more than the loop.
@numba.njit(cache=True)
def slerp_quaternions(t, key_t, key_q, step_rotvec):
    """Quaternions (m, 4), scalar last, at times ``t`` (m,) between keys ``key_t`` (n,) with
    quaternions ``key_q`` (n, 4) and turns ``step_rotvec`` (n - 1, 3): the key's rotation
    followed by the fraction of the interval's turn, in scipy's arithmetic order."""
    out = np.empty((t.shape[0], 4))
    n = key_t.shape[0]
    for i in range(t.shape[0]):
        # The interval whose end is the first key at or after t (its start for the first key).
        k = max(np.searchsorted(key_t, t[i]) - 1, 0)
        k = min(k, n - 2)
        alpha = (t[i] - key_t[k]) / (key_t[k + 1] - key_t[k])
        rx = step_rotvec[k, 0] * alpha
        ry = step_rotvec[k, 1] * alpha
        rz = step_rotvec[k, 2] * alpha
        angle = math.sqrt(rx * rx + ry * ry + rz * rz)
        if angle <= 1e-3:   # Taylor series of sin(a/2)/a, as scipy's from_rotvec
            a2 = angle * angle
            scale = 0.5 - a2 / 48 + a2 * a2 / 3840
        else:
            scale = math.sin(angle / 2) / angle
        qx, qy, qz, qw = rx * scale, ry * scale, rz * scale, math.cos(angle / 2)
        px, py, pz, pw = key_q[k, 0], key_q[k, 1], key_q[k, 2], key_q[k, 3]
        out[i, 0] = pw * qx + qw * px + (py * qz - pz * qy)
        out[i, 1] = pw * qy + qw * py + (pz * qx - px * qz)
        out[i, 2] = pw * qz + qw * pz + (px * qy - py * qx)
        out[i, 3] = pw * qw - px * qx - py * qy - pz * qz
    return out
