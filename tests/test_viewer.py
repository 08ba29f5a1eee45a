"""The results viewer's data: maps stored as bytes, verdicts, and a page that needs no network."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

from flyover.io.viewer_page import DYNAMIC_RANGE_DB, STEP_DB, stored_map


def test_stored_map_is_db_under_the_peak_in_steps():
    # Naive reference: 10 lg(m / peak) per point, clipped to the range, in 0.1 dB steps; a
    # point with nothing left (<= 0 after diagonal removal) is the floor (0).
    m = np.array([[4e-4, 2e-4, 0.0], [4e-5, 4e-6, -1e-6]])      # (n_x, n_y)
    image, peak_db = stored_map(m)
    assert image.shape == (3, 2) and image.dtype == np.uint8       # (n_y, n_x)
    assert peak_db == pytest.approx(10 * np.log10(4e-4 / 4e-10))
    expected = np.array([[0.0, -10.0], [-3.0103, -20.0], [None, None]], dtype=float)
    for (j, i), db in np.ndenumerate(expected):
        want = 0 if np.isnan(db) else max(0, round((db + DYNAMIC_RANGE_DB) / STEP_DB))
        assert image[j, i] == want, (j, i)
    # A map with no power at all is all floor, and its peak is unknown, not a number.
    empty, peak = stored_map(np.zeros((2, 2)))
    assert not empty.any() and np.isnan(peak)


def test_verdicts_follow_the_level_columns():
    from flyover.pipeline.viewer import verdicts
    levels = pd.DataFrame({"level_db": [60.0, 58.0, np.nan],
                           "resolved": [True, False, False]})
    assert list(verdicts(levels)) == ["resolved", "dominant, not resolved", "no level"]


def one_window(pass_name="a", region="r"):
    """The data of a page with one pass, one window, one band and one region."""
    from flyover.io.viewer_page import ViewerData
    image, peak = stored_map(np.ones((3, 2)))
    return ViewerData(
        title="check", bands_hz=[500.0], grid={"x_m": [0.0, 1.0, 2.0], "y_m": [0.0, 1.0]},
        passes=pd.DataFrame({"pass": [pass_name], "label": ["l"], "status": ["accepted"],
                             "option": [f"{pass_name} (l, accepted)"]}),
        windows=pd.DataFrame({"pass": [pass_name], "window": [0], "polar_angle_deg": [90.0],
                              "time_utc": ["t"], "east_m": [0.0], "north_m": [0.0],
                              "analysed": [True]}),
        maps=pd.DataFrame({"pass": [pass_name], "window": [0], "band_hz": [500.0],
                           "image": [image], "peak_db": [peak]}),
        levels=pd.DataFrame({"pass": [pass_name], "window": [0], "polar_angle_deg": [90.0],
                             "band_hz": [500.0], "region": [region], "level_db": [60.0],
                             "ci90_low_db": [59.0], "ci90_high_db": [61.0],
                             "verdict": ["resolved"], "note": [""]}),
        regions=pd.DataFrame({"region": [region], "x0": [0.0], "x1": [1.0], "y0": [0.0],
                              "y1": [1.0]}),
        microphones=pd.DataFrame({"pass": [pass_name], "east_m": [0.0], "north_m": [0.0]}),
        listening=pd.DataFrame({"pass": [pass_name], "region": [region],
                                "file": [f"{pass_name}/listen/r.wav"]}),
        narrowband=pd.DataFrame({"pass": [pass_name], "window": [0], "region": [region],
                                 "frequency_hz": [np.arange(8.0, 100.0, 8.0, dtype=np.float32)],
                                 "psd_db": [np.full(12, 40.0, np.float32)]}),
        harmonics=pd.DataFrame({"pass": [pass_name], "window": [0], "rotor": ["nose"],
                                "frequency_hz": [64.0]}))


def test_page_needs_nothing_from_the_network():
    # The page inlines its plotting library and data, so no script, style or image element
    # points to a server (the workflow's browser test checks the requests themselves).
    from flyover.io.viewer_page import viewer_html
    html = viewer_html(one_window())
    assert "<script" in html and "Bokeh" in html
    assert not re.search(r"""<(script|link|img)\b[^>]*(src|href)=["']?https?://""", html)


def test_names_from_the_campaign_file_stay_text_in_the_browser(tmp_path):
    # A region and a pass named with HTML and URL characters: the page shows the names as
    # written, creates no element from them, and links the listening file by its real path.
    import shutil
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        pytest.skip("Chromium is not installed (Debian package 'chromium'; .ci/run installs it)")
    from playwright.sync_api import sync_playwright

    from flyover.io.viewer_page import viewer_html
    region, pass_name = '<img src=x onerror="window.hit=1">', "pass #1"
    page_file = tmp_path / "viewer.html"
    page_file.write_text(viewer_html(one_window(pass_name, region)), encoding="utf-8")
    with sync_playwright() as play:
        chromium = play.chromium.launch(executable_path=browser, args=[
            "--no-sandbox", "--disable-gpu", "--disable-background-networking"])
        page = chromium.new_page()
        page.goto(page_file.as_uri())
        page.wait_for_function("() => window.Bokeh && Bokeh.documents.length > 0")
        model = "name => Bokeh.documents[0].get_model_by_name(name)"
        page.evaluate(f"() => {{ ({model})('regions').selected.indices = [0]; }}")
        page.wait_for_function(f"() => ({model})('audio').text.includes('audio')")
        status = page.locator("text=region <img").first.inner_text()
        source = page.evaluate(f"() => ({model})('audio').text")
        hit = page.evaluate("() => window.hit === 1")
        chromium.close()
    assert region in status and not hit
    assert 'src="pass%20%231/listen/r.wav"' in source
