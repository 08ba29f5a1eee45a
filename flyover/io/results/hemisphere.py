"""``hemispheres/<label>/hemisphere.csv`` and ``hemisphere.nc``: a label's directivity
hemispheres, as a table and as a NetCDF cube (xarray, h5netcdf engine, CF-style attributes).

The cube's dimensions are ``region``, ``band_hz``, ``polar_deg`` and ``azimuth_deg`` (every cell
of the grid, covered or not: an uncovered cell holds NaN and ``n_windows`` 0).
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from flyover.io.atomic import atomic_path
from flyover.io.results import FigureFile, TableFile

FOLDER = "hemispheres"
CUBE_NAME = "hemisphere.nc"


def label_folders(labels) -> dict[str, str]:
    """Each label's folder name: the label itself with path separators and characters that no
    file system takes replaced by '_' ('unlabelled' for passes without one); labels that would
    share a folder get the number of their first appearance appended."""
    out: dict[str, str] = {}
    for label in dict.fromkeys(labels):
        name = re.sub(r'[/\\:*?"<>|\x00-\x1f]', "_", label).strip(" .") or "unlabelled"
        if name in out.values():
            name = f"{name}-{len(out) + 1}"
        out[label] = name
    return out


HEMISPHERE = TableFile("hemisphere.csv", (
    ("label", "configuration label"),
    ("region", "region name, or 'total'"),
    ("band_hz", "nominal one-third-octave midband"),
    ("polar_deg", "deg, cell centre: emission polar angle from the nose (body x), 0-180"),
    ("azimuth_deg", "deg, cell centre: emission azimuth about body x from straight down, "
                    "positive to starboard, -90 to 90"),
    ("level_db", "dB re 20 uPa at 1 m, free field, no absorption: energetic mean of the cell's "
                 "windows"),
    ("uncertainty_db", "dB, standard uncertainty: the windows' rms stated uncertainty and the "
                       "spread of the passes' cell means, each over sqrt(passes)"),
    ("n_windows", "windows in the cell"),
    ("n_passes", "passes with a window in the cell"),
    ("passes", "their names"),
    ("fit_db", "dB, the smooth spherical-harmonic fit at this cell (a fit, not a measurement; "
               "empty without one)"),
    ("fit_residual_db", "dB, level_db - fit_db"),
), float_format="%.3f")

HEMISPHERE_FIGURE = FigureFile("hemisphere.png", "hemispheres")
COVERAGE_FIGURE = FigureFile("coverage.png", "coverage")
FILES = (HEMISPHERE.name, CUBE_NAME, HEMISPHERE_FIGURE.name, COVERAGE_FIGURE.name)
_VARIABLES = {
    "level_db": {"long_name": "component band level at 1 m, free field", "units": "dB",
                 "reference": "20 uPa"},
    "uncertainty_db": {"long_name": "standard uncertainty of level_db", "units": "dB"},
    "n_windows": {"long_name": "number of analysed windows in the cell", "units": "1"},
    "n_passes": {"long_name": "number of passes with a window in the cell", "units": "1"},
    "fit_db": {"long_name": "spherical-harmonic fit of level_db (a fit, not a measurement)",
               "units": "dB", "reference": "20 uPa"},
}
_COORDS = {
    "band_hz": {"long_name": "nominal one-third-octave midband frequency", "units": "Hz"},
    "polar_deg": {"long_name": "emission polar angle from the vehicle nose (body x axis), "
                               "cell centre", "units": "degree"},
    "azimuth_deg": {"long_name": "emission azimuth about the body x axis from straight down, "
                                 "positive to starboard, cell centre", "units": "degree"},
    "region": {"long_name": "vehicle region (component)"},
}


def hemisphere_cube(table: pd.DataFrame, *, regions, band_hz, polar_deg, azimuth_deg,
                    attrs: dict) -> xr.Dataset:
    """The table of covered cells as a full cube over the grid (uncovered cells NaN)."""
    index = pd.MultiIndex.from_product(
        [list(regions), np.asarray(band_hz, float), np.asarray(polar_deg, float),
         np.asarray(azimuth_deg, float)], names=["region", "band_hz", "polar_deg", "azimuth_deg"])
    t = table.assign(band_hz=table["band_hz"].astype(float),
                     polar_deg=table["polar_deg"].astype(float),
                     azimuth_deg=table["azimuth_deg"].astype(float))
    full = t.set_index(index.names)[list(_VARIABLES)].reindex(index)
    full[["n_windows", "n_passes"]] = full[["n_windows", "n_passes"]].fillna(0).astype(np.int32)
    ds = xr.Dataset.from_dataframe(full)
    ds["region"] = ds["region"].astype(str)
    for name, a in {**_VARIABLES, **_COORDS}.items():
        ds[name].attrs.update(a)
    ds.attrs.update({"Conventions": "CF-1.10", **attrs})
    return ds


def write_cube(folder, ds: xr.Dataset) -> Path:
    """Write the cube as NetCDF-4 (atomically, like every result)."""
    path = Path(folder) / CUBE_NAME
    with atomic_path(path) as tmp:
        ds.to_netcdf(tmp, engine="h5netcdf")
    return path
