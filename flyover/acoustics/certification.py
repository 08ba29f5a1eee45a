"""Certification-style adjustments of a measured single-event level to a reference height
and speed, each with the window its procedure allows it in (from the text of 14 CFR 36 as the
project's reference notes quote it: App. G for propeller-driven small aeroplanes, App. J for
helicopters). They are the simple route to a reference flight that flyover's reconstruction from
the measured directivity is compared with."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flyover.acoustics.metrics import EventMetrics


@dataclass(frozen=True)
class CertificationAdjustment:
    """A certification procedure's simple adjustment of a measured level to the reference
    height and speed, with the window its text allows it in (from the text of 14 CFR 36, as
    the project's reference notes quote it). A slope of None: the procedure does not adjust
    that metric (it is left empty)."""

    text: str
    lasmax_height_slope_db: float | None
    lae_height_slope_db: float | None
    lae_speed_slope_db: float | None
    max_height_offset_pct: float | None = None      # |H_T / H_R - 1|
    max_zenith_deg: float | None = None             # passage off the vertical
    max_adjustment_db: float | None = None          # the adjustment's own size

    def adjusted(self, m: EventMetrics, height_t, height_r, speed_t, speed_r) -> EventMetrics:
        """The metrics adjusted from the test's height and speed to the reference ones."""
        h, v = np.log10(height_t / height_r), np.log10(speed_t / speed_r)
        lasmax = (m.lasmax_db + self.lasmax_height_slope_db * h
                  if self.lasmax_height_slope_db is not None else np.nan)
        lae = (m.lae_db + self.lae_height_slope_db * h + self.lae_speed_slope_db * v
               if self.lae_height_slope_db is not None else np.nan)
        return EventMetrics(m.lafmax_db, m.lafmax_s, lasmax, m.lasmax_s, lae, m.ten_db_down_s,
                            m.laeq_db, m.laeq_duration_s, m.ten_db_down_complete)

    def window_note(self, height_t, height_r, speed_t, speed_r, lateral_m) -> str:
        """'' inside the procedure's window, else '; outside ...' naming what is out."""
        out = []
        offset = 100 * abs(height_t / height_r - 1)
        if self.max_height_offset_pct is not None and offset > self.max_height_offset_pct:
            out.append(f"height {height_t:.1f} m is {offset:.0f} % off the reference "
                       f"{height_r:.1f} m (limit {self.max_height_offset_pct:g} %)")
        zenith = float(np.degrees(np.arctan2(lateral_m, height_t)))
        if self.max_zenith_deg is not None and zenith > self.max_zenith_deg:
            out.append(f"passage {zenith:.1f} deg off the vertical (limit "
                       f"{self.max_zenith_deg:g} deg)")
        if self.max_adjustment_db is not None:
            size = abs(self.lae_height_slope_db * np.log10(height_t / height_r)
                       + self.lae_speed_slope_db * np.log10(speed_t / speed_r))
            if size >= self.max_adjustment_db:
                out.append(f"the adjustment is {size:.1f} dB (under {self.max_adjustment_db:g} "
                           "dB allowed)")
        return "; outside its window: " + ", ".join(out) if out else ""


# Chosen by analysis.reference_flight.adjustment (the vehicle's class).
CERTIFICATION_ADJUSTMENTS = {
    # 14 CFR 36 App. G (G36.111, G36.201): LASmax + 22 lg(H_T/H_R), the pass within 10 deg of
    # the vertical and 20 % of the reference height. (G36.201 takes 20 lg outside its Fig. G1
    # temperature and humidity window, which flyover does not hold: the note says so.)
    "propeller-aeroplane": CertificationAdjustment(
        "LASmax + 22 lg(H_T/H_R) (14 CFR 36 App. G, G36.201; 20 lg outside its Fig. G1 "
        "temperature and humidity window, not checked here); LAE not adjusted",
        22.0, None, None, max_height_offset_pct=20.0, max_zenith_deg=10.0),
    # 14 CFR 36 App. J (J36.205): SEL + 12.5 lg(H_T/H_R) + 10 lg(V_T/V_R), adjustments under
    # 2 dB unless approved.
    "helicopter": CertificationAdjustment(
        "LAE + 12.5 lg(H_T/H_R) + 10 lg(V_T/V_R) (14 CFR 36 App. J, J36.205); LASmax not "
        "adjusted", None, 12.5, 10.0, max_adjustment_db=2.0),
}
