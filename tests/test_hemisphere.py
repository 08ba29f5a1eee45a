"""Directivity hemispheres: cells, means, the fit, the files, and the chain on simulated passes."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
import yaml
from conftest import TINY_SCENARIO

from flyover.acoustics.hemisphere import (HemisphereSettings, band_range_cells, fit_cells,
                                          hemisphere_cells)
from flyover.forward.moving_source import DipoleLike
from flyover.model.errors import FlyoverInputError


def window_rows(pass_name, polar, azimuth, level, uncertainty=0.5, band=500.0, region="r"):
    return pd.DataFrame({"pass": pass_name, "region": region, "band_hz": band,
                         "emission_polar_deg": polar, "emission_azimuth_deg": azimuth,
                         "level_1m_db": level, "uncertainty_db": uncertainty})


def test_cells_are_centred_on_the_steps_and_end_at_the_horizon():
    grid = HemisphereSettings(10.0, 15.0)
    assert grid.polar_deg[[0, -1]].tolist() == [0.0, 180.0] and len(grid.polar_deg) == 19
    assert grid.azimuth_deg[[0, -1]].tolist() == [-90.0, 90.0] and len(grid.azimuth_deg) == 13
    polar, az = grid.cell_of([84.9, 85.1, 3.0], [-33.7, 7.4, 97.6])
    assert polar.tolist() == [80.0, 90.0, 0.0]
    assert az[0] == -30.0 and az[1] == 0.0 and np.isnan(az[2])   # 97.6 deg: above the horizon
    with pytest.raises(FlyoverInputError, match="divide 90"):
        HemisphereSettings(polar_step_deg=7.0)


def test_cell_level_is_the_energetic_mean_with_its_uncertainty_by_hand():
    rows = pd.concat([window_rows("a", [88.0, 91.0], [1.0, -2.0], [70.0, 73.0], 0.4),
                      window_rows("b", [92.0], [3.0], [72.0], 0.7),
                      window_rows("b", [120.0], [3.0], [np.nan], 0.7)])   # no level: left out
    cells = hemisphere_cells(rows, HemisphereSettings())
    assert len(cells) == 1
    cell = cells.iloc[0]
    assert (cell["polar_deg"], cell["azimuth_deg"], cell["n_windows"], cell["n_passes"]) == \
        (90.0, 0.0, 3, 2)
    assert cell["passes"] == "a b"
    # 10 lg of the mean of 10^(L/10) over the three windows.
    assert cell["level_db"] == pytest.approx(10 * np.log10((1e7 + 10 ** 7.3 + 10 ** 7.2) / 3))
    # Stated: rms(0.4, 0.4, 0.7); spread: std of the passes' means (ddof 1); both over sqrt(2).
    mean_a = 10 * np.log10((1e7 + 10 ** 7.3) / 2)
    stated = np.sqrt((0.16 + 0.16 + 0.49) / 3)
    spread = np.std([mean_a, 72.0], ddof=1)
    assert cell["uncertainty_db"] == pytest.approx(np.hypot(stated, spread) / np.sqrt(2))


def test_fit_reproduces_a_low_degree_field_and_stays_on_the_covered_cells():
    # A level field 80 + 4 cos(polar) + 2 sin(polar) cos(azimuth) dB is of degree one in
    # spherical harmonics about the x axis (x = cos polar, z = sin polar cos azimuth), so a
    # degree-1 fit returns it exactly on any cells that pin it down; degree 0 cannot.
    polar, az = np.meshgrid(np.arange(40.0, 141.0, 10.0), np.arange(-30.0, 31.0, 10.0))
    cells = pd.DataFrame({"polar_deg": polar.ravel(), "azimuth_deg": az.ravel(),
                          "uncertainty_db": 0.5})
    t, p = np.deg2rad(cells["polar_deg"]), np.deg2rad(cells["azimuth_deg"])
    cells["level_db"] = 80 + 4 * np.cos(t) + 2 * np.sin(t) * np.cos(p)
    np.testing.assert_allclose(fit_cells(cells, 1), cells["level_db"], atol=1e-9)
    assert np.abs(fit_cells(cells, 0) - cells["level_db"]).max() > 1.0
    # Too few cells for the degree: no fit rather than a wild one.
    assert np.isnan(fit_cells(cells.iloc[:7], 2)).all()


def test_band_range_sums_only_cells_with_every_band():
    cells = pd.DataFrame({"region": "r", "polar_deg": [90.0, 90.0, 100.0],
                          "azimuth_deg": 0.0, "band_hz": [500.0, 630.0, 500.0],
                          "level_db": [60.0, 60.0, 60.0], "uncertainty_db": [0.3, 0.4, 0.3]})
    summed = band_range_cells(cells, [500.0, 630.0])
    assert summed["polar_deg"].tolist() == [90.0]
    assert summed["level_db"].iloc[0] == pytest.approx(60 + 10 * np.log10(2))
    assert summed["uncertainty_db"].iloc[0] == pytest.approx(np.sqrt((0.09 + 0.16) / 2))


def test_label_folders_take_any_label():
    from flyover.io.results.hemisphere import label_folders
    folders = label_folders(["cruise 60/low", "", "cruise 60_low", "cruise 60/low"])
    assert folders == {"cruise 60/low": "cruise 60_low", "": "unlabelled",
                       "cruise 60_low": "cruise 60_low-3"}


# A single source with a known pattern, symmetric about the vertical plane of the body (its axis
# is in the x-z plane), flown over at three lateral offsets and once in the opposite direction.
# Tones (one per band) make every window's level deterministic: the check is the geometry and the
# pattern, not the random scatter of noise bands.
PATTERN = DipoleLike((0.5, 0.0, 0.866), 0.75)
TONES_HZ = (250.0, 400.0, 630.0)   # below 0.1 fs: every window measures them
# Calm air: in a wind the simulated vehicle crabs, turning the body axes (and the azimuths the
# checks below work out from the ground track) by the crab angle.
_PASS = {"label": "h", "speed_m_s": 25.0, "height_m": 30.0, "duration_s": 4.4,
         "atmosphere": {"temperature_c": 15.0, "relative_humidity_pct": 70.0}}
# The tiny campaign's site, array, recorder and GNSS (conftest), with this source and passes.
HEMI_SCENARIO = {
    **{k: TINY_SCENARIO[k] for k in ("site", "array", "recording", "gnss")},
    "name": "hemisphere test campaign",
    "sources": [{"name": "rotor", "body_m": [0.5, 0.0, 0.0],
                 "tones": [{"frequency_hz": f, "level_db": 90.0} for f in TONES_HZ],
                 "directivity": {"axis_body": list(PATTERN.axis_body),
                                 "dipole_fraction": PATTERN.dipole_fraction}}],
    "passes": {
        "right": {**_PASS, "heading_deg": 90.0, "cross_offset_m": 20.0,
                  "recording_start_utc": "2026-06-01T10:00:00.000Z", "clock_offset_s": 0.1},
        "centre": {**_PASS, "heading_deg": 90.0,
                   "recording_start_utc": "2026-06-01T10:03:00.000Z", "clock_offset_s": 0.1},
        "left": {**_PASS, "heading_deg": 90.0, "cross_offset_m": -20.0,
                 "recording_start_utc": "2026-06-01T10:06:00.000Z", "clock_offset_s": 0.1},
        # Flown west on the same ground line as 'right' (its left is south).
        "back": {**_PASS, "heading_deg": 270.0, "cross_offset_m": -20.0,
                 "recording_start_utc": "2026-06-01T10:09:00.000Z", "clock_offset_s": 0.1},
    },
    "campaign": {
        "vehicle": {"grid": {"x_m": [-1.0, 2.0], "y_m": [-1.0, 1.0], "spacing_m": 0.5},
                    "regions": {"rotor": {"x_m": [0.0, 1.0], "y_m": [-0.5, 0.5]}}},
        "analysis": {"window_s": 0.25, "hop_s": 0.25, "band_min_hz": 250,
                     "band_max_hz": 630, "reference_distance_m": 50.0,
                     "max_polar_offset_deg": 45.0,
                     "reference_atmosphere": {"temperature_c": 25.0,
                                              "relative_humidity_pct": 70.0},
                     "hemisphere": {"polar_step_deg": 10, "azimuth_step_deg": 10,
                                    "fit_degree": 1}},
        "output": "results",
    },
}


@pytest.fixture(scope="module")
def hemisphere_run(tmp_path_factory):
    from flyover.io.config import load_campaign
    from flyover.pipeline import align, hemispheres, image, levels
    from flyover.sim.demo import write_campaign
    folder = tmp_path_factory.mktemp("hemi")
    (folder / "scenario.yaml").write_text(yaml.safe_dump(HEMI_SCENARIO))
    write_campaign(folder / "scenario.yaml", folder, progress=lambda *_: None)
    campaign = load_campaign(folder / "campaign.yaml")
    for name in campaign.passes:
        out = campaign.output / name
        align.run(campaign, name, out)
        image.run(campaign, name, out, threads=2, quiet=True)
        levels.run(campaign, name, out)
    _signed(campaign, rejected=())
    hemispheres.run(campaign, campaign.output)
    return campaign


def _signed(campaign, rejected):
    """The sign-off the workflow writes before the hemispheres: every pass accepted but
    ``rejected`` (the other checks are not run here)."""
    import pandas as pd
    from flyover.io.results.signoff import SIGNOFF
    SIGNOFF.write(campaign.output, pd.DataFrame(
        [{"pass": n, "label": p.label, "status": "rejected" if n in rejected else "accepted",
          "reasons": ""} for n, p in campaign.passes.items()], columns=SIGNOFF.column_names))


def pattern_truth_db(levels: pd.DataFrame) -> np.ndarray:
    """The source's level at 1 m towards each window's emission angles (body axes)."""
    t = np.deg2rad(levels["emission_polar_deg"].to_numpy(float))
    p = np.deg2rad(levels["emission_azimuth_deg"].to_numpy(float))
    e = np.stack([np.cos(t), np.sin(t) * np.sin(p), np.sin(t) * np.cos(p)], axis=1)
    return 90.0 + PATTERN.gain_db(e)


@pytest.mark.slow
def test_offset_passes_see_the_array_at_their_azimuth(hemisphere_run):
    # 'right' flies 20 m right (south) of the array at 30 m: the array is below-left, port,
    # so -atan(20/30) = -33.69 deg; 'left' +33.69; 'back' flies west on the 'right' line and
    # sees the array to starboard: +33.69 (the mirror image); 'centre' straight down.
    expected = {"right": -33.69, "centre": 0.0, "left": 33.69, "back": 33.69}
    for name, az in expected.items():
        rows = rotor_rows(hemisphere_run, [name])
        assert len(rows) > 0
        np.testing.assert_allclose(rows["emission_azimuth_deg"], az, atol=0.5, err_msg=name)


def rotor_rows(campaign, names) -> pd.DataFrame:
    from flyover.io.results.levels import LEVELS
    rows = pd.concat([LEVELS.read(campaign.output / n).assign(**{"pass": n}) for n in names],
                     ignore_index=True)
    return rows[rows["region"] == "rotor"]


@pytest.mark.slow
def test_covered_cells_follow_the_known_pattern_within_1_db(hemisphere_run):
    from flyover.io.results.hemisphere import HEMISPHERE
    rows = rotor_rows(hemisphere_run, list(hemisphere_run.passes)).dropna(subset=["level_1m_db"])
    rows = rows[rows["band_hz"].isin(TONES_HZ)]             # the bands the source radiates in
    # The truth of a cell is the pattern averaged (energetically) over the angles of the windows
    # that fell in it: the same cells, with each window's level replaced by the pattern's.
    truth = hemisphere_cells(rows.assign(level_1m_db=pattern_truth_db(rows)),
                             hemisphere_run.analysis.hemisphere)
    table = HEMISPHERE.read(hemisphere_run.output / "hemispheres" / "h")
    cells = table[(table["region"] == "rotor") & table["band_hz"].isin(TONES_HZ)]
    merged = cells.merge(truth, on=["region", "band_hz", "polar_deg", "azimuth_deg"],
                         suffixes=("", "_truth"))
    assert len(merged) == len(cells) == len(truth) >= 3 * 3 * 9    # 3 rows, 3 bands, 9 cells
    assert set(merged["azimuth_deg"]) == {-30.0, 0.0, 30.0}
    err = merged["level_db"] - merged["level_db_truth"]
    assert np.abs(err).max() < 1.0, merged.loc[np.abs(err).idxmax()]
    # The pattern spans several dB over these cells: the check can tell a pattern from none.
    assert merged["level_db_truth"].max() - merged["level_db_truth"].min() > 3.0
    assert set(table["region"]) == {"rotor", "total"} and (table["n_windows"] >= 1).all()


@pytest.mark.slow
def test_opposite_directions_land_in_mirrored_azimuths_and_agree(hemisphere_run):
    # 'right' (east) and 'back' (west) fly the same ground line: the array is to port of one and
    # to starboard of the other. For a source symmetric about the body's vertical plane each
    # cell of one equals the mirrored cell of the other.
    grid = hemisphere_run.analysis.hemisphere
    right = hemisphere_cells(rotor_rows(hemisphere_run, ["right"]), grid)
    back = hemisphere_cells(rotor_rows(hemisphere_run, ["back"]), grid)
    assert set(right["azimuth_deg"]) == {-30.0} and set(back["azimuth_deg"]) == {30.0}
    key = ["band_hz", "polar_deg"]
    both = right.merge(back, on=key, suffixes=("_right", "_back"))
    both = both[both["band_hz"].isin(TONES_HZ)]
    assert len(both) >= 3 * 9                                      # 3 bands, 9 polar cells
    assert np.abs(both["level_db_right"] - both["level_db_back"]).max() < 0.5


@pytest.mark.slow
def test_the_netcdf_cube_opens_with_xarray_and_carries_units(hemisphere_run):
    from flyover.io.results.hemisphere import HEMISPHERE
    folder = hemisphere_run.output / "hemispheres" / "h"
    with xr.open_dataset(folder / "hemisphere.nc", engine="h5netcdf") as ds:
        assert ds["level_db"].dims == ("region", "band_hz", "polar_deg", "azimuth_deg")
        assert ds["level_db"].attrs["units"] == "dB"
        assert ds["polar_deg"].attrs["units"] == "degree"
        assert ds["band_hz"].attrs["units"] == "Hz"
        assert ds.attrs["Conventions"].startswith("CF-")
        table = HEMISPHERE.read(folder)
        row = table.iloc[0]
        cell = ds["level_db"].sel(region=row["region"], band_hz=row["band_hz"],
                                  polar_deg=row["polar_deg"], azimuth_deg=row["azimuth_deg"])
        assert float(cell) == pytest.approx(row["level_db"], abs=1e-3)
        # Cells no window reached are empty in the cube, never filled in.
        assert int((ds["n_windows"] == 0).sum()) > 0
        assert bool(np.isnan(ds["level_db"].where(ds["n_windows"] == 0)).all())
    for name in ("hemisphere.png", "coverage.png"):
        assert (folder / name).stat().st_size > 10_000


@pytest.mark.slow
def test_a_rejected_pass_is_left_out_of_its_labels_hemisphere(hemisphere_run, tmp_path):
    import shutil
    from flyover.pipeline import hemispheres
    from dataclasses import replace
    campaign = replace(hemisphere_run, output=tmp_path / "results")
    shutil.copytree(hemisphere_run.output, campaign.output)
    first, *others = campaign.passes
    _signed(campaign, rejected=(first,))
    hemispheres.run(campaign, campaign.output)
    with xr.open_dataset(campaign.output / "hemispheres" / "h" / "hemisphere.nc",
                         engine="h5netcdf") as ds:
        assert ds.attrs["passes"].split() == others
        assert ds.attrs["passes_rejected"] == first
