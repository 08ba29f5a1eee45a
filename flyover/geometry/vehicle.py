"""The vehicle grid and its regions: rectangles in body axes (x forward, y starboard, z down)
that the maps are made on and the levels integrated over."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flyover.model.errors import require


@dataclass(frozen=True)
class Region:
    """A rectangle of the vehicle grid (body axes x forward, y starboard), e.g. the propulsion.

    ``z_m`` is the grid's plane (body z, down); ``convective_exponent`` n, the power of
    ``1 / (1 - M_r)`` in its sources' pressure under the chain's normalisation (the source's
    waveform in source time, at 1 m): 2 for a monopole and, after Lowson (1965), for a moving
    point force whose waveform is the force's rate of change; 3 for a compact quadrupole
    (from memory). The levels take (1 - M_r)^-n off and the reconstruction puts the same back.
    """

    name: str
    x_m: tuple[float, float]
    y_m: tuple[float, float]
    z_m: float = 0.0
    convective_exponent: float = 2.0

    def __post_init__(self):
        require(0.0 <= self.convective_exponent <= 6.0, "convective exponent out of range",
                f"vehicle.regions.{self.name}.convective_exponent",
                "2 (monopole, moving point force) or 3 (compact quadrupole)",
                f"{self.convective_exponent}")

    @property
    def center_m(self) -> np.ndarray:
        """Centre in body axes, shape (3,), in the grid's plane."""
        return np.array([0.5 * sum(self.x_m), 0.5 * sum(self.y_m), self.z_m])

    def contains(self, points_body_m) -> np.ndarray:
        p = np.asarray(points_body_m, dtype=float)
        return ((p[..., 0] >= self.x_m[0] - 1e-9) & (p[..., 0] <= self.x_m[1] + 1e-9)
                & (p[..., 1] >= self.y_m[0] - 1e-9) & (p[..., 1] <= self.y_m[1] + 1e-9))


@dataclass(frozen=True)
class VehicleGrid:
    """A rectangular grid attached to the vehicle, in body axes (plane z = z_m)."""

    x_m: tuple[float, float]
    y_m: tuple[float, float]
    spacing_m: float
    z_m: float = 0.0

    def __post_init__(self):
        require(self.spacing_m > 0, "grid spacing must be positive", "vehicle.grid.spacing_m",
                "a spacing in metres such as 0.1", f"{self.spacing_m}")
        for axis, (lo, hi) in (("x_m", self.x_m), ("y_m", self.y_m)):
            require(lo <= hi, "grid range inverted", f"vehicle.grid.{axis}", "[min, max]",
                    f"[{lo}, {hi}]")

    @property
    def x_axis_m(self) -> np.ndarray:
        n = int(round((self.x_m[1] - self.x_m[0]) / self.spacing_m)) + 1
        return self.x_m[0] + self.spacing_m * np.arange(n)

    @property
    def y_axis_m(self) -> np.ndarray:
        n = int(round((self.y_m[1] - self.y_m[0]) / self.spacing_m)) + 1
        return self.y_m[0] + self.spacing_m * np.arange(n)

    @property
    def shape(self) -> tuple[int, int]:
        """(n_x, n_y)."""
        return len(self.x_axis_m), len(self.y_axis_m)

    def axis_masks(self, region: Region) -> tuple[np.ndarray, np.ndarray]:
        """Which points of the x and the y axis lie in a region (as :meth:`Region.contains`):
        the region's grid points are their outer product, counted without building the grid."""
        x, y = self.x_axis_m, self.y_axis_m
        return ((x >= region.x_m[0] - 1e-9) & (x <= region.x_m[1] + 1e-9),
                (y >= region.y_m[0] - 1e-9) & (y <= region.y_m[1] + 1e-9))

    def points_m(self) -> np.ndarray:
        """Grid points in body axes, shape (n_x * n_y, 3), x varying slowest."""
        gx, gy = np.meshgrid(self.x_axis_m, self.y_axis_m, indexing="ij")
        return np.stack([gx.ravel(), gy.ravel(), np.full(gx.size, self.z_m)], axis=1)
