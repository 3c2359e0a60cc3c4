"""Helpers shared by the search tests (no tests here).

``qnm_stand_in`` gives (2,2,n) frequencies/damping times from the independent
``qnm`` package (Stein 2019, JOSS 4, 1683), tabulated on a spin grid and
interpolated; the tests use it only when the shipped table is not installed.
``WhiteConditioned`` is a minimal stand-in of the data layer's ConditionedData
for white Gaussian noise of unit one-sided... (see its docstring).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ringsearch.physics.units import MSUN_S


@functools.lru_cache(maxsize=8)
def _qnm_table(n: int):
    import qnm

    seq = qnm.modes_cache(s=-2, l=2, m=2, n=n)
    chi = np.linspace(0.0, 0.995, 400)
    w = np.array([seq(a=a)[0] for a in chi])
    return chi, w


def qnm_f_tau(mass, spin, n):
    """(f, tau) of the (2,2,n) mode from the qnm package (spline in spin)."""
    from scipy.interpolate import CubicSpline

    chi, w = _qnm_table(n)
    mass = np.asarray(mass, float)
    spin = np.asarray(spin, float)
    wr = CubicSpline(chi, w.real)(spin)
    wi = CubicSpline(chi, w.imag)(spin)
    t_m = mass * MSUN_S
    return wr / (2 * np.pi * t_m), t_m / (-wi)


def use_reference_qnm(monkeypatch) -> None:
    """Point the bank at the qnm package when the shipped table is absent."""
    try:
        import ringsearch.physics.qnm  # noqa: F401
    except ImportError:
        import ringsearch.search.bank as bank_mod

        monkeypatch.setattr(bank_mod, "qnm_f_tau", qnm_f_tau)


@dataclass
class WhiteConditioned:
    """White-noise stand-in for ConditionedData.

    The raw data is white Gaussian noise of one-sided PSD ``S = 2 dt`` (unit
    variance per sample) band-limited to [f_low, f_high]; the whitening
    response is then ``H = sqrt(2 dt / S) = 1`` in band and 0 outside, which
    satisfies the contract ``sum whitened * irfft(rfft(u) H) = <d, u>``.
    """

    whitened_values: np.ndarray
    sample_rate: float
    t0: float
    f_low: float = 20.0
    f_high: float = 1024.0
    detector: str = "H1"
    taper_hz: float = 0.0
    analysable_segments: list = field(default_factory=list)
    gates: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(
        {"gps": [], "width_s": [], "peak": []}))

    @property
    def whitened(self):
        from gwpy.timeseries import TimeSeries

        return TimeSeries(self.whitened_values, t0=self.t0, sample_rate=self.sample_rate,
                          name=self.detector)

    @property
    def analysable(self):
        from gwpy.segments import Segment, SegmentList

        if self.analysable_segments:
            return SegmentList([Segment(a, b) for a, b in self.analysable_segments])
        dur = self.whitened_values.size / self.sample_rate
        return SegmentList([Segment(self.t0, self.t0 + dur)])

    @property
    def psd(self):
        from gwpy.frequencyseries import FrequencySeries

        f = np.linspace(0, self.sample_rate / 2, 1025)
        return FrequencySeries(np.full(f.size, 2 / self.sample_rate), frequencies=f)

    def filter_response(self, freqs):
        return band_response(freqs, self.f_low, self.f_high, self.taper_hz)


def band_response(freqs, f_low, f_high, taper_hz=0.0):
    """1 in [f_low, f_high] (0 outside), with optional cosine roll-offs of ``taper_hz``
    inside the band edges.  With a taper the raw noise PSD is read as S = 2 dt / H^2,
    so whitened noise is still unit white noise in band."""
    f = np.asarray(freqs, float)
    h = ((f >= f_low) & (f <= f_high)).astype(float)
    if taper_hz > 0:
        lo = (f >= f_low) & (f < f_low + taper_hz)
        h[lo] = np.sin(0.5 * np.pi * (f[lo] - f_low) / taper_hz) ** 2
        hi = (f > f_high - taper_hz) & (f <= f_high)
        h[hi] = np.sin(0.5 * np.pi * (f_high - f[hi]) / taper_hz) ** 2
    return h


def white_data(duration: float, sample_rate: float, rng, *, f_low=20.0, f_high=1024.0,
               t0=1_000_000_000.0, signal=None, detector="H1", taper_hz=0.0
               ) -> WhiteConditioned:
    """Band-limited unit white noise (plus an optional raw-units ``signal`` array)."""
    n = int(round(duration * sample_rate))
    freqs = np.fft.rfftfreq(n, 1 / sample_rate)
    h = band_response(freqs, f_low, f_high, taper_hz)
    spec = np.fft.rfft(rng.standard_normal(n)) * (h > 0)
    if signal is not None:
        spec = spec + np.fft.rfft(signal) * h
    w = np.fft.irfft(spec, n)
    return WhiteConditioned(w, sample_rate, t0, f_low, f_high, detector, taper_hz)


def damped_sinusoids(n_samples, sample_rate, start_s, f_hz, tau_s, amps):
    """Sum of Re[A_n exp(-i 2 pi f_n t)] exp(-t/tau_n) starting at start_s (raw units).

    With A = a_re + i a_im this is a_re cos + a_im sin, the amplitude
    convention of the search's trigger table.
    """
    t = np.arange(n_samples) / sample_rate - start_s
    on = t >= 0
    out = np.zeros(n_samples)
    for f, tau, a in zip(np.atleast_1d(f_hz), np.atleast_1d(tau_s), np.atleast_1d(amps),
                         strict=True):
        ph = 2 * np.pi * f * t[on]
        out[on] += np.exp(-t[on] / tau) * (a.real * np.cos(ph) + a.imag * np.sin(ph))
    return out


def search_triggers(cond, bank, snr_threshold: float = 5.0, *, veto: bool = False,
                    veto_bins: int = 8, veto_domain: str = "time",
                    gps_window: tuple[float, float] | None = None):
    """The search engine's triggers of one detector's (stand-in) conditioned data."""
    from ringsearch.search.engine import Search

    kw = {}
    if gps_window is not None:
        kw = {"gps_start": gps_window[0], "gps_end": gps_window[1]}
    search = Search(bank=bank, snr_threshold=snr_threshold, veto=veto, veto_bins=veto_bins,
                    veto_domain=veto_domain, **kw)
    return search.run({cond.detector: cond}).triggers
