"""Strain read stretch by stretch: one detector's data without holding all of it.

A :class:`StrainSource` knows a detector's sample grid, its data-quality
segments and where its samples live (arrays in memory, or HDF5 datasets read
only when asked), and returns any stretch as a gwpy ``TimeSeries`` with the
segments where it may be analysed.  Long searches
(:mod:`ringsearch.search.stretches`) read through it so that their memory
follows the stretch, not the data.  Reading stretch ``[i, j)`` gives the same
samples, and within them the same analysable segments, as reading everything
and slicing.

Open files with :func:`ringsearch.data.io.open_detectors`, or wrap a series
already in memory with :meth:`StrainSource.from_series`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ringsearch.errors import InputError


@dataclass
class StrainSource:
    """One detector's strain on one sample grid, read a stretch at a time.

    Attributes
    ----------
    detector : str
        Detector name such as ``"H1"``.
    t0 : float
        GPS time of sample 0.
    sample_rate : float
        Hz.
    n_samples : int
        Samples from ``t0`` to the end of the last piece (gaps included, as NaN).
    pieces : list of (offset, samples)
        Where the samples live: ``samples`` is a numpy array or any object with
        ``size`` and slicing that returns a numpy array (e.g. an HDF5 dataset
        opened on demand); ``offset`` is its first sample's index.
    segments : SegmentList or None
        Times passing data quality (None: all of them); non-finite samples are
        removed from it by :meth:`read`.
    source_files : list of str
        Files the pieces come from (for provenance).

    Examples
    --------
    >>> from ringsearch.data.noise import gaussian_noise
    >>> src = StrainSource.from_series(gaussian_noise("design", 8.0, 1024, 1, gps_start=0.0))
    >>> ts, segs = src.read(1024, 3072)
    >>> float(ts.t0.value), ts.size, list(segs)
    (1.0, 2048, [Segment(1.0, 3.0)])
    """

    detector: str
    t0: float
    sample_rate: float
    n_samples: int
    pieces: list = field(repr=False)
    segments: Any = None
    source_files: list = field(default_factory=list)

    @classmethod
    def from_series(cls, strain: Any, segments: Any = None) -> StrainSource:
        """A source over a gwpy TimeSeries already in memory (no copy is made).

        Examples
        --------
        >>> from ringsearch.data.noise import gaussian_noise
        >>> StrainSource.from_series(gaussian_noise("design", 4.0, 1024, 1)).n_samples
        4096
        """
        if not (hasattr(strain, "sample_rate") and hasattr(strain, "t0")):
            raise InputError(f"strain must be a gwpy TimeSeries (with t0 and sample_rate), "
                             f"not {type(strain).__name__}.")
        det = strain.name or (str(strain.channel).split(":", 1)[0] if strain.channel else "")
        values = np.asarray(strain.value)
        return cls(str(det), float(strain.t0.value), float(strain.sample_rate.value),
                   int(values.size), [(0, values)], segments,
                   list(getattr(strain, "source_files", []) or []))

    @property
    def span(self) -> tuple[float, float]:
        """GPS times of the first sample and of the end of the last."""
        return self.t0, self.t0 + self.n_samples / self.sample_rate

    def time_of(self, sample: int) -> float:
        """GPS time of a sample index.

        Examples
        --------
        >>> StrainSource("H1", 10.0, 4.0, 8, []).time_of(2)
        10.5
        """
        return self.t0 + int(sample) / self.sample_rate

    def read(self, start: int, stop: int) -> tuple[Any, Any]:
        """Samples ``[start, stop)`` as a TimeSeries (NaN where no piece holds data)
        and the segments where they pass data quality and are finite.

        Examples
        --------
        >>> src = StrainSource("H1", 0.0, 2.0, 6, [(0, np.ones(6) * 1e-21)])
        >>> ts, segs = src.read(2, 6)
        >>> ts.size, list(segs)
        (4, [Segment(1.0, 3.0)])
        """
        from gwpy.segments import Segment, SegmentList
        from gwpy.timeseries import TimeSeries

        from ringsearch.data.io import finite_segments

        start, stop = max(0, int(start)), min(self.n_samples, int(stop))
        if not start < stop:
            raise InputError(f"samples {start}:{stop} of {self.detector} are empty "
                             f"(the data hold {self.n_samples}).")
        out = np.full(stop - start, np.nan)
        for offset, samples in self.pieces:
            a, b = max(start, offset), min(stop, offset + int(samples.size))
            if a < b:
                out[a - start:b - start] = samples[a - offset:b - offset]
        ts = TimeSeries(out, t0=self.time_of(start), sample_rate=self.sample_rate,
                        name=self.detector, channel=f"{self.detector}:STRAIN")
        ts.source_files = list(self.source_files)
        segs = finite_segments(ts)
        if self.segments is not None:
            t_a, t_b = self.time_of(start), self.time_of(stop)
            segs &= SegmentList(self.segments) & SegmentList([Segment(t_a, t_b)])
        return ts, segs.coalesce()


def check_same_grid(sources: Sequence[StrainSource]) -> None:
    """Refuse sources whose sample rates differ (the search needs one rate).

    Examples
    --------
    >>> check_same_grid([StrainSource("H1", 0.0, 4.0, 8, []), StrainSource("L1", 0.0, 4.0, 8, [])])
    """
    rates = {float(s.sample_rate) for s in sources}
    if len(rates) > 1:
        a, b = sources[0], next(s for s in sources if s.sample_rate != sources[0].sample_rate)
        raise InputError(f"{b.detector} is sampled at {b.sample_rate:g} Hz but {a.detector} at "
                         f"{a.sample_rate:g} Hz; all detectors need one rate.")
