"""Significance: false-alarm rates from time slides (several detectors) or from the data itself.

Time slides shift every detector but the first by multiples of a step larger
than the coincidence window plus the longest template, wrapping around the
common analysed span, so no slid coincidence can contain a real signal in all
detectors.  The false-alarm rate of a zero-lag candidate with network
statistic x is ``N_bg(>= x) / (n_slides * T)``, where background coincidences
that reuse any trigger of the candidate are left out, so a candidate is never
counted in its own background.  With no louder background event the FAR is an
upper limit ``1 / (n_slides * T)`` and is flagged as such.

With one detector there is no coincidence; the FAR of a trigger is the rate of
the *other* clustered triggers of the analysed data at least as loud.  Any
signal in the data then inflates the background, so that estimate is
conservative; the output says which method was used.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np
import pandas as pd

from ringsearch.errors import InputError
from ringsearch.physics.units import YEAR_S
from ringsearch.search.coincidence import TIMING_TOLERANCE_S, coincident_candidates

SLIDES_METHOD = "time slides"
SINGLE_METHOD = ("single detector: FAR from the rate of this data's own clustered triggers "
                 "(no coincidence available; conservative if signals are present)")


def time_slide_background(triggers: Mapping[str, pd.DataFrame], span: tuple[float, float], *,
                          n_slides: int = 100, step_s: float, tolerance_s: float =
                          TIMING_TOLERANCE_S, cluster_window_s: float = 0.1,
                          maxima: Mapping[str, pd.DataFrame] | None = None,
                          snr_column: str = "snr") -> pd.DataFrame:
    """Coincident candidates of ``n_slides`` time slides (never the zero lag).

    Detector i (in mapping order) is shifted by ``k * i * step_s`` for slide
    k = 1..n_slides, wrapping around ``span``.  Raises if the span cannot hold
    that many distinct slides.

    Returns the candidates with a ``slide`` column; ``maxima`` as for
    :func:`~ringsearch.search.coincidence.coincident_candidates` (the same
    network statistic as the zero lag must be used), and so must ``snr_column``.

    Examples
    --------
    >>> bg = time_slide_background(trig, (t0, t1), n_slides=50, step_s=0.5)  # doctest: +SKIP
    """
    dets = list(triggers)
    dur = float(span[1] - span[0])
    if step_s <= 0:
        raise InputError(f"time-slide step must be positive, got {step_s}.")
    max_slides = max_distinct_slides(dur, step_s, len(dets))
    if n_slides > max_slides:
        raise InputError(f"{n_slides} time slides of {step_s:.3g} s do not fit in the "
                         f"{dur:.3g} s of coincident data (at most {max_slides}).")
    out = []
    for k in range(1, n_slides + 1):
        shifts = {d: k * i * step_s for i, d in enumerate(dets)}
        c = coincident_candidates(triggers, tolerance_s=tolerance_s, shifts=shifts, span=span,
                                  cluster_window_s=cluster_window_s, maxima=maxima,
                                  snr_column=snr_column)
        c["slide"] = k
        out.append(c)
    if not out:
        return pd.DataFrame({"slide": pd.Series(dtype=int), "network_snr": pd.Series(dtype=float)})
    return pd.concat(out, ignore_index=True)


def max_distinct_slides(duration_s: float, step_s: float, n_detectors: int) -> int:
    """Largest number of slides whose shifts stay distinct and non-zero modulo the span."""
    if n_detectors < 2:
        return 0
    # the largest shift (n_det-1) * k * step must stay a step away from a full wrap
    return max(0, int(math.floor((duration_s - step_s) / (step_s * (n_detectors - 1)))))


def assign_far(candidates: pd.DataFrame, background: pd.DataFrame, n_slides: int,
               live_time_s: float, detectors: list[str]) -> pd.DataFrame:
    """Add ``far_per_year``, ``ifar_years``, ``far_is_upper_limit``, ``n_louder_background``.

    Examples
    --------
    >>> cand = assign_far(cand, bg, 100, 32.0, ["H1", "L1"])  # doctest: +SKIP
    """
    cand = candidates.copy()
    t_bg = n_slides * live_time_s
    if t_bg <= 0:
        raise InputError("no background time: need at least one time slide of coincident data.")
    bsnr = background["network_snr"].to_numpy(float) if len(background) else np.empty(0)
    n_louder = []
    for _, r in cand.iterrows():
        louder = bsnr >= r["network_snr"]
        # leave out background coincidences that reuse this candidate's triggers
        for d in detectors:
            j = int(r[f"{d}_row"])
            if j >= 0 and len(background):
                louder &= background[f"{d}_row"].to_numpy(int) != j
        n_louder.append(int(louder.sum()))
    n_louder = np.asarray(n_louder, float)
    upper = n_louder == 0
    far = np.maximum(n_louder, 1.0) / t_bg * YEAR_S
    cand["n_louder_background"] = n_louder.astype(int)
    cand["far_per_year"] = far
    cand["ifar_years"] = 1.0 / far
    cand["far_is_upper_limit"] = upper
    return cand


def single_detector_far(triggers: pd.DataFrame, analysed_s: float,
                        column: str = "snr") -> pd.DataFrame:
    """FAR of each trigger from the rate of the other triggers at least as loud (by ``column``).

    Examples
    --------
    >>> t = pd.DataFrame({"snr": [5.0, 6.0, 9.0]})
    >>> single_detector_far(t, 3600.0).far_per_year.round(0).tolist()
    [17532.0, 8766.0, 8766.0]
    """
    if analysed_s <= 0:
        raise InputError("no analysed time: cannot estimate a false-alarm rate.")
    out = triggers.copy()
    s = np.sort(out[column].to_numpy(float))
    # number of *other* triggers with a statistic >= this one's
    n_ge = s.size - np.searchsorted(s, out[column].to_numpy(float), "left") - 1
    upper = n_ge == 0
    far = np.maximum(n_ge, 1) / analysed_s * YEAR_S
    out["n_louder_background"] = n_ge
    out["far_per_year"] = far
    out["ifar_years"] = 1.0 / far
    out["far_is_upper_limit"] = upper
    return out
