"""The command line: summaries, templates, exit codes, no tracebacks."""

from __future__ import annotations

import numpy as np
import pandas as pd
import soundfile as sf
import yaml

from flyover.cli import main
from flyover.io.config import load_campaign


def test_check_prints_summary(tiny_campaign_dir, capsys):
    assert main(["check", str(tiny_campaign_dir / "campaign.yaml")]) == 0
    out = capsys.readouterr().out
    for fragment in ("16/16 microphones used", "recorder 'recorder': WAV file recording.wav",
                     "overhead at", "closest 30.0 m", "all inputs are valid"):
        assert fragment in out


def test_check_bad_input_exit_2_without_traceback(tiny_copy, capsys):
    path = tiny_copy / "campaign.yaml"
    data = yaml.safe_load(path.read_text())
    data["vehicle"]["gird"] = data["vehicle"].pop("grid")
    path.write_text(yaml.safe_dump(data))
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert "unknown key 'vehicle.gird'" in err and "did you mean 'grid'?" in err
    assert "Traceback" not in err


def test_template_is_a_valid_campaign_shape(tmp_path, capsys):
    out = tmp_path / "t.yaml"
    assert main(["template", "-o", str(out)]) == 0
    # The template names files that do not exist yet; everything else must validate.
    campaign = load_campaign(out)
    assert "pass-1" in campaign.passes


def test_calibrate_one_channel_then_all(tmp_path, capsys):
    # 94 dB re 20 uPa is 1.0024 Pa rms (20 uPa * 10**(94/20); IEC 60942 calibrator level).
    fs = 8000
    t = np.arange(2 * fs) / fs
    amp_units = 0.05
    x = np.zeros((len(t), 3), dtype=np.float32)
    x[:, 1] = amp_units * np.sqrt(2) * np.sin(2 * np.pi * 1000 * t)
    sf.write(tmp_path / "cal.wav", x, fs, subtype="FLOAT")
    csv = tmp_path / "cal.csv"
    assert main(["calibrate", str(tmp_path / "cal.wav"), "--channel", "2",
                 "--update", str(csv)]) == 0
    table = pd.read_csv(csv)
    assert list(table.channel) == [2]
    expected = 20e-6 * 10 ** (94 / 20) / amp_units
    assert abs(table.pa_per_unit.iloc[0] / expected - 1) < 1e-3
    # All channels at once fails on the silent channels, naming the first.
    assert main(["calibrate", str(tmp_path / "cal.wav")]) == 2
    assert "no calibrator tone at 1000 Hz on channel 1" in capsys.readouterr().err


def test_array_plan_prints_widths_and_where_two_points_separate(tmp_path, capsys):
    # `flyover array-plan` on a site-frame layout, no recording: a row per band and the band
    # from which two body points separate; the figure is written.
    from flyover.sim.scenario import spiral_layout
    mics = spiral_layout(6, 8, 0.6, 6.0)
    layout = tmp_path / "my layout.csv"
    layout.write_text("channel,east_m,north_m,up_m\n" + "".join(
        f"{k + 1},{e},{n},{u}\n" for k, (e, n, u) in enumerate(mics)))
    figure = tmp_path / "psf.png"
    assert main(["array-plan", str(layout), "--height-m", "35", "--bands", "400", "1600",
                 "--points", "1.1", "0", "-1.5", "0", "--figure", str(figure)]) == 0
    out = capsys.readouterr().out
    assert out.count("\n") >= 8 and "the two points separate from" in out
    assert figure.stat().st_size > 10_000
    assert main(["array-plan", str(layout), "--height-m", "0.1"]) == 2


def test_plan_names_the_input_file_that_changed():
    # A dry run's job block as Snakemake 9 prints it with --reason.
    from flyover.workflow.dryrun import format_plan, parse_dry_run
    text = """
rule align:
    input: /c/p1/track.csv, /c/p1/recording.wav
    output: /c/results/p1/alignment.json
    jobid: 3
    reason: Updated input files: /c/p1/track.csv
    wildcards: pass_name=p1
"""
    plan = format_plan(parse_dry_run(text))
    assert "pass p1:" in plan and "input changed: /c/p1/track.csv" in plan


def test_plan_names_the_settings_that_changed(tiny_copy):
    # A step's record of what it ran with, then two edits: the plan names exactly those keys.
    from conftest import edit_campaign

    from flyover.workflow.dryrun import format_plan
    from flyover.workflow.settings_record import changed_settings, write_settings_record
    campaign = load_campaign(tiny_copy / "campaign.yaml")
    write_settings_record(campaign.output, campaign, "align", "p1")
    assert changed_settings(campaign.output, campaign, "align", "p1") == []
    edited = load_campaign(edit_campaign(tiny_copy, lambda d: (
        d["analysis"].update(window_s=0.2),
        d["passes"]["p1"]["atmosphere"].update(temperature_c=21.5))))
    names = changed_settings(edited.output, edited, "align", "p1")
    assert names == ["analysis.window_s", "passes.p1.atmosphere.temperature_c"]
    job = {"rule": "align", "pass": "p1", "reason": "Params have changed since last execution"}
    plan = format_plan([job], {("align", "p1"): names})
    assert "changed: analysis.window_s, passes.p1.atmosphere.temperature_c" in plan
    # A step that never recorded (an older run) falls back to the general words.
    assert changed_settings(edited.output, edited, "qc", "p1") == []
    assert "config values it uses changed" in format_plan([job])
