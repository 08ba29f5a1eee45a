"""``comparisons/A--B/``: one label against another (of the same campaign or of two), per
region, band and polar bin (``levels.csv``), for the overall and A-weighted levels over a band
range common to both (``overall.csv``) and for the single-event metrics (``metrics.csv``)."""

from flyover.io.results import FigureFile, TableFile

FOLDER = "comparisons"

_DIFFERENCE = (
    ("polar_bin_deg", "deg, centre of the 10 deg polar bin (90 = overhead)"),
    ("mean_a_db", "dB, mean over the passes of A (each pass's energetic mean in the bin)"),
    ("mean_b_db", "dB, the same for B"),
    ("n_a", "passes of A with a level"),
    ("n_b", "passes of B with a level"),
    ("difference_db", "dB, mean_b_db - mean_a_db"),
    ("ci90_low_db", "dB, 90 % interval of the difference: the unequal-variance (Welch) t "
                    "interval of the pass-to-pass scatter with the levels' stated "
                    "uncertainties (shared calibration cancelling within one campaign only); "
                    "empty with fewer than two passes a side"),
    ("ci90_high_db", "dB"),
    ("dof", "Welch-Satterthwaite degrees of freedom"),
    ("differs", "the interval excludes zero: B differs from A"),
    ("passes_a", "the passes of A used (rejected ones are left out)"),
    ("passes_b", "the passes of B used"),
)
COMPARED_LEVELS = TableFile("levels.csv", (
    ("region", "region name, or 'total'"),
    ("band_hz", "nominal one-third-octave midband"),
    *_DIFFERENCE), float_format="%.3f", flags=("differs",))
COMPARED_OVERALL = TableFile("overall.csv", (
    ("region", "region name, or 'total'"),
    ("quantity", "'overall' or 'A-weighted'"),
    ("band_range_hz", "the bands summed on both sides: the widest run every pass of A and of B "
                      "supports near overhead"),
    *_DIFFERENCE), float_format="%.3f", flags=("differs",))
# The single-event metrics of event_metrics.csv compared, in this order, with their symbols.
COMPARED_METRIC_NAMES = {"lasmax_db": "LASmax", "lafmax_db": "LAFmax", "lae_db": "LAE",
                         "laeq_db": "LAeq"}
COMPARED_METRICS = TableFile("metrics.csv", (
    ("metric", "a column of event_metrics.csv: " + ", ".join(COMPARED_METRIC_NAMES)),
    *[c for c in _DIFFERENCE if c[0] != "polar_bin_deg"]), float_format="%.3f",
    flags=("differs",))


def pair_folder(name_a: str, name_b: str) -> str:
    """The folder of one comparison inside ``FOLDER``: ``A--B`` (path separators replaced)."""
    safe = [n.replace("/", "_").replace("\\", "_") for n in (name_a, name_b)]
    return f"{safe[0]}--{safe[1]}"


COMPARISON_FIGURE = FigureFile("comparison.png", "B minus A against polar angle, per region: "
                                                 "overall and A-weighted, with 90 % intervals")


# `flyover compare CAMPAIGN --truth`: a simulated campaign's levels against what its sources
# emit (flyover.sim.truth), in FOLDER/TRUTH_FOLDER.
TRUTH_FOLDER = "truth"
MEASURED_MINUS_TRUE = TableFile("measured_minus_true.csv", (
    ("pass", "pass name"),
    ("label", "the pass's label"),
    ("window", "index"),
    ("polar_angle_deg", "deg, the window's angle (90 = overhead)"),
    ("region", "region name, or 'total'"),
    ("band_hz", "nominal one-third-octave midband"),
    ("sources", "the simulated sources inside the region"),
    ("measured_1m_db", "dB re 20 uPa, the level at 1 m (levels.csv's level_1m_db)"),
    ("true_1m_db", "dB re 20 uPa, the sources' band level at 1 m towards the array (their "
                   "level pattern included), energies added"),
    ("difference_db", "dB, measured_1m_db - true_1m_db"),
    ("ci90_low_db", "dB, the measured level's 90 % interval, minus the truth"),
    ("ci90_high_db", "dB"),
    ("within_interval", "the interval holds the truth (0 lies between its ends)"),
    ("resolved", "the region is resolved from every other in the window"),
), float_format="%.3f", flags=("within_interval", "resolved"))
