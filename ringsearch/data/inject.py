"""Add simulated signals to detector strain, and tabulate their optimal SNRs.

A *signal* is any object with three methods (both
:class:`ringsearch.physics.ringdown.RingdownSource` and
:class:`ringsearch.physics.external.ExternalWaveform` have them)::

    support(detector) -> (gps_start, gps_end)   # zero outside this interval
    detector_strain(detector, times, epoch=0.0) # response at GPS epoch + times
    check_sample_rate(sample_rate) -> None      # InputError if unresolvable

Injection copies the strain and evaluates each signal only on the samples
inside its support, at the exact sample times (a start between two samples is
exact: earlier samples get nothing; times are passed as the strain's start
epoch plus small offsets, so no precision is lost to 1e9-second GPS values).
Samples outside every support are left bit-for-bit as they were, and the
caller's series is never modified.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from typing import Any, Protocol

import numpy as np

from ringsearch.errors import InputError

__all__ = ["Signal", "strain_detector", "inject", "inject_network", "signal_snr",
           "snr_table"]


class Signal(Protocol):
    """What :func:`inject` needs from a signal model."""

    def support(self, detector: Any) -> tuple[float, float]: ...

    def detector_strain(self, detector: Any, times: Any, epoch: float = 0.0
                        ) -> np.ndarray: ...

    def check_sample_rate(self, sample_rate: float) -> None: ...


def _as_list(signals: Any) -> list[Signal]:
    if hasattr(signals, "detector_strain"):
        return [signals]
    out = list(signals)
    for k, s in enumerate(out):
        if not hasattr(s, "detector_strain") or not hasattr(s, "support"):
            raise InputError(f"signal {k} ({type(s).__name__}) is not a waveform model with "
                             "support() and detector_strain().")
    return out


def strain_detector(strain: Any) -> str:
    """Detector name of a strain series, from ``.name`` or the channel prefix.

    Examples
    --------
    >>> from gwpy.timeseries import TimeSeries
    >>> strain_detector(TimeSeries([0.0], name="L1"))
    'L1'
    """
    name = getattr(strain, "name", None)
    if not name and getattr(strain, "channel", None) is not None:
        name = str(strain.channel).split(":", 1)[0]
    if not name:
        raise InputError("the strain series carries no detector name; pass detector= "
                         "explicitly.")
    return str(name).split(":", 1)[0]


def _sample_range(t0: float, dt: float, n: int, start: float, end: float) -> tuple[int, int]:
    """Indices ``[i0, i1)`` covering ``start <= t0 + i dt < end``, clipped to the data.

    One extra sample is taken before ``start`` to absorb round-off in GPS
    arithmetic; the model is exactly zero there, and adding +0.0 leaves any
    non-zero sample bit-for-bit unchanged.
    """
    i0 = math.ceil((start - t0) / dt) - 1
    i1 = math.ceil((end - t0) / dt)
    return max(i0, 0), min(max(i1, 0), n)


def inject(strain: Any, signals: Signal | Iterable[Signal], detector: str | None = None,
           require_overlap: bool = False) -> Any:
    """A copy of ``strain`` with ``signals`` added at their arrival times in its detector.

    Parameters
    ----------
    strain : gwpy.timeseries.TimeSeries
        One detector's strain (NaN samples stay NaN).
    signals : signal or iterable of signals
        Waveform models, each placed at its own arrival time in the detector.
    detector : str, optional
        Detector name; by default taken from the series' name or channel.
    require_overlap : bool
        Raise :class:`~ringsearch.errors.InputError` when a signal's support
        does not overlap the data (for a user-placed injection, where that is
        a mistake rather than a signal that belongs to another stretch of data).

    Returns
    -------
    gwpy.timeseries.TimeSeries
        New series; ``strain`` itself is not modified.  Signals whose support
        lies outside the data add nothing (unless ``require_overlap``).

    Examples
    --------
    >>> from gwpy.timeseries import TimeSeries
    >>> from ringsearch.physics.ringdown import RingdownSource
    >>> noise = TimeSeries(np.zeros(4096), t0=1e9, sample_rate=4096, name="H1")
    >>> src = RingdownSource(60.0, 0.7, distance=400.0, t0=1e9 + 0.5)
    >>> out = inject(noise, src)
    >>> bool(out.value.any()), bool(noise.value.any())
    (True, False)
    """
    det = detector or strain_detector(strain)
    sigs = _as_list(signals)
    fs = float(strain.sample_rate.value)
    dt = 1.0 / fs
    t0 = float(strain.t0.value)
    out = strain.copy()
    values = out.value  # the copy's own buffer
    n = values.size
    for s in sigs:
        s.check_sample_rate(fs)
        start, end = s.support(det)
        if require_overlap and not (start < t0 + n * dt and end > t0):
            raise InputError(f"the signal (GPS {start:.6f} to {end:.6f} in {det}) does not "
                             f"overlap the {det} data [{t0:.6f}, {t0 + n * dt:.6f}).")
        i0, i1 = _sample_range(t0, dt, n, start, end)
        if i1 <= i0:
            continue
        values[i0:i1] += s.detector_strain(det, np.arange(i0, i1) * dt, epoch=t0)
    return out


def inject_network(strains: Mapping[str, Any] | Sequence[Any],
                   signals: Signal | Iterable[Signal]) -> dict[str, Any]:
    """Inject the same signals into several detectors' strain.

    Parameters
    ----------
    strains : mapping of detector name to TimeSeries, or sequence of TimeSeries
        (then each series' name gives its detector).
    signals : signal or iterable of signals

    Returns
    -------
    dict
        Detector name -> new TimeSeries with the signals added.

    Examples
    --------
    >>> from gwpy.timeseries import TimeSeries
    >>> from ringsearch.physics.ringdown import RingdownSource
    >>> h1 = TimeSeries(np.zeros(4096), t0=1e9, sample_rate=4096, name="H1")
    >>> l1 = TimeSeries(np.zeros(4096), t0=1e9, sample_rate=4096, name="L1")
    >>> srcs = [RingdownSource(60.0, 0.7, t0=1e9 + 0.2), RingdownSource(30.0, 0.5, t0=1e9 + 0.6)]
    >>> out = inject_network({"H1": h1, "L1": l1}, srcs)
    >>> sorted(out)
    ['H1', 'L1']
    """
    sigs = _as_list(signals)
    if isinstance(strains, Mapping):
        items = list(strains.items())
    else:
        items = [(strain_detector(s), s) for s in strains]
    names = [k for k, _ in items]
    if len(set(names)) != len(names):
        raise InputError(f"two strain series are for the same detector ({names}); join them "
                         "first.")
    return {str(name): inject(s, sigs, detector=str(name)) for name, s in items}


def signal_snr(signal: Signal, detector: str, psd: Any, sample_rate: float | None = None,
               f_low: float = 20.0, f_high: float | None = None,
               min_duration: float = 4.0) -> float:
    """Optimal SNR of one signal in one detector for a one-sided PSD.

    With ``sample_rate`` the signal is sampled at that rate over its support
    (zero-padded to at least ``min_duration`` seconds) and passed to
    :func:`ringsearch.physics.ringdown.optimal_snr`: the SNR of exactly what
    :func:`inject` adds to data at that rate.  Without it, a ringdown source
    uses its analytic Fourier transform on the PSD's grid (the continuous
    signal; the two differ by the aliasing of the start discontinuity,
    typically 0.1-1% at 4096 Hz and falling as ``1/sample_rate^2``).

    Examples
    --------
    >>> from gwpy.frequencyseries import FrequencySeries
    >>> from ringsearch.physics.ringdown import RingdownSource
    >>> psd = FrequencySeries(np.full(8193, 1e-46), df=0.25)
    >>> src = RingdownSource(68.0, 0.69, distance=400.0, t0=1e9)
    >>> a, s = signal_snr(src, "H1", psd), signal_snr(src, "H1", psd, sample_rate=4096)
    >>> bool(abs(a / s - 1) < 0.01)
    True
    """
    from gwpy.timeseries import TimeSeries

    from ringsearch.physics.ringdown import RingdownSource, network_snr, optimal_snr

    if sample_rate is None:
        if isinstance(signal, RingdownSource):
            return network_snr(signal, {detector: psd}, f_low, f_high)[detector]
        raise InputError(f"{type(signal).__name__} has no analytic transform; give "
                         "sample_rate.")
    signal.check_sample_rate(sample_rate)
    start, end = signal.support(detector)
    epoch = math.floor(start * sample_rate) / sample_rate
    n = max(int(math.ceil((end - epoch) * sample_rate)),
            int(math.ceil(min_duration * sample_rate)))
    ts = TimeSeries(signal.detector_strain(detector, np.arange(n) / sample_rate, epoch=epoch),
                    t0=epoch, sample_rate=sample_rate)
    return optimal_snr(ts, psd, f_low, f_high)


def snr_table(signals: Signal | Iterable[Signal], psds: Mapping[str, Any],
              sample_rate: float | None = None, f_low: float = 20.0,
              f_high: float | None = None):
    """Optimal SNR of each signal in each detector and the network, as a DataFrame.

    Columns ``snr_<detector>`` for each PSD's detector and ``snr_network``
    (root sum of squares); one row per signal, in order.  ``sample_rate`` as
    in :func:`signal_snr`.

    Examples
    --------
    >>> from gwpy.frequencyseries import FrequencySeries
    >>> from ringsearch.physics.ringdown import RingdownSource
    >>> psd = FrequencySeries(np.full(8193, 1e-46), df=0.25)
    >>> src = RingdownSource(68.0, 0.69, distance=400.0, t0=1e9)
    >>> snr_table([src], {"H1": psd, "L1": psd}).columns.tolist()
    ['snr_H1', 'snr_L1', 'snr_network']
    """
    import pandas as pd

    sigs = _as_list(signals)
    if not psds:
        raise InputError("snr_table needs at least one detector PSD.")
    rows = []
    for s in sigs:
        row = {f"snr_{d}": signal_snr(s, d, p, sample_rate, f_low, f_high)
               for d, p in psds.items()}
        row["snr_network"] = math.sqrt(sum(v * v for v in row.values()))
        rows.append(row)
    return pd.DataFrame(rows, columns=[*(f"snr_{d}" for d in psds), "snr_network"])
