"""Condition strain for matched filtering: band limit, whiten, gate.

``condition`` turns a strain series into a :class:`ConditionedData`: the
whitened, band-limited, gated series together with everything the search needs
to whiten its templates identically (``filter_response``), the PSD, the band,
the analysable segments and the gate list.

The whitening filter is built by inverse-spectrum truncation: the ideal
response ``1 / sqrt(S(f) fs / 2)`` (held flat outside the band) is turned into
zero-phase taps, cut to ``truncation`` seconds with a Hann window, and applied
as a real multiplier on the data's DFT together with a hard band mask.  The
finite taps bound how far a spectral line or an edge can ring.  gwpy's
``TimeSeries.whiten`` does a similar truncation but neither exposes the exact
response it applied nor handles NaN gaps and data-quality segments, both of
which the search relies on, so the filter is built here with numpy/scipy.

Gating: samples of the whitened series above ``gate_threshold`` times its
expected noise standard deviation are clustered; around each cluster's peak
the band-limited strain is zeroed over ``gate_width`` seconds with an inverse
Tukey window (``gate_taper`` seconds of cosine ramp on each side) and the data
are whitened again.  The gates and the times they corrupt are removed from the
analysable segments.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from ringsearch.data.segments import total_seconds
from ringsearch.errors import InputError

#: Default low-frequency cut in Hz (below ~20 Hz the early advanced detectors'
#: seismic and control noise dominates).  # common practice
DEFAULT_F_LOW = 20.0
#: Default upper band edge as a fraction of the Nyquist frequency: GWOSC's
#: 4096 Hz data roll off from the anti-alias filter above ~1.7 kHz (visible in
#: the GW150914 files), so 0.8 * 2048 Hz = 1638.4 Hz stays clear of it.
DEFAULT_F_HIGH_FRACTION = 0.8
#: Default gate threshold, in units of the whitened noise standard deviation.
#: Gaussian noise never reaches it (2*norm.sf(100) underflows), loud glitches
#: reach hundreds to thousands, and it spares real ringdowns: a damped sinusoid
#: of optimal SNR rho peaks at ~0.37 rho (250 Hz, 4 ms) to ~0.8 rho (1 kHz,
#: 1 ms) whitened sigmas, so signals up to SNR ~120 are never gated.
#: Thresholds of this order are used for automatic gating of advanced-detector
#: data.  # from memory
DEFAULT_GATE_THRESHOLD = 100.0
#: Seconds zeroed around each gate's peak, and length of each cosine ramp.
DEFAULT_GATE_WIDTH = 0.5
DEFAULT_GATE_TAPER = 0.25
#: Longest cosine taper (s) applied to the raw data at each edge of a usable stretch.
MAX_EDGE_TAPER = 0.5


def _fold_taps(taps: np.ndarray, m: int) -> np.ndarray:
    """Place centred symmetric taps on a circular grid of length ``m``."""
    k = (taps.size - 1) // 2
    idx = np.arange(-k, k + 1) % m
    out = np.zeros(m)
    np.add.at(out, idx, taps)
    return out


def _regular_grid(f: np.ndarray, fs: float) -> int | None:
    """FFT length M if ``f`` lies on the grid k*fs/M, else None."""
    if f.size < 2:
        return None
    df = f[1] - f[0]
    if df <= 0:
        return None
    m = fs / df
    if abs(m - round(m)) > 1e-6 * m or round(m) > 2**28:
        return None
    m = int(round(m))
    k = f / (fs / m)
    if np.max(np.abs(k - np.round(k))) > 1e-6 or np.any(k < -0.5) or np.max(k) > m // 2 + 1e-6:
        return None
    return m


@dataclass
class ConditionedData:
    """Whitened, band-limited, gated strain of one detector, ready for the search.

    Attributes
    ----------
    detector : str
        Detector name, e.g. ``"H1"``.
    sample_rate : float
        Hz.
    f_low, f_high : float
        Band of the inner product in Hz; the filter is zero outside it.
    psd : FrequencySeries
        One-sided PSD (1/Hz) used to build the whitening filter.
    whitened : TimeSeries
        Whitened, band-limited, gated data (same samples as the input; zero in
        gaps and outside the usable data).  Normalised so that
        ``sum(whitened * whiten(u)) = <d, u>`` (see :meth:`filter_response`);
        in Gaussian noise its standard deviation is :attr:`sigma`
        (``~ sqrt(2 (f_high - f_low) / fs)``), not 1.
    analysable : gwpy.segments.SegmentList
        Times whose whitened samples are trustworthy: DQ-passing, NaN-free,
        minus ``edge`` seconds at every segment edge and minus gated times.
    gates : pandas.DataFrame
        One row per gate: ``gps`` (peak time, s), ``width_s`` (zeroed span, s),
        ``peak`` (|whitened| / sigma at the peak).
    t0 : float
        GPS time of the first sample.
    truncation : float
        Length of the whitening filter in seconds.
    sigma : float
        Expected standard deviation of ``whitened`` in stationary Gaussian
        noise with PSD ``psd``.
    edge : float
        Seconds dropped at each edge of a usable stretch (taper + half filter).
    taps : numpy.ndarray
        Centred zero-phase whitening taps (odd length); the band mask is
        applied on top of their response.
    """

    detector: str
    sample_rate: float
    f_low: float
    f_high: float
    psd: Any
    whitened: Any
    analysable: Any
    gates: pd.DataFrame
    t0: float
    truncation: float
    sigma: float
    edge: float
    taps: np.ndarray = field(repr=False)
    gate_threshold: float = DEFAULT_GATE_THRESHOLD
    _grids: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def duration(self) -> float:
        """Seconds of data held (analysable or not)."""
        return self.whitened.size / self.sample_rate

    @property
    def analysed_seconds(self) -> float:
        """Total length of the analysable segments in seconds."""
        return total_seconds(self.analysable)

    def filter_response(self, freqs) -> np.ndarray:
        """Real, zero-phase magnitude response H(f) that was applied to the data's DFT.

        ``H`` is zero outside ``[f_low, f_high]`` and, inside, equals
        ``1 / sqrt(S(f) fs / 2)`` up to the smoothing of the truncated filter.
        The normalisation is chosen so that for a template ``u`` sampled at
        ``sample_rate`` with the same length ``N`` as the data,

            ``sum_j whitened[j] * irfft(rfft(u) * H(rfftfreq(N, 1/fs)))[j]``
            ``= <d, u> = 4 Re sum_k d~(f_k) conj(u~(f_k)) / S(f_k) df``

        with ``d~ = dt * rfft(d)`` (continuous-FT convention), i.e. the matched
        filter inner product.  On a grid ``k * fs / M`` (any integer ``M``, as
        from ``numpy.fft.rfftfreq(M, 1/fs)``) the values are exact for a
        length-``M`` circular FFT; other frequencies are evaluated by a direct
        cosine sum.

        Parameters
        ----------
        freqs : array_like
            Frequencies in Hz.

        Returns
        -------
        numpy.ndarray
            H at ``freqs`` (same shape), in 1/(strain) units per sample.

        Examples
        --------
        >>> from ringsearch.data.noise import gaussian_noise
        >>> cond = condition(gaussian_noise("design", 32.0, 2048, 1), f_low=20.0)
        >>> h = cond.filter_response(np.fft.rfftfreq(2048, 1 / 2048))
        >>> h.shape, float(h[10]), bool(h[100] > 0)
        ((1025,), 0.0, True)
        """
        f = np.asarray(freqs, dtype=float)
        flat = np.abs(f.ravel())
        m = _regular_grid(flat, self.sample_rate)
        if m is not None:
            full = self._grids.get(m)
            if full is None:  # cache the last few grids: templates reuse them
                full = np.fft.rfft(_fold_taps(self.taps, m)).real.copy()
                if len(self._grids) >= 4:
                    self._grids.pop(next(iter(self._grids)))
                self._grids[m] = full
            resp = full[np.round(flat / (self.sample_rate / m)).astype(int)]
        else:
            k = (self.taps.size - 1) // 2
            half = self.taps[k:]
            resp = np.empty(flat.size)
            lags = np.arange(1, k + 1)
            for a in range(0, flat.size, 4096):
                ph = 2 * np.pi * np.outer(flat[a:a + 4096], lags) / self.sample_rate
                resp[a:a + 4096] = half[0] + 2 * np.cos(ph) @ half[1:]
        resp = resp * ((flat >= self.f_low) & (flat <= self.f_high))
        return resp.reshape(f.shape)

    def whiten(self, u, n: int | None = None) -> np.ndarray:
        """Whiten a template (array or TimeSeries) exactly as the data were.

        Returns ``irfft(rfft(u, n) * H, n)`` with ``n`` defaulting to
        ``len(u)``; ``sum(whitened_data_slice * cond.whiten(u))`` is then the
        inner product of the data with ``u`` placed at that slice.

        Examples
        --------
        >>> from ringsearch.data.noise import gaussian_noise
        >>> cond = condition(gaussian_noise("design", 32.0, 2048, 1))
        >>> cond.whiten(np.zeros(256)).shape
        (256,)
        """
        x = np.asarray(getattr(u, "value", u), dtype=float)
        n = x.size if n is None else int(n)
        h = self.filter_response(np.fft.rfftfreq(n, 1.0 / self.sample_rate))
        return np.fft.irfft(np.fft.rfft(x, n) * h, n)

    def summary(self) -> dict:
        """JSON-ready description: detector, band, analysed segments and gates.

        Examples
        --------
        >>> from ringsearch.data.noise import gaussian_noise
        >>> condition(gaussian_noise("design", 32.0, 2048, 1)).summary()["detector"]
        'H1'
        """
        return {
            "detector": self.detector,
            "sample_rate_hz": self.sample_rate,
            "f_low_hz": self.f_low,
            "f_high_hz": self.f_high,
            "gps_start": self.t0,
            "duration_s": self.duration,
            "psd_resolution_hz": _resolution(self.psd),
            "whitening_filter_s": self.truncation,
            "edge_dropped_s": self.edge,
            "whitened_sigma": self.sigma,
            "gate_threshold_sigma": self.gate_threshold,
            "analysed_segments": [[float(s[0]), float(s[1])] for s in self.analysable],
            "analysed_s": self.analysed_seconds,
            "gates": [{"gps": float(r.gps), "width_s": float(r.width_s), "peak": float(r.peak)}
                      for r in self.gates.itertuples()],
        }


def _resolution(psd) -> float | None:
    """Frequency step of a PSD, or None for an irregular grid."""
    try:
        return float(psd.df.value)
    except (AttributeError, TypeError):
        return None


def whitening_taps(psd, sample_rate: float, f_low: float, f_high: float,
                   truncation: float) -> np.ndarray:
    """Centred zero-phase taps approximating ``1 / sqrt(S(f) fs / 2)``, ``truncation`` s long.

    The ideal response is held at its band-edge values outside
    ``[f_low, f_high]`` (so the cut does not ring inside the band), turned into
    a zero-phase impulse response, and windowed by a Hann window of
    ``truncation`` seconds (inverse-spectrum truncation).

    Examples
    --------
    >>> from ringsearch.data.noise import flat_psd
    >>> taps = whitening_taps(flat_psd([0.0, 1024.0], 2.0 / 2048), 2048, 20.0, 900.0, 1.0)
    >>> taps.size, round(float(taps[taps.size // 2]), 2)
    (2049, 1.0)
    """
    from scipy.signal import windows

    from ringsearch.data.noise import interpolate_psd

    k = int(round(truncation * sample_rate / 2))
    if k < 2:
        raise InputError(f"truncation {truncation!r} s is too short at {sample_rate:g} Hz.")
    df_psd = _resolution(psd) or 0.25
    ng = max(int(round(sample_rate / df_psd)), 2 * k + 2)
    ng += ng % 2
    f = np.fft.rfftfreq(ng, 1.0 / sample_rate)
    s = interpolate_psd(psd, np.clip(f, f_low, f_high))
    w = 1.0 / np.sqrt(s * sample_rate / 2.0)
    imp = np.fft.irfft(w, ng)
    taps = imp[np.arange(-k, k + 1) % ng] * windows.hann(2 * k + 3)[1:-1]
    return taps


def _tukey_ramp(n: int) -> np.ndarray:
    """Rising half-cosine ramp of n samples (0 -> 1, both ends excluded)."""
    return 0.5 - 0.5 * np.cos(np.pi * (np.arange(n) + 0.5) / n)


def _apply_segments(x: np.ndarray, t0: float, fs: float, segs, taper_n: int) -> None:
    """In place: zero ``x`` outside ``segs`` and taper ``taper_n`` samples at their edges.

    A sample is kept when its whole period ``[t_j, t_j + 1/fs)`` lies in a segment
    (:func:`ringsearch.data.segments.sample_range` with ``whole_periods``).
    """
    from ringsearch.data.segments import sample_range

    n = x.size
    keep = np.zeros(n, dtype=bool)
    ramps = []
    for seg in segs:
        a, b = sample_range(seg, t0, fs, whole_periods=True)
        a, b = max(0, a), min(n, b)
        if b <= a:
            continue
        keep[a:b] = True
        r = min(taper_n, (b - a) // 2)
        if r > 0:
            ramps.append((a, b, r))
    x[~keep] = 0.0
    for a, b, r in ramps:
        ramp = _tukey_ramp(r)
        x[a:a + r] *= ramp
        x[b - r:b] *= ramp[::-1]


def _whiten(xf: np.ndarray, resp: np.ndarray, nfft: int, n: int) -> np.ndarray:
    from scipy.fft import irfft

    prod = xf * resp
    return irfft(prod, nfft, overwrite_x=True)[:n]


def _expected_sigma(psd, taps, fs, f_low, f_high) -> float:
    """sqrt(integral of S(f) H(f)^2 df): std of whitened noise of PSD ``psd``.

    Evaluated on a grid four times finer than the filter's own resolution.
    """
    from scipy.fft import rfft

    from ringsearch.data.noise import interpolate_psd

    m = 4 * (taps.size + 1)
    f = np.fft.rfftfreq(m, 1.0 / fs)
    h = rfft(_fold_taps(taps, m)).real * ((f >= f_low) & (f <= f_high))
    return float(np.sqrt(np.sum(interpolate_psd(psd, f) * h**2) * fs / m))


def _find_gates(white: np.ndarray, level: float, inside, t0: float, fs: float,
                width: float):
    """Clusters of |white| > level inside ``inside``: list of (gps of peak, |peak|)."""
    over = np.flatnonzero(np.abs(white) > level)
    if over.size == 0:
        return []
    times = t0 + over / fs
    ok = np.zeros(over.size, dtype=bool)
    for seg in inside:
        ok |= (times >= float(seg[0])) & (times < float(seg[1]))
    over = over[ok]
    if over.size == 0:
        return []
    gap = int(round(width * fs))
    breaks = np.flatnonzero(np.diff(over) > gap)
    out = []
    for grp in np.split(over, breaks + 1):
        j = grp[np.argmax(np.abs(white[grp]))]
        out.append((t0 + j / fs, float(abs(white[j]))))
    return out


def _gate_window(n, t0, fs, gates, width, taper):
    wts = np.ones(n)
    half_n = int(round(width * fs / 2))
    r = max(1, int(round(taper * fs)))
    ramp = _tukey_ramp(r)
    for gps, _ in gates:
        c = int(round((gps - t0) * fs))
        a, b = c - half_n, c + half_n
        lo, hi = max(0, a), min(n, b)
        if hi > lo:
            wts[lo:hi] = 0.0
        for idx, val in zip(range(a - r, a), ramp[::-1], strict=True):
            if 0 <= idx < n:
                wts[idx] = min(wts[idx], 1.0 - val)
        for idx, val in zip(range(b, b + r), ramp, strict=True):
            if 0 <= idx < n:
                wts[idx] = min(wts[idx], val)
    return wts


def usable_segments(strain, analysable=None):
    """Finite samples of ``strain`` inside ``analysable`` (all finite data when None).

    Examples
    --------
    >>> from ringsearch.data.noise import gaussian_noise
    >>> list(usable_segments(gaussian_noise("design", 8.0, 2048, 1, gps_start=0.0)))
    [Segment(0.0, 8.0)]
    """
    from gwpy.segments import SegmentList

    from ringsearch.data.io import finite_segments

    usable = finite_segments(strain)
    if analysable is not None:
        usable &= SegmentList(analysable).coalesce()
    usable = usable.coalesce()
    if not usable:
        det = strain.name or (str(strain.channel).split(":", 1)[0] if strain.channel else "")
        raise InputError(f"strain {det} has no finite data inside the analysable segments.")
    return usable


def conditioning_psd(strain, seglen: float = 4.0, analysable=None, exclude=None):
    """The PSD :func:`condition` estimates when none is given (Welch median of usable data).

    Use it to whiten one stretch with the PSD of another, e.g. data with
    injections with the PSD of the same data before injection, exactly as
    :func:`condition` would have estimated it there.

    Examples
    --------
    >>> from ringsearch.data.noise import gaussian_noise
    >>> psd = conditioning_psd(gaussian_noise("design", 32.0, 2048, 1))
    >>> float(psd.df.value)
    0.25
    """
    from ringsearch.data.psd import estimate_psd

    return estimate_psd(strain, seglen=seglen, segments=usable_segments(strain, analysable),
                        exclude=exclude)


def condition(strain, f_low: float = DEFAULT_F_LOW, f_high: float | None = None, psd=None,
              seglen: float = 4.0, analysable=None, gate_threshold: float | None = None,
              truncation: float | None = None, gate_width: float = DEFAULT_GATE_WIDTH,
              gate_taper: float = DEFAULT_GATE_TAPER, psd_exclude=None) -> ConditionedData:
    """Band-limit, whiten and gate strain for the matched filter.

    Parameters
    ----------
    strain : gwpy.timeseries.TimeSeries
        One detector's strain (``.name`` the detector); NaN marks missing data.
    f_low : float
        Low-frequency cut in Hz (default 20 Hz).
    f_high : float, optional
        Upper band edge in Hz (default 0.8 x Nyquist, clear of the anti-alias
        roll-off).
    psd : FrequencySeries, optional
        One-sided PSD to whiten with; by default estimated from the usable
        data with :func:`ringsearch.data.psd.estimate_psd` (Welch median,
        ``seglen`` segments).
    seglen : float
        PSD segment length in seconds (sets the PSD resolution).
    analysable : gwpy.segments.SegmentList, optional
        Times allowed by data quality (e.g. from
        :func:`ringsearch.data.io.read_strain_with_quality`); finite data
        outside them is treated like a gap.
    gate_threshold : float, optional
        Gate whitened excursions above this many noise standard deviations
        (default 100, which no ringdown below SNR ~120 reaches; ``math.inf``
        disables gating).
    truncation : float, optional
        Whitening filter length in seconds (default ``seglen``, the longest the
        PSD resolution supports: shorter filters cannot notch the strong
        narrow lines of real data, e.g. the ~992 Hz violin harmonic in H1).
    gate_width, gate_taper : float
        Seconds zeroed around each gate and length of each cosine ramp.
    psd_exclude : (gps_lo, gps_hi) or list, optional
        Times left out of the PSD estimate (e.g. around a candidate).

    Returns
    -------
    ConditionedData

    Examples
    --------
    >>> from ringsearch.data.noise import gaussian_noise
    >>> cond = condition(gaussian_noise("design", 32.0, 4096, 5), f_low=20.0)
    >>> cond.detector, cond.f_high, len(cond.gates)
    ('H1', 1638.4, 0)
    >>> list(cond.analysable)  # 0.5 s taper + 2 s half-filter dropped at each end
    [Segment(2.5, 29.5)]
    """
    from gwpy.segments import Segment, SegmentList
    from gwpy.timeseries import TimeSeries
    from scipy.fft import irfft, next_fast_len, rfft

    from ringsearch.data.psd import estimate_psd

    if not (hasattr(strain, "sample_rate") and hasattr(strain, "t0")):
        raise InputError(f"strain must be a gwpy TimeSeries (with t0 and sample_rate), "
                         f"not {type(strain).__name__}.")
    fs = float(strain.sample_rate.value)
    nyq = fs / 2.0
    t0 = float(strain.t0.value)
    n = strain.size
    det = strain.name or (str(strain.channel).split(":", 1)[0] if strain.channel else "")
    f_high = DEFAULT_F_HIGH_FRACTION * nyq if f_high is None else float(f_high)
    f_low = float(f_low)
    if not (math.isfinite(f_low) and f_low >= 0):
        raise InputError(f"f_low {f_low!r} must be a frequency >= 0 Hz.")
    if not (math.isfinite(f_high) and f_low < f_high <= nyq):
        raise InputError(f"f_high {f_high!r} Hz must lie above f_low ({f_low:g} Hz) and at or "
                         f"below the Nyquist frequency {nyq:g} Hz.")
    if not (seglen > 0 and math.isfinite(seglen)):
        raise InputError(f"seglen {seglen!r} must be a positive number of seconds.")
    truncation = float(seglen) if truncation is None else float(truncation)
    if not (math.isfinite(truncation) and 0 < truncation <= seglen):
        raise InputError(f"truncation {truncation!r} s must be positive and at most the PSD "
                         f"segment length {seglen:g} s.")
    gate_threshold = DEFAULT_GATE_THRESHOLD if gate_threshold is None else float(gate_threshold)
    if not gate_threshold > 0:
        raise InputError(f"gate_threshold {gate_threshold!r} must be positive.")
    if not (gate_width > 0 and gate_taper >= 0):
        raise InputError(f"gate_width {gate_width!r} must be > 0 and gate_taper "
                         f"{gate_taper!r} >= 0.")

    usable = usable_segments(strain, analysable)
    if psd is None:
        psd = estimate_psd(strain, seglen=seglen, segments=usable, exclude=psd_exclude)

    taps = whitening_taps(psd, fs, f_low, f_high, truncation)
    k = (taps.size - 1) // 2
    taper_n = min(k // 2, int(round(MAX_EDGE_TAPER * fs)))
    edge = (taper_n + k) / fs

    # One FFT of the whole stretch, zero-padded by half a filter so the circular
    # product never wraps the end onto the start.  Arrays are reused in place:
    # conditioning 4096 s at 4096 Hz peaks near 4x the input's size.
    nfft = next_fast_len(n + k, real=True)
    k_lo = int(math.ceil(f_low * nfft / fs - 1e-9))
    k_hi = int(math.floor(f_high * nfft / fs + 1e-9))
    resp = rfft(_fold_taps(taps, nfft)).real.copy()  # copy: do not keep the complex array
    resp[:k_lo] = 0.0
    resp[k_hi + 1:] = 0.0

    x = np.array(strain.value, dtype=np.float64, copy=True)
    np.nan_to_num(x, copy=False, nan=0.0, posinf=0.0, neginf=0.0)
    _apply_segments(x, t0, fs, usable, taper_n)
    xf = rfft(x, nfft)
    del x
    white = _whiten(xf, resp, nfft, n)
    sigma = _expected_sigma(psd, taps, fs, f_low, f_high)

    inside = _contract(usable, edge)
    gates: list[tuple[float, float]] = []
    for _ in range(3):  # gating a loud glitch can uncover a quieter one
        new = _find_gates(white, gate_threshold * sigma, inside, t0, fs, gate_width)
        if not new:
            break
        gates.extend((g, p / sigma) for g, p in new)
        bandlim = xf.copy()
        bandlim[:k_lo] = 0.0
        bandlim[k_hi + 1:] = 0.0
        bandlim = irfft(bandlim, nfft, overwrite_x=True)[:n]
        bandlim *= _gate_window(n, t0, fs, gates, gate_width, gate_taper)
        white = _whiten(rfft(bandlim, nfft), resp, nfft, n)
        del bandlim
    _apply_segments(white, t0, fs, usable, 0)

    good = _contract(usable, edge)
    if gates:
        half = gate_width / 2 + gate_taper + k / fs
        good -= SegmentList(Segment(g - half, g + half) for g, _ in gates).coalesce()
    good = SegmentList(s for s in good.coalesce() if float(s[1] - s[0]) > 0)
    table = pd.DataFrame({"gps": [g for g, _ in gates],
                          "width_s": [float(gate_width)] * len(gates),
                          "peak": [p for _, p in gates]}).astype(float)
    whitened = TimeSeries(white, t0=t0, sample_rate=fs, name=det,
                          channel=f"{det}:WHITENED" if det else None)
    return ConditionedData(detector=det, sample_rate=fs, f_low=f_low, f_high=f_high, psd=psd,
                           whitened=whitened, analysable=good, gates=table, t0=t0,
                           truncation=2 * k / fs, sigma=sigma, edge=edge, taps=taps,
                           gate_threshold=gate_threshold)


def _contract(segs, edge: float):
    """``segs`` less ``edge`` seconds at both ends; segments no longer than ``2 * edge`` vanish."""
    from gwpy.segments import SegmentList

    # SegmentList.contract alone would turn a segment shorter than 2 * edge into a
    # reversed (still non-empty) one, so those are dropped first
    return SegmentList(s for s in segs
                       if float(s[1]) - edge > float(s[0]) + edge).contract(edge)
