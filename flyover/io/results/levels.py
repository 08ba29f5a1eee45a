"""``levels.csv``: component levels per window, band and region, at the reference distance."""

from flyover.io.results import TableFile

LEVELS = TableFile("levels.csv", (
    ("window", "index"),
    ("time_utc", "ISO 8601 UTC, emission time of the window centre"),
    ("polar_angle_deg", "deg, between the flight direction and the line from the body origin to "
                        "the array centre (90 = overhead); the window's angle"),
    ("band_hz", "nominal one-third-octave midband"),
    ("region", "region name, or 'total'"),
    ("level_db", "dB re 20 uPa at the reference distance in the reference atmosphere; empty "
                 "where not separable or not measurable"),
    ("level_1m_db", "dB re 20 uPa, source strength at 1 m; empty where level_db is"),
    ("uncertainty_db", "dB, standard uncertainty of both levels (inputs, window scatter and "
                       "leakage)"),
    ("leakage_db", "dB, how far the level moved when a unit source shifted or with the "
                   "method's variant (region_power.csv's stability_db; 0 for 'total'; empty where "
                   "the level is): in uncertainty_db as a rectangular term of that half-width"),
    ("ground_db", "dB, over raised microphones on soft ground: how far the ground correction "
                  "moves when the flow resistivity is off by analysis.uncertainty."
                  "flow_resistivity_factor either way; in uncertainty_db as a rectangular term "
                  "(0 otherwise)"),
    ("position_bias_db", "dB, the mean loss of the level to the microphones' position errors "
                         "and the speed of sound's, 10 lg(e) (k sigma)^2: one-sided (the true "
                         "level lies above), so in ci90_high_db, not in uncertainty_db"),
    ("ci90_low_db", "dB, level_db - 1.645 uncertainty_db: the 90 % interval"),
    ("ci90_high_db", "dB, level_db + 1.645 uncertainty_db + position_bias_db"),
    ("resolved", "the region is resolved from every other in the window (region_power.csv); a "
                 "level that is not is given only when dominant, and not over raised "
                 "microphones (see note)"),
    ("band_valid", "the window can measure the band"),
    ("note", "why a level is empty, or 'dominant, not resolved'"),
    ("height_m", "m above the array centre"),
    ("speed_m_s", "m/s"),
    ("distance_m", "m"),
    ("emission_polar_deg", "deg, body axes: the line from the region's centre (the body origin "
                           "for 'total') to the array centre, from the nose (0) to the tail "
                           "(180)"),
    ("emission_azimuth_deg", "deg, body axes: the same line's angle about the body x axis from "
                             "straight down (0), positive to starboard"),
    ("air_polar_deg", "deg, in the moving air: between the region's velocity through the air "
                      "(ground velocity minus wind) and the direction its sound travels in the "
                      "air to the array centre (0 ahead, 90 abeam)"),
    ("mach_r", "the region's Mach number through the air along that direction (+ approaching)"),
    ("convective_exponent", "n of the region's sources' pressure (1 - M_r)^-n: 2 monopole (the "
                            "chain's) and moving point force, 3 compact quadrupole; levels "
                            "corrected by 20 (n - 2) lg(1 - M_r)"),
    ("convective_amplification_db", "dB, -20 n lg(1 - M_r): what the motion adds at the array "
                                    "(removed from the levels)"),
    ("level_as_heard_db", "dB, level_db with the convective amplification kept: as heard on "
                          "the ground from the moving vehicle, at the reference distance"),
    ("band_absorption_difference_db", "dB, the reference path's absorption integrated over the "
                                      "band (after SAE ARP 5534) minus the pure tone's at the "
                                      "exact midband (ISO 9613-1); analysis.band_absorption "
                                      "says which the levels use"),
    ("plate_correction_db", "dB, the ground plate's measured response minus +6.02 dB in this "
                            "band (array.plate_correction_db), subtracted from the levels"),
), float_format="%.3f", flags=("resolved", "band_valid"))

# Every method the pass runs (analysis.method and its other_methods), for comparison: the same
# columns after the method's name. levels.csv holds the headline method's alone.
LEVELS_BY_METHOD = TableFile("levels_by_method.csv", (
    ("method", "the imaging method"), *LEVELS.columns), float_format="%.3f", flags=LEVELS.flags)
