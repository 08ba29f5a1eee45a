"""``region_power.csv``: per window, region and band, the integrated power at 1 m and its parts."""

from flyover.io.results import TableFile

REGION_POWER = TableFile("region_power.csv", (
    ("window", "index"),
    ("method", "the imaging method (analysis.method, the headline, or one of other_methods)"),
    ("region", "region name, or 'total' for all regions together"),
    ("band_hz", "nominal one-third-octave midband (IEC 61260-1)"),
    ("power_1m_pa2", "Pa^2, band power of the region's sources at 1 m"),
    ("map_sum_pa2", "Pa^2, the region's summed map"),
    ("psf_sum_pa2", "Pa^2, the region's summed map of its unit source"),
    ("unit_power_pa2", "Pa^2, the unit source's band power at 1 m"),
    ("residual_power_pa2", "Pa^2, a deconvolving method's residual integrated over the region "
                           "(included in power_1m_pa2; empty for the others)"),
    ("resolved", "the region is resolved from every other in this window: each pair's midpoint "
                 "lies outside both unit sources' half-power main lobes"),
    ("dominant", "not resolved, but holding at least 10 times the power of the regions it is "
                 "not resolved from"),
    ("stability_db", "dB, how far the level moves when any region's unit source shifts within "
                     "its region to its -1 dB contour, or (CLEAN-SC) without its power re-fit; "
                     "over 1 dB it is not given"),
    ("region_valid", "the level can be given: finite, steady under the shifts, resolved or "
                     "dominant"),
    ("region_note", "why not, or 'dominant, not resolved'"),
    ("main_lobe_width_m", "m, the Rayleigh width 1.22 lambda z / D (for reference)"),
    ("band_valid", "the window can measure the band"),
    ("band_note", "why not"),
), float_format="%.6e", flags=("resolved", "dominant", "region_valid",
                                   "band_valid"))
