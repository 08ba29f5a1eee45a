"""One label against another: the difference tables and the command, on levels made by hand
(the statistics are checked against scipy in test_stats.py)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from flyover.io.results.comparison import (COMPARED_LEVELS, COMPARED_METRICS, COMPARED_OVERALL,
                                           COMPARISON_FIGURE)
from flyover.io.results.event_metrics import EVENT_METRICS
from flyover.io.results.levels import LEVELS
from flyover.pipeline._compare import Side, compare, write_comparison

BANDS = (500.0, 630.0, 800.0, 1000.0)


def levels(offset_db: float, *, region_db=None, polar=(86.0, 90.0, 94.0)) -> pd.DataFrame:
    """A pass's levels.csv: one bin near overhead, every band at 70 dB plus an offset (the
    windows equal, so each pass's bin mean is the offset itself)."""
    rows = []
    for w, angle in enumerate(polar):
        for region in ("propulsion", "total"):
            for band in BANDS:
                level = 70.0 + offset_db + (0.0 if region == "total" else -3.0)
                if region_db is not None and region == "propulsion" and band == 800.0:
                    level = region_db
                rows.append(dict(window=w, time_utc="", polar_angle_deg=angle, band_hz=band,
                                 region=region, level_db=level, level_1m_db=level,
                                 uncertainty_db=np.nan))
    return pd.DataFrame(rows).reindex(columns=LEVELS.column_names)


def metrics(offset_db: float) -> pd.DataFrame:
    """A pass's event_metrics.csv: every metric at 80 dB plus an offset."""
    return pd.DataFrame([{c: (80.0 + offset_db if c.endswith("_db") else "")
                          for c in EVENT_METRICS.column_names}])


def side(name, offsets, results="/campaign/results", **kw) -> Side:
    passes = [f"{name}-{k}" for k in range(len(offsets))]
    return Side(name, {p: levels(o, **kw) for p, o in zip(passes, offsets)}, 0.15,
                Path(results), pd.concat([metrics(o).assign(**{"pass": p})
                                          for p, o in zip(passes, offsets)], ignore_index=True))


def test_band_and_overall_differences_match_welchs_interval():
    # B is about 2 dB quieter than A in every band. Per region and band the difference and its
    # interval are Welch's on the passes' offsets (scipy.stats.ttest_ind, equal_var=False);
    # the overall and A-weighted levels over the bands both support move by the same offsets.
    a_off, b_off = [0.0, 0.6, -0.4, 0.2], [-2.1, -1.7, -2.4]
    a, b = side("A", a_off), side("B", b_off)
    bands, overall, compared_metrics = compare(a, b)
    ref = stats.ttest_ind(b_off, a_off, equal_var=False)
    ci = ref.confidence_interval(0.90)
    total = bands[(bands["region"] == "total") & (bands["polar_bin_deg"] == 90.0)]
    assert len(total) == len(BANDS)
    np.testing.assert_allclose(total["difference_db"], np.mean(b_off) - np.mean(a_off))
    np.testing.assert_allclose(total["ci90_low_db"], ci.low, rtol=1e-9)
    np.testing.assert_allclose(total["ci90_high_db"], ci.high, rtol=1e-9)
    assert total["differs"].all() and (total["n_a"] == 4).all() and (total["n_b"] == 3).all()
    assert total["passes_a"].iloc[0] == "A-0 A-1 A-2 A-3"
    for quantity in ("overall", "A-weighted"):
        row = overall[(overall["region"] == "total") & (overall["quantity"] == quantity)]
        assert len(row) == 1 and row["band_range_hz"].iloc[0] == "500-1000"
        assert row["difference_db"].iloc[0] == pytest.approx(np.mean(b_off) - np.mean(a_off))
        assert row["ci90_low_db"].iloc[0] == pytest.approx(ci.low, rel=1e-9)
    # The single-event metrics likewise (their only stated uncertainty, the shared
    # calibration, cancels within one campaign); across two campaigns it counts once a side,
    # so the interval widens about the same difference.
    lae = compared_metrics.set_index("metric").loc["lae_db"]
    assert lae["difference_db"] == pytest.approx(np.mean(b_off) - np.mean(a_off))
    assert (lae["ci90_low_db"], lae["ci90_high_db"]) == pytest.approx((ci.low, ci.high),
                                                                      rel=1e-9)
    assert lae["differs"] and lae["passes_b"] == "B-0 B-1 B-2"
    across = compare(a, side("B", b_off, results="/other/results"))[2].set_index("metric")
    assert across.loc["lae_db", "ci90_low_db"] < ci.low
    assert across.loc["lae_db", "ci90_high_db"] > ci.high


def test_a_label_with_one_pass_gets_no_interval_and_the_files_are_written(tmp_path):
    # The undecidable case says so: one pass of B, no interval and no 'differs'. The tables
    # and the figure land in comparisons/A--B with their declared columns.
    a, b = side("A", [0.0, 0.5, -0.3]), side("B", [-4.0])
    bands, overall, compared_metrics = compare(a, b)
    assert compared_metrics["ci90_low_db"].isna().all() and not compared_metrics["differs"].any()
    assert bands["ci90_low_db"].isna().all() and not bands["differs"].any()
    assert (bands["difference_db"].dropna() < -3.0).all()
    folder = write_comparison(tmp_path, a, b)
    assert folder == tmp_path / "comparisons" / "A--B"
    assert list(COMPARED_LEVELS.read(folder).columns) == COMPARED_LEVELS.column_names
    assert len(COMPARED_OVERALL.read(folder)) == len(overall)
    assert list(COMPARED_METRICS.read(folder)["metric"]) == list(compared_metrics["metric"])
    assert COMPARISON_FIGURE.path(folder).stat().st_size > 10_000


def test_overall_levels_compare_only_bands_both_labels_support():
    # B has no propulsion level at 800 Hz: the propulsion overall of both labels is summed
    # over the run both support (here none of three bands: 500-630 is too short), so it is
    # left out rather than compared over different bands.
    a = side("A", [0.0, 0.4])
    b = side("B", [-1.0, -1.2], region_db=np.nan)
    _, overall, _ = compare(a, b)
    assert set(overall["region"]) == {"total"}


def test_the_command_says_when_it_cannot_tell(tiny_copy, capsys):
    # One pass a side: the command prints the difference and that it cannot tell, never a
    # verdict; the tables land beside the campaign's results.
    from conftest import edit_campaign

    from flyover.cli import main
    edit_campaign(tiny_copy, lambda d: d["passes"]["p2"].update(label="b"))
    for name, offset in (("p1", 0.0), ("p2", -2.5)):
        LEVELS.write(tiny_copy / "results" / name, levels(offset))
        # B's pass measured no LAE (its 10 dB-down interval not reached): no difference.
        EVENT_METRICS.write(tiny_copy / "results" / name, metrics(offset).assign(
            lae_db=np.nan if name == "p2" else 80.0))
    assert main(["compare", str(tiny_copy / "campaign.yaml"), "--labels", "a", "b"]) == 0
    out = capsys.readouterr().out
    assert "total A-weighted at 90 deg: -2.5 dB, cannot tell" in out
    assert "LASmax: -2.5 dB, no interval" in out
    assert "LAE: no value on one side (1 passes of A, 0 of B with one)" in out
    assert "differs" not in out and "nan" not in out
    assert (tiny_copy / "results" / "comparisons" / "a--b" / "overall.csv").exists()


def test_the_reports_comparison_section_never_prints_nan(tiny_copy):
    # The report's section shows the overall differences near overhead and the metrics; a
    # difference one side cannot give (B's LAE was not measured) reads 'no value'.
    import re

    from conftest import edit_campaign

    from flyover.io.config import load_campaign
    from flyover.pipeline._compare import label_side
    from flyover.pipeline.report import _comparison_section
    campaign = load_campaign(edit_campaign(tiny_copy, lambda d: (
        d["passes"]["p2"].update(label="b"), d["analysis"].update(comparisons=[["a", "b"]]))))
    out = tiny_copy / "results"
    for name, offset in (("p1", 0.0), ("p2", -2.5)):
        LEVELS.write(out / name, levels(offset))
        EVENT_METRICS.write(out / name, metrics(offset).assign(
            lae_db=np.nan if name == "p2" else 80.0))
    write_comparison(out, label_side(campaign, "a", out), label_side(campaign, "b", out))
    text = _comparison_section(campaign, out)
    assert "Single-event metrics" in text and "LASmax" in text and "no value" in text
    assert not re.search(r"\bnan\b", text, re.IGNORECASE)
