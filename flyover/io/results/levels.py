"""``levels.csv``: component levels per window, band and region, at the reference distance."""

from flyover.io.results import TableFile

LEVELS = TableFile("levels.csv", (
    ("window", "index"),
    ("time_utc", "ISO 8601 UTC, emission time of the window centre"),
    ("polar_angle_deg", "deg"),
    ("band_hz", "nominal one-third-octave midband"),
    ("region", "region name, or 'total'"),
    ("level_db", "dB re 20 uPa at the reference distance in the reference atmosphere; empty "
                 "where not separable or not measurable"),
    ("level_1m_db", "dB re 20 uPa, source strength at 1 m; empty where level_db is"),
    ("uncertainty_db", "dB, standard uncertainty of both levels (inputs and window scatter)"),
    ("ci90_low_db", "dB, level_db - 1.645 uncertainty_db: the 90 % interval"),
    ("ci90_high_db", "dB, level_db + 1.645 uncertainty_db"),
    ("resolved", "region centres at least one main-lobe width apart"),
    ("band_valid", "the window can measure the band"),
    ("note", "why a level is empty"),
    ("height_m", "m above the array centre"),
    ("speed_m_s", "m/s"),
    ("distance_m", "m"),
), float_format="%.3f")
