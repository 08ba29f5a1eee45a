"""Site and body frames against GeographicLib worked examples and pyproj geodesics."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from pyproj import Geod

from flyover.geometry.frames import SiteFrame, Transform, attitude_rotation, body_to_site


def test_enu_matches_geographiclib_cartconvert_example():
    # GeographicLib CartConvert(1) man page, EXAMPLES: origin (33 N, 44 E, 20 m), point
    # (33.3, 44.4, 6000 m) -> local (37288.97, 33374.29, 5783.64) m; printed Up is 7 mm low
    # (reference-values section 7), so 0.02 m.
    site = SiteFrame(33.0, 44.0, 20.0)
    np.testing.assert_allclose(site.to_enu(33.3, 44.4, 6000.0), [37288.97, 33374.29, 5783.64],
                               atol=0.02)


def test_enu_distances_match_pyproj_geodesic():
    # pyproj 3.7 Geod('WGS84').inv: short horizontal distances equal the ENU chord to < 1 mm.
    # On the ellipsoid (h = 0): at height h the ENU distances scale by (R + h)/R.
    site = SiteFrame(52.1, 5.2, 0.0)
    geod = Geod(ellps="WGS84")
    lon2, lat2, _ = geod.fwd(5.2, 52.1, 37.0, 800.0)
    e, n, _ = site.to_enu(lat2, lon2, 0.0)
    assert np.hypot(e, n) == pytest.approx(800.0, abs=1e-3)
    assert np.rad2deg(np.arctan2(e, n)) == pytest.approx(37.0, abs=1e-4)


def test_one_degree_of_latitude_at_30_deg():
    # WGS84 meridian degree at 30 deg: 110852.442 m (reference-values section 7, Wikipedia
    # "Latitude" table). The ENU chord of +-0.5 deg is shorter than the arc by ~ L^3/(24 R^2).
    site = SiteFrame(30.0, 0.0, 0.0)
    a = site.to_enu(29.5, 0.0, 0.0)
    b = site.to_enu(30.5, 0.0, 0.0)
    chord = np.linalg.norm(b - a)
    assert chord == pytest.approx(110852.44, rel=1e-4)


@settings(max_examples=60, deadline=None)
@given(st.floats(-60, 60), st.floats(-170, 170), st.floats(-100, 3000),
       st.floats(-3000, 3000), st.floats(-3000, 3000), st.floats(-50, 500))
def test_site_frame_round_trip(lat0, lon0, h0, e, n, u):
    site = SiteFrame(lat0, lon0, h0)
    lat, lon, h = site.to_wgs84([e, n, u])
    np.testing.assert_allclose(site.to_enu(lat, lon, h), [e, n, u], atol=1e-6)


def test_attitude_body_axes():
    # Aerospace convention (common practice): yaw 90 deg points the nose east; pitch up lifts it;
    # roll right wing down puts the starboard axis below the horizon.
    nose = body_to_site([0, 0, 0], attitude_rotation(90.0, 0.0, 0.0)).apply([1.0, 0.0, 0.0])
    np.testing.assert_allclose(nose, [1, 0, 0], atol=1e-12)
    up = body_to_site([0, 0, 0], attitude_rotation(0.0, 10.0, 0.0)).apply([1.0, 0.0, 0.0])
    assert up[2] == pytest.approx(np.sin(np.deg2rad(10.0)))
    wing = body_to_site([0, 0, 0], attitude_rotation(0.0, 0.0, 20.0)).apply([0.0, 1.0, 0.0])
    assert wing[2] == pytest.approx(-np.sin(np.deg2rad(20.0)))
    down = body_to_site([0, 0, 5], attitude_rotation(0.0, 0.0, 0.0)).apply([0.0, 0.0, 1.0])
    np.testing.assert_allclose(down, [0, 0, 4])


def test_transforms_refuse_wrong_chain():
    t = Transform("body", "site-enu", np.eye(3), np.zeros(3))
    with pytest.raises(ValueError, match="cannot apply"):
        t.then(t)
    back = t.then(t.inverse())
    assert back.source == "body" and back.target == "body"
