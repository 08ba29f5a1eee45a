"""Stage: per campaign label, directivity hemispheres of every region from all its passes.

Writes, in ``hemispheres/<label>/`` of the output folder: ``hemisphere.csv`` (every covered
cell per region and band), ``hemisphere.nc`` (the same as a cube over the whole grid),
``hemisphere.png`` (maps per region and band range) and ``coverage.png`` (which cells the
passes reach, and each pass's line of windows across the grid).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from flyover.acoustics.bands import third_octave_bands
from flyover.acoustics.hemisphere import band_range_cells, fit_cells, hemisphere_cells
from flyover.io.figures import coverage_figure, hemisphere_figure, save_figure
from flyover.io.results.hemisphere import (COVERAGE_FIGURE, FOLDER, HEMISPHERE,
                                           HEMISPHERE_FIGURE, hemisphere_cube, label_folders,
                                           write_cube)
from flyover.io.results.levels import LEVELS
from flyover.io.results.signoff import signoff_statuses
from flyover.campaign import Campaign
from flyover.model.constants import TOTAL
from flyover.model.reads import guarded
from flyover.pipeline._overall import label_band_ranges

# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = ("passes", "regions", "analysis.hemisphere", "analysis.overall_band_range_hz",
         "analysis.band_min_hz", "analysis.band_max_hz")


def run(campaign: Campaign, out_dir: Path) -> None:
    """Write every label's hemisphere files (see the module docstring)."""
    campaign = guarded(campaign, READS, stage="hemispheres")
    out_dir = Path(out_dir)
    grid = campaign.analysis.hemisphere
    folders = label_folders(p.label for p in campaign.passes.values())
    rejected = {n for n, s in signoff_statuses(out_dir).items() if s == "rejected"}
    for label, folder in folders.items():
        # Passes the sign-off rejected are left out (the cube's attributes name those used),
        # unless every pass of the label was.
        of_label = [n for n, p in campaign.passes.items() if p.label == label]
        names = [n for n in of_label if n not in rejected] or of_label
        tables = [LEVELS.read(out_dir / n) for n in names]
        levels = pd.concat([t.assign(**{"pass": n}) for n, t in zip(names, tables)],
                           ignore_index=True)
        regions = [*campaign.regions, TOTAL]
        table = label_table(levels, grid, label)
        dest = out_dir / FOLDER / folder
        HEMISPHERE.write(dest, table)
        bands = third_octave_bands(campaign.analysis.band_min_hz,
                                   campaign.analysis.band_max_hz).nominal_hz
        write_cube(dest, hemisphere_cube(
            table, regions=regions, band_hz=bands, polar_deg=grid.polar_deg,
            azimuth_deg=grid.azimuth_deg,
            attrs={"title": f"flyover directivity hemispheres, label {label}",
                   "label": label, "passes": " ".join(names),
                   "passes_rejected": " ".join(n for n in of_label if n in rejected),
                   "polar_step_deg": grid.polar_step_deg,
                   "azimuth_step_deg": grid.azimuth_step_deg,
                   "fit_degree": -1 if grid.fit_degree is None else grid.fit_degree,
                   "comment": "body axes: polar from the nose, azimuth about x from straight "
                              "down, positive to starboard; uncovered cells are NaN, never "
                              "extrapolated"}))
        panels = range_panels(table, label_ranges(campaign, tables, regions), grid.fit_degree)
        save_figure(hemisphere_figure(panels, grid.polar_deg, grid.azimuth_deg, label),
                    HEMISPHERE_FIGURE.path(dest))
        counts, traces = coverage(levels, grid)
        save_figure(coverage_figure(counts, traces, grid.polar_deg, grid.azimuth_deg, label),
                    COVERAGE_FIGURE.path(dest))


def label_table(levels: pd.DataFrame, grid, label: str) -> pd.DataFrame:
    """hemisphere.csv of one label: the covered cells, with the fit where one is asked for."""
    cells = hemisphere_cells(levels, grid)
    cells.insert(0, "label", label)
    cells["fit_db"] = np.nan
    if grid.fit_degree is not None:
        for _, idx in cells.groupby(["region", "band_hz"]).groups.items():
            cells.loc[idx, "fit_db"] = fit_cells(cells.loc[idx], grid.fit_degree)
    cells["fit_residual_db"] = cells["level_db"] - cells["fit_db"]
    return cells[HEMISPHERE.column_names]


def label_ranges(campaign: Campaign, tables, regions) -> dict:
    """Band ranges drawn per region: the campaign's ``analysis.hemisphere.band_ranges_hz``, else
    the label's overall band range (the summary's)."""
    chosen = campaign.analysis.hemisphere.band_ranges_hz
    if chosen:
        return {r: list(chosen) for r in regions}
    found = label_band_ranges(campaign, tables)
    return {r: [found[r]] for r in regions if found.get(r) is not None}


def range_panels(table: pd.DataFrame, ranges: dict, fit_degree: int | None) -> list:
    """(title, cells, fit cells) per region and band range, for :func:`hemisphere_figure`."""
    panels = []
    for region, spans in ranges.items():
        part = table[table["region"] == region]
        for lo, hi in spans:
            cells = band_range_cells(part, third_octave_bands(lo, hi).nominal_hz)
            fit = None
            if fit_degree is not None and len(cells):
                fit = cells.assign(fit_db=fit_cells(cells, fit_degree))
                fit["fit_residual_db"] = fit["level_db"] - fit["fit_db"]
            panels.append((f"{region}, {lo:g}-{hi:g} Hz", cells, fit))
    return panels


def coverage(levels: pd.DataFrame, grid) -> tuple[pd.DataFrame, dict]:
    """Windows per cell (from the body origin's angles) and each pass's trace of windows."""
    origin = levels[levels["region"] == TOTAL].drop_duplicates(["pass", "window"])
    polar, azimuth = grid.cell_of(origin["emission_polar_deg"], origin["emission_azimuth_deg"])
    counts = (origin.assign(polar_deg=polar, azimuth_deg=azimuth)
              .dropna(subset=["azimuth_deg"])
              .groupby(["polar_deg", "azimuth_deg"]).size().rename("n_windows").reset_index())
    traces = {n: (g["emission_polar_deg"].to_numpy(float), g["emission_azimuth_deg"]
                  .to_numpy(float)) for n, g in origin.sort_values("window").groupby("pass")}
    return counts, traces
