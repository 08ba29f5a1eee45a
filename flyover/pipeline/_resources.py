"""What a pass's processing costs: the chain's settings for its windows, the memory a window
takes against what the machine has, and the bytes its results take."""

from __future__ import annotations

import os

import numpy as np

from flyover.acoustics.bands import third_octave_bands
from flyover.imaging.chain import ChainSettings, window_memory_bytes
from flyover.io.results import pass_output_bytes
from flyover.campaign import Campaign
from flyover.model.errors import FlyoverInputError
from flyover.pipeline.context import PassInputs


def chain_settings(inputs: PassInputs, bands, interpolation: str, *, weights=None,
                   absorption: bool = True) -> ChainSettings:
    """How the pass's array is imaged: its mounting's G and, for raised microphones, their
    images in the ground and the ground's surface."""
    array = inputs.array
    raised = array.mounting == "raised"
    return ChainSettings(bands, inputs.weights if weights is None else weights,
                         array.pressure_gain, interpolation, absorption,
                         image_mic_enu_m=inputs.layout.image_enu_m if raised else None,
                         ground=array.ground)


# The share of the machine's memory the windows imaged at a time may take (the rest: the
# recording's reads, the results, the other jobs).
MEMORY_SHARE = 0.5


def check_memory(campaign: Campaign, inputs: PassInputs, share: float = MEMORY_SHARE) -> None:
    """Refuse a window or grid whose processing would need more than ``share`` of the memory."""
    need, have = _window_need_bytes(campaign, inputs), _memory_bytes()
    if need > share * have:
        an = campaign.analysis
        raise FlyoverInputError(
            "window or vehicle grid too large for the memory available",
            f"{campaign.config_path}, keys vehicle.grid and analysis.window_s",
            f"at most {share * have / 2 ** 30:.1f} GiB per window ({share:.0%} of this machine)",
            f"about {need / 2 ** 30:.1f} GiB for {campaign.grid.shape[0]} x "
            f"{campaign.grid.shape[1]} grid points, {len(inputs.layout.channel)} microphones and "
            f"{an.window_s} s windows",
            "use a coarser spacing_m, a smaller grid or a shorter window_s")


def windows_at_once(campaign: Campaign, inputs: PassInputs, threads: int,
                    share: float = MEMORY_SHARE) -> int:
    """How many windows the image step may image at a time on ``threads``: one per thread, as
    many as fit in ``share`` of the memory (at least one)."""
    fit = int(share * _memory_bytes() // max(_window_need_bytes(campaign, inputs), 1))
    return max(1, min(threads, fit))


def _window_need_bytes(campaign: Campaign, inputs: PassInputs) -> int:
    an = campaign.analysis
    settings = chain_settings(inputs, third_octave_bands(an.band_min_hz, an.band_max_hz),
                              an.interpolation)
    return window_memory_bytes(int(np.prod(campaign.grid.shape)), len(inputs.layout.channel),
                               int(an.window_s * inputs.sample_rate_hz), len(settings.bands),
                               settings)


def _memory_bytes() -> int:
    return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")


def output_bytes(campaign: Campaign, inputs: PassInputs) -> int:
    """About how many bytes the results of a pass will take."""
    an = campaign.analysis
    n_windows = an.window_count_bound(inputs.duration_s)
    return pass_output_bytes(n_windows, len(third_octave_bands(an.band_min_hz, an.band_max_hz)),
                             int(np.prod(campaign.grid.shape)))
