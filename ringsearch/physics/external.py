"""User-supplied waveforms (numerical relativity or other models) as injectable signals.

A file gives ``time, h_plus, h_cross`` for one source orientation, either in
geometric units (time in units of the total mass ``M``, strain as
``r h / M``) or in SI (seconds, strain at a reference distance).
:func:`load_waveform` scales it to a detector-frame mass and a luminosity
distance and places it on the sky; the resulting :class:`ExternalWaveform`
has the same ``support`` / ``detector_strain`` / ``check_sample_rate``
methods as :class:`ringsearch.physics.ringdown.RingdownSource`, so
:mod:`ringsearch.data.inject` and the campaigns treat both alike.

The polarisations are interpolated to the detector's sample times with
scipy's cubic spline (``scipy.interpolate.CubicSpline``) and are zero outside
the file's time span.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ringsearch.errors import InputError, reason
from ringsearch.physics.units import MPC_M, MSUN_M, MSUN_S

__all__ = ["ExternalWaveform", "load_waveform", "read_waveform_file", "UNITS"]

#: Unit systems a waveform file may use.
UNITS = ("geometric", "si")

_TEXT = {".txt", ".dat", ".csv", ".gz", ".tsv"}
_HDF5 = {".h5", ".hdf5", ".hdf"}


def read_waveform_file(path: str | Path) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Read ``(time, h_plus, h_cross)`` from a text, ``.npz`` or HDF5 file.

    Text files have three columns (whitespace or comma separated, ``#``
    comments); ``.npz`` and HDF5 files hold arrays/datasets named ``time``,
    ``h_plus`` and ``h_cross``.  Times must increase strictly.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "w.txt"
    >>> np.savetxt(p, np.c_[np.arange(5.0), np.ones(5), np.zeros(5)])
    >>> [a.size for a in read_waveform_file(p)]
    [5, 5, 5]
    """
    path = Path(path)
    if not path.exists():
        raise InputError(f"waveform file {path} does not exist.")
    suffix = path.suffix.lower()
    try:
        if suffix == ".npz":
            with np.load(path) as z:
                arrays = [np.asarray(z[k], dtype=float) for k in ("time", "h_plus", "h_cross")]
        elif suffix in _HDF5:
            import h5py

            with h5py.File(path, "r") as f:
                arrays = [np.asarray(f[k][()], dtype=float) for k in ("time", "h_plus", "h_cross")]
        else:
            text = path.read_text() if suffix != ".gz" else None
            delimiter = "," if (suffix == ".csv" or (text and "," in text.split("\n", 3)[-1])) \
                else None
            table = np.loadtxt(path, comments="#", delimiter=delimiter, ndmin=2)
            if table.shape[1] != 3:
                raise InputError(f"waveform file {path} has {table.shape[1]} columns; expected "
                                 "3 (time, h_plus, h_cross).")
            arrays = [table[:, 0], table[:, 1], table[:, 2]]
    except InputError:
        raise
    except KeyError as exc:
        raise InputError(f"waveform file {path} lacks the array {exc.args[0]!r} (need time, "
                         "h_plus, h_cross).") from None
    except (ValueError, OSError) as exc:
        raise InputError(f"waveform file {path} could not be read ({reason(exc)}).") from None
    t, hp, hc = arrays
    if not (t.ndim == hp.ndim == hc.ndim == 1 and t.size == hp.size == hc.size):
        raise InputError(f"waveform file {path}: time, h_plus and h_cross must be 1-d arrays "
                         "of one length.")
    if t.size < 4:
        raise InputError(f"waveform file {path} has {t.size} samples; need at least 4.")
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(hp)) and np.all(np.isfinite(hc))):
        raise InputError(f"waveform file {path} contains NaN or infinite values.")
    if np.any(np.diff(t) <= 0):
        raise InputError(f"waveform file {path}: times must increase strictly.")
    return t, hp, hc


@dataclass(frozen=True)
class ExternalWaveform:
    """A tabulated waveform in physical units, placed on the sky.

    Parameters
    ----------
    time : array
        Seconds relative to the reference point (time zero).
    h_plus, h_cross : array
        Strain polarisations at the source's distance.
    t_ref : float
        GPS time at the geocentre of the waveform's time zero.
    ra, dec, psi : float
        Sky position and polarisation angle, radians.

    Examples
    --------
    >>> t = np.linspace(-0.05, 0.05, 2001)
    >>> w = ExternalWaveform(t, 1e-21 * np.cos(400 * t), 1e-21 * np.sin(400 * t), t_ref=1e9)
    >>> round(w.support("H1")[1] - w.support("H1")[0], 6)
    0.1
    """

    time: np.ndarray
    h_plus: np.ndarray
    h_cross: np.ndarray
    t_ref: float = 0.0
    ra: float = 0.0
    dec: float = 0.0
    psi: float = 0.0
    _splines: tuple[Any, Any] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        from scipy.interpolate import CubicSpline

        t = np.asarray(self.time, dtype=float)
        hp = np.asarray(self.h_plus, dtype=float)
        hc = np.asarray(self.h_cross, dtype=float)
        if not (t.shape == hp.shape == hc.shape and t.ndim == 1 and t.size >= 4):
            raise InputError("time, h_plus and h_cross must be 1-d arrays of one length >= 4.")
        if np.any(np.diff(t) <= 0):
            raise InputError("waveform times must increase strictly.")
        for key in ("t_ref", "ra", "dec", "psi"):
            if not math.isfinite(float(getattr(self, key))):
                raise InputError(f"{key} must be finite, got {getattr(self, key)!r}.")
        object.__setattr__(self, "time", t)
        object.__setattr__(self, "h_plus", hp)
        object.__setattr__(self, "h_cross", hc)
        object.__setattr__(self, "_splines", (CubicSpline(t, hp), CubicSpline(t, hc)))

    @property
    def max_frequency(self) -> float:
        """Largest instantaneous frequency (Hz) where ``|h|`` exceeds 1% of its peak."""
        h = self.h_plus - 1j * self.h_cross
        amp = np.abs(h)
        phase = np.unwrap(np.angle(h))
        f = np.abs(np.gradient(phase, self.time)) / (2 * np.pi)
        loud = amp > 0.01 * amp.max()
        return float(f[loud].max()) if loud.any() else 0.0

    def check_sample_rate(self, sample_rate: float) -> None:
        """Raise :class:`InputError` if the waveform's frequency reaches Nyquist."""
        if not sample_rate > 0:
            raise InputError(f"sample_rate must be positive, got {sample_rate!r} Hz.")
        fmax = self.max_frequency
        if fmax >= 0.5 * sample_rate:
            raise InputError(f"sample rate {sample_rate:g} Hz is too low for the external "
                             f"waveform, which reaches {fmax:.1f} Hz.")

    def polarizations(self, times: Any, epoch: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
        """``(h_plus, h_cross)`` at geocentre GPS ``epoch + times`` (zero outside the table)."""
        s = (epoch - self.t_ref) + np.asarray(times, dtype=float)
        return self._interpolate(s)

    def _interpolate(self, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        inside = (s >= self.time[0]) & (s <= self.time[-1])
        hp = np.where(inside, self._splines[0](np.where(inside, s, self.time[0])), 0.0)
        hc = np.where(inside, self._splines[1](np.where(inside, s, self.time[0])), 0.0)
        return hp, hc

    def _delay(self, detector: Any) -> float:
        from ringsearch.physics.detectors import time_delay_from_geocentre

        return float(time_delay_from_geocentre(detector, self.ra, self.dec, self.t_ref))

    def support(self, detector: Any) -> tuple[float, float]:
        """GPS interval at ``detector`` outside which the signal is zero."""
        d = self.t_ref + self._delay(detector)
        return d + float(self.time[0]), d + float(self.time[-1])

    def arrival_time(self, detector: Any) -> float:
        """GPS time of the waveform's time zero at ``detector``."""
        return self.t_ref + self._delay(detector)

    def antenna_pattern(self, detector: Any) -> tuple[float, float]:
        """``(F_plus, F_cross)`` of ``detector`` at ``t_ref``."""
        from ringsearch.physics.detectors import antenna_pattern

        fp, fc = antenna_pattern(detector, self.ra, self.dec, self.psi, self.t_ref)
        return float(fp), float(fc)

    def detector_strain(self, detector: Any, times: Any, epoch: float = 0.0) -> np.ndarray:
        """``F_plus h_plus + F_cross h_cross`` at ``detector`` at GPS ``epoch + times``.

        A GPS ``epoch`` near ``t_ref`` with small ``times`` keeps full precision.
        """
        fp, fc = self.antenna_pattern(detector)
        s = ((epoch - self.t_ref) + np.asarray(times, dtype=float)) - self._delay(detector)
        return fp * self._interpolate(s)[0] + fc * self._interpolate(s)[1]


def load_waveform(path: str | Path, units: str = "geometric", mass: float | None = None,
                  distance: float | None = None, reference_distance: float | None = None,
                  t_ref: float = 0.0, ra: float = 0.0, dec: float = 0.0, psi: float = 0.0,
                  align: str = "peak") -> ExternalWaveform:
    """Read a waveform file and scale it to a mass and distance.

    Parameters
    ----------
    path : path
        Text/``.npz``/HDF5 file with ``time, h_plus, h_cross``
        (:func:`read_waveform_file`).
    units : {"geometric", "si"}
        ``geometric``: time in units of ``M`` and strain as ``r h / M``; needs
        ``mass`` (detector-frame total mass, solar masses) and ``distance``
        (Mpc).  ``si``: time in seconds and strain at ``reference_distance``
        Mpc; ``distance`` rescales it as ``1/distance`` (omit both to keep it).
    t_ref : float
        GPS time at the geocentre of the reference point.
    ra, dec, psi : float
        Sky position and polarisation angle, radians.
    align : {"peak", "file"}
        Reference point: the peak of ``|h_plus - i h_cross|`` or the file's
        time zero.

    Returns
    -------
    ExternalWaveform

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "nr.txt"
    >>> t = np.arange(0.0, 100.0, 0.1)               # in units of M
    >>> h = np.exp(-1j * (0.53 - 0.08j) * t)          # r h / M
    >>> np.savetxt(p, np.c_[t, h.real, -h.imag])
    >>> w = load_waveform(p, mass=65.0, distance=400.0, t_ref=1e9)
    >>> round(w.max_frequency)                        # 0.53 / (2 pi 65 G Msun / c^3)
    263
    """
    if units not in UNITS:
        raise InputError(f"units must be one of {', '.join(UNITS)}, got {units!r}.")
    if align not in ("peak", "file"):
        raise InputError(f"align must be 'peak' or 'file', got {align!r}.")
    t, hp, hc = read_waveform_file(path)
    for key, value in (("mass", mass), ("distance", distance),
                       ("reference_distance", reference_distance)):
        if value is not None and not (math.isfinite(value) and value > 0):
            raise InputError(f"{key} must be positive, got {value!r}.")
    if units == "geometric":
        if mass is None or distance is None:
            raise InputError("a waveform in geometric units needs mass (solar masses) and "
                             "distance (Mpc).")
        if reference_distance is not None:
            raise InputError("reference_distance applies to SI waveforms only.")
        t = t * mass * MSUN_S
        scale = mass * MSUN_M / (distance * MPC_M)
    else:
        if mass is not None:
            raise InputError("mass applies to geometric-unit waveforms only; an SI waveform "
                             "already has its mass.")
        if (distance is None) != (reference_distance is None):
            raise InputError("give both distance and reference_distance to rescale an SI "
                             "waveform, or neither.")
        scale = 1.0 if distance is None else reference_distance / distance
    if align == "peak":
        t = t - t[int(np.argmax(hp**2 + hc**2))]
    return ExternalWaveform(t, scale * hp, scale * hc, t_ref=t_ref, ra=ra, dec=dec, psi=psi)
