"""Stage: validate a campaign and every input file it names; summarise each pass."""

from __future__ import annotations

import os

import numpy as np

from ..bands import third_octave_bands
from ..campaign import Campaign
from ..dedoppler import ChainSettings, window_memory_bytes
from ..errors import FlyoverInputError
from ..io.passdata import PassInputs, load_pass
from ..overview import pass_geometry
from ..timebase import iso_utc


def pass_summary(inputs: PassInputs) -> dict:
    """The facts `flyover check` prints and the alignment stage records for one pass."""
    geo = pass_geometry(inputs.track, inputs.layout.center_enu_m, inputs.recording_span_s)
    clock = inputs.clock
    atm = inputs.spec.atmosphere
    return {
        "pass": inputs.spec.name,
        "label": inputs.spec.label,
        "channels": int(inputs.recording.n_channels),
        "channels_used": int(inputs.weights.sum()),
        "sample_rate_hz": inputs.recording.sample_rate_hz,
        "duration_s": inputs.recording.duration_s,
        "epoch_utc": iso_utc(clock.epoch_utc_ns),
        "clock_offset_s": clock.clock_offset_s,
        "clock_offset_auto": inputs.spec.clock_offset_s == "auto",
        "track_start_utc": iso_utc(int(clock.utc_ns(inputs.track.start_s))),
        "track_end_utc": iso_utc(int(clock.utc_ns(inputs.track.end_s))),
        "covered_s": [geo.covered_s[0], geo.covered_s[1]],
        "overhead_utc": iso_utc(int(clock.utc_ns(geo.closest_s))),
        "overhead_s": geo.closest_s,
        "closest_distance_m": geo.closest_m,
        "height_above_array_m": geo.height_m,
        "speed_m_s": geo.speed_m_s,
        "track_noise_estimate_m": inputs.track.residual_rms_m(),
        "speed_of_sound_m_s": atm.c_m_s,
        "array_aperture_m": inputs.layout.aperture_m,
    }


def check_campaign(campaign: Campaign) -> list[dict]:
    """Load every pass (raising :class:`FlyoverInputError` on the first bad input) and summarise."""
    loaded = [load_pass(campaign, name) for name in campaign.passes]
    rates = {p.spec.name: p.recording.sample_rate_hz for p in loaded}
    if len(set(rates.values())) > 1:
        raise FlyoverInputError(
            "passes that share the array layout have different sample rates",
            str(campaign.config_path), "one sample rate for the campaign's recordings",
            ", ".join(f"{n}: {r:g} Hz" for n, r in rates.items()),
            "a recorder setting changed between passes; resample or split the campaign")
    for p in loaded:
        check_memory(campaign, p)
    return [pass_summary(p) for p in loaded]


def check_memory(campaign: Campaign, inputs: PassInputs, share: float = 0.5) -> None:
    """Refuse a window or grid whose processing would need more than ``share`` of the memory."""
    an = campaign.analysis
    settings = ChainSettings(third_octave_bands(an.band_min_hz, an.band_max_hz), inputs.weights,
                             campaign.array.pressure_gain, an.interpolation)
    fs = inputs.recording.sample_rate_hz
    n_grid = int(np.prod(campaign.grid.shape))
    need = window_memory_bytes(n_grid, len(inputs.layout.channel), int(an.window_s * fs),
                               len(settings.bands), settings)
    have = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    if need > share * have:
        raise FlyoverInputError(
            "window or vehicle grid too large for the memory available",
            f"{campaign.config_path}, keys vehicle.grid and analysis.window_s",
            f"at most {share * have / 2 ** 30:.1f} GiB per window ({share:.0%} of this machine)",
            f"about {need / 2 ** 30:.1f} GiB for {campaign.grid.shape[0]} x "
            f"{campaign.grid.shape[1]} grid points, {len(inputs.layout.channel)} microphones and "
            f"{an.window_s} s windows",
            "use a coarser spacing_m, a smaller grid or a shorter window_s")


def format_summary(campaign: Campaign, summaries: list[dict]) -> str:
    """Human-readable text of :func:`check_campaign`'s result."""
    lines = [f"campaign {campaign.config_path}",
             f"  array: {summaries[0]['channels']} channels, aperture "
             f"{summaries[0]['array_aperture_m']:.2f} m, {campaign.array.mounting}",
             f"  grid: {campaign.grid.shape[0]} x {campaign.grid.shape[1]} points at "
             f"{campaign.grid.spacing_m} m; regions: {', '.join(campaign.regions)}"]
    for s in summaries:
        clock = ("clock offset auto: the workflow estimates it from the anchor"
                 if s["clock_offset_auto"] else f"clock offset {s['clock_offset_s']:+.3f} s")
        lines += [
            f"  {s['pass']} ({s['label'] or 'no label'}): {s['channels_used']}/{s['channels']} "
            f"channels, {s['duration_s']:.2f} s at {s['sample_rate_hz']:.0f} Hz",
            f"    recording from {s['epoch_utc']} ({clock}); "
            f"track {s['track_start_utc']} to {s['track_end_utc']}",
            f"    track covers {s['covered_s'][1] - s['covered_s'][0]:.2f} s of the recording; "
            f"overhead at {s['overhead_utc']} (t = {s['overhead_s']:.2f} s)",
            f"    closest {s['closest_distance_m']:.1f} m, "
            f"height {s['height_above_array_m']:.1f} m, "
            f"speed {s['speed_m_s']:.1f} m/s, c = {s['speed_of_sound_m_s']:.2f} m/s, "
            f"track noise ~{s['track_noise_estimate_m'] * 100:.1f} cm"]
    lines.append("all inputs are valid")
    return "\n".join(lines)
