"""Attitude between logged samples: spherical linear interpolation of rotations.

Each interval between two logged attitudes turns about one fixed axis at a constant rate
(Shoemake 1985, common practice), as :class:`scipy.spatial.transform.Slerp` does; the
interpolation itself runs in a compiled kernel, since the emission-time solver asks for the
attitude at hundreds of thousands of times per iteration (scipy's took two thirds of a simulated
pass).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.spatial.transform import Rotation


@dataclass(frozen=True)
class AttitudeKeys:
    """Logged attitudes and the turn between each consecutive pair.

    Attributes
    ----------
    time_s : ndarray, shape (n,)
        Strictly increasing times of the logged attitudes, s.
    quat_xyzw : ndarray, shape (n, 4)
        The logged rotations as unit quaternions, scalar last.
    step_rotvec : ndarray, shape (n - 1, 3)
        Rotation vector (rad) of each interval's turn, in the body axes of its start.
    """

    time_s: np.ndarray
    quat_xyzw: np.ndarray
    step_rotvec: np.ndarray

    @classmethod
    def from_rotations(cls, time_s, rotations: Rotation) -> "AttitudeKeys":
        """Keys of rotations logged at ``time_s`` (at least two, strictly increasing)."""
        t = np.asarray(time_s, float)
        if t.ndim != 1 or len(t) < 2 or len(rotations) != len(t) or np.any(np.diff(t) <= 0):
            raise ValueError("attitude keys need at least two rotations at strictly "
                             f"increasing times, one each; got {len(t)} times for "
                             f"{len(rotations)} rotations")
        step = (rotations[:-1].inv() * rotations[1:]).as_rotvec()
        return cls(t, rotations.as_quat(), step)

    def __call__(self, time_s) -> Rotation:
        """Rotations at ``time_s`` (shape (m,), within the keys' times, both ends included)."""
        from flyover.geometry._attitude_kernel import slerp_quaternions

        t = np.atleast_1d(np.asarray(time_s, float))
        if t.size and (t.min() < self.time_s[0] or t.max() > self.time_s[-1]):
            raise ValueError(f"attitude asked for at {t.min():.6g} to {t.max():.6g} s, outside "
                             f"the keys' {self.time_s[0]:.6g} to {self.time_s[-1]:.6g} s")
        return Rotation.from_quat(slerp_quaternions(t.ravel(), self.time_s, self.quat_xyzw,
                                                    self.step_rotvec))


def load_compiled() -> None:
    """Load the compiled interpolation for the argument types a track passes it (from numba's
    cache, or compiling it): the warm process of a workflow run does so once, so that its
    forks do not each load it (0.27 s). It is serial: a parallel kernel loaded there would
    start numba's thread pool, which a fork must not inherit."""
    AttitudeKeys.from_rotations([0.0, 1.0], Rotation.identity(2))(0.5)
