"""Recording clock: sample index <-> UTC."""

import numpy as np
from hypothesis import given
from hypothesis import strategies as st

from flyover.model.timebase import RecordingClock, iso_utc

START = int(np.datetime64("2026-05-14T09:30:00", "ns").astype(np.int64))


def test_sample_time_definition():
    # Design contract: sample n at recording_start_utc + clock_offset_s + n / fs.
    clock = RecordingClock(START, 0.25, 48000.0)
    utc = clock.utc_ns(clock.sample_time_s(48000))
    assert utc == START + 1_250_000_000
    assert iso_utc(int(utc)) == "2026-05-14T09:30:01.250Z"


def test_rate_error():
    # A clock running 100 ppm fast takes 48004.8 samples per true second.
    clock = RecordingClock(START, 0.0, 48000.0, rate_error_ppm=100.0)
    assert clock.sample_index(1.0) == 48004.8


@given(st.integers(0, 2 ** 33), st.floats(-5, 5), st.sampled_from([8000.0, 44100.0, 51200.0]))
def test_round_trip(n, offset, fs):
    clock = RecordingClock(START, offset, fs)
    t = clock.sample_time_s(n)
    back = clock.sample_index(clock.seconds_since_epoch(clock.utc_ns(t)))
    # ns rounding of UTC: at most half a nanosecond of time.
    assert abs(back - n) <= fs * 1e-9
