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


def mean_and_interval(values_db, confidence: float = 0.90) -> dict:
    """Mean, standard deviation and two-sided Student-t interval of the mean.

    Returns a dict with ``mean_db``, ``std_db`` (n - 1 in the denominator), ``n``,
    ``ci_half_width_db`` (NaN for fewer than two values), ``ci_low_db``, ``ci_high_db``.
    """
    x = np.asarray(values_db, float)
    x = x[np.isfinite(x)]
    n = int(x.size)
    if n == 0:
        return {"mean_db": np.nan, "std_db": np.nan, "n": 0, "ci_half_width_db": np.nan,
                "ci_low_db": np.nan, "ci_high_db": np.nan}
    mean = float(np.mean(x))
    std = float(np.std(x, ddof=1)) if n > 1 else np.nan
    half = float(stats.t.ppf(0.5 + confidence / 2, n - 1) * std / np.sqrt(n)) if n > 1 else np.nan
    return {"mean_db": mean, "std_db": std, "n": n, "ci_half_width_db": half,
            "ci_low_db": mean - half, "ci_high_db": mean + half}
