"""Certification-style adjustments against the formulas of 14 CFR 36 (App. G, G36.201 and
G36.111; App. J, J36.205), as the project's reference notes quote them."""

from __future__ import annotations

import numpy as np
import pytest

from flyover.acoustics.certification import CERTIFICATION_ADJUSTMENTS
from flyover.acoustics.metrics import EventMetrics

MEASURED = EventMetrics(80.0, 1.0, 78.0, 1.2, 85.0, (0.0, 8.0), 70.0, 10.0, True)


def test_app_g_adjusts_lasmax_by_22_lg_and_holds_its_window():
    rule = CERTIFICATION_ADJUSTMENTS["propeller-aeroplane"]
    # Flown at 330 m for a 300 m reference: 22 lg(1.1) = 0.911 dB added; LAE not adjusted.
    m = rule.adjusted(MEASURED, 330.0, 300.0, 40.0, 40.0)
    assert m.lasmax_db == pytest.approx(78.0 + 22 * np.log10(1.1), abs=1e-9)
    assert np.isnan(m.lae_db)
    # G36.111: within 20 % of the reference height and 10 deg of the vertical.
    assert rule.window_note(330.0, 300.0, 40.0, 40.0, lateral_m=30.0) == ""
    note = rule.window_note(370.0, 300.0, 40.0, 40.0, lateral_m=70.0)
    assert "23 % off the reference" in note and "10.7 deg off the vertical" in note


def test_app_j_adjusts_lae_for_height_and_speed_and_refuses_2_db_or_more():
    rule = CERTIFICATION_ADJUSTMENTS["helicopter"]
    # 165 m and 30 m/s for 150 m and 33 m/s: 12.5 lg(1.1) + 10 lg(30/33) = 0.517 - 0.414 dB.
    m = rule.adjusted(MEASURED, 165.0, 150.0, 30.0, 33.0)
    assert m.lae_db == pytest.approx(85.0 + 12.5 * np.log10(1.1) + 10 * np.log10(30 / 33),
                                     abs=1e-9)
    assert np.isnan(m.lasmax_db)
    assert rule.window_note(165.0, 150.0, 30.0, 33.0, lateral_m=0.0) == ""
    # 220 m for 150 m: 12.5 lg(1.467) = 2.08 dB, over the 2 dB J36.205 allows unless approved.
    assert "2.1 dB" in rule.window_note(220.0, 150.0, 33.0, 33.0, lateral_m=0.0)
