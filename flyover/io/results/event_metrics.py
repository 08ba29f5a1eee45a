"""Single-event metrics of a pass as received at its reference microphone.

``event_metrics.csv``: one row; ``level_history.csv``: the F- and S-weighted A levels every
10 ms; ``band_history.csv``: one-third-octave band levels every 0.5 s.
"""

from flyover.io.results import FigureFile, TableFile

SHORTFALL = ("dB, how much LAE may miss where the 10 dB-down interval is cut short: estimated "
             "for a straight flight whose sound falls off by spherical spreading beyond the cut "
             "(0 when complete, inf where the cut may hold the peak)")

LEVEL_HISTORY_FIGURE = FigureFile("level_history.png",
                                  "A-weighted level and band levels against time")
EVENT_METRICS = TableFile("event_metrics.csv", (
    ("channel", "layout channel of the reference microphone"),
    ("lafmax_db", "dB(A) re 20 uPa, maximum of the F-weighted level (IEC 61672-1, 125 ms)"),
    ("lafmax_utc", "ISO 8601 UTC of it, as received"),
    ("lasmax_db", "dB(A) re 20 uPa, maximum of the S-weighted level (1 s)"),
    ("lasmax_utc", "ISO 8601 UTC of it, as received"),
    ("lae_db", "dB(A) re 20 uPa and 1 s, sound exposure level over the 10 dB-down interval"),
    ("ten_db_down_start_utc", "ISO 8601 UTC where L_AS first comes within 10 dB of LASmax"),
    ("ten_db_down_end_utc", "ISO 8601 UTC where it last is"),
    ("ten_db_down_s", "s, the 10 dB-down duration"),
    ("ten_db_down_complete", "false where the recording cuts the interval short"),
    ("lae_shortfall_db", SHORTFALL),
    ("laeq_db", "dB(A) re 20 uPa, equivalent level over the span analysed"),
    ("laeq_duration_s", "s, that span"),
    ("as_measured", "levels as the microphone measured them (a ground-plate microphone "
                    "includes the pressure doubling)"),
), float_format="%.3f", flags=("ten_db_down_complete",))

LEVEL_HISTORY = TableFile("level_history.csv", (
    ("time_utc", "ISO 8601 UTC, as received"),
    ("time_s", "s after the pass epoch"),
    ("laf_db", "dB(A), F-weighted"),
    ("las_db", "dB(A), S-weighted"),
), float_format="%.3f")

BAND_HISTORY = TableFile("band_history.csv", (
    ("time_utc", "ISO 8601 UTC of the 0.5 s block's centre, as received"),
    ("time_s", "s after the pass epoch"),
    ("band_hz", "nominal one-third-octave midband"),
    ("level_db", "dB re 20 uPa, mean square over the block"),
), float_format="%.3f")

RECONSTRUCTED = TableFile("reconstructed_metrics.csv", (
    ("route", "'measured' (the microphone, in the analysed bands), 'rebuilt on the measured "
              "path', 'measured over the rebuilt stretch' (the check, like for like), "
              "'reference flight', 'adjusted measurement' (certification-style "
              "height and speed adjustments of the measured levels, all frequencies), "
              "'adjusted measurement, analysed bands' (the same over the bands the "
              "reconstruction holds), or 'reference flight minus adjusted measurement' (the "
              "two routes compared like for like: analysed bands, and empty unless the "
              "reference observer has the array's mounting)"),
    ("component", "region name, 'components' (their sum), or 'total' (all regions together)"),
    ("lasmax_db", "dB(A) re 20 uPa"),
    ("lae_db", "dB(A) re 20 uPa and 1 s, over the 10 dB-down interval"),
    ("ten_db_down_s", "s"),
    ("complete", "the 10 dB-down interval lies inside the span reconstructed or measured"),
    ("lae_shortfall_db", SHORTFALL),
    ("height_m", "m, of the flight (above the observer's ground)"),
    ("speed_m_s", "m/s"),
    ("observer", "'ground-plate' or 'raised' (1.2 m over hard ground)"),
    ("note", "how the row was obtained"),
), float_format="%.3f", flags=("complete",))
