"""``rotor_tones.csv`` and ``band_parts.csv``: each rotor's harmonics per window, and the band
levels split into their rotors' tonal part and the broadband rest."""

from flyover.acoustics.orders import SEPARATION_CORRELATION
from flyover.io.results import FigureFile, TableFile

ROTOR_TONES_FIGURE = FigureFile("rotor_tones.png", "rotor harmonics against polar angle")
ROTOR_TONES = TableFile("rotor_tones.csv", (
    ("window", "index"),
    ("time_utc", "ISO 8601 UTC, emission time of the window centre"),
    ("polar_angle_deg", "deg, the window's (90 = overhead)"),
    ("rotor", "rotor name (vehicle.rotors)"),
    ("harmonic", "k: the k-th blade-passing harmonic"),
    ("order", "shaft order, k x blades"),
    ("frequency_hz", "Hz at emission: the order times the mean shaft speed over the window"),
    ("level_1m_db", "dB re 20 uPa rms at 1 m, free field (path absorption undone); empty when "
                    "not separable or not above the noise"),
    ("level_db", "dB re 20 uPa at the reference distance in the reference atmosphere"),
    ("uncertainty_db", "dB, standard uncertainty of the level from the fit's covariance and "
                       "the residual's spectrum near the tone (the noise's bias is taken off "
                       "the level)"),
    ("phase_deg", "deg, of the cosine at the window's first sample against the shaft angle "
                  "integrated from the logged speed since the pass epoch (no once-per-rev "
                  "mark: comparable between harmonics of one window only)"),
    ("snr_db", "dB, the tone over the fit's residual near its frequency; under 6 dB the "
               "level is not given"),
    ("separable", "false when another component's fit column (exp(2 pi i order "
                  f"revolutions) over the window) correlates with this one's above "
                  f"{SEPARATION_CORRELATION:g}"),
    ("column_correlation", "the largest such correlation (0 to 1)"),
    ("note", "why a level is empty"),
), float_format="%.3f", flags=("separable",))

BAND_PARTS = TableFile("band_parts.csv", (
    ("window", "index"),
    ("polar_angle_deg", "deg"),
    ("region", "region name, or 'total'"),
    ("band_hz", "nominal one-third-octave midband"),
    ("level_1m_db", "dB at 1 m, the band level (levels.csv)"),
    ("tonal_1m_db", "dB at 1 m, the power of the rotors' separated harmonics in the band, of "
                    "the rotors whose hub lies in the region; empty without any"),
    ("broadband_1m_db", "dB at 1 m, the band level minus its tonal part; empty when a tone in "
                        "the band is not separable or carries the whole band"),
    ("broadband_db", "dB at the reference distance, the same correction as the band level"),
    ("note", "why a part is empty"),
), float_format="%.3f")
