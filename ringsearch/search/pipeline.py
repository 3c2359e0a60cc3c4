"""The end-to-end search: read/condition -> bank -> filter -> coincidence -> significance.

:func:`run_search` is what ``ringsearch search`` and campaigns call; it
accepts file paths, strain series or already conditioned data, so campaigns
can search data with injections in it without writing files.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from ringsearch.errors import InputError
from ringsearch.search.bank import Bank
from ringsearch.search.coincidence import (
    TIMING_TOLERANCE_S,
    check_tolerance,
    coincident_candidates,
    light_travel_time,
)
from ringsearch.search.filter import default_cluster_window, matched_filter
from ringsearch.search.significance import (
    SINGLE_METHOD,
    SLIDES_METHOD,
    assign_far,
    max_distinct_slides,
    single_detector_far,
    time_slide_background,
)
from ringsearch.search.triggers import loudest
from ringsearch.search.veto import DEFAULT_BINS, DEFAULT_DOMAIN, check_bins, check_domain


@dataclass
class SearchResult:
    """Everything a search produced.

    ``triggers``: all detectors' clustered triggers (``detector`` column);
    ``candidates``: coincident candidates (or, with one detector, its
    triggers) with ``far_per_year``/``ifar_years``; ``background``: time-slide
    coincidences; ``conditioned``: detector -> ConditionedData; ``summary``:
    the JSON-ready summary written as ``summary.json``.
    """

    triggers: pd.DataFrame
    candidates: pd.DataFrame
    background: pd.DataFrame
    bank: Bank
    conditioned: dict
    summary: dict = field(default_factory=dict)


def _is_conditioned(x: Any) -> bool:
    return hasattr(x, "filter_response") and hasattr(x, "whitened")


def condition_inputs(data: Any, *, f_low: float = 20.0, f_high: float | None = None,
                     dq_level: str = "CBC_CAT2", gps_start: float | None = None,
                     gps_end: float | None = None, detector: str | None = None,
                     sample_rate: float | None = None, data_start: float | None = None,
                     **condition_kw: Any) -> dict:
    """Turn paths / strain series / conditioned data into ``{detector: ConditionedData}``.

    The GPS window is only checked here (it must overlap analysable data);
    :func:`run_search` restricts trigger start times to it.  ``detector``,
    ``sample_rate`` and ``data_start`` describe files that do not describe
    themselves, as in :func:`ringsearch.data.io.read_detectors` (where
    ``data_start`` is called ``gps_start``); they apply to file paths only.

    Examples
    --------
    >>> conds = condition_inputs(["H-H1_LOSC_4_V2-1126259446-32.hdf5"])  # doctest: +SKIP
    """
    from gwpy.segments import Segment, SegmentList

    if isinstance(data, Mapping):
        items = dict(data)
    elif isinstance(data, str | bytes) or hasattr(data, "__fspath__"):
        items = None
        data = [data]
    else:
        items = None
    conds: dict = {}
    if items is None:
        from ringsearch.data.io import read_detectors

        paths = list(data)
        if not paths:
            raise InputError("no strain files given.")
        items = dict(read_detectors(paths, dq_level=dq_level, detector=detector,
                                    sample_rate=sample_rate, gps_start=data_start))
    elif detector is not None or sample_rate is not None or data_start is not None:
        raise InputError("detector, sample_rate and data_start describe strain files, so they "
                         "do not apply to strain given as a mapping {detector: strain}.")
    from ringsearch.data.condition import condition

    for det, item in items.items():
        if _is_conditioned(item):
            conds[det] = item
            continue
        if isinstance(item, tuple):
            ts, segs = item
        else:
            ts, segs = item, None
        conds[det] = condition(ts, f_low=f_low, f_high=f_high, analysable=segs, **condition_kw)
    if gps_start is not None or gps_end is not None:
        _check_gps_window(gps_start, gps_end)
        for det, c in conds.items():
            t0 = float(c.t0)
            t1 = t0 + c.whitened.size / float(c.sample_rate)
            a = t0 if gps_start is None else float(gps_start)
            b = t1 if gps_end is None else float(gps_end)
            if not a < b:
                raise InputError(f"GPS window {a}:{b} is empty (start must be before end).")
            if b <= t0 or a >= t1:
                raise InputError(f"GPS window {a}:{b} lies outside the {det} data "
                                 f"({t0}:{t1}).")
            if abs(c.analysable & SegmentList([Segment(a, b)])) <= 0:
                raise InputError(f"GPS window {a}:{b} holds no analysable {det} data.")
    for det, c in conds.items():
        if abs(c.analysable) <= 0:
            raise InputError(f"no analysable time is left in the {det} data after data quality, "
                             "gating and the GPS window.")
    return conds


def _combined_psd(conds: Mapping[str, Any]) -> tuple[np.ndarray, np.ndarray]:
    """Network noise for bank placement: 1 / mean(1/S) on the first detector's grid."""
    first = next(iter(conds.values())).psd
    f = np.asarray(first.frequencies.value, float)
    inv = np.zeros_like(f)
    for c in conds.values():
        pf, pv = np.asarray(c.psd.frequencies.value, float), np.asarray(c.psd.value, float)
        with np.errstate(divide="ignore"):
            inv += np.interp(f, pf, np.where(pv > 0, 1 / pv, 0.0))
    inv /= len(conds)
    good = inv > 0
    return f[good], 1 / inv[good]


def _check_gps_window(gps_start: float | None, gps_end: float | None) -> None:
    for name, v in (("--gps-start", gps_start), ("--gps-end", gps_end)):
        if v is not None and not math.isfinite(float(v)):
            raise InputError(f"{name} must be a finite GPS time in s, got {v}.")
    if gps_start is not None and gps_end is not None and not float(gps_start) < float(gps_end):
        raise InputError(f"GPS window {gps_start}:{gps_end} is empty (start must be before end).")


def run_search(data: Any, *, gps_start: float | None = None, gps_end: float | None = None,
               mass: tuple[float, float] = (20.0, 200.0), spin: tuple[float, float] = (0.0, 0.99),
               n_overtones: int | None = None, min_match: float = 0.97, bank: Bank | None = None,
               snr_threshold: float = 5.0, n_slides: int = 100, slide_step_s: float | None = None,
               tolerance_s: float = TIMING_TOLERANCE_S, f_low: float = 20.0,
               f_high: float | None = None, dq_level: str = "CBC_CAT2", seed: int = 0,
               progress: bool = False, veto: bool = True,
               veto_bins: int = DEFAULT_BINS, veto_domain: str = DEFAULT_DOMAIN,
               detector: str | None = None, sample_rate: float | None = None,
               data_start: float | None = None) -> SearchResult:
    """Search strain for ringdowns and rank candidates by false-alarm rate.

    Parameters
    ----------
    data : paths, ``{det: TimeSeries}``, ``{det: (TimeSeries, SegmentList)}`` or
        ``{det: ConditionedData}``
        Strain to search (files of one or several detectors).
    gps_start, gps_end : float, optional
        Only templates starting in this window make triggers.
    mass, spin : (lo, hi)
        Remnant box of the bank (ignored when ``bank`` is given).
    n_overtones, min_match, seed
        Bank parameters (see :meth:`Bank.from_box`); ``n_overtones`` defaults
        to 0, or to the given bank's count (another count with a bank is refused).
    bank : Bank, optional
        Reuse a bank instead of placing one.
    snr_threshold : float
        Projection-SNR threshold of triggers.
    n_slides : int
        Time slides for the background (capped by what the data can hold).
    slide_step_s : float, optional
        Slide step (default: coincidence window + longest template + cluster
        window, rounded up to 0.1 s).
    tolerance_s : float
        Timing tolerance added to the light-travel time for coincidence.
    veto : bool
        Signal-consistency veto (default on): the band chi-squared of
        :mod:`ringsearch.search.veto` at every trigger, and clustering,
        coincidence, network statistic and FAR ranked by the re-weighted SNR
        (the raw SNR stays in the ``snr`` columns).  Off: ranked by raw SNR.
    veto_bins : int
        Number p of pieces of the chi-squared (default 8).
    veto_domain : {"time", "frequency"}
        Pieces are time slices of the whitened template (default) or frequency bands.
    detector, sample_rate, data_start : optional
        For strain files that do not describe themselves: the detector name
        (overrides what files record; refused for files of several
        detectors), and the sample rate (Hz) and GPS time of the first sample
        of one-column text files.  Only with file paths as ``data``.

    Returns
    -------
    SearchResult

    Examples
    --------
    >>> res = run_search(["H-H1_LOSC_4_V2-1126259446-32.hdf5",
    ...                   "L-L1_LOSC_4_V2-1126259446-32.hdf5"])  # doctest: +SKIP
    >>> res.summary["candidates"][0]["gps"]  # doctest: +SKIP
    """
    if not snr_threshold > 0:
        raise InputError(f"SNR threshold must be positive, got {snr_threshold}.")
    if int(n_slides) < 0:
        raise InputError(f"number of time slides must be non-negative, got {n_slides}.")
    _check_gps_window(gps_start, gps_end)
    tolerance_s = check_tolerance(tolerance_s)
    if slide_step_s is not None and not (math.isfinite(float(slide_step_s))
                                         and float(slide_step_s) > 0):
        raise InputError(f"time-slide step must be a positive number of seconds, "
                         f"got {slide_step_s}.")
    if bank is not None and n_overtones is not None and int(n_overtones) != bank.n_overtones:
        raise InputError(f"the bank was built for {bank.n_overtones} overtone(s), not the "
                         f"{n_overtones} asked for; omit the overtone count or build a new bank.")
    if n_overtones is None:
        n_overtones = bank.n_overtones if bank is not None else 0
    bins = check_bins(veto_bins) if veto else None
    if veto:
        veto_domain = check_domain(veto_domain)
    rank = "snr_reweighted" if veto else "snr"
    if bank is None:
        # validate the box before any expensive work
        from ringsearch.search.bank import _check_overtones, _check_range, _check_seed

        _check_range("mass", mass, 0.0, math.inf)
        lo_s, hi_s = _check_range("spin", spin, 0.0, 1.0)
        if hi_s >= 1.0:
            raise InputError(f"spin range upper end must be below 1 (Kerr bound), got {hi_s}.")
        if not 0.0 < float(min_match) < 1.0:
            raise InputError(f"minimal match must lie strictly between 0 and 1, got {min_match}.")
        _check_overtones(n_overtones)
        _check_seed(seed)
    conds = condition_inputs(data, f_low=f_low, f_high=f_high, dq_level=dq_level,
                             gps_start=gps_start, gps_end=gps_end, detector=detector,
                             sample_rate=sample_rate, data_start=data_start)
    dets = list(conds)
    if bank is None:
        f_hi = min(float(c.f_high) for c in conds.values())
        f_lo = max(float(c.f_low) for c in conds.values())
        bank = Bank.from_box(mass, spin, n_overtones, min_match, psd=_combined_psd(conds),
                             f_low=f_lo, f_high=f_hi, seed=seed, progress=progress)
    window = default_cluster_window(bank)
    gps_window = None
    if gps_start is not None or gps_end is not None:
        gps_window = (-math.inf if gps_start is None else float(gps_start),
                      math.inf if gps_end is None else float(gps_end))
    trig_by_det: dict[str, pd.DataFrame] = {}
    maxima: dict[str, pd.DataFrame] = {}
    analysed: dict[str, float] = {}
    refused = None
    for det, c in conds.items():
        t, mx = matched_filter(c, bank, snr_threshold, cluster_window_s=window,
                               progress=progress, gps_window=gps_window, return_maxima=True,
                               veto_bins=bins, veto_domain=veto_domain)
        trig_by_det[det] = t
        maxima[det] = mx
        analysed[det] = float(t.attrs["analysed_s"])
        refused = t.attrs["refused"]
    triggers = pd.concat([t.copy().set_axis(t.columns, axis=1) for t in trig_by_det.values()],
                         ignore_index=True)
    triggers.attrs = {}
    sig: dict[str, Any]
    background = pd.DataFrame()
    if len(dets) == 1:
        cands = single_detector_far(trig_by_det[dets[0]], analysed[dets[0]], column=rank)
        cands = cands.sort_values(rank, ascending=False).reset_index(drop=True)
        cands.insert(2, "network_snr", cands[rank])
        sig = {"method": SINGLE_METHOD, "background_time_s": analysed[dets[0]]}
    else:
        from gwpy.segments import SegmentList

        common = SegmentList(conds[dets[0]].analysable)
        for d in dets[1:]:
            common = common & SegmentList(conds[d].analysable)
        if gps_window is not None:
            from gwpy.segments import Segment

            lo, hi = (max(gps_window[0], -1e12), min(gps_window[1], 1e12))
            common = common & SegmentList([Segment(lo, hi)])
        common = common.coalesce()
        live = float(abs(common))
        if live <= 0:
            raise InputError("the detectors share no analysable time, so nothing can be "
                             "coincident.")
        span = (float(common[0][0]), float(common[-1][1]))
        # zero lag and slides use only triggers inside the common analysable time
        in_common = {}
        for d in dets:
            t = trig_by_det[d]
            keep = np.array([any(float(s[0]) <= g < float(s[1]) for s in common)
                             for g in t["gps"]], bool) if len(t) else np.zeros(0, bool)
            in_common[d] = t[keep].reset_index(drop=True)
        max_travel = max(light_travel_time(a, b) for a in dets for b in dets if a != b)
        if slide_step_s is None:
            slide_step_s = math.ceil((max_travel + tolerance_s + float(bank.duration_s.max())
                                      + window) * 10) / 10
        coinc_window = max_travel + tolerance_s
        min_step = coinc_window + float(bank.duration_s.max())
        if slide_step_s <= min_step:
            raise InputError(f"time-slide step {slide_step_s} s must exceed the coincidence "
                             f"window plus the longest template ({min_step:.3g} s).")
        n_use = min(int(n_slides), max_distinct_slides(span[1] - span[0], slide_step_s, len(dets)))
        zero = coincident_candidates(in_common, tolerance_s=tolerance_s, cluster_window_s=window,
                                     maxima=maxima, snr_column=rank)
        if n_use > 0:
            background = time_slide_background(in_common, span, n_slides=n_use,
                                               step_s=slide_step_s, tolerance_s=tolerance_s,
                                               cluster_window_s=window, maxima=maxima,
                                               snr_column=rank)
            cands = assign_far(zero, background, n_use, live, dets)
        else:
            cands = zero.copy()
            for col in ("n_louder_background", "far_per_year", "ifar_years",
                        "far_is_upper_limit"):
                cands[col] = pd.Series(dtype=float)
        cands = cands.sort_values("network_snr", ascending=False).reset_index(drop=True)
        nt = cands["network_template_index"].to_numpy(int)
        tab = bank.table.iloc[np.clip(nt, 0, None)]
        for col in ["template_id", "mass_msun", "spin"] + [
                c for n in range(bank.n_modes) for c in (f"f22{n}_hz", f"tau22{n}_s")]:
            cands[f"network_{col}"] = np.where(nt >= 0, tab[col].to_numpy(float), np.nan)
        sig = {"method": SLIDES_METHOD, "n_slides": int(n_use), "requested_slides": int(n_slides),
               "slide_step_s": float(slide_step_s), "coincident_time_s": live,
               "background_time_s": live * n_use, "timing_tolerance_s": float(tolerance_s),
               "coincidence_window_s": {f"{a}-{b}": light_travel_time(a, b) + tolerance_s
                                        for i, a in enumerate(dets) for b in dets[i + 1:]},
               "n_background": int(len(background))}
        if n_use == 0:
            sig["note"] = ("the coincident data is too short for any time slide of "
                           f"{slide_step_s} s; no FAR is given")
    what = "re-weighted SNR rho_hat" if veto else "projection SNR rho"
    sig["network_statistic"] = (
        f"sqrt(max over templates of the sum over detectors of the squared {what}), one "
        "template for all detectors" if len(dets) > 1 else f"single-detector {what}")
    sig["veto"] = ({"bins": int(bins), "domain": veto_domain,
                    "statistic": "chi-squared of the projection split into p equal-share "
                    f"{'time slices' if veto_domain == 'time' else 'frequency bands'}, "
                    "dof 2(N+1)(p-1) at most (Allen 2005, PRD 71, 062001, adapted)",
                    "reweighting": "rho / [(1 + chi2_r^3)/2]^(1/6) for chi2_r > 1 "
                    "(Babak et al. 2013, PRD 87, 024033)",
                    "cpu_s": {d: float(trig_by_det[d].attrs.get("veto_cpu_s", 0.0))
                              for d in dets}}
                   if veto else None)
    summary = _summary(conds, bank, trig_by_det, cands, sig, refused, window, rank,
                       dict(snr_threshold=float(snr_threshold), gps_start=gps_start,
                            gps_end=gps_end))
    if "mass_range_msun" in bank.meta:
        # bank report: Monte Carlo coverage with a seed independent of the placement's
        cov = bank.coverage(500, seed=seed + 1)
        summary["bank"]["coverage"] = {
            "n_points": int(len(cov)), "fraction_covered": float(cov.covered.mean()),
            "min_fitting_factor": float(cov.fitting_factor.min()),
            "definition": "fitting factor minimised over mode amplitudes, uniform (M, chi)"}
    return SearchResult(triggers, cands, background, bank, conds, summary)


def _clean(x: Any) -> Any:
    """JSON-safe: numpy scalars to Python, NaN to None."""
    if isinstance(x, dict):
        return {str(k): _clean(v) for k, v in x.items()}
    if isinstance(x, list | tuple):
        return [_clean(v) for v in x]
    if isinstance(x, np.generic):
        x = x.item()
    if isinstance(x, float) and not math.isfinite(x):
        return None
    return x


def _summary(conds, bank, trig_by_det, cands, sig, refused, window, rank, params) -> dict:
    dets = list(conds)
    out: dict[str, Any] = {
        "detectors": dets,
        "loudest": {d: loudest(trig_by_det[d], rank) for d in dets},
        "n_triggers": {d: int(len(trig_by_det[d])) for d in dets},
        "significance": sig,
        "segments": {d: [[float(s[0]), float(s[1])] for s in conds[d].analysable] for d in dets},
        "analysed_s": {d: float(trig_by_det[d].attrs["analysed_s"]) for d in dets},
        "bank": bank.summary(),
        "refused_templates": refused or [],
        "cluster_window_s": float(window),
        "parameters": params,
        "amplitude_convention": ("h(t) = sum_n Re[A_n exp(-i 2 pi f_n (t - gps))] "
                                 "exp(-(t - gps)/tau_n), A_n = amp22n_re + i amp22n_im"),
    }
    rows = []
    for _, r in cands.head(50).iterrows():
        row = {"gps": float(r["gps"]), "network_snr": float(r["network_snr"]),
               "far_per_year": r.get("far_per_year"), "ifar_years": r.get("ifar_years"),
               "far_is_upper_limit": bool(r["far_is_upper_limit"])
               if "far_is_upper_limit" in r and pd.notna(r["far_is_upper_limit"]) else None}
        if len(dets) > 1:
            row["network_snr_quadrature"] = float(r["network_snr_quadrature"])
            row["template"] = {"template_id": r["network_template_id"],
                               "mass": r["network_mass_msun"], "spin": r["network_spin"],
                               "f_hz": r["network_f220_hz"], "tau_s": r["network_tau220_s"],
                               "n_overtones": bank.n_overtones}
            row["detectors"] = {}
            for d in dets:
                j = int(r[f"{d}_row"])
                if j >= 0:
                    t = trig_by_det[d].iloc[j]
                    row["detectors"][d] = {"gps": float(t.gps), "snr": float(t.snr),
                                           "snr_reweighted": float(t.snr_reweighted),
                                           "chisq": float(t.chisq),
                                           "chisq_dof": int(t.chisq_dof),
                                           "mass": float(t.mass_msun), "spin": float(t.spin),
                                           "f_hz": float(t.f220_hz), "tau_s": float(t.tau220_s),
                                           "template_id": int(t.template_id)}
        else:
            row.update({"detector": dets[0], "snr": float(r["snr"]),
                        "snr_reweighted": float(r["snr_reweighted"]), "chisq": float(r["chisq"]),
                        "chisq_dof": int(r["chisq_dof"]), "mass": float(r.mass_msun),
                        "spin": float(r.spin), "f_hz": float(r.f220_hz),
                        "tau_s": float(r.tau220_s), "template_id": int(r.template_id)})
        rows.append(row)
    out["candidates"] = rows
    out["loudest_candidate"] = rows[0] if rows else None
    return _clean(out)

