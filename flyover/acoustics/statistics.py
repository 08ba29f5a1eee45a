"""Pass-to-pass statistics of levels (means of dB values, Student-t confidence intervals)."""

from __future__ import annotations

import numpy as np

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
    from scipy import stats  # 0.4 s to import: only where an interval is formed
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


def difference_interval(a_db, b_db, confidence: float = 0.90, *, ua_db=None, ub_db=None,
                        shared_db: float = 0.0, shared_cancels: bool = True,
                        shared_b_db: float | None = None) -> dict:
    """The difference of two groups' means, ``mean(b) - mean(a)``, with its two-sided interval.

    The pass-to-pass scatter gives the unequal-variance (Welch) t interval, standard error
    ``sqrt(s_a^2 / n_a + s_b^2 / n_b)`` on the Welch-Satterthwaite degrees of freedom. With the
    values' own standard uncertainties the independent parts (rms less ``shared_db``) add as a
    normal term, ``u_a^2 / n_a + u_b^2 / n_b``, in quadrature, as :func:`mean_and_interval`
    does for one mean. ``shared_db`` is the part every value of both groups has in common (one
    campaign's calibrator and capsule type): it cancels in the difference when
    ``shared_cancels`` (the groups share it), and counts once per group otherwise (two
    campaigns with their own calibrations: ``shared_b_db``, default ``shared_db``, is B's).

    With fewer than two values in a group the scatter cannot be estimated: no interval (NaN),
    never a tight one from the stated uncertainties alone.

    Returns a dict with ``difference_db``, ``mean_a_db``, ``mean_b_db``, ``n_a``, ``n_b``,
    ``dof`` (Welch-Satterthwaite), ``ci_half_width_db``, ``ci_low_db``, ``ci_high_db`` and
    ``differs`` (the interval excludes zero).
    """
    from scipy import stats  # 0.4 s to import: only where an interval is formed
    a = np.asarray(a_db, float)
    b = np.asarray(b_db, float)
    keep_a, keep_b = np.isfinite(a), np.isfinite(b)
    a, b = a[keep_a], b[keep_b]
    n_a, n_b = int(a.size), int(b.size)
    out = {"mean_a_db": float(np.mean(a)) if n_a else np.nan,
           "mean_b_db": float(np.mean(b)) if n_b else np.nan, "n_a": n_a, "n_b": n_b,
           "dof": np.nan, "ci_half_width_db": np.nan}
    out["difference_db"] = out["mean_b_db"] - out["mean_a_db"]
    if n_a >= 2 and n_b >= 2:
        va, vb = np.var(a, ddof=1) / n_a, np.var(b, ddof=1) / n_b
        se = float(np.sqrt(va + vb))
        dof = float((va + vb) ** 2 / (va ** 2 / (n_a - 1) + vb ** 2 / (n_b - 1))) if se > 0 \
            else float(n_a + n_b - 2)
        half = float(stats.t.ppf(0.5 + confidence / 2, dof) * se)
        if ua_db is not None and ub_db is not None:
            ua = np.asarray(ua_db, float)[keep_a]
            ub = np.asarray(ub_db, float)[keep_b]
            if np.all(np.isfinite(ua)) and np.all(np.isfinite(ub)):
                shared_b = shared_db if shared_b_db is None else shared_b_db
                own = (max(float(np.mean(ua ** 2)) - shared_db ** 2, 0.0) / n_a
                       + max(float(np.mean(ub ** 2)) - shared_b ** 2, 0.0) / n_b)
                if not shared_cancels:
                    own += shared_db ** 2 + shared_b ** 2
                half = float(np.hypot(half, stats.norm.ppf(0.5 + confidence / 2)
                                      * np.sqrt(own)))
        out.update(dof=dof, ci_half_width_db=half)
    half = out["ci_half_width_db"]
    out["ci_low_db"] = out["difference_db"] - half
    out["ci_high_db"] = out["difference_db"] + half
    out["differs"] = bool(np.isfinite(half) and (out["ci_low_db"] > 0 or out["ci_high_db"] < 0))
    return out
