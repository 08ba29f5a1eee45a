"""Property-based tests: random mutations of valid inputs either load or raise flyover's own
error type, never anything else (hypothesis)."""

from __future__ import annotations

import shutil

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from flyover.geometry.frames import SiteFrame
from flyover.io.config import load_campaign
from flyover.io.readers.calibration_csv import read_calibration
from flyover.io.readers.layout_csv import read_layout
from flyover.io.readers.track_csv import read_track
from flyover.model.errors import FlyoverInputError

SITE = SiteFrame(47.0, 8.0, 400.0)
FUZZ = settings(max_examples=60, deadline=None,
                suppress_health_check=[HealthCheck.function_scoped_fixture,
                                       HealthCheck.too_slow])


@st.composite
def mutated(draw, text: str):
    """The text with a few random edits: characters deleted, inserted or replaced, lines
    dropped, duplicated or swapped, fields blanked."""
    lines = text.splitlines()
    for _ in range(draw(st.integers(1, 4))):
        kind = draw(st.sampled_from(["delete", "insert", "replace", "drop", "dup", "swap",
                                     "blank", "junk"]))
        i = draw(st.integers(0, max(len(lines) - 1, 0)))
        if not lines:
            lines = [""]
        line = lines[i]
        j = draw(st.integers(0, max(len(line) - 1, 0)))
        if kind == "delete" and line:
            lines[i] = line[:j] + line[j + 1:]
        elif kind == "insert":
            lines[i] = line[:j] + draw(st.sampled_from(list(",.-:eZx \t\"'#;") + ["nan", "1e400"]))\
                + line[j:]
        elif kind == "replace" and line:
            lines[i] = line[:j] + draw(st.characters(codec="utf-8")) + line[j + 1:]
        elif kind == "drop" and len(lines) > 1:
            lines.pop(i)
        elif kind == "dup":
            lines.insert(i, line)
        elif kind == "swap" and len(lines) > 2:
            k = draw(st.integers(0, len(lines) - 1))
            lines[i], lines[k] = lines[k], lines[i]
        elif kind == "blank":
            fields = line.split(",")
            fields[draw(st.integers(0, len(fields) - 1))] = ""
            lines[i] = ",".join(fields)
        elif kind == "junk":
            lines[i] = draw(st.text(max_size=30))
    return "\n".join(lines) + "\n"


def _loads_or_refuses(call):
    try:
        call()
    except FlyoverInputError:
        pass


@pytest.fixture(scope="module")
def originals(tiny_campaign_dir):
    return {name: (tiny_campaign_dir / name).read_text()
            for name in ("layout.csv", "p1/track.csv", "p1/calibration.csv", "campaign.yaml")}


@FUZZ
@given(data=st.data())
def test_layout_reader(originals, tmp_path, data):
    path = tmp_path / "layout.csv"
    path.write_text(data.draw(mutated(originals["layout.csv"])))
    _loads_or_refuses(lambda: read_layout(path, SITE))


@FUZZ
@given(data=st.data())
def test_calibration_reader(originals, tmp_path, data):
    path = tmp_path / "calibration.csv"
    path.write_text(data.draw(mutated(originals["p1/calibration.csv"])))
    _loads_or_refuses(lambda: read_calibration(path, range(1, 17)))


@FUZZ
@given(data=st.data())
def test_track_reader(originals, tmp_path, data):
    path = tmp_path / "track.csv"
    # A shorter track keeps each example quick; the mutations are the same.
    text = "\n".join(originals["p1/track.csv"].splitlines()[:40]) + "\n"
    path.write_text(data.draw(mutated(text)))
    _loads_or_refuses(lambda: read_track(path, SITE))


@FUZZ
@given(data=st.data())
def test_config_reader(tiny_campaign_dir, originals, tmp_path_factory, data):
    folder = tmp_path_factory.mktemp("fuzz")
    for name in ("layout.csv",):
        shutil.copy(tiny_campaign_dir / name, folder / name)
    path = folder / "campaign.yaml"
    path.write_text(data.draw(mutated(originals["campaign.yaml"])))
    _loads_or_refuses(lambda: load_campaign(path))
