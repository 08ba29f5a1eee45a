"""Directivity hemispheres: component levels over polar and azimuth emission angle.

The angles are those of :func:`flyover.geometry.windows.emission_angles_deg` (body axes: polar
from the nose, azimuth about the body x axis from straight down, positive to starboard). The
lower hemisphere is the azimuths from -90 deg (port horizon) to +90 deg (starboard horizon), every
polar angle from 0 to 180 deg. Cells are centred on multiples of the grid's steps; the end cells
(polar 0 and 180, azimuth -90 and +90) are half cells. A cell's level comes only from the windows
that fall in it: cells without a window stay empty, never filled from their neighbours.

The optional smooth fit is a least-squares series of spherical harmonics up to a low degree, in
dB, with the pole along the body x axis (so that the fit's angles are the cells' own), weighted by
each cell's stated uncertainty. It is evaluated at the covered cells only: it smooths, it does
not extrapolate.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from flyover.acoustics.statistics import energetic_mean_db
from flyover.model.errors import require


@dataclass(frozen=True)
class HemisphereSettings:
    """A regular polar x azimuth grid of the lower hemisphere (cell centres on multiples of the
    steps, in degrees), the degree of the optional smooth fit (None: no fit) and the band ranges
    drawn (empty: each label's overall band range)."""

    polar_step_deg: float = 10.0
    azimuth_step_deg: float = 10.0
    fit_degree: int | None = None
    band_ranges_hz: tuple[tuple[float, float], ...] = ()

    def __post_init__(self):
        for key, step in (("polar_step_deg", self.polar_step_deg),
                          ("azimuth_step_deg", self.azimuth_step_deg)):
            require(0 < step <= 90 and abs(90 / step - round(90 / step)) < 1e-9,
                    "hemisphere step must divide 90 deg", f"analysis.hemisphere.{key}",
                    "a step in degrees such as 5, 10, 15 or 30", f"{step}")
        require(self.fit_degree is None or 0 <= self.fit_degree <= 8,
                "spherical-harmonic degree out of range", "analysis.hemisphere.fit_degree",
                "an integer from 0 to 8 (low orders only), or none", f"{self.fit_degree}")

    @property
    def polar_deg(self) -> np.ndarray:
        """Cell centres in polar angle, 0 to 180 deg."""
        return np.arange(round(180 / self.polar_step_deg) + 1) * self.polar_step_deg

    @property
    def azimuth_deg(self) -> np.ndarray:
        """Cell centres in azimuth, -90 to +90 deg."""
        n = round(90 / self.azimuth_step_deg)
        return np.arange(-n, n + 1) * self.azimuth_step_deg

    def cell_of(self, polar_deg, azimuth_deg) -> tuple[np.ndarray, np.ndarray]:
        """Centres of the cells holding each pair of angles; NaN for an azimuth beyond the
        horizon (more than half a step past +-90 deg: above the vehicle)."""
        polar = np.round(np.asarray(polar_deg, float) / self.polar_step_deg) * self.polar_step_deg
        az = np.round(np.asarray(azimuth_deg, float) / self.azimuth_step_deg) \
            * self.azimuth_step_deg
        return polar + 0.0, np.where(np.abs(az) <= 90.0 + 1e-9, az + 0.0, np.nan)  # no -0


def hemisphere_cells(levels: pd.DataFrame, grid: HemisphereSettings, *,
                     value: str = "level_1m_db") -> pd.DataFrame:
    """The level of every covered cell per region and band.

    Parameters
    ----------
    levels : DataFrame
        Rows of window levels with columns ``pass``, ``region``, ``band_hz``,
        ``emission_polar_deg``, ``emission_azimuth_deg``, ``value`` and ``uncertainty_db`` (the
        level's standard uncertainty in dB). Rows without a level are left out.
    grid : HemisphereSettings
    value : str
        The level column averaged (dB).

    Returns
    -------
    DataFrame
        One row per region, band and covered cell: ``polar_deg``, ``azimuth_deg`` (cell
        centres), ``level_db`` (energetic mean of the cell's windows over every pass),
        ``uncertainty_db``, ``n_windows``, ``n_passes``, ``passes``. The uncertainty combines,
        in quadrature, the windows' rms stated uncertainty over sqrt(passes) (what a pass's
        windows share does not average out within the pass) and the standard deviation of the
        passes' own cell means over sqrt(passes) (zero for one pass).
    """
    cols = ["region", "band_hz", "polar_deg", "azimuth_deg", "level_db", "uncertainty_db",
            "n_windows", "n_passes", "passes"]
    d = levels[np.isfinite(pd.to_numeric(levels[value], errors="coerce"))].copy()
    if len(d) == 0:
        return pd.DataFrame(columns=cols)
    d["polar_deg"], d["azimuth_deg"] = grid.cell_of(d["emission_polar_deg"],
                                                    d["emission_azimuth_deg"])
    d = d[np.isfinite(d["azimuth_deg"])]
    rows = []
    for key, g in d.groupby(["region", "band_hz", "polar_deg", "azimuth_deg"], sort=True):
        values = g[value].to_numpy(float)
        # Each pass's windows in their order, the passes sorted (a groupby per cell cost a
        # millisecond each, most of the step).
        passes, which = np.unique(g["pass"].to_numpy(), return_inverse=True)
        per_pass = np.array([energetic_mean_db(values[which == i]) for i in range(len(passes))])
        n_passes = len(passes)
        stated = float(np.sqrt(np.mean(g["uncertainty_db"].to_numpy(float) ** 2)))
        spread = float(np.std(per_pass, ddof=1)) if n_passes > 1 else 0.0
        rows.append(dict(zip(cols[:4], key), level_db=energetic_mean_db(values),
                         uncertainty_db=float(np.hypot(stated, spread) / np.sqrt(n_passes)),
                         n_windows=len(g), n_passes=n_passes, passes=" ".join(passes)))
    return pd.DataFrame(rows, columns=cols)


def harmonic_basis(polar_deg, azimuth_deg, degree: int) -> np.ndarray:
    """Real spherical harmonics up to ``degree`` (pole along body x), shape (n, (degree+1)^2):
    for each degree l the order-0 function, then the real and imaginary parts of orders 1..l."""
    from scipy.special import sph_harm_y  # scipy.special's import is slow; few steps fit
    theta = np.deg2rad(np.asarray(polar_deg, float))
    phi = np.deg2rad(np.asarray(azimuth_deg, float))
    columns = []
    for n in range(degree + 1):
        columns.append(sph_harm_y(n, 0, theta, phi).real)
        for m in range(1, n + 1):
            y = sph_harm_y(n, m, theta, phi)
            columns += [y.real, y.imag]
    return np.stack(columns, axis=-1)


def fit_cells(cells: pd.DataFrame, degree: int) -> np.ndarray:
    """The smooth fit's level at each covered cell of one region and band (dB), NaN when the
    cells are too few for the degree (fewer than twice its (degree+1)^2 terms).

    Weighted least squares of ``level_db`` with weights 1 / uncertainty (cells without a stated
    uncertainty weigh as the median); the design matrix is :func:`harmonic_basis`.
    """
    n_terms = (degree + 1) ** 2
    if len(cells) < 2 * n_terms:
        return np.full(len(cells), np.nan)
    a = harmonic_basis(cells["polar_deg"], cells["azimuth_deg"], degree)
    u = cells["uncertainty_db"].to_numpy(float)
    u = np.where(np.isfinite(u) & (u > 0), u, np.nanmedian(u) if np.any(u > 0) else 1.0)
    w = 1.0 / u
    coef, *_ = np.linalg.lstsq(a * w[:, None], cells["level_db"].to_numpy(float) * w,
                               rcond=None)
    return a @ coef


def band_range_cells(cells: pd.DataFrame, bands_hz) -> pd.DataFrame:
    """Per region and cell, the level summed over a band range, with the rms of the bands'
    uncertainties (errors shared by the bands do not average out): only cells with a level in
    every band of the range (never a sum over fewer bands)."""
    bands = set(float(b) for b in bands_hz)
    d = cells[cells["band_hz"].astype(float).isin(bands)]
    g = d.groupby(["region", "polar_deg", "azimuth_deg"])
    out = pd.concat([g["level_db"].apply(lambda v: 10 * np.log10(np.sum(10 ** (v / 10)))),
                     g["uncertainty_db"].apply(lambda u: float(np.sqrt(np.mean(u ** 2)))),
                     g["band_hz"].nunique().rename("n_bands")], axis=1)
    return out[out["n_bands"] == len(bands)].drop(columns="n_bands").reset_index()
