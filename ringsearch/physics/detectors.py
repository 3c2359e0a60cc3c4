"""Interferometer geometry: site positions, arm directions, antenna patterns, delays.

A :class:`Detector` is built from a site's geodetic latitude, longitude and
elevation (WGS-84, converted to Earth-fixed Cartesian coordinates by astropy's
``EarthLocation``) and the directions of its two arms (bearing, i.e. azimuth
measured from local North toward East, and altitude above the local
horizontal).  From that it gives the response tensor
``D = (x x^T - y y^T) / 2`` of an L-shaped interferometer, the antenna
patterns ``F_plus``, ``F_cross`` for any sky position, polarisation angle and
GPS time, and the light-travel delay from the geocentre.

Conventions (those of Anderson et al. 2001, PRD 63, 042003, Appendix B):
the source sits at right ascension ``ra`` and declination ``dec``; with
``e_phi`` the unit vector of increasing right ascension and ``e_theta`` that of
increasing polar angle (southward) on the sky, the wave's polarisation axes are
``m = cos(psi) e_phi + sin(psi) e_theta`` and
``n = -sin(psi) e_phi + cos(psi) e_theta``; ``e_plus = m m - n n`` and
``e_cross = m n + n m``; ``F = D : e``.  Greenwich mean sidereal time comes
from astropy with UT1 taken equal to UTC (|UT1 - UTC| < 0.9 s by definition,
i.e. under 7e-5 rad of Earth rotation), so no Earth-orientation table has to
be downloaded.
"""

from __future__ import annotations

import math
import numbers
import tomllib
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Any

import numpy as np

from ringsearch.errors import InputError, reason
from ringsearch.physics.units import C_SI

__all__ = [
    "Detector",
    "get_detector",
    "detector_from_mapping",
    "load_detectors",
    "known_detectors",
    "gmst",
    "antenna_pattern",
    "time_delay_from_geocentre",
    "register_detector",
]


@dataclass(frozen=True)
class Detector:
    """An L-shaped interferometer at a fixed site on the Earth.

    Parameters
    ----------
    name : str
        Short name, e.g. ``"H1"``.
    latitude_deg, longitude_deg : float
        Geodetic (WGS-84) latitude and east longitude of the vertex, degrees.
    elevation_m : float
        Height of the vertex above the WGS-84 ellipsoid, metres.
    xarm_bearing_deg, yarm_bearing_deg : float
        Direction of each arm, degrees from local North toward East.
    xarm_altitude_rad, yarm_altitude_rad : float
        Tilt of each arm above the local horizontal, radians.

    Examples
    --------
    >>> det = Detector("X1", 45.0, 10.0, 0.0, 0.0, 270.0)
    >>> round(float(np.linalg.norm(det.location)) / 1e6, 1)   # metres -> 1000 km
    6.4
    """

    name: str
    latitude_deg: float
    longitude_deg: float
    elevation_m: float
    xarm_bearing_deg: float
    yarm_bearing_deg: float
    xarm_altitude_rad: float = 0.0
    yarm_altitude_rad: float = 0.0
    location: np.ndarray = field(init=False, repr=False, compare=False)
    xarm: np.ndarray = field(init=False, repr=False, compare=False)
    yarm: np.ndarray = field(init=False, repr=False, compare=False)
    response: np.ndarray = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        for key in ("latitude_deg", "longitude_deg", "elevation_m", "xarm_bearing_deg",
                    "yarm_bearing_deg", "xarm_altitude_rad", "yarm_altitude_rad"):
            value = getattr(self, key)
            if isinstance(value, bool) or not isinstance(value, numbers.Real) or \
                    not math.isfinite(value):
                raise InputError(f"detector {self.name!r}: {key} must be a finite number, "
                                 f"got {value!r}.")
            object.__setattr__(self, key, float(value))
        if not -90.0 <= self.latitude_deg <= 90.0:
            raise InputError(f"detector {self.name!r}: latitude_deg={self.latitude_deg} "
                             "is outside [-90, 90].")
        from astropy import units as u
        from astropy.coordinates import EarthLocation

        # astropy does the WGS-84 geodetic -> geocentric conversion.
        loc = EarthLocation.from_geodetic(self.longitude_deg * u.deg, self.latitude_deg * u.deg,
                                          self.elevation_m * u.m, ellipsoid="WGS84")
        xyz = np.array([loc.x.to_value(u.m), loc.y.to_value(u.m), loc.z.to_value(u.m)])
        lat, lon = math.radians(self.latitude_deg), math.radians(self.longitude_deg)
        east = np.array([-math.sin(lon), math.cos(lon), 0.0])
        north = np.array([-math.sin(lat) * math.cos(lon), -math.sin(lat) * math.sin(lon),
                          math.cos(lat)])
        up = np.array([math.cos(lat) * math.cos(lon), math.cos(lat) * math.sin(lon),
                       math.sin(lat)])

        def arm(bearing_deg: float, alt: float) -> np.ndarray:
            b = math.radians(bearing_deg)
            return (math.cos(alt) * (math.sin(b) * east + math.cos(b) * north)
                    + math.sin(alt) * up)

        x, y = arm(self.xarm_bearing_deg, self.xarm_altitude_rad), arm(
            self.yarm_bearing_deg, self.yarm_altitude_rad)
        if abs(float(np.dot(x, y))) > 0.5:
            raise InputError(f"detector {self.name!r}: the arms are within 60 degrees of each "
                             "other; check xarm/yarm bearings.")
        object.__setattr__(self, "location", xyz)
        object.__setattr__(self, "xarm", x)
        object.__setattr__(self, "yarm", y)
        object.__setattr__(self, "response", 0.5 * (np.outer(x, x) - np.outer(y, y)))

    def antenna_pattern(self, ra: Any, dec: Any, psi: Any, gps: Any
                        ) -> tuple[np.ndarray, np.ndarray]:
        """``(F_plus, F_cross)`` for sky position(s), polarisation(s) and GPS time(s).

        All angles in radians; arguments broadcast against each other.

        Examples
        --------
        >>> fp, fc = get_detector("H1").antenna_pattern(1.95, -1.27, 0.82, 1126259462.42)
        >>> bool(abs(fp) <= 1 and abs(fc) <= 1)
        True
        """
        return antenna_pattern(self, ra, dec, psi, gps)

    def time_delay_from_geocentre(self, ra: Any, dec: Any, gps: Any) -> np.ndarray:
        """Arrival time at this detector minus arrival time at the geocentre, seconds."""
        return time_delay_from_geocentre(self, ra, dec, gps)


# ---------------------------------------------------------------------------
# Published sites.  Latitude/longitude/elevation and arm directions of the
# LIGO and Virgo vertices: Althouse et al., LIGO-T980044, and Anderson et al.
# 2001, PRD 63, 042003, Table I (those tables give the arm azimuth counter-
# clockwise from East; here it is converted to a bearing = 90 deg - azimuth).
# KAGRA: the collaboration's published vertex coordinates (Akutsu et al. 2021,
# PTEP 2021, 05A101).  All digits below are # from memory.
_SITES: dict[str, dict[str, float]] = {
    "H1": dict(latitude_deg=46.45514666, longitude_deg=-119.40765714, elevation_m=142.554,
               xarm_bearing_deg=324.0006, yarm_bearing_deg=234.0006,
               xarm_altitude_rad=-6.195e-4, yarm_altitude_rad=1.25e-5),
    "L1": dict(latitude_deg=30.56289433, longitude_deg=-90.77424039, elevation_m=-6.574,
               xarm_bearing_deg=252.2835, yarm_bearing_deg=162.2835,
               xarm_altitude_rad=-3.121e-4, yarm_altitude_rad=-6.107e-4),
    "V1": dict(latitude_deg=43.63141394, longitude_deg=10.50449661, elevation_m=51.884,
               xarm_bearing_deg=19.4326, yarm_bearing_deg=289.4326,
               xarm_altitude_rad=0.0, yarm_altitude_rad=0.0),
    "K1": dict(latitude_deg=36.41186034, longitude_deg=137.30595601, elevation_m=414.181,
               xarm_bearing_deg=60.3962, yarm_bearing_deg=330.3964,
               xarm_altitude_rad=3.1414e-3, yarm_altitude_rad=-3.6270e-3),
}

_REGISTRY: dict[str, Detector] = {}


def known_detectors() -> list[str]:
    """Names accepted by :func:`get_detector` (built-in and registered)."""
    return sorted(set(_SITES) | set(_REGISTRY))


def register_detector(detector: Detector) -> Detector:
    """Make ``detector`` available to :func:`get_detector` by its name; returns it."""
    _REGISTRY[detector.name] = detector
    return detector


def get_detector(name: str | Detector) -> Detector:
    """The :class:`Detector` called ``name`` (``H1``, ``L1``, ``V1``, ``K1`` or registered).

    Examples
    --------
    >>> get_detector("L1").name
    'L1'
    """
    if isinstance(name, Detector):
        return name
    key = str(name).strip().upper() if str(name).strip().upper() in _SITES else str(name)
    if key in _REGISTRY:
        return _REGISTRY[key]
    if key in _SITES:
        _REGISTRY[key] = Detector(key, **_SITES[key])
        return _REGISTRY[key]
    raise InputError(f"unknown detector {name!r}; known detectors are "
                     f"{', '.join(known_detectors())}.")


_KEYS = ("latitude_deg", "longitude_deg", "elevation_m", "xarm_bearing_deg",
         "yarm_bearing_deg", "xarm_altitude_rad", "yarm_altitude_rad")


def detector_from_mapping(name: str, spec: Mapping[str, Any]) -> Detector:
    """A :class:`Detector` from a small dict (e.g. one TOML table).

    Keys: ``latitude_deg``, ``longitude_deg``, ``elevation_m`` (default 0),
    ``xarm_bearing_deg``, ``yarm_bearing_deg`` (default x-arm bearing - 90,
    i.e. a right-handed L seen from above), ``xarm_altitude_rad``,
    ``yarm_altitude_rad`` (default 0).

    Examples
    --------
    >>> d = detector_from_mapping("E1", {"latitude_deg": 43.6, "longitude_deg": 10.5,
    ...                                   "xarm_bearing_deg": 20.0})
    >>> d.yarm_bearing_deg
    290.0
    """
    unknown = sorted(set(spec) - set(_KEYS))
    if unknown:
        raise InputError(f"detector {name!r}: unknown key {unknown[0]!r}; allowed keys are "
                         f"{', '.join(_KEYS)}.")
    for key in ("latitude_deg", "longitude_deg", "xarm_bearing_deg"):
        if key not in spec:
            raise InputError(f"detector {name!r}: missing key {key!r}.")
    values = {k: spec[k] for k in _KEYS if k in spec}
    for k, v in values.items():
        if isinstance(v, bool) or not isinstance(v, int | float):
            raise InputError(f"detector {name!r}: {k} must be a number, got {v!r}.")
        values[k] = float(v)
    values.setdefault("elevation_m", 0.0)
    values.setdefault("yarm_bearing_deg", (values["xarm_bearing_deg"] - 90.0) % 360.0)
    return Detector(name, **values)


def load_detectors(path: str | Path) -> dict[str, Detector]:
    """Read extra detectors from a TOML file with one table per detector.

    Example file::

        [E1]
        latitude_deg = 43.63
        longitude_deg = 10.50
        xarm_bearing_deg = 19.4

    The detectors are registered, so :func:`get_detector` finds them by name.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "det.toml"
    >>> _ = p.write_text("[E1]\\nlatitude_deg = 43.6\\nlongitude_deg = 10.5\\n"
    ...                  "xarm_bearing_deg = 20.0\\n")
    >>> sorted(load_detectors(p))
    ['E1']
    """
    path = Path(path)
    try:
        tables = tomllib.loads(path.read_text())
    except FileNotFoundError:
        raise InputError(f"detector file {path} does not exist.") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"detector file {path} is not valid TOML ({reason(exc)}).") from None
    out = {}
    for name, spec in tables.items():
        if not isinstance(spec, dict):
            raise InputError(f"detector file {path}: entry {name!r} is not a table.")
        out[name] = register_detector(detector_from_mapping(name, spec))
    return out


def gmst(gps: Any) -> np.ndarray:
    """Greenwich mean sidereal time (radians) at GPS time(s), from astropy.

    UT1 is taken equal to UTC (error below 7e-5 rad) so that no IERS table is
    needed offline.

    Examples
    --------
    >>> round(float(gmst(1126259462.42)), 3)
    2.457
    """
    from astropy.time import Time
    from erfa import ErfaWarning

    gps = np.asarray(gps, dtype=float)
    if not np.all(np.isfinite(gps)):
        raise InputError("gps time must be finite.")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ErfaWarning)
        t = Time(gps, format="gps", scale="utc")
        t.delta_ut1_utc = np.zeros(gps.shape) if gps.ndim else 0.0
        return np.asarray(t.sidereal_time("mean", "greenwich").rad)


@lru_cache(maxsize=4096)
def _gmst_scalar(gps: float) -> float:
    # astropy's Time costs ~1 ms; injections ask for the same instant per detector
    return float(gmst(gps))


def _sky_basis(ra: Any, dec: Any, gps: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Earth-fixed unit vectors (source direction, e_phi, e_theta), shape (..., 3)."""
    ra, dec, gps = np.broadcast_arrays(np.asarray(ra, float), np.asarray(dec, float),
                                       np.asarray(gps, float))
    # a declination beyond the poles (or NaN) is a unit or sign mistake, not a direction
    # (1e-12 rad of slack for values computed with arcsin)
    bad = ~(np.abs(dec) <= np.pi / 2 + 1e-12)
    if np.any(bad):
        raise InputError(f"declination dec={float(dec[bad].flat[0])!r} rad must lie in "
                         "[-pi/2, pi/2].")
    if gps.ndim == 0 or np.all(gps == gps.flat[0]):
        sidereal = _gmst_scalar(float(gps.flat[0])) if gps.size else gmst(gps)
    else:
        sidereal = gmst(gps)
    lon = ra - sidereal  # longitude of the sub-source point
    cd, sd, cl, sl = np.cos(dec), np.sin(dec), np.cos(lon), np.sin(lon)
    n = np.stack([cd * cl, cd * sl, sd], axis=-1)
    e_phi = np.stack([-sl, cl, np.zeros_like(sl)], axis=-1)
    e_theta = np.stack([sd * cl, sd * sl, -cd], axis=-1)
    return n, e_phi, e_theta


def antenna_pattern(detector: str | Detector, ra: Any, dec: Any, psi: Any, gps: Any
                    ) -> tuple[np.ndarray, np.ndarray]:
    """Antenna patterns ``(F_plus, F_cross)`` of an interferometer.

    Parameters
    ----------
    detector : str or Detector
        Detector name (``H1``, ``L1``, ``V1``, ``K1`` or registered) or object.
    ra, dec : float or array
        Right ascension and declination of the source, radians.
    psi : float or array
        Polarisation angle, radians (see the module docstring for the axes).
    gps : float or array
        GPS time (sets the Earth's rotation angle).

    Returns
    -------
    F_plus, F_cross : numpy.ndarray
        Broadcast shape of the inputs (0-d for scalar input).

    Examples
    --------
    >>> fp, fc = antenna_pattern("L1", 1.95, -1.27, 0.0, 1126259462.42)
    >>> round(float(fp**2 + fc**2), 6) <= 1.0
    True
    """
    det = get_detector(detector)
    _, e_phi, e_theta = _sky_basis(ra, dec, gps)
    psi = np.asarray(psi, float)
    c, s = np.cos(psi)[..., None], np.sin(psi)[..., None]
    m = c * e_phi + s * e_theta
    n = -s * e_phi + c * e_theta
    d = det.response
    dm, dn = m @ d, n @ d  # D is symmetric
    f_plus = np.sum(dm * m, axis=-1) - np.sum(dn * n, axis=-1)
    f_cross = 2.0 * np.sum(dm * n, axis=-1)
    return f_plus, f_cross


def time_delay_from_geocentre(detector: str | Detector, ra: Any, dec: Any, gps: Any
                              ) -> np.ndarray:
    """Arrival time at the detector minus arrival time at the geocentre, seconds.

    A plane wave from direction ``n`` reaches position ``r`` at
    ``t_geo - n.r / c``.

    Examples
    --------
    >>> abs(float(time_delay_from_geocentre("H1", 1.95, -1.27, 1126259462.42))) < 0.022
    True
    """
    det = get_detector(detector)
    n, _, _ = _sky_basis(ra, dec, gps)
    return -(n @ det.location) / C_SI
