"""``campaign_levels.csv`` and ``campaign_overall.csv``: means over the passes of each label."""

from flyover.io.results import FigureFile, TableFile

_STATISTICS = (
    ("polar_bin_deg", "deg, centre of the 10 deg polar bin"),
    ("mean_db", "dB, mean over passes of the passes' energetic bin means"),
    ("std_db", "dB, standard deviation over passes"),
    ("n_passes", "passes with a level"),
    ("ci_half_width_db", "dB, half-width of the 90 % interval of the mean: the Student-t "
                         "interval of the pass-to-pass scatter and the passes' own stated "
                         "uncertainties (levels.csv) combined in quadrature"),
    ("uncertainty_db", "dB, the mean's standard uncertainty from the passes' stated ones: "
                       "their independent part over sqrt(passes), the part all share "
                       "(calibration_shared_db) whole"),
    ("ci_low_db", "dB"),
    ("ci_high_db", "dB"),
    ("passes", "names of the passes averaged (rejected passes are left out)"),
    ("passes_flagged", "those of them the sign-off flagged (signoff.csv says why)"),
    ("wide_interval", "interval wider than +-1.5 dB"),
)
CAMPAIGN_FIGURE = FigureFile("campaign_overall.png", "campaign A-weighted levels")
CAMPAIGN_LEVELS = TableFile("campaign_levels.csv", (
    ("label", "configuration label"), ("region", "region name, or 'total'"),
    ("band_hz", "nominal midband")) + _STATISTICS, float_format="%.3f")
CAMPAIGN_OVERALL = TableFile("campaign_overall.csv", (
    ("label", "configuration label"), ("region", "region name, or 'total'"),
    ("band_range_hz", "the nominal bands summed, lowest-highest (one range per label and "
                      "region)"),
    ("quantity", "'overall' or 'A-weighted'")) + _STATISTICS, float_format="%.3f")
