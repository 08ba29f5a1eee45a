"""Stage: align a pass (clock, track, recording) and draw its track check figure."""

from __future__ import annotations

from pathlib import Path


from flyover.acoustics.bands import third_octave_bands
from flyover.geometry.windows import plan_windows
from flyover.io.figures import save_figure, track_figure
from flyover.io.results.alignment import TRACK_FIGURE, write_alignment
from flyover.campaign import PASS_INPUTS, Campaign
from flyover.model.errors import FlyoverInputError
from flyover.model.reads import guarded
from flyover.pipeline._span import dedopplerize_span
from flyover.pipeline._facts import pass_summary
from flyover.pipeline._resources import chain_settings
from flyover.pipeline.context import load_pass
from flyover.sync.clock_offset import estimate_clock_offset
from flyover.sync.quality import (ChannelAccumulator, channel_quality, neighbour_coherence,
                                  track_quality)

# When the acoustic clock estimate refuses (our thresholds, set on simulated passes: a true
# anchor gave a coherence of 0.94 and a prominence of 12; an anchor 15 m to the side 0.014 and
# 4.0; one 20 m above the vehicle 0.61 and 3.1, with its estimate 19 ms wrong).
MIN_ANCHOR_COHERENCE = 0.2
MIN_ANCHOR_PROMINENCE = 6.0
# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = PASS_INPUTS + ("analysis.window_s", "analysis.band_min_hz", "analysis.band_max_hz",
                       "regions")



def run(campaign: Campaign, pass_name: str, out_dir: Path) -> dict:
    """Write ``alignment.json`` (clock, coverage, overhead time) and ``track.png``.

    With ``clock_offset_s: auto`` the offset is estimated from the anchor source first and the
    pass is aligned with it.
    """
    campaign = guarded(campaign, READS, stage="align", pass_name=pass_name)
    inputs = load_pass(campaign, pass_name)
    estimate = None
    if inputs.spec.clock_offset_s == "auto":
        estimate = _estimate_offset(campaign, inputs)
        measured = {r.spec.name: r.timing for r in inputs.recorders if r.timing is not None}
        inputs = load_pass(campaign, pass_name, estimate.offset_s, measured_clocks=measured)
    summary = pass_summary(inputs)
    summary["epoch_utc_ns"] = int(inputs.clock.epoch_utc_ns)
    timed = all(r.spec.timing_channels for r in inputs.recorders)
    # With every recorder on a timing channel the pass's offset is only a common correction.
    summary["clock_offset_source"] = ("timing channels (plus the config's common offset)"
                                      if timed else "config")
    quality = pass_channel_quality(campaign, inputs, summary["covered_s"], summary["overhead_s"])
    flagged = [q["channel"] for q in quality if q["verdict"] != "ok"]
    summary["channel_quality"] = quality
    summary["quality_flagged_channels"] = flagged
    kept = set(inputs.array.keep_channels) | set(inputs.spec.keep_channels)
    summary["quality_excluded_channels"] = [c for c in flagged if c not in kept]
    left_out = set(summary["quality_excluded_channels"])
    summary["channels_used"] = sum(1 for c, w in zip(inputs.layout.channel, inputs.weights)
                                   if w > 0 and int(c) not in left_out)
    summary["track_quality"] = track_quality(inputs.track, summary["covered_s"])
    if estimate is not None:
        summary["clock_offset_source"] = (f"estimated from the anchor at body "
                                          f"{list(inputs.spec.clock_anchor_m)} m")
        summary["clock_estimate_contrast"] = estimate.contrast
        summary["clock_estimate_coherence"] = estimate.coherence
        summary["clock_estimate_prominence"] = estimate.prominence
        summary["clock_offset_uncertainty_s"] = estimate.uncertainty_s
        for r in summary["recorders"]:
            if r["clock_method"] == "acoustic":
                r["offset_uncertainty_s"] = estimate.uncertainty_s
        summary["clock_scan_offsets_s"] = [round(float(v), 6) for v in estimate.scan_offsets_s]
        summary["clock_scan_power"] = [round(float(v), 6) for v in estimate.scan_power]
    fig = track_figure(inputs, summary)
    save_figure(fig, TRACK_FIGURE.path(out_dir))
    write_alignment(out_dir, summary)
    return summary


def _estimate_offset(campaign: Campaign, inputs):
    """Clock offset from the anchor source, on up to five windows near overhead."""
    an = campaign.analysis
    spec = inputs.spec
    fs = inputs.sample_rate_hz
    search = spec.clock_search_s
    span = (search + 0.5, inputs.recording_span_s[1] - search - 0.5)
    windows = plan_windows(inputs.track, inputs.layout.center_enu_m, span, an.window_s,
                           an.window_s, fs, max_polar_offset_deg=30.0)
    if not windows:
        raise FlyoverInputError(
            "no window near overhead to estimate the clock offset from",
            f"{campaign.config_path}, key passes.{spec.name}.recording",
            f"a recording covering the overhead time with {search} s to spare on each side",
            hint="set clock_search_s smaller, or give clock_offset_s as a number")
    pick = windows[:: max(1, len(windows) // 5)][:5]
    bands = third_octave_bands(max(an.band_min_hz, 250.0), an.band_max_hz)
    settings = chain_settings(inputs, bands, "cubic")
    def read_frames(first, n):
        # Silence outside the recording: candidate offsets may look past its ends.
        return inputs.read_pressure_pa(first, n, pad=True)

    estimate = estimate_clock_offset(read_frames, inputs.track, pick, spec.clock_anchor_m,
                                     inputs.layout.enu_m, inputs.atmosphere, inputs.clock,
                                     settings, max_offset_s=search)
    hint = "check clock_anchor_m, or give clock_offset_s as a number from a timing log"
    if not estimate.coherence >= MIN_ANCHOR_COHERENCE:
        raise FlyoverInputError(
            "no source at the anchor: the clock offset cannot be estimated from it",
            f"{campaign.config_path}, key passes.{spec.name}.clock_anchor_m",
            f"an array coherence of at least {MIN_ANCHOR_COHERENCE} at the anchor",
            f"{estimate.coherence:.3f} at body {list(spec.clock_anchor_m)} m", hint)
    if not estimate.prominence >= MIN_ANCHOR_PROMINENCE:
        raise FlyoverInputError(
            "the anchor shows no clear peak over the offsets searched",
            f"{campaign.config_path}, key passes.{spec.name}.clock_anchor_m",
            f"a peak {MIN_ANCHOR_PROMINENCE:g} times the scan's spread above its median",
            f"{estimate.prominence:.1f} times (peak at {estimate.offset_s:+.4f} s, uncertain by "
            f"{estimate.uncertainty_s * 1000:.0f} ms)", hint)
    if estimate.halves_disagree:
        low, high = estimate.half_offsets_s
        half = max(1, len(bands) // 2)
        raise FlyoverInputError(
            "the anchor is not the dominant source in every band: the clock offset cannot be "
            "estimated from it",
            f"{campaign.config_path}, key passes.{spec.name}.clock_anchor_m",
            f"the lower and upper bands to agree within "
            f"{estimate.halves_tolerance_s * 1000:.0f} ms",
            f"{bands.nominal_hz[0]:g}-{bands.nominal_hz[half - 1]:g} Hz put it at "
            f"{low:+.3f} s, {bands.nominal_hz[half]:g}-{bands.nominal_hz[-1]:g} Hz at "
            f"{high:+.3f} s (a source elsewhere on the body outweighs the anchor in some "
            "bands)", hint)
    return estimate


def pass_channel_quality(campaign: Campaign, inputs, covered_s, overhead_s: float,
                         coherence_span_s: float = 1.0) -> list[dict]:
    """Channel statistics over the part of the recording the track covers (block by block), and
    each channel's coherence with its neighbours at low frequency, on the signals de-Dopplerized
    to the first region's centre over ``coherence_span_s`` of emission time around overhead
    (aligned in source time, so the moving source's changing delays do not decorrelate them)."""
    acc = ChannelAccumulator(len(inputs.layout.channel))
    for block in inputs.raw_blocks(*inputs.covered_frames(covered_s)):
        acc.add(block)
    return channel_quality(acc, inputs.pa_per_unit, inputs.layout.enu_m, inputs.layout.channel,
                           _aligned_coherence(campaign, inputs, overhead_s, coherence_span_s))


def _aligned_coherence(campaign: Campaign, inputs, overhead_s: float, span_s: float):
    """Low-band neighbour coherence of the de-Dopplerized channels, or None when the recording
    does not hold the span."""
    fs = inputs.sample_rate_hz
    centre = next(iter(campaign.regions.values())).center_m
    aligned = dedopplerize_span(campaign, inputs, overhead_s - span_s / 2, int(span_s * fs),
                                centre)
    if aligned is None:
        return None
    band_lo = campaign.analysis.band_min_hz
    return neighbour_coherence(aligned, fs, inputs.layout.enu_m,
                               band_hz=(band_lo, 2.0 * band_lo))
