"""Conversions between gwpy segment lists and per-sample masks, and segment helpers.

Time spans are :class:`gwpy.segments.SegmentList` objects everywhere in
ringsearch (half-open ``[start, end)`` GPS intervals); the set arithmetic
(intersection, union, difference, coalescing) is gwpy's.  A mask is needed
only where numbers are computed sample by sample, and the two conversions
below are the only places that cross between the representations: sample j
of a series starting at ``t0`` with rate ``fs`` sits at ``t0 + j / fs`` and
belongs to a segment when ``start <= t0 + j / fs < end``.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from typing import Any

import numpy as np

#: Tolerance (in samples) when a segment edge falls on a sample time.
_EDGE_TOL = 1e-6


def as_segments(segments: Any) -> Any:
    """A coalesced :class:`~gwpy.segments.SegmentList` from segments or ``(start, end)`` pairs.

    Examples
    --------
    >>> list(as_segments([(0, 2), (1, 3), (5, 6)]))
    [Segment(0, 3), Segment(5, 6)]
    """
    from gwpy.segments import Segment, SegmentList

    return SegmentList(Segment(a, b) for a, b in (segments or []) if b > a).coalesce()


def segments_from_mask(mask: Any, t0: float, sample_rate: float) -> Any:
    """Segments covering the samples where ``mask`` is true (sample j spans one sample period).

    The runs of true samples are found with numpy (their edges in one pass);
    gwpy's ``StateTimeSeries.to_dqflag`` gives the same segments but walks the
    mask sample by sample in Python (seconds for a day of 4096 Hz data).

    Examples
    --------
    >>> list(segments_from_mask([0, 1, 1, 0, 1], 10.0, 2.0))
    [Segment(10.5, 11.5), Segment(12.0, 12.5)]
    """
    from gwpy.segments import Segment, SegmentList

    m = np.asarray(mask, dtype=bool)
    edges = np.flatnonzero(np.diff(np.concatenate(([0], m.view(np.int8), [0]))))
    dt = 1.0 / float(sample_rate)
    return SegmentList(Segment(float(t0) + a * dt, float(t0) + b * dt)
                       for a, b in zip(edges[::2], edges[1::2], strict=True)).coalesce()


def sample_range(segment: Any, t0: float, sample_rate: float,
                 whole_periods: bool = False) -> tuple[int, int]:
    """Sample indices ``[lo, hi)`` whose times lie in ``segment`` (no clipping to any length).

    With ``whole_periods`` a sample counts only when its whole period
    ``[t_j, t_j + 1/fs)`` lies in the segment (a stricter end when the
    segment ends between two samples), as for data a segment must contain.

    Examples
    --------
    >>> sample_range((10.5, 11.75), 10.0, 2.0)
    (1, 4)
    >>> sample_range((10.5, 11.75), 10.0, 2.0, whole_periods=True)
    (1, 3)
    """
    a, b = float(segment[0]), float(segment[1])
    lo = math.ceil((a - t0) * sample_rate - _EDGE_TOL) if math.isfinite(a) else -(2 ** 62)
    if not math.isfinite(b):
        hi = 2 ** 62
    elif whole_periods:
        hi = math.floor((b - t0) * sample_rate + _EDGE_TOL)
    else:
        hi = math.ceil((b - t0) * sample_rate - _EDGE_TOL)
    return int(lo), int(hi)


def mask_from_segments(segments: Iterable[Any], t0: float, sample_rate: float,
                       n: int) -> np.ndarray:
    """Boolean mask of ``n`` samples: true where ``start <= t0 + j / fs < end`` for a segment.

    Examples
    --------
    >>> mask_from_segments([(10.5, 11.5), (12.0, 20.0)], 10.0, 2.0, 6).astype(int).tolist()
    [0, 1, 1, 0, 1, 1]
    """
    out = np.zeros(int(n), dtype=bool)
    for seg in segments:
        lo, hi = sample_range(seg, t0, sample_rate)
        lo, hi = max(lo, 0), min(hi, int(n))
        if hi > lo:
            out[lo:hi] = True
    return out


def shorten_ends(segments: Iterable[Any], seconds: float) -> Any:
    """Each segment with ``seconds`` cut from its end (empty ones dropped).

    The start times of a template of that length that fit inside a segment.

    Examples
    --------
    >>> list(shorten_ends([(0.0, 4.0), (5.0, 5.5)], 1.0))
    [Segment(0.0, 3.0)]
    """
    from gwpy.segments import Segment, SegmentList

    return SegmentList(Segment(float(s[0]), float(s[1]) - seconds) for s in segments
                       if float(s[1]) - seconds > float(s[0])).coalesce()


def total_seconds(segments: Iterable[Any]) -> float:
    """Summed length of the segments in seconds (as a float).

    Examples
    --------
    >>> total_seconds([(0.0, 1.5), (3.0, 4.0)])
    2.5
    """
    return float(sum(float(s[1]) - float(s[0]) for s in segments))
