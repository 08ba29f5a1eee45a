"""Pass-to-pass statistics of levels (means of dB values, Student-t confidence intervals)."""

from __future__ import annotations

import numpy as np
from scipy import stats

WIDE_INTERVAL_DB = 1.5  # half-width of the 90 % interval beyond which a mean is flagged


def energetic_mean_db(levels_db) -> float:
    """10 lg of the mean of 10**(L/10), NaN entries left out; NaN when none is left."""
    x = np.asarray(levels_db, float)
    x = x[np.isfinite(x)]
    return float(10 * np.log10(np.mean(10 ** (x / 10)))) if x.size else float("nan")


def polar_bin_deg(polar_angle_deg, width_deg: float = 10.0):
    """Centre of the polar-angle bin, bins centred on multiples of ``width_deg`` (90 = overhead)."""
    return np.round(np.asarray(polar_angle_deg, float) / width_deg) * width_deg


def mean_and_interval(values_db, confidence: float = 0.90, uncertainty_db=None, *,
                      shared_db: float = 0.0, bias_db=None) -> dict:
    """Mean, standard deviation and two-sided interval of the mean.

    Without ``uncertainty_db`` the interval is Student t's from the pass-to-pass scatter alone.
    With each value's own standard uncertainty it combines both in quadrature: the scatter's
    t-interval and the normal interval of the values' uncertainty, whose independent part
    (rms over the values, less the shared part) shrinks as 1 / sqrt(n) while ``shared_db``,
    common to every value (fully correlated: GUM 5.2.2 with r = 1, from memory), does not.
    For one value the interval is its own uncertainty's. ``bias_db`` (per value) is a
    one-sided loss the values share (the microphone positions'): its mean raises the upper end.

    Returns a dict with ``mean_db``, ``std_db`` (n - 1 in the denominator), ``n``,
    ``ci_half_width_db`` (NaN for fewer than two values and no uncertainties), ``ci_low_db``,
    ``ci_high_db``, and ``uncertainty_db`` (the mean's standard uncertainty from the values'
    own, NaN without them).
    """
    x = np.asarray(values_db, float)
    keep = np.isfinite(x)
    x = x[keep]
    u = (np.asarray(uncertainty_db, float)[keep] if uncertainty_db is not None
         else np.full(x.size, np.nan))
    n = int(x.size)
    if n == 0:
        return {"mean_db": np.nan, "std_db": np.nan, "n": 0, "ci_half_width_db": np.nan,
                "ci_low_db": np.nan, "ci_high_db": np.nan, "uncertainty_db": np.nan}
    mean = float(np.mean(x))
    std = float(np.std(x, ddof=1)) if n > 1 else np.nan
    half = float(stats.t.ppf(0.5 + confidence / 2, n - 1) * std / np.sqrt(n)) if n > 1 else np.nan
    own = np.nan
    if np.all(np.isfinite(u)):
        independent = max(float(np.mean(u ** 2)) - shared_db ** 2, 0.0)
        own = float(np.sqrt(independent / n + shared_db ** 2))
    if np.isfinite(own):
        half = float(np.hypot(np.nan_to_num(half), stats.norm.ppf(0.5 + confidence / 2) * own))
    bias = 0.0 if bias_db is None else float(np.nanmean(np.asarray(bias_db, float)[keep]))
    return {"mean_db": mean, "std_db": std, "n": n, "ci_half_width_db": half,
            "ci_low_db": mean - half, "ci_high_db": mean + half + np.nan_to_num(bias),
            "uncertainty_db": own}
