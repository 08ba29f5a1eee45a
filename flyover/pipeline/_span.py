"""Shared by stages: every microphone de-Dopplerized to one body point over a span, and what
one microphone received of a span."""

from __future__ import annotations

import numpy as np

from flyover.acoustics.bands import third_octave_bands
from flyover.geometry.windows import Window
from flyover.imaging.dedoppler import dedopplerized_signals
from flyover.imaging.reception import reception_geometry, required_frames
from flyover.campaign import Campaign
from flyover.pipeline._resources import chain_settings
from flyover.pipeline.context import PassInputs


def dedopplerize_span(campaign: Campaign, inputs: PassInputs, start_s: float, n_samples: int,
                      body_m, *, with_geometry: bool = False, read=None):
    """The channels de-Dopplerized to a body point over ``n_samples`` of emission time,
    the recordings read through ``read`` (default :meth:`PassInputs.read_pressure_pa`; a
    sweep along the pass passes a :meth:`PassInputs.block_reader`).

    Returns
    -------
    float32 array (n_mics, n_samples), or None when the track or the recording does not hold
    the span (no absorption compensation: a caller that needs it takes the span's
    :class:`ReceptionGeometry` too, ``with_geometry``, and compensates per line).
    """
    fs = inputs.sample_rate_hz
    track = inputs.track
    if start_s < track.start_s or start_s + n_samples / fs > track.end_s:
        return None
    span = Window(-1, start_s, n_samples, fs, track.position(start_s), track.velocity(start_s),
                  track.attitude_deg(start_s), 90.0, 0.0)
    band = campaign.analysis.band_min_hz
    settings = chain_settings(inputs, third_octave_bands(band, band), "cubic",
                              weights=np.ones(len(inputs.weights)), absorption=False)
    geo = reception_geometry(track, span, [body_m], inputs.layout.enu_m, inputs.atmosphere,
                             settings.pressure_gain, node_step=settings.node_step)
    first, count = required_frames(geo, inputs.clock, "cubic")
    if not inputs.holds(first, count):
        return None
    signals = (read or inputs.read_pressure_pa)(first, count)
    out = dedopplerized_signals(signals, first, geo, inputs.clock, span, settings)[0]
    return (out, geo) if with_geometry else out


def received_stretch(inputs: PassInputs, mic: int, span_s) -> tuple[float, np.ndarray]:
    """What a microphone received of an emission span: its reception start (s after the
    epoch) and signal (Pa). The span's ends are carried to the microphone along the straight
    path at the speed of sound (wind apart: a few milliseconds, nothing to a listener)."""
    times = np.asarray(span_s, float)
    distance = np.linalg.norm(inputs.track.position(times) - inputs.layout.enu_m[mic], axis=1)
    received = times + distance / inputs.atmosphere.c_m_s
    first, held = inputs.covered_frames(tuple(received))
    return float(received[0]), inputs.read_microphone_pa(mic, int(first[mic]), held)
