"""Detector geometry, antenna patterns and delays against published values and formulas."""

from __future__ import annotations

import numpy as np
import pytest

from ringsearch.errors import InputError
from ringsearch.physics import detectors as dets
from ringsearch.physics.detectors import (
    Detector,
    antenna_pattern,
    detector_from_mapping,
    get_detector,
    gmst,
    load_detectors,
    time_delay_from_geocentre,
)
from ringsearch.physics.units import C_SI

GPS = 1126259462.42


def test_hanford_livingston_light_travel_time():
    # H1-L1 light-travel time is 10.0 ms (Abbott et al. 2016, PRL 116, 061102)  # from memory
    h, l = get_detector("H1"), get_detector("L1")
    dt = np.linalg.norm(h.location - l.location) / C_SI
    assert dt == pytest.approx(10.0e-3, abs=0.05e-3)


@pytest.mark.parametrize("name, xyz, xarm, yarm", [
    # Earth-fixed vertex positions (m) and arm unit vectors from Anderson et al. 2001,
    # PRD 63, 042003, Table I / LIGO-T980044  # from memory
    ("H1", (-2.16141492636e6, -3.83469517889e6, 4.60035022664e6),
     (-0.22389266154, 0.79983062746, 0.55690487831),
     (-0.91397818574, 0.02609403989, -0.40492342125)),
    ("L1", (-7.4276044e4, -5.49628371971e6, 3.22425701744e6),
     (-0.95457412153, -0.14158077340, -0.26218911324),
     (0.29774156894, -0.48791033647, -0.82054461286)),
    ("V1", (4.54637409900e6, 8.42989697626e5, 4.37857696241e6),
     (-0.70045821479, 0.20848948619, 0.68256166277),
     (-0.05379255368, -0.96908180549, 0.24080451708)),
])
def test_site_geometry_matches_published_cartesian_values(name, xyz, xarm, yarm):
    det = get_detector(name)
    np.testing.assert_allclose(det.location, xyz, atol=2.0)  # metres
    np.testing.assert_allclose(det.xarm, xarm, atol=2e-5)
    np.testing.assert_allclose(det.yarm, yarm, atol=2e-5)


def test_gmst_matches_the_standard_polynomial():
    # GMST = 18.697374558 h + 24.06570982441908 h * D, D = days since J2000.0 (UT1),
    # USNO / Meeus "Astronomical Algorithms" ch. 12 (good to ~0.1 s per century)  # from memory
    gps = np.array([630720013.0, 1126259462.42, 1.4e9])  # 2000-01-01T00:00 UTC and later
    utc_minus_gps = np.array([-13.0, -17.0, -18.0])  # leap seconds  # from memory
    jd = 2451544.5 + (gps + utc_minus_gps - 630720013.0 + 13.0) / 86400.0
    d = jd - 2451545.0
    expect = np.mod(18.697374558 + 24.06570982441908 * d, 24.0) * np.pi / 12
    diff = np.angle(np.exp(1j * (gmst(gps) - expect)))
    assert np.max(np.abs(diff)) < 1e-4


def _zenith(det: Detector, gps: float) -> tuple[float, float]:
    lat, lon = np.radians(det.latitude_deg), np.radians(det.longitude_deg)
    return float(lon + gmst(gps)), float(lat)


@pytest.mark.parametrize("name", ["H1", "L1", "V1", "K1"])
def test_zenith_source_has_unit_response_for_every_polarisation(name):
    # For an L-shaped interferometer with perpendicular horizontal arms and the wave
    # arriving from the zenith, F+^2 + Fx^2 = 1 (Schutz 2011, CQG 28, 125023, eq. 9-10)
    det = get_detector(name)
    ra, dec = _zenith(det, GPS)
    psi = np.linspace(0, np.pi, 7)
    fp, fc = antenna_pattern(det, ra, dec, psi, GPS)
    # arms tilted by up to 3.6e-3 rad (K1) and 90.0 +- 0.0003 deg apart change this at 1e-5
    np.testing.assert_allclose(fp**2 + fc**2, 1.0, atol=3e-5)


def _textbook(theta, phi, psi):
    # Thorne 1987 ("300 Years of Gravitation", eq. 104) / Schutz 2011, CQG 28, 125023:
    # detector frame with x, y along the arms and z = x cross y.
    a = 0.5 * (1 + np.cos(theta) ** 2) * np.cos(2 * phi)
    b = np.cos(theta) * np.sin(2 * phi)
    return a * np.cos(2 * psi) - b * np.sin(2 * psi), a * np.sin(2 * psi) + b * np.cos(2 * psi)


@pytest.mark.parametrize("name", ["V1", "X9"])
def test_antenna_patterns_agree_with_the_textbook_formula(name):
    det = get_detector("V1") if name == "V1" else Detector(
        "X9", -31.3, 115.7, 20.0, xarm_bearing_deg=45.0, yarm_bearing_deg=315.0)
    rng = np.random.default_rng(4)
    n = 200
    ra, dec = rng.uniform(0, 2 * np.pi, n), np.arcsin(rng.uniform(-1, 1, n))
    psi, gps = rng.uniform(0, np.pi, n), GPS + rng.uniform(0, 86400, n)
    fp, fc = antenna_pattern(det, ra, dec, psi, gps)

    # Detector-frame description of the same geometry, built here from the arm vectors.
    x, y = det.xarm, det.yarm
    z = np.cross(x, y)
    lon = ra - gmst(gps)
    nvec = np.stack([np.cos(dec) * np.cos(lon), np.cos(dec) * np.sin(lon), np.sin(dec)], -1)
    theta = np.arccos(np.clip(nvec @ z, -1, 1))
    phi = np.arctan2(nvec @ y, nvec @ x)
    # psi-independent combination: no sign convention involved
    a, b = _textbook(theta, phi, 0.0)
    np.testing.assert_allclose(fp**2 + fc**2, a**2 + b**2, atol=1e-12)
    # Full check: the textbook's polarisation axes at psi_T = 0 are (p, q) = (e_theta,
    # -e_phi) of the detector frame.  Our axes m = cos(psi) e_phi + sin(psi) e_theta (sky
    # frame) have the same handedness about the propagation direction and lie at angle
    # alpha from (p, q); the textbook's psi_T turns (F+ + iFx) by exp(+2i psi_T) while a
    # rotation of the axes by alpha turns it by exp(-2i alpha), so psi_T = -alpha.
    e_th = np.stack([np.cos(theta) * np.cos(phi), np.cos(theta) * np.sin(phi),
                     -np.sin(theta)], -1) @ np.stack([x, y, z])
    e_ph = np.stack([-np.sin(phi), np.cos(phi), np.zeros(n)], -1) @ np.stack([x, y, z])
    e_phi_sky = np.stack([-np.sin(lon), np.cos(lon), np.zeros(n)], -1)
    e_theta_sky = np.stack([np.sin(dec) * np.cos(lon), np.sin(dec) * np.sin(lon),
                            -np.cos(dec)], -1)
    m = np.cos(psi)[:, None] * e_phi_sky + np.sin(psi)[:, None] * e_theta_sky
    psi_t = -np.arctan2(np.sum(m * -e_ph, -1), np.sum(m * e_th, -1))
    tp, tc = _textbook(theta, phi, psi_t)
    np.testing.assert_allclose(fp, tp, atol=1e-12)
    np.testing.assert_allclose(fc, tc, atol=1e-12)


def test_polarisation_rotation_and_bounds():
    rng = np.random.default_rng(7)
    ra, dec = rng.uniform(0, 2 * np.pi, 50), np.arcsin(rng.uniform(-1, 1, 50))
    fp0, fc0 = antenna_pattern("L1", ra, dec, 0.0, GPS)
    fp, fc = antenna_pattern("L1", ra, dec, 0.3, GPS)
    # rotating the polarisation axes by psi rotates (F+, Fx) by -2 psi
    np.testing.assert_allclose(fp + 1j * fc, (fp0 + 1j * fc0) * np.exp(-2j * 0.3), atol=1e-12)
    assert np.all(fp**2 + fc**2 <= 1.0 + 1e-6)


def test_time_delay_geometry():
    det = get_detector("H1")
    ra, dec = _zenith(det, GPS)
    # from the zenith, the wave reaches H1 earlier than the geocentre by (r . up)/c
    up = np.array([np.cos(dec) * np.cos(ra - gmst(GPS)), np.cos(dec) * np.sin(ra - gmst(GPS)),
                   np.sin(dec)])
    assert float(time_delay_from_geocentre(det, ra, dec, GPS)) == pytest.approx(
        -(det.location @ up) / C_SI, rel=1e-12)
    # opposite direction, opposite delay; |delay| <= R_earth / c ~ 21.3 ms
    rng = np.random.default_rng(1)
    r, d = rng.uniform(0, 2 * np.pi, 100), np.arcsin(rng.uniform(-1, 1, 100))
    t1 = time_delay_from_geocentre("L1", r, d, GPS)
    t2 = time_delay_from_geocentre("L1", r + np.pi, -d, GPS)
    np.testing.assert_allclose(t1, -t2, atol=1e-15)
    assert np.all(np.abs(t1) < 0.0214)


def test_gw150914_arrives_at_livingston_first():
    # GW150914 reached L1 about 7 ms before H1 (Abbott et al. 2016, PRL 116, 061102); with
    # a sky position in the published southern arc (ra 1.95, dec -1.27 rad  # from memory)
    dl = time_delay_from_geocentre("L1", 1.95, -1.27, GPS)
    dh = time_delay_from_geocentre("H1", 1.95, -1.27, GPS)
    assert float(dh - dl) == pytest.approx(6.9e-3, abs=0.6e-3)


def test_custom_detectors_from_mapping_and_toml(tmp_path):
    d = detector_from_mapping("E1", {"latitude_deg": 43.63141394, "longitude_deg": 10.50449661,
                                     "elevation_m": 51.884, "xarm_bearing_deg": 19.4326})
    v = get_detector("V1")
    np.testing.assert_allclose(d.response, v.response, atol=1e-12)
    np.testing.assert_allclose(d.location, v.location, atol=1e-6)
    path = tmp_path / "extra.toml"
    path.write_text("[Z1]\nlatitude_deg = 10.0\nlongitude_deg = 20.0\nxarm_bearing_deg = 0.0\n")
    assert list(load_detectors(path)) == ["Z1"]
    assert get_detector("Z1").latitude_deg == 10.0
    fp, fc = antenna_pattern("Z1", 1.0, 0.2, 0.1, GPS)
    assert np.isfinite(fp) and np.isfinite(fc)
    dets._REGISTRY.pop("Z1")


@pytest.mark.parametrize("call, word", [
    (lambda: get_detector("G7"), "G7"),
    (lambda: detector_from_mapping("E1", {"latitude_deg": 1.0, "longitude_deg": 2.0}),
     "xarm_bearing_deg"),
    (lambda: detector_from_mapping("E1", {"latitude_deg": 1.0, "longitude_deg": 2.0,
                                          "xarm_bearing_deg": 0.0, "colour": 1}), "colour"),
    (lambda: Detector("E1", 91.0, 0.0, 0.0, 0.0, 270.0), "91"),
    (lambda: Detector("E1", 40.0, 0.0, 0.0, 0.0, 10.0), "arms"),
    # a declination beyond the poles (degrees given for radians) or NaN is not a direction
    (lambda: antenna_pattern("H1", 1.0, 9.0, 0.0, GPS), "declination"),
    (lambda: time_delay_from_geocentre("L1", 1.0, np.array([0.1, np.nan]), GPS),
     "declination"),
])
def test_bad_detector_input(call, word):
    with pytest.raises(InputError, match=word):
        call()


def test_bad_toml_file(tmp_path):
    p = tmp_path / "bad.toml"
    p.write_text("[E1\nlatitude = 3")
    with pytest.raises(InputError, match="bad.toml"):
        load_detectors(p)
    with pytest.raises(InputError, match="missing.toml"):
        load_detectors(tmp_path / "missing.toml")
