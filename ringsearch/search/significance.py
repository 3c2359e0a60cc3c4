"""Significance: false-alarm rates from time-slide backgrounds, or from one detector's own data.

Several detectors: the background is the set of network events of the time
slides (:mod:`ringsearch.search.network`), counted over the slides' real
coincident time ``T_bg = sum_k |cap_d wrap(V_d, s_k,d)|``.  The false-alarm
rate of a zero-lag candidate with statistic x is ``N_bg(>= x) / T_bg``, where
background events that share a trigger with the candidate are left out, so a
candidate is never counted in its own background.  With no louder background
event the FAR is an upper limit ``1 / T_bg`` (never 0) and is flagged.

One detector: there is no coincidence; the FAR of a trigger is the rate of the
*other* clustered triggers of the analysed data at least as loud.  Any signal
in the data then inflates the background, so that estimate is conservative;
the output says which method was used.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from ringsearch.errors import InputError
from ringsearch.physics.units import YEAR_S

SLIDES_METHOD = "time slides"
SINGLE_METHOD = ("single detector: FAR from the rate of this data's own clustered triggers "
                 "(no coincidence available; conservative if signals are present)")
FAR_COLUMNS = ("n_louder_background", "far_per_year", "ifar_years", "far_is_upper_limit")


def far_from_counts(n_louder: np.ndarray, background_s: float) -> pd.DataFrame:
    """FAR columns from counts of louder background events over ``background_s`` seconds.

    Examples
    --------
    >>> far_from_counts(np.array([0, 2]), YEAR_S)["far_per_year"].round(6).tolist()
    [1.0, 2.0]
    """
    if not background_s > 0:
        raise InputError("no background time: need at least one time slide of coincident data.")
    n = np.asarray(n_louder, float)
    far = np.maximum(n, 1.0) / float(background_s) * YEAR_S
    return pd.DataFrame({"n_louder_background": n.astype(np.int64), "far_per_year": far,
                         "ifar_years": 1.0 / far, "far_is_upper_limit": n == 0})


def assign_far(candidates: pd.DataFrame, background: pd.DataFrame, background_s: float,
               detectors: Sequence[str], column: str = "network_snr") -> pd.DataFrame:
    """Add the FAR columns to zero-lag candidates from a time-slide background.

    A background event sharing any detector's trigger id with the candidate
    is not counted against it.

    Examples
    --------
    >>> cand = assign_far(cand, background, 1188.0, ["H1", "L1"])  # doctest: +SKIP
    """
    cand = candidates.reset_index(drop=True).copy()
    bsnr = background[column].to_numpy(float) if len(background) else np.empty(0)
    ids = {d: (background[f"{d}_trigger_id"].to_numpy(np.int64) if len(background)
               else np.empty(0, np.int64)) for d in detectors}
    n_louder = np.zeros(len(cand), np.int64)
    for i in range(len(cand)):
        louder = bsnr >= float(cand[column].iloc[i])
        for d in detectors:
            j = int(cand[f"{d}_trigger_id"].iloc[i])
            if j >= 0:
                louder &= ids[d] != j
        n_louder[i] = int(louder.sum())
    return pd.concat([cand, far_from_counts(n_louder, background_s)], axis=1)


def single_detector_far(triggers: pd.DataFrame, analysed_s: float,
                        column: str = "snr_reweighted") -> pd.DataFrame:
    """FAR of each trigger from the rate of the other triggers at least as loud (by ``column``).

    Examples
    --------
    >>> t = pd.DataFrame({"snr_reweighted": [5.0, 6.0, 9.0]})
    >>> single_detector_far(t, 3600.0).far_per_year.round(0).tolist()
    [17532.0, 8766.0, 8766.0]
    """
    if analysed_s <= 0:
        raise InputError("no analysed time: cannot estimate a false-alarm rate.")
    out = triggers.reset_index(drop=True).copy()
    s = np.sort(out[column].to_numpy(float))
    # number of *other* triggers with a statistic >= this one's
    n_ge = s.size - np.searchsorted(s, out[column].to_numpy(float), "left") - 1
    return pd.concat([out, far_from_counts(n_ge, analysed_s)], axis=1)


def rate_at(statistic: np.ndarray, background: np.ndarray, background_s: float) -> np.ndarray:
    """Rate per year of background events at least as loud as each statistic (no exclusions).

    Examples
    --------
    >>> rate_at(np.array([5.0, 9.0]), np.array([6.0, 7.0]), YEAR_S).round(6).tolist()
    [2.0, 0.0]
    """
    if not background_s > 0:
        return np.full(np.shape(statistic), np.nan)
    bg = np.sort(np.asarray(background, float))
    louder = bg.size - np.searchsorted(bg, np.asarray(statistic, float), side="left")
    return louder / float(background_s) * YEAR_S
