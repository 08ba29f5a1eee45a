"""Pass-to-pass statistics against scipy and textbook values."""

import numpy as np
import pytest

from flyover.acoustics.statistics import (difference_interval, energetic_mean_db,
                                          mean_and_interval, polar_bin_deg)


def test_student_t_interval():
    # 90 % two-sided interval of the mean, n = 4: t(0.95, 3) = 2.353 (Student t table, e.g.
    # NIST/SEMATECH e-Handbook 1.3.6.7.2); values 70, 71, 72, 73: mean 71.5, s = 1.291.
    r = mean_and_interval([70.0, 71.0, 72.0, 73.0])
    assert r["mean_db"] == 71.5
    assert r["std_db"] == pytest.approx(1.2910, abs=1e-4)
    assert r["ci_half_width_db"] == pytest.approx(2.353 * 1.2910 / 2, abs=2e-3)
    assert mean_and_interval([70.0])["n"] == 1
    assert np.isnan(mean_and_interval([70.0])["ci_half_width_db"])


def test_energetic_mean_and_bins():
    # Energetic mean of 60 and 70 dB: 10 lg((1e6 + 1e7) / 2) = 67.404 dB (common practice).
    assert energetic_mean_db([60.0, 70.0, np.nan]) == pytest.approx(67.4036, abs=1e-4)
    np.testing.assert_array_equal(polar_bin_deg([84.9, 85.1, 94.9, 131.0]), [80, 90, 90, 130])


def test_interval_combines_scatter_and_stated_uncertainties():
    # One pass: the normal 90 % interval of its own uncertainty, 1.645 u (GUM, coverage 90 %).
    one = mean_and_interval([70.0], uncertainty_db=[1.0])
    assert one["ci_half_width_db"] == pytest.approx(1.6449, abs=1e-3)
    # Two passes 2 dB apart, 1 dB each: t(0.95, 1) = 6.314 (Student's table) times s / sqrt(2)
    # = 1.414 / 1.414, in quadrature with 1.645 * 1 / sqrt(2).
    two = mean_and_interval([70.0, 72.0], uncertainty_db=[1.0, 1.0])
    assert two["ci_half_width_db"] == pytest.approx(np.hypot(6.314, 1.6449 / np.sqrt(2)),
                                                    abs=2e-3)
    assert two["uncertainty_db"] == pytest.approx(1 / np.sqrt(2))


def test_a_shared_uncertainty_does_not_shrink_with_more_passes():
    # Sixteen passes, each 0.5 dB uncertain of which 0.3 dB every pass shares (one calibrator):
    # the independent 0.4 dB averages to 0.4 / 4 = 0.1 dB, the shared 0.3 dB stays (fully
    # correlated terms add linearly: GUM 5.2.2 with r = 1, from memory): u = hypot(0.1, 0.3).
    values = np.full(16, 70.0)
    many = mean_and_interval(values, uncertainty_db=np.full(16, 0.5), shared_db=0.3)
    assert many["uncertainty_db"] == pytest.approx(np.hypot(0.1, 0.3), rel=1e-9)
    # Without a shared part all 0.5 dB averages down: 0.125 dB.
    assert mean_and_interval(values, uncertainty_db=np.full(16, 0.5))["uncertainty_db"] == \
        pytest.approx(0.125)
    # One pass: its whole uncertainty, shared or not.
    assert mean_and_interval([70.0], uncertainty_db=[0.5], shared_db=0.3)["uncertainty_db"] \
        == pytest.approx(0.5)


def test_campaign_rows_name_the_flagged_passes_they_include():
    # Three passes of one label, one flagged by the sign-off: the row's mean includes it and
    # says so; the figure's panel title names it.
    import pandas as pd

    from flyover.io.figures import campaign_figure
    from flyover.pipeline.summary import summarise
    per_pass = {n: pd.DataFrame({"window": [0], "polar_angle_deg": [90.0], "region": ["total"],
                                 "band_range_hz": ["500-2000"], "a_weighted_db": [v],
                                 "uncertainty_db": [0.5]})
                for n, v in (("a", 70.0), ("b", 71.0), ("c", 72.0))}
    table = summarise(per_pass, dict.fromkeys(per_pass, "cruise"), "a_weighted_db",
                      ["region", "band_range_hz"], shared_db=0.15, flagged={"b"})
    row = table.iloc[0]
    assert row["passes"] == "a b c" and row["passes_flagged"] == "b"
    assert row["mean_db"] == pytest.approx(71.0)
    fig = campaign_figure(table.assign(quantity="A-weighted"))
    assert "flagged: b" in fig.axes[0].get_title()
    # A label with none flagged keeps a plain title.
    clean = summarise(per_pass, dict.fromkeys(per_pass, "cruise"), "a_weighted_db",
                      ["region", "band_range_hz"])
    assert campaign_figure(clean.assign(quantity="A-weighted")).axes[0].get_title() == \
        "cruise (3 passes)"


def test_difference_interval_is_welchs_t_interval():
    # Without stated uncertainties the interval is the unequal-variance t interval of
    # scipy.stats.ttest_ind(equal_var=False) (a general-purpose reference), with its
    # Welch-Satterthwaite degrees of freedom.
    from scipy import stats
    rng = np.random.default_rng(7)
    for n_a, n_b, sd_a, sd_b in ((5, 4, 0.5, 1.5), (3, 8, 1.0, 0.3), (6, 6, 0.8, 0.8)):
        a = 70 + rng.normal(0, sd_a, n_a)
        b = 68 + rng.normal(0, sd_b, n_b)
        ref = stats.ttest_ind(b, a, equal_var=False)
        ci = ref.confidence_interval(0.90)
        d = difference_interval(a, b, 0.90)
        assert d["difference_db"] == pytest.approx(b.mean() - a.mean())
        assert d["ci_low_db"] == pytest.approx(ci.low, rel=1e-9)
        assert d["ci_high_db"] == pytest.approx(ci.high, rel=1e-9)
        assert d["dof"] == pytest.approx(ref.df, rel=1e-9)
        assert d["differs"] == (ci.low > 0 or ci.high < 0)


def test_difference_interval_shared_terms_and_the_undecidable_case():
    # Two labels of one campaign share the calibrator: its part cancels in the difference.
    # Two campaigns do not: it counts once per group, so the interval is wider.
    a, b = np.array([70.0, 70.4, 69.8]), np.array([68.1, 68.5, 67.9, 68.3])
    ua, ub = np.full(3, 0.5), np.full(4, 0.5)
    one = difference_interval(a, b, ua_db=ua, ub_db=ub, shared_db=0.3)
    two = difference_interval(a, b, ua_db=ua, ub_db=ub, shared_db=0.3, shared_cancels=False)
    plain = difference_interval(a, b)
    independent = (0.5 ** 2 - 0.3 ** 2) * (1 / 3 + 1 / 4)
    z = 1.6449
    assert one["ci_half_width_db"] == pytest.approx(
        np.hypot(plain["ci_half_width_db"], z * np.sqrt(independent)), rel=1e-4)
    assert two["ci_half_width_db"] == pytest.approx(
        np.hypot(plain["ci_half_width_db"], z * np.sqrt(independent + 2 * 0.3 ** 2)), rel=1e-4)
    assert one["differs"] and two["differs"]
    # Two campaigns with their own calibrators: each side's shared term, once.
    own = difference_interval(a, b, ua_db=ua, ub_db=ub, shared_db=0.3, shared_b_db=0.1,
                              shared_cancels=False)
    mixed = (0.5 ** 2 - 0.3 ** 2) / 3 + (0.5 ** 2 - 0.1 ** 2) / 4 + 0.3 ** 2 + 0.1 ** 2
    assert own["ci_half_width_db"] == pytest.approx(
        np.hypot(plain["ci_half_width_db"], z * np.sqrt(mixed)), rel=1e-4)
    # One pass in a label: the scatter is unknown, so no interval and no verdict.
    lone = difference_interval(a[:1], b, ua_db=ua[:1], ub_db=ub)
    assert np.isnan(lone["ci_half_width_db"]) and not lone["differs"]
    assert lone["difference_db"] == pytest.approx(b.mean() - 70.0)
