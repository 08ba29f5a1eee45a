"""The pass as sound: focused waveforms in source time and their levels."""

from __future__ import annotations

import copy

import numpy as np
import pandas as pd
import pytest
import soundfile
import yaml
from conftest import TINY_SCENARIO

from flyover.acoustics.waveform import focused_block, hann_taper, overlap_add


def test_hann_blocks_half_a_block_apart_add_back_to_the_signal():
    # Overlap-add with the periodic Hann window at half overlap is an identity away from the
    # ends (common practice, Allen & Rabiner 1977); naive reference: the signal itself.
    rng = np.random.default_rng(1)
    x = rng.standard_normal(4096)
    block, hop = 256, 128
    taper = hann_taper(block)
    starts = range(-hop, len(x), hop)
    padded = np.concatenate([np.zeros(hop), x, np.zeros(block)])
    blocks = [focused_block(padded[None, s + hop:s + hop + block], taper=taper) for s in starts]
    y = overlap_add(blocks, hop, len(x) + hop)[hop:]
    np.testing.assert_allclose(y, x, atol=1e-12)
    with pytest.raises(ValueError, match="even number"):
        hann_taper(255)


def test_focused_block_is_the_weighted_mean_with_each_microphone_compensated_per_line():
    # Naive reference: each microphone filtered alone by its real line gain through a full
    # DFT, then the weighted mean; a weight of 0 leaves a microphone out.
    rng = np.random.default_rng(2)
    x = rng.standard_normal((3, 64))
    w = np.array([1.0, 0.0, 2.0])
    gain = 1.0 + rng.random((3, 33))
    full_gain = np.concatenate([gain, gain[:, -2:0:-1]], axis=1)
    each = np.real(np.fft.ifft(np.fft.fft(x, axis=1) * full_gain, axis=1))
    np.testing.assert_allclose(focused_block(x, weights=w, line_gain=gain),
                               (each[0] + 2 * each[2]) / 3, atol=1e-12)
    np.testing.assert_allclose(focused_block(x, weights=w), (x[0] + 2 * x[2]) / 3)


@pytest.fixture(scope="module")
def one_source_pass(tmp_path_factory):
    """The tiny campaign's first pass with only its front source (at the front region's
    centre), through align, image, levels and listen."""
    from flyover.io.config import load_campaign
    from flyover.pipeline import align, image, levels, listen
    from flyover.sim.demo import write_campaign
    scenario = copy.deepcopy(TINY_SCENARIO)
    scenario["sources"] = scenario["sources"][:1]
    scenario["passes"] = {"p1": scenario["passes"]["p1"]}
    folder = tmp_path_factory.mktemp("one source")
    (folder / "scenario.yaml").write_text(yaml.safe_dump(scenario))
    write_campaign(folder / "scenario.yaml", folder, progress=lambda *_: None)
    campaign = load_campaign(folder / "campaign.yaml")
    out = folder / "results" / "p1"
    align.run(campaign, "p1", out)
    image.run(campaign, "p1", out, threads=2, quiet=True)
    levels.run(campaign, "p1", out)
    listen.run(campaign, "p1", out)
    return folder, out


def _window_band_levels_db(signal, start_utc_ns, rate, windows, bands):
    """Band levels (dB re 20 uPa) of a signal cut at each window, (n_windows, n_bands)."""
    from flyover.imaging.chain import signal_band_power
    from flyover.model.constants import P0_PA
    out = []
    for _, w in windows.iterrows():
        n = int(round(w["duration_s"] * rate))
        first_ns = pd.Timestamp(w["start_utc"]).value
        i = int(round((first_ns - start_utc_ns) * 1e-9 * rate))
        out.append(10 * np.log10(signal_band_power(signal[i:i + n], bands, rate) / P0_PA ** 2))
    return np.array(out)


def test_region_files_carry_the_region_band_levels(one_source_pass):
    from flyover.acoustics.bands import third_octave_bands
    from flyover.io.results.listen import LISTEN, read_wav
    from flyover.io.results.windows import read_analysed
    folder, out = one_source_pass
    index = LISTEN.read(out).set_index("file")
    assert list(index["what"]) == ["region", "region", "microphone"]
    # The regions share one full scale; each file is 16-bit PCM at the recording's rate, its
    # comment stating the scale, and its stated level is its decoded level.
    regions = index[index["what"] == "region"]
    assert regions["full_scale_pa"].nunique() == 1
    for file, row in index.iterrows():
        info = soundfile.info(out / file)
        assert info.subtype == "PCM_16" and info.samplerate == 8000
        with soundfile.SoundFile(out / file) as fh:
            assert f"full scale {row['full_scale_pa']:.6g} Pa" in fh.comment
        signal, rate = read_wav(out, file, row["full_scale_pa"])
        assert 10 * np.log10(np.mean(signal ** 2) / 4e-10) == pytest.approx(row["level_db"],
                                                                          abs=1e-3)
    windows = read_analysed(out)
    bands = third_octave_bands(200, 800)
    front = regions[regions["region"] == "front"]
    file = front.index[0]
    signal, rate = read_wav(out, file, front["full_scale_pa"].iloc[0])
    heard = _window_band_levels_db(signal, pd.Timestamp(front["start_utc"].iloc[0]).value, rate,
                                   windows, bands)
    # Against the region's levels at 1 m (a monopole: the chain's own exponent, so the level
    # at 1 m is what the array hears in source time): per window and band within 0.3 dB where
    # the level is given (the file keeps the 16 microphones' own noise and the rear region's
    # leakage, which the region's level removes; both are small for this lone source).
    table = pd.read_csv(out / "levels.csv")
    given = table[(table["region"] == "front") & np.isfinite(table["level_1m_db"])]
    row = {w: i for i, w in enumerate(windows["window"])}
    column = {b: k for k, b in enumerate(bands.nominal_hz)}
    diffs = [heard[row[r.window], column[r.band_hz]] - r.level_1m_db
             for r in given.itertuples()]
    assert len(diffs) >= 20
    assert np.max(np.abs(diffs)) < 0.3, np.round(diffs, 2)
    # Against the simulator's truth, its expected band power at 1 m: the energetic mean over
    # the analysed windows, within three standard deviations of a noise band's power measured
    # over B T (10 lg(e) / sqrt(B T) dB, Bendat & Piersol, from memory) and 0.2 dB.
    truth = pd.read_csv(folder / "truth.csv")
    truth = truth[(truth["pass"] == "p1") & (truth["source"] == "front")].set_index("band_hz")
    mean = 10 * np.log10(np.mean(10 ** (heard / 10), axis=0))
    err = mean - truth.loc[bands.nominal_hz, "level_1m_db"].to_numpy()
    spread_db = 10 * np.log10(np.e) / np.sqrt((bands.upper_hz - bands.lower_hz)
                                              * windows["duration_s"].sum())
    assert (np.abs(err) < 0.2 + 3 * spread_db).all(), np.round(err, 2)
    # The empty rear region, 2 m behind and within the main lobe at these bands, sounds
    # quieter than the front one.
    rear = regions[regions["region"] == "rear"]
    assert rear["level_db"].iloc[0] < front["level_db"].iloc[0]


def test_center_microphone_file_is_what_it_received(one_source_pass):
    # The same stretch as received: the source level at 1 m, spread over the windows'
    # distances (the mean of 1 / r^2: spherical spreading), doubled in pressure by the ground
    # plate (+6.02 dB); the motion's amplification fore and aft about cancels at Mach 0.06.
    # The received span starts one travel time (about 30 m / c) after the emission span.
    from flyover.io.results.listen import LISTEN
    from flyover.io.results.windows import read_analysed
    _, out = one_source_pass
    index = LISTEN.read(out)
    mic = index[index["what"] == "microphone"].iloc[0]
    front = index[index["region"] == "front"].iloc[0]
    delay_s = (pd.Timestamp(mic["start_utc"]) - pd.Timestamp(front["start_utc"])).total_seconds()
    assert 0.05 < delay_s < 0.2
    assert mic["duration_s"] == pytest.approx(front["duration_s"], abs=0.01)
    distance_m = read_analysed(out)["distance_m"].to_numpy()
    expected = front["level_db"] + 10 * np.log10(np.mean(distance_m ** -2.0)) + 6.02
    assert mic["level_db"] == pytest.approx(expected, abs=0.5)
