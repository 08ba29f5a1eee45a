"""Recordings as field systems write them: Broadcast WAV, TDMS, split takes, several recorders."""

from __future__ import annotations

import copy
import datetime as dt
import struct

import numpy as np
import pytest
import soundfile as sf
import yaml

from flyover.io import bwf
from flyover.io.config import load_campaign
from flyover.io.readers import read
from flyover.io.readers.soundfile_recording import write_recording
from flyover.io.readers.tdms_recording import write_tdms
from flyover.io.recorders import join_files
from flyover.model.errors import FlyoverInputError

from conftest import TINY_SCENARIO, edit_campaign

FS = 8000.0


def ns(*args) -> int:
    return int(dt.datetime(*args, tzinfo=dt.timezone.utc).timestamp()) * 10 ** 9


# --- Broadcast WAV (EBU Tech 3285) ---------------------------------------------------------

def test_bext_field_layout_as_the_standard_gives_it():
    # EBU Tech 3285 (version 2), the bext chunk's fixed part, little-endian (from memory):
    # Description 256 B at 0, Originator 32 at 256, OriginatorReference 32 at 288,
    # OriginationDate 10 at 320, OriginationTime 8 at 330, TimeReferenceLow/High uint32 at
    # 338/342, Version uint16 at 346, UMID 64 at 348, loudness 5 x int16 at 412, reserved 180
    # at 422, CodingHistory from 602. Packed here by hand, field by field.
    body = bytearray(602)
    body[0:14] = b"Take 12, mic A"
    body[256:265] = b"FieldRec1"
    body[320:330] = b"2026-06-17"
    body[330:338] = b"07:49:31"
    samples = 2 ** 32 + 1234567          # a time reference past 32 bits: both halves matter
    struct.pack_into("<IIH", body, 338, samples & 0xFFFFFFFF, samples >> 32, 2)
    body += b"A=PCM,F=48000,W=24,M=mono\r\n"
    info = bwf.parse_bext(bytes(body))
    assert info.description == "Take 12, mic A" and info.originator == "FieldRec1"
    assert info.origination_date == "2026-06-17" and info.origination_time == "07:49:31"
    assert info.time_reference_samples == samples and info.version == 2
    assert info.coding_history.startswith("A=PCM,F=48000")
    # And flyover's own writer lays the fields out the same way.
    again = bwf.bext_chunk(time_reference_samples=samples, origination_date="2026-06-17",
                           origination_time="07:49:31", description="Take 12, mic A")
    assert again[338:348] == bytes(body[338:348]) and again[320:338] == bytes(body[320:338])


def test_time_reference_gives_the_start():
    # Samples since midnight at the file's rate: 07:49:31.25 at 48 kHz is
    # (7 * 3600 + 49 * 60 + 31.25) * 48000 = 1 352 220 000 samples (computed by hand).
    assert (7 * 3600 + 49 * 60 + 31.25) * 48000 == 1_352_220_000
    start = bwf.start_utc_ns("2026-06-17", "07:49:31", 1_352_220_000, 48000.0)
    assert start == ns(2026, 6, 17, 7, 49, 31) + 250_000_000
    # The standard allows '-', '_', ':', ' ' and '.' as date separators.
    assert bwf.start_utc_ns("2026:06:17", "07-49-31", 1_352_220_000, 48000.0) == start
    # Written just after midnight for a take that began at 23:59:50 the day before.
    late = bwf.start_utc_ns("2026-06-18", "00:00:20", int(86390 * 48000), 48000.0)
    assert late == ns(2026, 6, 17, 23, 59, 50)


def test_broadcast_wav_start_and_ixml_names_are_read(tmp_path):
    path = tmp_path / "take.wav"
    start = ns(2026, 6, 17, 7, 49, 31) + 125_000_000     # a whole number of samples at 8 kHz
    write_recording(path, np.zeros((2, 800), np.float32), FS, start_utc_ns=start)
    rec = read("recording", path)
    assert rec.start_utc_ns == start and "bext" in rec.time_reference
    # soundfile still reads the samples of the file with the added chunk.
    assert sf.info(str(path)).frames == 800
    ixml = (b'<?xml version="1.0"?><BWFXML><TRACK_LIST><TRACK><CHANNEL_INDEX>2</CHANNEL_INDEX>'
            b'<NAME>PPS</NAME></TRACK><TRACK><CHANNEL_INDEX>1</CHANNEL_INDEX><NAME>Mic 1</NAME>'
            b'</TRACK></TRACK_LIST></BWFXML>')
    path.write_bytes(bwf.insert_chunks(path.read_bytes(), {b"iXML": ixml}))
    assert read("recording", path).channel_names == ("Mic 1", "PPS")


# --- TDMS -----------------------------------------------------------------------------------

def test_tdms_written_by_nptdms_reads_back(tmp_path):
    from nptdms import ChannelObject, GroupObject, RootObject, TdmsWriter
    start = ns(2026, 6, 17, 7, 49, 31) + 123_456_000   # nptdms's writer keeps microseconds
    data = np.vstack([np.arange(1000.0), -np.arange(1000.0), np.sin(np.arange(1000.0))])
    props = {"wf_start_time": np.datetime64(start, "ns"), "wf_increment": 1 / 25600}
    path = tmp_path / "daq.tdms"
    with TdmsWriter(str(path)) as writer:   # two segments, as a DAQ logging in blocks writes
        for part in (slice(0, 600), slice(600, 1000)):
            writer.write_segment([RootObject({}), GroupObject("Array")]
                                 + [ChannelObject("Array", name, data[k, part], properties=props)
                                    for k, name in enumerate(["Mic 01", "Mic 02", "PPS"])])
    rec = read("recording", path)
    assert rec.format == "TDMS" and rec.sample_rate_hz == 25600.0 and rec.n_frames == 1000
    assert rec.channel_names == ("Array/Mic 01", "Array/Mic 02", "Array/PPS")
    assert rec.start_utc_ns == start
    np.testing.assert_array_equal(rec.read(590, 20, [1, 2]), data[1:, 590:610].astype(np.float32))


def test_tdms_timestamp_conversion():
    # NI's TDMS format (from memory): a timestamp is an int64 of seconds since
    # 1904-01-01T00:00:00Z and a uint64 of 2^-64 s fractions; 1904 to 1970 is 2 082 844 800 s.
    from nptdms.timestamp import TdmsTimestamp

    from flyover.io.readers.tdms_recording import tdms_timestamp_ns
    unix = ns(2026, 6, 17, 7, 49, 31) // 10 ** 9
    assert tdms_timestamp_ns(TdmsTimestamp(unix + 2_082_844_800, 1 << 63)) == (
        unix * 10 ** 9 + 500_000_000)
    assert tdms_timestamp_ns(TdmsTimestamp(unix + 2_082_844_800, 1 << 34)) == unix * 10 ** 9 + 1


# --- split takes ------------------------------------------------------------------------------

def split_take(tmp_path, fmt, gap_samples=0, n=2400, per=1000):
    start = ns(2026, 6, 17, 7, 49, 31)
    data = np.random.default_rng(0).normal(0, 0.1, (3, n)).astype(np.float32)
    paths = []
    for k, lo in enumerate(range(0, n, per)):
        stamp = start + int(round((lo + (gap_samples if k == 2 else 0)) / FS * 1e9))
        path = tmp_path / f"take-{k + 1}.{'tdms' if fmt == 'tdms' else 'wav'}"
        if fmt == "tdms":
            write_tdms(path, data[:, lo:lo + per], FS, stamp, ["a", "b", "c"])
        else:
            write_recording(path, data[:, lo:lo + per], FS, start_utc_ns=stamp)
        paths.append(path)
    return data, paths


@pytest.mark.parametrize("fmt", ["bwf", "tdms"])
def test_split_take_is_joined_in_time_order(tmp_path, fmt):
    data, paths = split_take(tmp_path, fmt)
    joined = join_files(list(reversed(paths)), where="test")   # any order given
    assert joined.n_frames == data.shape[1] and joined.paths == paths
    np.testing.assert_array_equal(joined.read(950, 1100, [0, 2]), data[[0, 2], 950:2050])


@pytest.mark.parametrize("gap", [5, -5])
def test_gap_or_overlap_between_files_is_refused(tmp_path, gap):
    _, paths = split_take(tmp_path, "bwf", gap_samples=gap)
    with pytest.raises(FlyoverInputError) as err:
        join_files(paths, where="campaign.yaml, recorder 'rack-a'")
    text = str(err.value)
    assert "take-2.wav" in text and "take-3.wav" in text and "5 samples" in text
    assert ("gap" if gap > 0 else "overlap") in text and "rack-a" in text


def test_files_of_one_recorder_with_different_rates_are_refused(tmp_path):
    write_recording(tmp_path / "a.wav", np.zeros((2, 100)), 8000)
    write_recording(tmp_path / "b.wav", np.zeros((2, 100)), 16000)
    with pytest.raises(FlyoverInputError, match="differ in sample rate") as err:
        join_files([tmp_path / "a.wav", tmp_path / "b.wav"], where="recorder 'rack-a'")
    assert "16000 Hz" in str(err.value) and "b.wav" in str(err.value)


# --- a pass of several recorders ------------------------------------------------------------

RECORDERS = [
    {"name": "rack-a", "microphones": [1, 8], "format": "bwf", "file_s": 1.2,
     "start_after_s": 0.0, "clock_error_s": 0.3, "drift_ppm": 50,
     "timing": ["pps", "irig-b-dcls"]},
    {"name": "rack-b", "microphones": [9, 16], "format": "tdms", "file_s": 1.0,
     "start_after_s": -0.021, "clock_error_s": -0.3, "drift_ppm": -50, "timing": ["pps"]},
]


@pytest.fixture(scope="module")
def two_recorder_dir(tmp_path_factory):
    from flyover.sim.demo import write_campaign
    scenario = copy.deepcopy(TINY_SCENARIO)
    scenario["passes"]["p1"]["recorders"] = RECORDERS
    folder = tmp_path_factory.mktemp("two-recorders")
    (folder / "scenario.yaml").write_text(yaml.safe_dump(scenario))
    write_campaign(folder / "scenario.yaml", folder, progress=lambda *_: None)
    return folder


def test_two_recorders_are_put_on_one_time_base(two_recorder_dir):
    from flyover.pipeline._facts import pass_summary
    from flyover.pipeline.context import load_pass
    campaign = load_campaign(two_recorder_dir / "campaign.yaml")
    spec = campaign.passes["p1"]
    assert all(r.start_utc_ns is None for r in spec.recorders)   # no typed start anywhere
    inputs = load_pass(campaign, "p1")
    a, b = inputs.recorders
    truth_epoch = TINY_SCENARIO["passes"]["p1"]["clock_offset_s"]
    # Each recorder's true start against the pass epoch, from its timing channels.
    assert abs(inputs.clock.start_s[a.mics[0]] - 0.0) < 1e-12
    assert abs(inputs.clock.start_s[b.mics[0]] - (-0.021)) < 20e-6
    assert abs(a.clock.rate_error_ppm - 50) < 0.5 and abs(b.clock.rate_error_ppm + 50) < 3.0
    epoch_s = (inputs.clock.epoch_utc_ns - ns(2026, 6, 1, 10, 0, 0)) / 1e9
    assert abs(epoch_s - truth_epoch) < 20e-6
    summary = pass_summary(inputs)
    rec = {r["name"]: r for r in summary["recorders"]}
    kind = rec["rack-a"]["timing_kind"]
    assert kind.startswith("IRIG-B") and "PPS" in kind
    assert abs(rec["rack-b"]["offset_s"] - 0.3) < 1e-3   # its own clock was 0.3 s early
    assert rec["rack-b"]["offset_uncertainty_s"] < 20e-6
    assert rec["rack-b"]["layout_channels"] == "9-16" and rec["rack-b"]["format"] == "TDMS"


@pytest.mark.parametrize("change,message", [
    (lambda r: r[1].update(channels={"9-15": "1-7", "8": 8}), "layout channel 8 is mapped twice"),
    (lambda r: r[1].update(channels={"9-15": "1-7"}), "mapped to no recorder"),
    (lambda r: r[1].update(channels={"9-16": "1-8"}, timing_channel="Sync"),
     "no channel named 'Sync'"),
    (lambda r: r[0].update(channels={"1-7": "1-7", "8": 7}), "recorder channel 7 is mapped twice"),
])
def test_bad_channel_maps_are_refused_naming_the_recorder(two_recorder_dir, tmp_path, change,
                                                          message):
    import shutil
    from flyover.pipeline.context import load_pass
    folder = tmp_path / "c"
    shutil.copytree(two_recorder_dir, folder)
    path = edit_campaign(folder, lambda d: change(d["passes"]["p1"]["recording"]))
    with pytest.raises(FlyoverInputError, match=message) as err:
        load_pass(load_campaign(path), "p1")
    assert "passes.p1.recording" in str(err.value)
    if "no recorder" not in message:
        assert "recorder 'rack-" in str(err.value)
    if "Sync" in message:
        assert "'daq/PPS'" in str(err.value)   # the names that do exist


def pass_levels(folder, tmp_path):
    """Align, image and level pass p1 of a campaign; its band levels at 1 m per region."""
    from flyover.io.results.levels import LEVELS
    from flyover.pipeline import align, image, levels
    campaign = load_campaign(folder / "campaign.yaml")
    out = tmp_path / folder.name
    align.run(campaign, "p1", out)
    image.run(campaign, "p1", out, quiet=True)
    levels.run(campaign, "p1", out)
    table = LEVELS.read(out)
    return table[table["level_db"].notna()].set_index(["window", "region", "band_hz"])


def test_two_recorders_image_as_one(two_recorder_dir, tiny_campaign_dir, tmp_path):
    # The same simulated pass (sources, noise, track) recorded by one recorder, and by two with
    # +-50 ppm drift, recorders starting 21 ms apart and their own clocks 0.3 s wrong: the
    # resolved region levels of the same windows agree within 0.1 dB (the accuracy).
    one = pass_levels(tiny_campaign_dir, tmp_path)["level_1m_db"]
    two = pass_levels(two_recorder_dir, tmp_path)["level_1m_db"]
    both = one.index.intersection(two.index)
    assert len(both) >= 0.8 * len(one) and len(both) >= 10
    assert np.max(np.abs(one[both] - two[both])) < 0.1


def test_irig_b_alone_needs_no_start_time(tmp_path):
    # A plain WAV (no time in the file) with an AM IRIG-B channel: nothing typed, the code says
    # which UTC every sample has.
    from flyover.pipeline.context import load_pass
    from flyover.sim.demo import write_campaign
    scenario = copy.deepcopy(TINY_SCENARIO)
    scenario["passes"]["p2"]["recorders"] = [
        {"name": "logger", "microphones": [1, 16], "format": "wav", "clock_error_s": 2.5,
         "drift_ppm": -30, "timing": ["irig-b-am"]}]
    (tmp_path / "scenario.yaml").write_text(yaml.safe_dump(scenario))
    write_campaign(tmp_path / "scenario.yaml", tmp_path, progress=lambda *_: None)
    campaign = load_campaign(tmp_path / "campaign.yaml")
    spec = campaign.passes["p2"]
    assert spec.recorders[0].start_utc_ns is None and "recording_start_utc" not in (
        tmp_path / "campaign.yaml").read_text().split("p2:")[1]
    inputs = load_pass(campaign, "p2")
    truth = ns(2026, 6, 1, 10, 5, 0) + 200_000_000       # start + clock offset of the scenario
    assert abs(inputs.clock.epoch_utc_ns - truth) < 20_000
    assert abs(inputs.recorders[0].clock.rate_error_ppm + 30) < 0.5
