"""What a simulated campaign's sources truly emit, in the terms of the measured levels: per
region, band and emission direction, the band level at 1 m of the sources inside the region.

A source's band power at 1 m (:meth:`PointSource.band_power_pa2`, its rotor at the pass's
own speed and the pass's gain) is shaped by its level pattern in the direction it emits
towards the array (:class:`DipoleLike`; 0 dB without one); the sources inside one region add
as energies, every source for the region 'total'. A region with no source has no truth.
"""

from __future__ import annotations

import numpy as np

from flyover.acoustics.bands import third_octave_bands
from flyover.model.constants import P0_PA, TOTAL
from flyover.sim.scenario import Scenario, pass_source


def body_direction(polar_deg, azimuth_deg) -> np.ndarray:
    """Unit vectors (n, 3) in body axes (x forward, y starboard, z down) from the emission
    polar angle (0 at the nose) and azimuth about the x axis (0 straight down, + starboard),
    as levels.csv gives them."""
    theta, phi = np.deg2rad(np.asarray(polar_deg, float)), np.deg2rad(np.asarray(azimuth_deg,
                                                                                  float))
    return np.stack([np.cos(theta), np.sin(theta) * np.sin(phi),
                     np.sin(theta) * np.cos(phi)], axis=-1)


def region_sources(scenario: Scenario, regions: dict) -> dict[str, list[str]]:
    """The names of the sources inside each region (by their body position), and every source
    for 'total'."""
    out = {name: [s.name for s in scenario.sources if region.contains(np.array(s.body_m))]
           for name, region in regions.items()}
    out[TOTAL] = [s.name for s in scenario.sources]
    return out


def true_levels_db(scenario: Scenario, pass_name: str, rows, regions: dict) -> np.ndarray:
    """The true level at 1 m (dB re 20 uPa) of each row of a levels table.

    Parameters
    ----------
    rows : DataFrame
        ``region``, ``band_hz`` (nominal), ``emission_polar_deg``, ``emission_azimuth_deg``.
    regions : dict of str -> Region

    Returns
    -------
    ndarray, shape (n_rows,)
        NaN where the region holds no source or the band no power.
    """
    flown = next((p for p in scenario.passes if p.name == pass_name), None)
    if flown is None:
        raise KeyError(f"the scenario has no pass '{pass_name}'")
    nominal = np.asarray(rows["band_hz"], float)
    bands = third_octave_bands(float(np.min(nominal)), float(np.max(nominal))) if len(rows) \
        else third_octave_bands(1000, 1000)
    column = {b: k for k, b in enumerate(bands.nominal_hz)}
    power = {s.name: pass_source(s, flown).band_power_pa2(bands, flown.gain_db.get(s.name, 0.0))
             for s in scenario.sources}
    pattern = {s.name: s.directivity for s in scenario.sources}
    direction = body_direction(rows["emission_polar_deg"], rows["emission_azimuth_deg"])
    inside = region_sources(scenario, regions)
    out = np.zeros(len(rows))
    for i, (region, band) in enumerate(zip(rows["region"], nominal)):
        for name in inside.get(region, []):
            gain = 1.0 if pattern[name] is None else float(pattern[name].gain(direction[i]))
            out[i] += power[name][column[band]] * gain
    with np.errstate(divide="ignore"):
        return np.where(out > 0, 10 * np.log10(out / P0_PA ** 2), np.nan)
