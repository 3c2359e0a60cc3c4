"""Welch median PSD estimation over the usable stretches of a strain series.

gwpy's ``TimeSeries.psd(method="median")`` (scipy's Welch with median
averaging) needs one contiguous series.  Real data has NaN gaps and we want to
leave out an on-source window around a candidate, so the per-segment
periodograms are taken here from every NaN-free stretch with scipy's
``spectrogram`` (the same window, overlap and density scaling as Welch), then
median-averaged together and divided by the median's bias for that number of
segments, exactly as scipy does for one stretch.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from ringsearch.errors import InputError

if TYPE_CHECKING:
    from gwpy.frequencyseries import FrequencySeries
    from gwpy.timeseries import TimeSeries


def median_bias(n: int) -> float:
    """Ratio of the median to the mean of ``n`` exponential (chi^2_2) variables.

    For odd ``n`` the expected median of ``n`` periodogram values is the mean
    times ``sum_{i=1}^{n} (-1)^(i+1) / i`` (Allen et al. 2012, FINDCHIRP,
    Phys. Rev. D 85, 122006, Appendix B; # from memory); it tends to ln 2.
    Even ``n`` uses the value for ``n - 1``, as scipy's Welch does.

    Examples
    --------
    >>> median_bias(1), round(median_bias(3), 4), round(median_bias(10**6), 4)
    (1.0, 0.8333, 0.6931)
    """
    if n < 1:
        raise InputError(f"median_bias needs at least one segment, not {n}.")
    m = (n - 1) // 2
    i = 2 * np.arange(1, m + 1, dtype=float)
    return float(1.0 + np.sum(1.0 / (i + 1.0) - 1.0 / i))


def _windows(exclude) -> list[tuple[float, float]]:
    if exclude is None:
        return []
    if hasattr(exclude, "__len__") and len(exclude) == 2 and np.isscalar(exclude[0]):
        exclude = [exclude]
    out = []
    for w in exclude:
        lo, hi = (float(w[0]), float(w[1]))
        if not (math.isfinite(lo) and math.isfinite(hi) and hi > lo):
            raise InputError(f"exclude window {tuple(w)!r} must be (gps_lo, gps_hi) "
                             "with gps_hi > gps_lo.")
        out.append((lo, hi))
    return out


def estimate_psd(strain: TimeSeries, seglen: float = 4.0, overlap: float | None = None,
                 window: str = "hann", exclude: tuple[float, float] | None = None,
                 segments=None) -> FrequencySeries:
    """One-sided PSD by Welch's method with median averaging.

    Parameters
    ----------
    strain : gwpy.timeseries.TimeSeries
        Strain; NaN samples mark missing data and are never used.
    seglen : float
        Length of each Welch segment in seconds (sets the resolution 1/seglen).
    overlap : float, optional
        Overlap of consecutive segments in seconds (default ``seglen / 2``).
    window : str
        Any window name scipy.signal.get_window knows (default Hann).
    exclude : (gps_lo, gps_hi) or list of them, optional
        Times whose data must not enter the estimate (e.g. an on-source window
        around a candidate, so a loud signal does not bias its own PSD).
    segments : gwpy.segments.SegmentList, optional
        Only use data inside these segments (e.g. the DQ-passing times).

    Returns
    -------
    gwpy.frequencyseries.FrequencySeries
        One-sided PSD in 1/Hz from 0 Hz to Nyquist in steps of ``1/seglen``,
        median-bias-corrected for the number of segments averaged, which is
        kept in the attribute ``psd.n_segments``.

    Raises
    ------
    InputError
        Bad parameters, or no usable stretch as long as ``seglen``.

    Examples
    --------
    >>> from ringsearch.data.noise import gaussian_noise
    >>> noise = gaussian_noise("design", 64.0, 4096, 3)
    >>> psd = estimate_psd(noise, seglen=4.0)
    >>> float(psd.df.value), float(psd.frequencies.value[-1]), psd.n_segments
    (0.25, 2048.0, 31)
    """
    from gwpy.frequencyseries import FrequencySeries
    from gwpy.segments import Segment, SegmentList
    from scipy.signal import get_window, spectrogram

    from ringsearch.data.io import finite_segments

    if not (hasattr(strain, "sample_rate") and hasattr(strain, "t0")):
        raise InputError(f"strain must be a gwpy TimeSeries (with t0 and sample_rate), "
                         f"not {type(strain).__name__}.")
    fs = float(strain.sample_rate.value)
    if not (seglen > 0 and math.isfinite(seglen)):
        raise InputError(f"seglen {seglen!r} must be a positive number of seconds.")
    nper = int(round(seglen * fs))
    if nper < 2 or abs(nper - seglen * fs) > 1e-6:
        raise InputError(f"seglen {seglen!r} s is not a whole number (>= 2) of samples at "
                         f"{fs:g} Hz.")
    overlap = seglen / 2.0 if overlap is None else float(overlap)
    nover = int(round(overlap * fs))
    if not (0 <= nover < nper):
        raise InputError(f"overlap {overlap!r} s must be >= 0 and shorter than seglen "
                         f"{seglen!r} s.")
    try:
        win = get_window(window, nper)
    except (ValueError, TypeError):
        raise InputError(f"window {window!r} is not a window scipy knows.") from None

    usable = finite_segments(strain)
    if segments is not None:
        usable &= SegmentList(segments).coalesce()
    ex = _windows(exclude)
    if ex:
        usable -= SegmentList(Segment(lo, hi) for lo, hi in ex).coalesce()
    t0 = float(strain.t0.value)
    x = np.asarray(strain.value, dtype=np.float64)
    blocks = []  # (start, stop) sample ranges, each a whole number of Welch segments
    step = nper - nover
    from ringsearch.data.segments import sample_range

    for seg in usable:
        a, b = sample_range(seg, t0, fs, whole_periods=True)
        if b - a < nper:
            continue
        # Blocks of at most 64 segments keep scipy's complex work arrays small; each
        # block starts on the same segment grid as one call over the whole stretch.
        nseg = (b - a - nper) // step + 1
        for first in range(0, nseg, 64):
            last = min(nseg, first + 64)
            blocks.append((a + first * step, a + (last - 1) * step + nper, last - first))
    name = strain.name or ""
    if not blocks:
        span = max((float(s[1] - s[0]) for s in usable), default=0.0)
        who = f"strain {name}" if name else "the strain"
        raise InputError(f"{who} has no usable stretch as long as the PSD segment length "
                         f"{seglen:g} s (longest is {span:g} s).")
    nseg = sum(c for _, _, c in blocks)
    stack = np.empty((nseg, nper // 2 + 1))
    row = 0
    for lo, hi, count in blocks:
        _, _, sxx = spectrogram(x[lo:hi], fs=fs, window=win, nperseg=nper, noverlap=nover,
                                detrend="constant", scaling="density", mode="psd")
        stack[row:row + count] = sxx.T
        row += count
    psd = np.median(stack, axis=0, overwrite_input=True) / median_bias(nseg)
    out = FrequencySeries(psd, f0=0.0, df=fs / nper, unit="1/Hz", name=name,
                          channel=getattr(strain, "channel", None),
                          epoch=strain.t0)
    out.n_segments = nseg  # gwpy arrays keep extra attributes on the instance
    return out
