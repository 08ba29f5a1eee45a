"""Clocks from timing channels: GNSS PPS and IRIG-B against the frame layout of IRIG 200."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest

from flyover.model.errors import FlyoverInputError
from flyover.sim.timing import irig_b_signal, irig_frame_symbols, pps_signal
from flyover.sync.timecode import (Edges, decode_irig, irig_fields, measure_clock,
                                   measure_clock_over, pulse_edges)

FS = 25600.0
BASE = int(dt.datetime(2026, 6, 17, 7, 49, 0, tzinfo=dt.timezone.utc).timestamp())


def utc_s(*args) -> int:
    return int(dt.datetime(*args, tzinfo=dt.timezone.utc).timestamp())


def recorded(kind: str, *, start_after_base_s: float, drift_ppm: float, seconds: float,
             base: int = BASE, noise: float = 0.002, seed: int = 0, with_year: bool = True):
    """A timing channel as a recorder with this true start and drift records it (plus noise)."""
    n = int(seconds * FS)
    t = start_after_base_s + np.arange(n) / (FS * (1 + drift_ppm * 1e-6))
    x = (pps_signal(t, rise_s=1 / FS) if kind == "pps" else
         irig_b_signal(t, base, form=kind.split("-")[-1], rise_s=1 / FS, with_year=with_year))
    return x + np.random.default_rng(seed).normal(0, noise, n)


def reader(x):
    return lambda first, n: x[first:first + n]


def test_irig_b_frame_layout_by_hand():
    # IRIG Standard 200-16, format B (from memory): Pr at bit 0, P1..P9 at 9, 19, .., 89, P0 at
    # 99; BCD least significant bit first: seconds 1-4 and 6-8, minutes 10-13 and 15-17, hours
    # 20-23 and 25-26, day of year 30-33, 35-38 and 40-41, year 50-53 and 55-58.
    # 2026-06-17 is day 168; 07:49:31 -> seconds 31, minutes 49, hours 7, year 26.
    sym = irig_frame_symbols(utc_s(2026, 6, 17, 7, 49, 31))
    markers = [0, 9, 19, 29, 39, 49, 59, 69, 79, 89, 99]
    assert [k for k in range(100) if sym[k] == 2] == markers
    ones = {1,                  # seconds units 1
            6, 7,               # seconds tens 10 + 20
            10, 13,             # minutes units 1 + 8
            17,                 # minutes tens 40
            20, 21, 22,         # hours 1 + 2 + 4
            33,                 # day units 8
            36, 37,             # day tens 20 + 40
            40,                 # day hundreds 100
            51, 52,             # year units 2 + 4
            56}                 # year tens 20
    assert {k for k in range(100) if sym[k] == 1} == ones
    assert irig_fields(sym) == {"seconds": 31, "minutes": 49, "hours": 7, "day": 168,
                                "year": 26}


@pytest.mark.parametrize("form", ["irig-b-dcls", "irig-b-am"])
def test_irig_b_decodes_across_new_year(form):
    # A take running over midnight at the year's end: day 365 of 2026, then day 1 of 2027.
    base = utc_s(2026, 12, 31, 23, 59, 57)
    x = recorded(form, start_after_base_s=0.3, drift_ppm=20, seconds=5.5, base=base)
    edges = pulse_edges(x, carrier_hz=1000.0 if form.endswith("am") else None,
                        sample_rate_hz=FS)
    frames = decode_irig(edges, FS, near_utc_s=None, where="test")
    assert [f.utc_s - base for f in frames] == [1, 2, 3, 4]
    stamps = [dt.datetime.fromtimestamp(f.utc_s, dt.timezone.utc) for f in frames]
    assert stamps[1] == dt.datetime(2026, 12, 31, 23, 59, 59, tzinfo=dt.timezone.utc)
    assert stamps[2] == dt.datetime(2027, 1, 1, 0, 0, 0, tzinfo=dt.timezone.utc)


def test_irig_b_without_year_takes_it_from_the_recorder():
    base = utc_s(2026, 12, 31, 23, 59, 57)
    x = recorded("irig-b-dcls", start_after_base_s=0.3, drift_ppm=0, seconds=5.5, base=base,
                 with_year=False)
    edges = pulse_edges(x)
    frames = decode_irig(edges, FS, near_utc_s=base - 100.0, where="test")
    assert [f.utc_s - base for f in frames] == [1, 2, 3, 4]
    with pytest.raises(FlyoverInputError, match="no year"):
        decode_irig(edges, FS, near_utc_s=None, where="test")


@pytest.mark.parametrize("timing", [["pps"], ["irig-b-dcls"], ["irig-b-am"],
                                    ["pps", "irig-b-dcls"]])
@pytest.mark.parametrize("offset_s,drift_ppm", [(0.3, 50.0), (-0.3, -50.0)])
def test_clock_recovered_within_20_us_and_half_a_ppm(timing, offset_s, drift_ppm):
    # The accuracy: recorders 50 ppm off and +-0.3 s wrong. The recorder's own clock
    # (what its files say) is wrong by offset_s; the timing channel gives the truth.
    true_start = 0.4321234
    chans = {k: recorded(k, start_after_base_s=true_start, drift_ppm=drift_ppm, seconds=12.0,
                         seed=i) for i, k in enumerate(timing)}
    own_ns = int(round((BASE + true_start + offset_s) * 1e9))
    fit = measure_clock({k: reader(v) for k, v in chans.items()}, int(12 * FS), FS, own_ns,
                        where="test")
    start_err_s = (fit.start_utc_ns - BASE * 10 ** 9) / 1e9 - true_start
    assert abs(start_err_s) < 20e-6
    assert abs(fit.drift_ppm - drift_ppm) < 0.5
    assert fit.start_uncertainty_s < 20e-6
    assert fit.residual_rms_s < 5e-6
    assert ("PPS" in fit.kind) == ("pps" in timing)


def test_a_stretch_of_a_long_recording_gives_the_clock_of_the_whole():
    # A pass cut from a 40 s recording reads 10 s of its timing channels, from 20 s on; the
    # clock carried back to sample 0 along the fitted rate agrees with the truth as the whole
    # recording's fit does (within 20 us plus the drift's error over 20 s), and no frame
    # outside the stretch is read.
    true_start, drift = 0.25, 30.0
    x = recorded("pps", start_after_base_s=true_start, drift_ppm=drift, seconds=40.0)
    y = recorded("irig-b-dcls", start_after_base_s=true_start, drift_ppm=drift, seconds=40.0,
                 seed=1)
    asked = []

    def logged(v):
        return lambda first, n: asked.append((first, n)) or v[first:first + n]
    own_ns = int(round((BASE + true_start + 0.2) * 1e9))
    first, n = int(20 * FS), int(10 * FS)
    fit = measure_clock_over({"pps": logged(x), "irig": logged(y)}, first, n, FS, own_ns,
                             where="test")
    assert min(a for a, _ in asked) >= first and max(a + k for a, k in asked) <= first + n
    err_s = (fit.start_utc_ns - BASE * 10 ** 9) / 1e9 - true_start
    assert abs(fit.drift_ppm - drift) < 0.5
    assert abs(err_s) < 20e-6 + 20.0 * abs(fit.drift_ppm - drift) * 1e-6


def test_pps_needs_the_start_within_half_a_second():
    x = recorded("pps", start_after_base_s=0.43, drift_ppm=0, seconds=4.0)
    own_ns = int(round((BASE + 0.43 + 0.7) * 1e9))   # the recorder's clock 0.7 s wrong
    fit = measure_clock({"pps": reader(x)}, len(x), FS, own_ns, where="test")
    # Labelled one second late: this is why a PPS alone needs the start within half a second.
    assert abs((fit.start_utc_ns - BASE * 10 ** 9) / 1e9 - 0.43 - 1.0) < 20e-6
    with pytest.raises(FlyoverInputError, match="cannot tell which second"):
        measure_clock({"pps": reader(x)}, len(x), FS, None, where="recorder rack-a")


def test_missing_and_extra_pulses_are_reported_with_their_second():
    x = recorded("pps", start_after_base_s=0.43, drift_ppm=10, seconds=8.0)
    t = 0.43 + np.arange(len(x)) / (FS * (1 + 10e-6))
    x[(t > 3.9) & (t < 4.2)] = 0.0           # the pulse of second 4 lost
    x[(t > 5.5) & (t < 5.52)] = 0.5          # a glitch between seconds 5 and 6
    own_ns = int(round((BASE + 0.43) * 1e9))
    fit = measure_clock({"pps": reader(x)}, len(x), FS, own_ns, where="test")
    assert any("missing" in e and "07:49:03.000Z" in e for e in fit.events)
    assert any("extra pulse" in e and "07:49:05.500Z" in e for e in fit.events)
    assert abs((fit.start_utc_ns - BASE * 10 ** 9) / 1e9 - 0.43) < 20e-6
    assert abs(fit.drift_ppm - 10) < 0.5


def test_bad_timing_channels_are_refused_clearly():
    own_ns = BASE * 10 ** 9
    silent = np.random.default_rng(1).normal(0, 1e-3, int(4 * FS))
    with pytest.raises(FlyoverInputError, match="no timing pulses") as err:
        measure_clock({"9": reader(silent)}, len(silent), FS, own_ns,
                      where="campaign.yaml, recorder 'rack-a'")
    assert "rack-a" in str(err.value) and "timing channel 9" in str(err.value)
    # A 10 Hz sync signal where a PPS was expected.
    t = np.arange(int(4 * FS)) / FS
    ten_hz = 0.5 * ((t * 10) % 1 < 0.5)
    with pytest.raises(FlyoverInputError, match="wrong rate"):
        measure_clock({"9": reader(ten_hz)}, len(t), FS, own_ns, where="rack-a")
    # A pulse train that jumps by 0.3 s (the receiver lost lock).
    edges = Edges(np.array([0.0, 1.0, 2.0, 3.3, 4.3]) * FS, np.full(5, 0.1 * FS))
    from flyover.sync.timecode import pps_seconds
    with pytest.raises(FlyoverInputError, match="jumps"):
        pps_seconds(edges, FS, own_ns, where="rack-a")


def test_a_clock_step_is_refused_and_small_misfits_reported():
    from flyover.sync.timecode import fit_clock
    sec = np.arange(BASE, BASE + 10)
    pos = (sec - BASE + 0.25) * FS
    fit = fit_clock(pos + np.r_[np.zeros(9), 8e-6 * FS], sec, np.zeros(10), FS, "PPS", [],
                    where="rack-a")
    assert any("more than 5 us off" in e and "07:49:09" in e for e in fit.events)
    with pytest.raises(FlyoverInputError, match="do not follow one clock") as err:
        fit_clock(pos + np.r_[np.zeros(5), np.full(5, 300e-6 * FS)], sec, np.zeros(10), FS,
                  "PPS", [], where="rack-a")
    assert "rack-a" in str(err.value)
