"""`flyover array-plan`: what an array layout resolves at a flyover height, per band, before
anything is flown (no recording): the core is :mod:`flyover.imaging.planning`."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from flyover.acoustics.bands import third_octave_bands
from flyover.geometry.frames import SiteFrame
from flyover.imaging.planning import (band_resolution, beam_pattern, body_to_plane,
                                      separable_from_hz)
from flyover.io.csvtable import numeric_column, read_csv_table
from flyover.io.figures import planning_figure, save_figure
from flyover.io.readers import read
from flyover.model.errors import require


def plan_array(layout: Path, *, height_m: float, band_min_hz: float, band_max_hz: float,
               points_body_m=None, heading_deg: float = 90.0, c_m_s: float = 343.0,
               figure: Path | None = None) -> str:
    """The table `flyover array-plan` prints (and the figure it draws)."""
    require(1.0 <= height_m <= 5000.0, "flyover height out of range", "--height-m",
            "metres above the array from 1 to 5000", f"{height_m}")
    require(0 < band_min_hz <= band_max_hz, "band range inverted or not positive", "--bands",
            "MIN MAX in Hz, MIN <= MAX", f"{band_min_hz} {band_max_hz}")
    mics = _layout_enu(layout)
    bands = third_octave_bands(band_min_hz, band_max_hz)
    rows = band_resolution(mics, height_m, bands, c_m_s=c_m_s, points_body_m=points_body_m,
                           heading_deg=heading_deg)
    table = pd.DataFrame([{"band_hz": f"{r.band_hz:g}", "-3 dB width (m)": f"{r.width_m:.2f}",
                           "first minimum (m)": f"{r.first_null_m:.2f}",
                           "max side lobe (dB)": f"{r.max_side_lobe_db:.1f}",
                           **({} if r.separable is None else
                              {"points separate": "yes" if r.separable else "no"})}
                          for r in rows])
    lines = [f"array {layout} ({len(mics)} microphones) under a source {height_m:g} m up, "
             f"c = {c_m_s:g} m/s:", table.to_string(index=False)]
    if points_body_m is not None:
        start = separable_from_hz(rows)
        lines.append("the two points separate " + (f"from {start:g} Hz" if start else
                                                   "in none of these bands"))
    if figure is not None:
        halves = [max(3.0 * r.width_m, 4.0) for r in rows]
        patterns = []
        for r, half in zip(rows, halves):
            axis = np.linspace(-half, half, 81)
            gx, gy = np.meshgrid(axis, axis, indexing="ij")
            pts = np.column_stack([gx.ravel(), gy.ravel()])
            patterns.append(beam_pattern(mics, [0.0, 0.0], pts, height_m, r.frequency_hz,
                                         c_m_s).reshape(81, 81))
        marks = None if points_body_m is None else body_to_plane(points_body_m, heading_deg)
        save_figure(planning_figure(np.stack(patterns), halves, rows,
                                    f"{Path(layout).name}: point-spread of a source "
                                    f"{height_m:g} m above the array centre", marks), figure)
        lines.append(f"wrote {figure}")
    return "\n".join(lines)


def _layout_enu(layout: Path) -> np.ndarray:
    """Microphone positions (n, 3): a site-frame layout as it is, a WGS84 one about its own
    centroid (only relative positions matter here)."""
    df = read_csv_table(layout, "layout")
    site = SiteFrame(0.0, 0.0, 0.0)
    if {"lat_deg", "lon_deg", "height_m"} <= set(df.columns):
        site = SiteFrame(*(float(numeric_column(df, k, layout).mean())
                           for k in ("lat_deg", "lon_deg", "height_m")))
    return read("layout", layout, site=site).enu_m
