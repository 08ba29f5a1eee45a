"""Track formats as the field writes them: PX4 ULog, ArduPilot DataFlash, NMEA 0183, GPX 1.1.

Each test writes a log following the format's published description (flyover.sim.flightlogs),
reads it back through flyover (which reads through pyulog, pymavlink, pynmea2 and gpxpy) and
compares the track with the positions, attitude, times and motor speeds written in.
"""

from __future__ import annotations

import numpy as np
import pytest

from flyover.geometry.frames import SiteFrame
from flyover.io.readers import read, reader_for
from flyover.model.errors import FlyoverInputError
from flyover.sim import flightlogs as fl
from flyover.sync.gpstime import GPS_EPOCH_UTC_NS, WEEK_NS, gps_minus_utc_s, gps_to_utc_ns

SITE = SiteFrame(47.0, 8.0, 400.0)
N_GEOID = 48.3                  # geoid height at the site, m (ellipsoidal = MSL + N)
T0_NS = int(np.datetime64("2026-06-01T10:00:00", "ns").astype(np.int64))


def flight(n=60, rate_hz=10.0, start_ns=T0_NS):
    """A level pass east at 20 m/s, 30 m over the site origin, with some pitch and roll."""
    t_s = np.arange(n) / rate_hz
    enu = np.stack([-30 + 20.0 * t_s, 5.0 + 0 * t_s, 30.0 + 0 * t_s], axis=1)
    lat, lon, h = SITE.to_wgs84(enu)
    ypr = np.stack([np.full(n, 88.0), 3.0 + 0.5 * np.sin(t_s), -4.0 + t_s], axis=1)
    utc = start_ns + np.round(t_s * 1e9).astype(np.int64)
    return utc, enu, lat, lon, h, ypr


def test_leap_seconds_between_gps_time_and_utc():
    # GPS - UTC: 17 s from 2015-07-01, 18 s from 2017-01-01 (IERS Bulletin C; from memory).
    day = np.datetime64("2016-06-01T00:00:00", "ns").astype(np.int64)
    assert gps_minus_utc_s(day) == 17
    assert gps_minus_utc_s(T0_NS) == 18
    assert gps_minus_utc_s(GPS_EPOCH_UTC_NS) == 0
    # The step itself: GPS 2017-01-01T00:00:17 is still 2016-12-31T23:59:59 UTC... the leap
    # second; GPS 2017-01-01T00:00:18 is UTC midnight.
    midnight = np.datetime64("2017-01-01T00:00:00", "ns").astype(np.int64)
    assert gps_to_utc_ns(midnight + 18_000_000_000) == midnight
    assert gps_to_utc_ns(midnight + 16_000_000_000) == midnight - 1_000_000_000


def test_nmea_track_with_checksums_geoid_separation_and_no_fix(tmp_path):
    utc, enu, lat, lon, h, ypr = flight()
    lines = []
    for k in range(len(utc)):
        lines += fl.nmea_fix_sentences(utc[k], lat[k], lon[k], h[k] - N_GEOID, N_GEOID, 20.0,
                                       88.0, quality=0 if 20 <= k < 25 else 4,
                                       heading_deg=88.0)
    lines[7] = lines[7][:-2] + "00"           # one bad checksum: skipped and counted
    (tmp_path / "fix.nmea").write_text("\n".join(lines) + "\n")
    samples = read("track", tmp_path / "fix.nmea", site=SITE)
    assert reader_for("track", tmp_path / "fix.nmea").format == "NMEA 0183"
    # Sentence 7 is the third fix's HDT: its GGA and RMC still count.
    keep = np.r_[0:20, 25:len(utc)]
    np.testing.assert_array_equal(samples.utc_ns, utc[keep])
    # Minutes with 6 decimals: 1.9 mm of latitude; heights to the millimetre.
    np.testing.assert_allclose(samples.enu_m, enu[keep], atol=0.005)
    assert samples.attitude_deg[:, 0] == pytest.approx(88.0)
    assert any("1 of" in n and "bad checksum" in n for n in samples.notes)
    assert any("5 position samples dropped" in n for n in samples.notes)
    # RMC's 20 m/s (written in knots) against the positions' 20 m/s.
    assert any("RMC ground speed 20.0 m/s" in n and "by 0.00 m/s rms" in n for n in samples.notes)
    # Too many bad sentences: refused, naming rows.
    bad = [s[:-2] + "00" if i % 5 == 0 else s for i, s in enumerate(lines)]
    (tmp_path / "bad.nmea").write_text("\n".join(bad) + "\n")
    with pytest.raises(FlyoverInputError, match="bad checksum"):
        read("track", tmp_path / "bad.nmea", site=SITE)


def test_gpx_track_read_with_its_height_datum(tmp_path):
    utc, enu, lat, lon, h, _ = flight()
    fl.write_gpx(tmp_path / "t.gpx", utc, lat, lon, h - N_GEOID)
    samples = read("track", tmp_path / "t.gpx", site=SITE, height_datum="msl",
                   geoid_undulation_m=N_GEOID)
    np.testing.assert_array_equal(samples.utc_ns, utc)
    np.testing.assert_allclose(samples.enu_m, enu, atol=1e-3)
    assert samples.attitude_deg is None and samples.holds == ["position"]
    with pytest.raises(FlyoverInputError, match="geoid"):
        read("track", tmp_path / "t.gpx", site=SITE, height_datum="msl")


def ulog_topics(utc, lat, lon, h, ypr, *, no_fix=(), utc_set=True):
    """The flight's PX4 topics with two ESCs (6000 + k and 6100 + k rpm at sample k)."""
    rpm = np.array([6000.0, 6100.0])[:, None] + np.arange(len(utc))[None, :]
    fix = ~np.isin(np.arange(len(utc)), list(no_fix))
    return fl.px4_topics(utc, lat, lon, h, ypr, geoid_m=N_GEOID, rpm=rpm, fix=fix,
                         utc_valid=utc_set)


ESC_REPORT = fl.ESC_REPORT


def test_ulog_track_attitude_utc_and_motor_speeds(tmp_path):
    utc, enu, lat, lon, h, ypr = flight()
    fl.write_ulog(tmp_path / "f.ulg", ulog_topics(utc, lat, lon, h, ypr), nested=ESC_REPORT)
    samples = read("track", tmp_path / "f.ulg", site=SITE)
    assert samples.source == "PX4 ULog (vehicle_global_position)"
    np.testing.assert_array_equal(samples.utc_ns, utc)    # boot time mapped onto UTC exactly
    # float32 ellipsoidal height in the estimate: to a millimetre at 450 m.
    np.testing.assert_allclose(samples.enu_m, enu, atol=2e-3)
    np.testing.assert_allclose(samples.attitude_deg, ypr, atol=1e-4)   # float32 quaternions
    assert [m.motor for m in samples.motors] == [1, 2]
    np.testing.assert_allclose(samples.motors[1].rpm, 6100.0 + np.arange(len(utc)))
    np.testing.assert_array_equal(samples.motors[0].utc_ns, utc)
    assert samples.holds == ["position", "attitude", "rotor speeds"]
    assert "spread" in samples.notes[0] and "0.000 ms" in samples.notes[0]


def test_ulog_without_fix_for_part_of_the_pass_drops_and_reports(tmp_path):
    utc, enu, lat, lon, h, ypr = flight()
    fl.write_ulog(tmp_path / "f.ulg", ulog_topics(utc, lat, lon, h, ypr,
                                                  no_fix=range(30, 36)), nested=ESC_REPORT)
    samples = read("track", tmp_path / "f.ulg", site=SITE)
    keep = np.r_[0:30, 36:len(utc)]
    np.testing.assert_array_equal(samples.utc_ns, utc[keep])
    assert any("6 position samples dropped" in n for n in samples.notes)


def test_ulog_refusals(tmp_path):
    utc, enu, lat, lon, h, ypr = flight()
    topics = ulog_topics(utc, lat, lon, h, ypr, utc_set=False)
    fl.write_ulog(tmp_path / "no-utc.ulg", topics, nested=ESC_REPORT)
    with pytest.raises(FlyoverInputError, match="never gives UTC"):
        read("track", tmp_path / "no-utc.ulg", site=SITE)
    fl.write_ulog(tmp_path / "no-gnss.ulg", topics[1:], nested=ESC_REPORT)
    with pytest.raises(FlyoverInputError, match="no GNSS data"):
        read("track", tmp_path / "no-gnss.ulg", site=SITE)


DF_TYPES = [
    fl.DataflashType(130, "GPS", "QBIHBcLLeffffB",
                     "TimeUS,Status,GMS,GWk,NSats,HDop,Lat,Lng,Alt,Spd,GCrs,VZ,Yaw,U"),
    fl.DataflashType(131, "POS", "QLLfff", "TimeUS,Lat,Lng,Alt,RelHomeAlt,RelOriginAlt"),
    fl.DataflashType(132, "ATT", "Qffffffff",
                     "TimeUS,DesRoll,Roll,DesPitch,Pitch,DesYaw,Yaw,ErrRP,ErrYaw"),
    fl.DataflashType(133, "ESC", "QBffff", "TimeUS,Instance,RPM,RawRPM,Volt,Curr"),
]


def dataflash_messages(utc, lat, lon, h, ypr, *, leap_s=18, no_fix=()):
    gps_ns = utc + leap_s * 1_000_000_000 - GPS_EPOCH_UTC_NS
    week, ms = gps_ns // WEEK_NS, (gps_ns % WEEK_NS) // 1_000_000
    boot = (utc - utc[0]) // 1000 + 9_000_000
    out = []
    for k in range(len(utc)):
        status = 1 if k in no_fix else 3
        out.append((130, (int(boot[k]), status, int(ms[k]), int(week[k]), 14, 70,
                          int(round(lat[k] * 1e7)), int(round(lon[k] * 1e7)),
                          int(round((h[k] - N_GEOID) * 100)), 20.0, 88.0, 0.0, 0.0, 1)))
        out.append((131, (int(boot[k]), int(round(lat[k] * 1e7)), int(round(lon[k] * 1e7)),
                          h[k] - N_GEOID, 30.0, 30.0)))
        out.append((132, (int(boot[k]), 0.0, ypr[k, 2], 0.0, ypr[k, 1], 0.0, ypr[k, 0], 0, 0)))
        for inst in (0, 1):
            out.append((133, (int(boot[k]), inst, 5000.0 + 100 * inst + k, 0.0, 22.0, 5.0)))
    return out


@pytest.mark.parametrize("when, leap_s", [("2026-06-01T10:00:00", 18),
                                          ("2016-06-01T10:00:00", 17)])
def test_dataflash_track_gps_week_to_utc_with_the_leap_seconds(tmp_path, when, leap_s):
    start = int(np.datetime64(when, "ns").astype(np.int64))
    utc, enu, lat, lon, h, ypr = flight(start_ns=start)
    fl.write_dataflash(tmp_path / "f.bin", DF_TYPES,
                       dataflash_messages(utc, lat, lon, h, ypr, leap_s=leap_s))
    samples = read("track", tmp_path / "f.bin", site=SITE, geoid_undulation_m=N_GEOID)
    assert samples.source == "ArduPilot DataFlash (POS)"
    np.testing.assert_array_equal(samples.utc_ns, utc)
    # Lat/Lng in 1e-7 deg (1.1 cm), float32 altitude.
    np.testing.assert_allclose(samples.enu_m, enu, atol=0.015)
    np.testing.assert_allclose(samples.attitude_deg, ypr, atol=1e-4)
    assert [m.motor for m in samples.motors] == [1, 2]
    np.testing.assert_allclose(samples.motors[1].rpm, 5100.0 + np.arange(len(utc)))


def test_dataflash_no_fix_dropped_and_msl_needs_the_geoid(tmp_path):
    utc, enu, lat, lon, h, ypr = flight()
    fl.write_dataflash(tmp_path / "f.bin", DF_TYPES,
                       dataflash_messages(utc, lat, lon, h, ypr, no_fix=range(10, 14)))
    samples = read("track", tmp_path / "f.bin", site=SITE, geoid_undulation_m=N_GEOID)
    assert len(samples.utc_ns) == len(utc) - 4
    assert any("4 position samples dropped" in n for n in samples.notes)
    with pytest.raises(FlyoverInputError, match="mean sea level"):
        read("track", tmp_path / "f.bin", site=SITE)


def test_lever_arm_moves_a_pitched_and_rolled_track_to_the_body_origin(tiny_copy):
    # The GNSS antenna 0.4 m from the body origin (0.25 m forward, 0.1 m to port, 0.3 m up) on a
    # vehicle pitched 6 deg and rolled 9 deg: its positions are the origin's plus R r. Given the
    # lever arm, flyover's fitted track is the simulator's true path within 1 cm.
    import pandas as pd
    from conftest import edit_campaign

    from flyover.geometry.frames import attitude_rotation, enu_from_body_matrix
    from flyover.io.config import load_campaign
    from flyover.sim.scenario_file import load_scenario
    from flyover.model.timebase import iso_utc
    from flyover.pipeline.context import load_pass
    from flyover.sim.scenario import pass_truth_track

    scenario, _, _ = load_scenario(tiny_copy / "scenario.yaml")
    ps = next(p for p in scenario.passes if p.name == "p1")
    truth = pass_truth_track(scenario, ps)
    t = np.arange(-2.0, ps.duration_s + 2.0, 0.1)
    att = np.tile([90.0, 6.0, 9.0], (len(t), 1))
    lever = np.array([0.25, -0.1, -0.3])
    assert np.linalg.norm(lever) == pytest.approx(0.4, abs=0.01)
    rot = enu_from_body_matrix(attitude_rotation(att[:, 0], att[:, 1], att[:, 2]))
    antenna = truth.position(t) + rot @ lever
    pd.DataFrame({"time_utc": [iso_utc(ps.epoch_utc_ns + int(round(v * 1e9))) for v in t],
                  "east_m": antenna[:, 0], "north_m": antenna[:, 1], "up_m": antenna[:, 2],
                  "roll_deg": att[:, 2], "pitch_deg": att[:, 1], "yaw_deg": att[:, 0]}
                 ).to_csv(tiny_copy / "p1" / "track.csv", index=False, float_format="%.6f")

    def with_lever(data):
        data["passes"]["p1"].update(track_antenna_offset_m=lever.tolist(),
                                    track_position_noise_m=0.002)
    edit_campaign(tiny_copy, with_lever)
    inputs = load_pass(load_campaign(tiny_copy / "campaign.yaml"), "p1")
    # Times on the pass epoch: the clock offset is the one the simulation used.
    assert inputs.clock.epoch_utc_ns == ps.epoch_utc_ns
    tt = np.linspace(0.5, ps.duration_s - 0.5, 200)
    err = np.linalg.norm(inputs.track.position(tt) - truth.position(tt), axis=1)
    assert err.max() < 0.01
    # Without it the track is the antenna's, 0.4 m off.
    edit_campaign(tiny_copy, lambda d: d["passes"]["p1"].pop("track_antenna_offset_m"))
    off = load_pass(load_campaign(tiny_copy / "campaign.yaml"), "p1")
    assert np.linalg.norm(off.track.position(tt) - truth.position(tt), axis=1).min() > 0.39


def test_a_pass_flown_with_an_autopilot_log_and_its_rotor_speeds(tiny_copy, capsys):
    # The tiny pass p1's track as the autopilot logged it (PX4 ULog, one motor at 6000 rpm):
    # `flyover check` reads it without conversion, prints what it holds and the rotor's speed;
    # a rotor naming a motor the log lacks is refused.
    import yaml

    from flyover.cli import main
    from flyover.io.config import load_campaign
    from flyover.sim.scenario_file import load_scenario
    from flyover.pipeline.context import load_pass
    from flyover.sim.scenario import pass_truth_track

    scenario, site, _ = load_scenario(tiny_copy / "scenario.yaml")
    ps = next(p for p in scenario.passes if p.name == "p1")
    truth = pass_truth_track(scenario, ps)
    t = np.arange(-2.0, ps.duration_s + 2.0, 0.1)
    utc = ps.epoch_utc_ns + np.round(t * 1e9).astype(np.int64)
    lat, lon, h = site.to_wgs84(truth.position(t))
    fl.write_ulog(tiny_copy / "p1" / "flight.ulg",
                  fl.px4_topics(utc, lat, lon, h, truth.attitude_deg(t), geoid_m=N_GEOID,
                                rpm=np.full((1, len(t)), 6000.0)), nested=fl.ESC_REPORT)
    path = tiny_copy / "campaign.yaml"
    data = yaml.safe_load(path.read_text())
    data["passes"]["p1"]["track"] = "p1/flight.ulg"
    data["vehicle"]["rotors"] = {"front": {"body_m": [1.0, 0.0, 0.0], "blades": 2, "motor": 1}}
    path.write_text(yaml.safe_dump(data))
    assert main(["check", str(path)]) == 0
    out = capsys.readouterr().out
    assert "track file flight.ulg: PX4 ULog (vehicle_global_position), 10.0 Hz" in out
    assert "holds position, attitude, rotor speeds" in out
    assert "rotor front (motor 1, 2 blades)" in out and "mean 6000 rpm" in out
    assert "blade passing 200.0 Hz" in out
    inputs = load_pass(load_campaign(path), "p1")
    (rotor,) = inputs.rotors
    np.testing.assert_allclose(rotor.rpm, 6000.0)
    tt = np.linspace(0.5, ps.duration_s - 0.5, 50)
    assert np.abs(inputs.track.position(tt) - truth.position(tt)).max() < 0.01
    data["vehicle"]["rotors"]["front"]["motor"] = 3
    path.write_text(yaml.safe_dump(data))
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert "rotor 'front' names motor 3, which the log does not hold" in err
    assert "flight.ulg" in err
    # The log of another flight, an hour later: it does not cover the recording.
    data["vehicle"]["rotors"]["front"]["motor"] = 1
    path.write_text(yaml.safe_dump(data))
    fl.write_ulog(tiny_copy / "p1" / "flight.ulg",
                  fl.px4_topics(utc + 3600 * 10 ** 9, lat, lon, h, truth.attitude_deg(t),
                                geoid_m=N_GEOID, rpm=np.full((1, len(t)), 6000.0)),
                  nested=fl.ESC_REPORT)
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert "the track does not cover the recording" in err and "flight.ulg" in err
