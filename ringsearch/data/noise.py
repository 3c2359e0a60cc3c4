"""Noise models: analytic and tabulated PSDs, and seeded stationary Gaussian noise.

``gaussian_noise`` colours white Gaussian samples with a finite (windowed)
FIR filter whose magnitude response is ``sqrt(S(f) fs / 2)`` and keeps only
the fully overlapped ("valid") part of the linear convolution.  The output is
therefore stationary from its first sample to its last: there is no circular
wrap of a frequency-domain draw and no edge transient.  gwpy and scipy have no
generator of coloured noise from an arbitrary PSD, so this is written here.
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ringsearch.errors import InputError, reason

if TYPE_CHECKING:
    from gwpy.timeseries import TimeSeries

#: Lowest frequency at which the analytic design fit is used; below it the
#: curve is held at its 10 Hz value so it stays finite (the fit's stated range
#: starts at 10 Hz; Ajith 2011).  # from memory
DESIGN_F_MIN = 10.0

#: Default flat PSD level, 1/Hz (an ASD of 1e-23 per root hertz).
FLAT_LEVEL = 1e-46

#: Largest series ``gaussian_noise`` draws in one piece: 2**28 float64 samples
#: (2 GiB; 18 hours at 4096 Hz).  Longer requests are a typo or belong in
#: several files, and would otherwise die with a MemoryError.
MAX_SAMPLES = 2**28


def _as_frequencies(frequencies) -> np.ndarray:
    f = np.asarray(getattr(frequencies, "value", frequencies), dtype=float)
    if hasattr(frequencies, "frequencies"):
        f = np.asarray(frequencies.frequencies.value, dtype=float)
    f = np.atleast_1d(f)
    if f.ndim != 1 or f.size == 0 or not np.all(np.isfinite(f)) or np.any(f < 0):
        raise InputError("frequencies must be a non-empty 1-D array of finite values >= 0 Hz.")
    return f


def _series(values: np.ndarray, f: np.ndarray, name: str):
    from gwpy.frequencyseries import FrequencySeries

    if f.size > 1:
        steps = np.diff(f)
        if np.all(steps > 0) and np.allclose(steps, steps[0], rtol=1e-9, atol=0):
            return FrequencySeries(values, f0=f[0], df=steps[0], unit="1/Hz", name=name)
    return FrequencySeries(values, frequencies=f, unit="1/Hz", name=name)


def design_psd(frequencies, kind: str = "aligo"):
    """Analytic design-sensitivity PSD of a second-generation ground-based detector.

    ``kind="aligo"`` is the Advanced LIGO zero-detuned high-power fit of
    Ajith (2011), Phys. Rev. D 84, 084037, eq. (4.7)::

        S(f) = 1e-49 [x^-4.14 - 5 x^-2 + 111 (1 - x^2 + x^4/2) / (1 + x^2/2)] / Hz,
        x = f / 245.4 Hz                                               # from memory

    held at its 10 Hz value below 10 Hz (the fit's lower limit).

    Parameters
    ----------
    frequencies : array_like or FrequencySeries
        Frequencies in Hz (>= 0).
    kind : {"aligo"}
        Which curve ("design" is an alias).

    Returns
    -------
    gwpy.frequencyseries.FrequencySeries
        One-sided PSD in 1/Hz.

    Examples
    --------
    >>> import numpy as np
    >>> psd = design_psd(np.arange(0.0, 2048.25, 0.25))
    >>> bool(1e-24 < np.sqrt(psd.value[1000]) < 1e-23)   # ASD at 250 Hz
    True
    """
    if kind not in ("aligo", "design"):
        raise InputError(f"design PSD kind {kind!r} is unknown; use 'aligo'.")
    f = _as_frequencies(frequencies)
    x = np.maximum(f, DESIGN_F_MIN) / 245.4
    s = 1e-49 * (x ** -4.14 - 5.0 * x ** -2 + 111.0 * (1 - x**2 + 0.5 * x**4) / (1 + 0.5 * x**2))
    return _series(s, f, "aLIGO design (Ajith 2011)")


def flat_psd(frequencies, level: float = FLAT_LEVEL):
    """A flat (white) one-sided PSD of ``level`` per hertz.

    Examples
    --------
    >>> flat_psd([0.0, 1.0, 2.0], level=2e-46).value.tolist()
    [2e-46, 2e-46, 2e-46]
    """
    if not (level > 0 and math.isfinite(level)):
        raise InputError(f"flat PSD level {level!r} must be a positive number per hertz.")
    f = _as_frequencies(frequencies)
    return _series(np.full(f.size, float(level)), f, "flat")


def psd_from_file(path: str | os.PathLike, asd: bool | None = None):
    """Read a PSD or ASD from a two-column text file ``frequency value``.

    Parameters
    ----------
    path : path
        Text file; ``#`` starts a comment.  Frequencies must increase.
    asd : bool, optional
        Whether the second column is an amplitude spectral density (per root
        hertz).  By default it is guessed from the values: a median above
        1e-35 can only be an ASD for strain (a strain PSD is ~1e-46).

    Returns
    -------
    gwpy.frequencyseries.FrequencySeries
        One-sided PSD in 1/Hz on the file's frequencies.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "asd.txt"
    >>> _ = p.write_text("10 1e-22\\n100 4e-24\\n1000 1e-23\\n")
    >>> print(f"{psd_from_file(p).value[1]:.3g}")
    1.6e-47
    """
    if not str(path).strip():
        raise InputError("the PSD file name is empty.")
    path = Path(path)
    if not path.is_file():
        raise InputError(f"PSD file {path} does not exist.")
    try:
        table = np.loadtxt(path, comments="#", ndmin=2)
    except (ValueError, OSError, UnicodeDecodeError) as exc:
        raise InputError(f"PSD file {path} is not a text table of numbers "
                         f"({reason(exc)}).") from None
    if table.ndim != 2 or table.shape[1] != 2 or table.shape[0] < 2:
        raise InputError(f"PSD file {path} must have two columns (frequency, value) and at "
                         "least two rows.")
    f, v = table[:, 0], table[:, 1]
    if not (np.all(np.isfinite(table)) and np.all(np.diff(f) > 0) and f[0] >= 0):
        raise InputError(f"PSD file {path} must list finite, increasing frequencies >= 0.")
    if np.any(v <= 0):
        raise InputError(f"PSD file {path} holds values <= 0; a PSD or ASD must be positive.")
    if asd is None:
        asd = bool(np.median(v) > 1e-35)
    psd = v**2 if asd else v
    return _series(psd, f, path.stem)


def interpolate_psd(psd, frequencies) -> np.ndarray:
    """Values of ``psd`` at ``frequencies``: log-log interpolation, held flat outside.

    Parameters
    ----------
    psd : FrequencySeries
        One-sided PSD (values > 0 wherever used).
    frequencies : array_like
        Frequencies in Hz.

    Returns
    -------
    numpy.ndarray

    Examples
    --------
    >>> import numpy as np
    >>> p = flat_psd([1.0, 10.0], 1e-46)
    >>> np.allclose(interpolate_psd(p, [0.0, 5.0, 50.0]), 1e-46, rtol=1e-12, atol=0)
    True
    """
    f_in = np.asarray(psd.frequencies.value, dtype=float)
    v_in = np.asarray(psd.value, dtype=float)
    f_out = np.asarray(frequencies, dtype=float)
    good = np.isfinite(v_in) & (v_in > 0)
    if not good.any():
        raise InputError("the PSD has no finite positive values.")
    f_in, v_in = f_in[good], v_in[good]
    if f_in.size == f_out.size and np.array_equal(f_in, f_out):
        return v_in.copy()
    pos = f_in > 0
    if pos.sum() >= 2:
        fo = np.clip(f_out, f_in[pos][0], f_in[pos][-1])
        return np.exp(np.interp(np.log(fo), np.log(f_in[pos]), np.log(v_in[pos])))
    return np.interp(f_out, f_in, v_in)


def resolve_psd(spec, frequencies=None):
    """Turn ``"design"``/``"aligo"``, ``"flat"``, a file path or a FrequencySeries into a PSD.

    Examples
    --------
    >>> resolve_psd("flat", [0.0, 1.0]).value.tolist()
    [1e-46, 1e-46]
    """
    if hasattr(spec, "frequencies"):
        return spec
    if frequencies is None:
        frequencies = np.arange(0.0, 8192.0 + 0.125, 0.125)
    if isinstance(spec, str) and spec in ("design", "aligo"):
        return design_psd(frequencies)
    if isinstance(spec, str) and spec == "flat":
        return flat_psd(frequencies)
    if isinstance(spec, (str, os.PathLike)):
        return psd_from_file(spec)
    raise InputError(f"PSD {spec!r} is not 'design', 'flat', a file or a FrequencySeries.")


def _rng(rng_or_seed) -> np.random.Generator:
    if isinstance(rng_or_seed, np.random.Generator):
        return rng_or_seed
    if isinstance(rng_or_seed, (int, np.integer)) and not isinstance(rng_or_seed, bool):
        if rng_or_seed < 0:
            raise InputError(f"seed {rng_or_seed} must be a non-negative integer.")
        return np.random.default_rng(int(rng_or_seed))
    raise InputError(f"rng_or_seed must be a numpy Generator or an integer seed, "
                     f"not {rng_or_seed!r}.")


def colouring_filter(psd, sample_rate: float, filter_duration: float = 8.0) -> np.ndarray:
    """Zero-phase FIR taps (centred) whose response is ``sqrt(S(f) fs / 2)``.

    Filtering unit-variance white noise with these taps gives noise of
    one-sided PSD ``S`` (smoothed over ``~2 / filter_duration`` Hz by the Hann
    window that makes the filter finite).  The DC term is zeroed.

    Examples
    --------
    >>> taps = colouring_filter(flat_psd([0.0, 2048.0], 2.0 / 4096), 4096, 1.0)
    >>> taps.size, round(float(taps.max()), 3)
    (4096, 1.0)
    """
    n = int(round(filter_duration * sample_rate))
    n += n % 2
    if n < 4:
        raise InputError(f"filter_duration {filter_duration!r} s is too short at "
                         f"{sample_rate:g} Hz.")
    freqs = np.fft.rfftfreq(n, 1.0 / sample_rate)
    amp = np.sqrt(interpolate_psd(psd, freqs) * sample_rate / 2.0)
    amp[0] = 0.0
    taps = np.roll(np.fft.irfft(amp, n=n), n // 2)
    from scipy.signal import windows

    return taps * windows.hann(n, sym=False)


def gaussian_noise(psd, duration: float, sample_rate: float,
                   rng_or_seed: np.random.Generator | int,
                   gps_start: float = 0.0, detector: str = "H1",
                   filter_duration: float = 8.0) -> TimeSeries:
    """Stationary Gaussian noise with one-sided PSD ``psd``, reproducible from a seed.

    Parameters
    ----------
    psd : FrequencySeries or {"design", "flat"} or path
        Target one-sided PSD (1/Hz); interpolated log-log onto the filter's
        grid and held flat beyond its frequency range.
    duration : float
        Seconds; ``duration * sample_rate`` must be a whole number of samples.
    sample_rate : float
        Hz.
    rng_or_seed : numpy.random.Generator or int
        Source of randomness; the same seed gives the same bytes.
    gps_start : float
        GPS time of the first sample.
    detector : str
        Stored as ``.name`` (channel ``"<det>:STRAIN"``).
    filter_duration : float
        Length of the colouring FIR in seconds: the PSD is honoured on
        frequency scales coarser than ``~2 / filter_duration`` Hz.

    Returns
    -------
    gwpy.timeseries.TimeSeries

    Examples
    --------
    >>> import numpy as np
    >>> a = gaussian_noise("design", 2.0, 4096, 7)
    >>> b = gaussian_noise("design", 2.0, 4096, 7)
    >>> a.value.tobytes() == b.value.tobytes(), a.name, a.value.size
    (True, 'H1', 8192)
    """
    from gwpy.timeseries import TimeSeries
    from scipy.signal import oaconvolve

    from ringsearch.data.io import _check_detector, check_gps

    if not (sample_rate > 0 and math.isfinite(sample_rate)):
        raise InputError(f"sample_rate {sample_rate!r} must be a positive number of hertz.")
    if not (duration > 0 and math.isfinite(duration)):
        raise InputError(f"duration {duration!r} must be a positive number of seconds.")
    n = duration * sample_rate
    if abs(n - round(n)) > 1e-6:
        raise InputError(f"duration {duration!r} s is not a whole number of samples at "
                         f"{sample_rate:g} Hz.")
    if not (filter_duration > 0 and math.isfinite(filter_duration)):
        raise InputError(f"filter_duration {filter_duration!r} must be positive seconds.")
    n = int(round(n))
    if n > MAX_SAMPLES:
        raise InputError(f"duration {duration!r} s at {sample_rate:g} Hz is {n} samples, more "
                         f"than the {MAX_SAMPLES} one series may hold; write several files.")
    check_gps(gps_start, "gps_start")
    detector = _check_detector(detector, "gaussian_noise")
    rng = _rng(rng_or_seed)
    psd = resolve_psd(psd, np.fft.rfftfreq(int(round(filter_duration * sample_rate)) or 2,
                                           1.0 / sample_rate))
    taps = colouring_filter(psd, sample_rate, filter_duration)
    white = rng.standard_normal(n + taps.size - 1)
    data = oaconvolve(white, taps, mode="valid")
    return TimeSeries(data, t0=gps_start, sample_rate=sample_rate, name=detector,
                      channel=f"{detector}:STRAIN")
