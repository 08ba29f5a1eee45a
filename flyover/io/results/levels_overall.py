"""``levels_overall.csv``: overall and A-weighted sums per window and region."""

from flyover.io.results import TableFile

LEVELS_OVERALL = TableFile("levels_overall.csv", (
    ("window", "index"),
    ("time_utc", "ISO 8601 UTC"),
    ("polar_angle_deg", "deg"),
    ("region", "region name, or 'total'"),
    ("overall_db", "dB re 20 uPa at the reference distance"),
    ("a_weighted_db", "dB(A) re 20 uPa (IEC 61672-1)"),
    ("bands_summed", "number of bands in the sums"),
    ("band_range_hz", "lowest-highest nominal band of the range summed: one range per label and "
                      "region (analysis.overall_band_range_hz, or the widest run of at least "
                      "three bands with a level in 75 % of the windows within 30 deg of "
                      "overhead of every pass of the label)"),
    ("note", "why an overall is empty"),
    ("uncertainty_db", "dB, standard uncertainty of the A-weighted level from its bands' "
                       "(independent bands, first order)"),
), float_format="%.3f")
