"""End-to-end overtone analysis of one candidate: :func:`analyse_candidate`.

Reads strain, estimates each detector's PSD away from the candidate,
band-passes the data, builds one Toeplitz noise model per detector, then

1. the amplitude-marginalised (mass, spin) posterior and the evidence for
   N = 0..N_max overtones at the requested start time (Bayes factors,
   supported N, credible intervals);
2. the same evidence over a scan of start times (Bayes factors against t0);
3. fixed-frequency fits against start time at the posterior median (amplitudes
   referred to the requested start time, residual power, condition numbers);
4. variable-projection fits (Kerr-constrained for each N; agnostic for one
   free mode) in each detector, with several starting points;

and, given an output folder, writes the tables, plots and ``summary.json``
atomically (the folder appears whole or not at all).
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ringsearch.analysis.fits import DetectorSeries, start_time_scan
from ringsearch.analysis.noise_model import ToeplitzNoise, toeplitz_noise
from ringsearch.analysis.posterior import (
    SNR_PRIOR,
    kerr22_spin_range,
    kerr_modes,
    remnant_posterior,
)
from ringsearch.analysis.varpro import fit_free_modes, fit_kerr
from ringsearch.errors import InputError

__all__ = ["bandpass", "prepare_detectors", "analyse_candidate", "candidate_from_search",
           "candidate_evidence", "sky_geometry"]

#: Seconds of data kept around the candidate for band-passing (filter transients die out).
_PAD_S = 4.0


def bandpass(values: np.ndarray, sample_rate: float, f_low: float, f_high: float,
             order: int = 8) -> np.ndarray:
    """Zero-phase Butterworth band-pass (scipy ``sosfiltfilt``) of a NaN-free array.

    Zero phase keeps the ringdown's start time where it is; the filter is run
    on several seconds around the candidate so its edge transients never reach
    the analysed segment.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(4096) / 4096.0
    >>> y = bandpass(np.sin(2 * np.pi * 5 * t) + np.sin(2 * np.pi * 250 * t), 4096.0, 20.0, 1000.0)
    >>> bool(np.allclose(y[1000:3000], np.sin(2 * np.pi * 250 * t[1000:3000]), atol=1e-2))
    True
    """
    from scipy.signal import butter, sosfiltfilt

    sos = butter(order, [f_low, f_high], btype="bandpass", fs=sample_rate, output="sos")
    return sosfiltfilt(sos, values)


def _read(strain_input, detector: str | None = None, sample_rate: float | None = None,
          data_start: float | None = None) -> list[Any]:
    """TimeSeries per detector from paths or from TimeSeries objects.

    ``detector``, ``sample_rate`` and ``data_start`` are the reading options of
    :func:`ringsearch.data.io.read_strain` (``data_start`` is its
    ``gps_start``) for files that do not describe themselves.
    """
    from ringsearch.data.io import read_strain

    if isinstance(strain_input, Mapping):
        items = list(strain_input.values())
    elif isinstance(strain_input, (str, os.PathLike)):
        items = [strain_input]
    else:
        items = list(strain_input)
    series = []
    paths = []
    for it in items:
        if isinstance(it, (str, os.PathLike)):
            paths.append(Path(it))
        else:
            series.append(it)
    read_kw = {"detector": detector, "sample_rate": sample_rate, "gps_start": data_start}
    if paths:
        by_det: dict[str, list] = {}
        for p in paths:
            ts = read_strain(p, **read_kw)
            by_det.setdefault(str(ts.name), []).append((p, ts))
        # one forced detector name for files of several detectors is refused here
        series.extend(read_strain([p for p, _ in got], **read_kw) if len(got) > 1
                      else got[0][1] for got in by_det.values())
    elif any(v is not None for v in read_kw.values()):
        raise InputError("detector, sample_rate and data_start describe strain files, so they "
                         "do not apply to strain given as series.")
    names = [str(s.name) for s in series]
    if len(set(names)) != len(names):
        raise InputError(f"the strain inputs hold the same detector twice ({names}).")
    if not series:
        raise InputError("no strain files were given.")
    return series


def prepare_detectors(strain_input, gps: float, duration: float, f_low: float = 20.0,
                      f_high: float | None = None, time_shifts: Mapping[str, float] | None = None,
                      psd_seglen: float = 2.0, out_of_band_factor: float = 100.0,
                      psds: Mapping[str, Any] | None = None, cache: dict | None = None,
                      *, detector: str | None = None, sample_rate: float | None = None,
                      data_start: float | None = None
                      ) -> tuple[list[DetectorSeries], list[ToeplitzNoise], dict]:
    """Band-passed data and Toeplitz noise models for every detector.

    ``strain_input`` is as for :func:`analyse_candidate`, and so are
    ``detector``, ``sample_rate`` and ``data_start`` (for files that do not
    describe themselves).  The PSD is ``psds[detector]`` (a one-sided gwpy FrequencySeries) when
    given, else a Welch median estimate (:func:`ringsearch.data.psd.estimate_psd`)
    that excludes ±2 s around ``gps``.  ``cache`` (any dict kept by the caller)
    reuses noise models across calls with the same detector, PSD object and
    segment length (the Cholesky factorisation is the costly step).  Returns
    the series, the noise models and a dict of per-detector metadata.

    Examples
    --------
    >>> data, noises, meta = prepare_detectors(["H-H1_LOSC_4_V2-1126259446-32.hdf5"],
    ...     1126259462.42, 0.1)  # doctest: +SKIP
    """
    from ringsearch.data.condition import DEFAULT_F_HIGH_FRACTION
    from ringsearch.data.psd import estimate_psd

    shifts = dict(time_shifts or {})
    out_d, out_n, meta = [], [], {}
    for ts in _read(strain_input, detector, sample_rate, data_start):
        name = str(ts.name)
        fs = float(ts.sample_rate.value)
        t_start = float(ts.t0.value)
        t_end = t_start + len(ts) / fs
        shift = float(shifts.get(name, 0.0))
        start = gps + shift
        if not (t_start <= start and start + duration <= t_end):
            raise InputError(f"the start time {start:.4f} (+{duration:.3f} s) lies outside the "
                             f"{name} data [{t_start:.3f}, {t_end:.3f}] s.")
        fh = DEFAULT_F_HIGH_FRACTION * fs / 2 if f_high is None else float(f_high)
        if not 0 < f_low < fh < fs / 2:
            raise InputError(f"the band f_low={f_low}, f_high={fh} Hz must satisfy "
                             f"0 < f_low < f_high < Nyquist ({fs / 2} Hz).")
        if psds is not None and name in psds:
            psd = psds[name]
        else:
            psd = estimate_psd(ts, seglen=psd_seglen, exclude=(gps - 2.0, gps + 2.0))
        lo = max(t_start, start - _PAD_S)
        hi = min(t_end, start + duration + _PAD_S)
        i0, i1 = int(round((lo - t_start) * fs)), int(round((hi - t_start) * fs))
        chunk = np.asarray(ts.value[i0:i1], float)
        if not np.all(np.isfinite(chunk)):
            raise InputError(f"the {name} data around GPS {gps} contains missing (NaN) samples.")
        if (start - lo) < 0.5 or (hi - start - duration) < 0.5:
            raise InputError(f"the start time {start:.3f} is within 0.5 s of the edge of the "
                             f"{name} data; the band-pass filter needs data on both sides.")
        filt = bandpass(chunk, fs, f_low, fh)
        n = int(round(duration * fs))
        key = (name, id(psd), n, fs, f_low, fh, out_of_band_factor)
        if cache is not None and key in cache:
            noise = cache[key][1]
        else:
            noise = toeplitz_noise(psd.frequencies.value, psd.value, fs, n, f_low=f_low,
                                   f_high=fh, out_of_band_factor=out_of_band_factor)
            if cache is not None:
                cache[key] = (psd, noise)   # keep psd alive so its id stays unique
        out_d.append(DetectorSeries(name, filt, t_start + i0 / fs, fs, time_shift=shift))
        out_n.append(noise)
        meta[name] = {"sample_rate_hz": fs, "f_low_hz": f_low, "f_high_hz": fh,
                      "psd_segments": int(getattr(psd, "n_segments", 0)), "time_shift_s": shift,
                      "segment_samples": n}
    unknown = sorted(set(shifts) - set(meta))
    if unknown:
        raise InputError(f"a time shift is given for {unknown[0]}, which is not among the "
                         f"detectors of the data ({', '.join(meta)}).")
    return out_d, out_n, meta


def sky_geometry(strain_input, sky: tuple[float, float], gps: float,
                 time_shifts: Mapping[str, float] | None = None, *,
                 detector: str | None = None, sample_rate: float | None = None,
                 data_start: float | None = None):
    """Start-time shifts and antenna patterns (F+, Fx at psi = 0) for a sky position.

    Detector names are read from the strain (files are opened, with the
    reading options ``detector``, ``sample_rate``, ``data_start`` of
    :func:`analyse_candidate`); shifts are geocentre-delay differences
    relative to the first detector unless given.

    Examples
    --------
    >>> shifts, fpc = sky_geometry(files, (1.95, -1.27), 1126259462.42)  # doctest: +SKIP
    """
    from ringsearch.physics.detectors import antenna_pattern, time_delay_from_geocentre

    ra, dec = map(float, sky)
    if not (0 <= ra <= 2 * math.pi and -math.pi / 2 <= dec <= math.pi / 2):
        raise InputError(f"the sky position ra={ra}, dec={dec} must be in radians "
                         "(0 <= ra <= 2 pi, -pi/2 <= dec <= pi/2).")
    names = [str(ts.name) for ts in _read(strain_input, detector, sample_rate, data_start)]
    antenna = {}
    delays = {}
    for det in names:
        fp, fc = antenna_pattern(det, ra, dec, 0.0, gps)
        antenna[det] = (float(np.ravel(fp)[0]), float(np.ravel(fc)[0]))
        delays[det] = float(np.ravel(time_delay_from_geocentre(det, ra, dec, gps))[0])
    if time_shifts:
        shifts = dict(time_shifts)
    else:
        shifts = {det: delays[det] - delays[names[0]] for det in names}
    return shifts, antenna


def candidate_from_search(folder: str | os.PathLike, trigger: int | None = None) -> dict:
    """Start time (and detector, template) of a candidate in a search output folder.

    ``trigger`` is a ``trigger_id`` of ``triggers.parquet``.  By default the
    loudest candidate of ``candidates.parquet`` is taken when there is one; with
    several detectors each detector's start of the candidate's template is
    returned as ``time_shifts`` (seconds relative to ``gps``), so every
    detector's segment starts where that detector's template did.  Otherwise
    the loudest trigger by its ranking SNR.

    Examples
    --------
    >>> candidate_from_search("search-out", 3)["gps"]  # doctest: +SKIP
    1126259462.423
    """
    folder = Path(folder)
    table = folder / "triggers.parquet"
    if not table.exists():
        raise InputError(f"the search folder {folder} has no triggers.parquet.")
    trig = pd.read_parquet(table)
    if len(trig) == 0:
        raise InputError(f"the search folder {folder} holds no triggers.")
    rank = "snr_reweighted" if "snr_reweighted" in trig.columns else "snr"
    cand_table = folder / "candidates.parquet"
    if trigger is None and cand_table.exists():
        cands = pd.read_parquet(cand_table)
        dets = sorted(set(trig["detector"].astype(str)))
        if len(cands) and len(dets) > 1:
            best = cands.loc[cands["network_snr"].idxmax()]
            gps = float(best["gps"])
            shifts = {d: float(best[f"{d}_gps"]) - gps for d in dets
                      if f"{d}_gps" in cands.columns and pd.notna(best[f"{d}_gps"])}
            return {"gps": gps, "detector": "network", "snr": float(best["network_snr"]),
                    "time_shifts": shifts}
    if trigger is None:
        row = trig.loc[trig[rank].idxmax()]
    else:
        ids = trig["trigger_id"] if "trigger_id" in trig.columns else pd.Series(trig.index)
        hit = np.flatnonzero(ids.to_numpy() == int(trigger))
        if hit.size == 0:
            raise InputError(f"trigger {trigger} is not a trigger_id of {table} "
                             f"({int(ids.min())}..{int(ids.max())}).")
        row = trig.iloc[int(hit[0])]
    out = {"gps": float(row["gps"]), "detector": str(row.get("detector", "")),
           "snr": float(row.get("snr", math.nan))}
    for k in ("mass_msun", "spin", "n_overtones"):
        if k in row:
            out[k] = float(row[k])
    return out


def candidate_evidence(strains, t0_gps: float, mass_range: tuple[float, float],
                       spin_range: tuple[float, float], max_overtones: int = 2,
                       psds: Mapping[str, Any] | None = None, grid: tuple[int, int] = (15, 15),
                       duration: float | None = None, f_low: float = 20.0,
                       f_high: float | None = None, threshold: float = 0.5,
                       snr_prior: tuple[float, float] | None = None,
                       time_shifts: Mapping[str, float] | None = None,
                       cache: dict | None = None,
                       antenna: Mapping[str, tuple[float, float]] | None = None) -> dict:
    """Overtone-count evidence for a candidate in strain series (for campaigns).

    Band-passes each detector's strain, builds (or reuses from ``cache``) its
    Toeplitz noise model from ``psds[detector]`` (estimated from the strain if
    absent), and returns :func:`ringsearch.analysis.posterior.overtone_evidence`'s
    dict: ``log10_bayes`` {"N:N-1": float}, ``supported_overtones``,
    ``mass``/``spin`` {median, lo90, hi90}, ``averaged``, ``snr_prior``, ``warnings``.

    Parameters
    ----------
    strains : TimeSeries, list of them, {detector: TimeSeries} or paths
        Strain (raw, not whitened) with at least 0.5 s on each side of the segment.
    t0_gps : float
        Ringdown start time (e.g. the injection's start time or the matched
        trigger's ``gps``).
    mass_range, spin_range, max_overtones, grid, threshold, snr_prior
        See :func:`analyse_candidate`; the default grid is coarse (15 x 15).
    cache : dict, optional
        Keep one dict across calls to reuse the noise factorisations.
    antenna : {detector: (F+, Fx)}, optional
        Coherent network (see :func:`sky_geometry`); default independent
        amplitudes per detector.

    Notes
    -----
    How often a Bayes factor above ``threshold`` is spurious is measured, not
    implied by the threshold (``scripts/calibrate.py``; see the Notes of
    :func:`ringsearch.analysis.posterior.overtone_evidence`).  In a campaign
    report, per-bin fractions from a handful of injections scatter widely
    (2 of 9 is 22%, with a 90% Wilson interval of 8-50%).

    Examples
    --------
    >>> cache = {}
    >>> ev = candidate_evidence({"H1": h1}, 1e9 + 8.0, (40, 110), (0, 0.95),
    ...                         psds={"H1": psd}, cache=cache)  # doctest: +SKIP
    >>> ev["supported_overtones"], ev["log10_bayes"]["1:0"]  # doctest: +SKIP
    (0, -1.3)
    """
    from ringsearch.analysis.posterior import overtone_evidence

    modes = kerr_modes()
    if duration is None:
        duration = _default_duration(modes, mass_range, spin_range)
    data, noises, _ = prepare_detectors(strains, t0_gps, duration, f_low, f_high, time_shifts,
                                        psds=psds, cache=cache)
    return overtone_evidence(data, noises, t0_gps, mass_range, spin_range, max_overtones, grid,
                             threshold, snr_prior or SNR_PRIOR, antenna=antenna)


def _default_duration(modes, mass_range, spin_range) -> float:
    m = np.array([mass_range[1]])
    s = np.linspace(spin_range[0], spin_range[1], 50)
    _, tau = modes(np.full_like(s, m[0]), s, 0)
    return float(np.clip(10.0 * np.max(tau), 0.05, 0.5))


def analyse_candidate(strain_input, gps: float, out: str | os.PathLike | None = None,
                      max_overtones: int = 2, mass_range: tuple[float, float] = (30.0, 150.0),
                      spin_range: tuple[float, float] = (0.0, 0.95),
                      duration: float | None = None, f_low: float = 20.0,
                      f_high: float | None = None, grid: tuple[int, int] = (40, 40),
                      t0_offsets_ms: Sequence[float] = (-2.0, 0.0, 2.0, 4.0, 6.0, 8.0, 10.0),
                      scan_grid: tuple[int, int] = (20, 20),
                      snr_prior: tuple[float, float] | None = None, threshold: float = 0.5,
                      time_shifts: Mapping[str, float] | None = None, run_varpro: bool = True,
                      seed: int = 0, modes=None, progress: bool = False,
                      sky: tuple[float, float] | None = None,
                      truth: tuple[float, float] | None = None, *, detector: str | None = None,
                      sample_rate: float | None = None, data_start: float | None = None
                      ) -> dict:
    """Overtone analysis of a candidate ringdown starting at GPS time ``gps``.

    Parameters
    ----------
    strain_input : paths, TimeSeries list or {detector: ...}
        Strain files (any format :func:`ringsearch.data.io.read_strain` reads)
        or gwpy TimeSeries named by detector.
    gps : float
        Ringdown start time t0 (GPS s) in the first detector; other detectors
        start at ``gps + time_shifts[det]`` (default 0).
    out : path, optional
        Output folder (must not exist or be empty): ``summary.json``,
        ``evidence.csv``, ``evidence_vs_t0.csv``, ``posterior.parquet``,
        ``start_time_scan.parquet``, ``varpro.csv``, ``varpro_starts.csv`` and
        PNG plots.
    max_overtones : int
        Largest overtone count N compared.
    mass_range, spin_range : (lo, hi)
        Uniform prior box (detector-frame solar masses; spin within the QNM
        table's range).
    duration : float, optional
        Segment length in s (default 10 damping times of the slowest (2,2,0)
        mode in the box, clipped to [0.05, 0.5] s).
    grid, scan_grid : (n_mass, n_spin)
        Grid sizes at t0 and for the start-time scan of the evidence.
    snr_prior : (lo, hi), optional
        Range of the log-uniform prior on the ringdown's expected optimal
        network SNR, the scale of the amplitude prior (default
        :data:`ringsearch.analysis.posterior.SNR_PRIOR`; see
        :func:`ringsearch.analysis.posterior.remnant_posterior`).  It is fixed
        before the data are seen and recorded in ``summary["prior"]``.
    threshold : float
        log10 Bayes factor an added overtone must exceed to be "supported".
    sky : (ra, dec), optional
        Sky position in radians.  Makes the network coherent (common h+/hx
        amplitudes through each detector's antenna pattern, from
        :mod:`ringsearch.physics.detectors`) and, unless ``time_shifts`` are
        given, sets each detector's start time from its geocentre delay
        relative to the first detector.
    seed : int
        Seed of the generator for VARPRO starting points.
    truth : (mass, spin), optional
        The remnant injected into synthetic data: marked in the posterior plot
        and compared in ``summary["truth"]`` (whether each interval holds it).
    detector, sample_rate, data_start : optional
        For strain files that do not describe themselves: the detector name
        (overrides what files record; refused for files of several
        detectors), and the sample rate (Hz) and GPS time of the first sample
        of one-column text files (``gps_start`` of
        :func:`ringsearch.data.io.read_strain`).

    Returns
    -------
    dict
        The contents of ``summary.json``.

    Examples
    --------
    >>> s = analyse_candidate(["H-H1_LOSC_4_V2-1126259446-32.hdf5"], 1126259462.423,
    ...                       max_overtones=1)  # doctest: +SKIP
    >>> s["supported_overtones"], sorted(s["log10_bayes"])  # doctest: +SKIP
    (0, ['1:0'])
    """
    if out is not None and Path(out).exists() and (not Path(out).is_dir()
                                                    or any(Path(out).iterdir())):
        raise InputError(f"output folder {out} already exists and is not empty.")
    if int(max_overtones) != max_overtones or max_overtones < 0:
        raise InputError(f"max_overtones={max_overtones} must be a whole number >= 0.")
    max_overtones = int(max_overtones)
    if not math.isfinite(threshold):
        raise InputError(f"threshold={threshold!r} must be a finite log10 Bayes factor.")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise InputError(f"seed={seed!r} must be an integer >= 0.")
    use_table = modes is None
    modes = modes or kerr_modes()
    if not (0 < mass_range[0] < mass_range[1]):
        raise InputError(f"the mass range {mass_range[0]}:{mass_range[1]} must be positive "
                         "and increasing.")
    if use_table:
        slo, shi = kerr22_spin_range()
        if not (slo <= spin_range[0] < spin_range[1] <= shi):
            raise InputError(f"the spin range {spin_range[0]}:{spin_range[1]} is outside the QNM "
                             f"table's range [{slo}, {shi:.4f}] (or empty).")
    if duration is None:
        duration = _default_duration(modes, mass_range, spin_range)
    read_kw = {"detector": detector, "sample_rate": sample_rate, "data_start": data_start}
    offsets = np.asarray(sorted(set(float(x) for x in t0_offsets_ms)), float)
    pad = max(0.0, float(offsets.max(initial=0.0))) / 1e3
    antenna = None
    if sky is not None:
        time_shifts, antenna = sky_geometry(strain_input, sky, gps, time_shifts, **read_kw)
    data, noises, meta = prepare_detectors(strain_input, gps, duration + pad, f_low, f_high,
                                           time_shifts, **read_kw)
    # noise models for the analysis segment length (the extra pad only checks data coverage)
    n = int(round(duration * noises[0].sample_rate))
    noises = [_shrink(nz, int(round(duration * nz.sample_rate))) for nz in noises]
    warnings: list[str] = []
    if len(data) > 1 and not time_shifts and sky is None:
        warnings.append("several detectors with no arrival-time shifts: every detector's "
                        "segment starts at the same GPS time (give time shifts to align them).")

    post = remnant_posterior(data, noises, gps, mass_range, spin_range, max_overtones, grid,
                             snr_prior or SNR_PRIOR, modes, antenna=antenna)
    warnings.extend(post.warnings)
    nsup = post.supported_overtones(threshold)
    for nn in sorted({0, nsup}):
        warnings.extend(post.resolution_warnings(nn))
    summ = post.summary(nsup)

    # evidence against start time
    rows = []
    it = offsets
    if progress:
        from tqdm import tqdm
        it = tqdm(offsets, desc="start times", unit="t0")
    for off in it:
        p = post if (off == 0.0 and tuple(scan_grid) == tuple(grid)) else remnant_posterior(
            data, noises, gps + off / 1e3, mass_range, spin_range, max_overtones, scan_grid,
            post.snr_prior, modes, antenna=antenna)
        s0 = p.summary(p.supported_overtones(threshold))
        row = {"t0_gps_s": gps + off / 1e3, "t0_offset_ms": off,
               "supported_overtones": p.supported_overtones(threshold),
               "mass_median": s0["mass"]["median"], "spin_median": s0["spin"]["median"]}
        for k, v in p.log10_bayes.items():
            row[f"log10_bayes_{k.replace(':', '_')}"] = v
        for k, v in enumerate(p.log_evidence):
            row[f"ln_evidence_n{k}"] = float(v)
        rows.append(row)
    ev_t0 = pd.DataFrame(rows)

    # fixed-frequency fits against t0 at the posterior median of the supported N
    mmed, smed = summ["mass"]["median"], summ["spin"]["median"]
    fk, tk = zip(*(modes(np.array([mmed]), np.array([smed]), k)
                   for k in range(max_overtones + 1)), strict=True)
    fk = np.array([float(np.ravel(x)[0]) for x in fk])
    tk = np.array([float(np.ravel(x)[0]) for x in tk])
    scans = [start_time_scan(d, nz, gps + offsets / 1e3, fk, tk, max_overtones, t_ref_gps=gps)
             for d, nz in zip(data, noises, strict=True)]
    scan = pd.concat(scans, ignore_index=True)
    at_t0 = scan[(scan.t0_gps_s == gps + offsets[np.argmin(abs(offsets))] / 1e3)
                 & (scan.n_overtones == nsup)]
    if at_t0.ill_conditioned.any():
        warnings.append(f"the fixed-frequency fit with N={nsup} at t0 is ill-conditioned: "
                        "its individual amplitudes are not meaningful at this noise level.")

    vp_rows, vp_starts = [], []
    if run_varpro:
        rng = np.random.default_rng(seed)
        for d, nz in zip(data, noises, strict=True):
            y, t = d.segment(gps, nz.n)
            for nn in range(max_overtones + 1):
                try:
                    r = fit_kerr(y, t, nz, nn, mmed, smed, mass_range, spin_range, modes,
                                 n_starts=4, rng=rng)
                except InputError as exc:
                    warnings.append(f"{d.name}: VARPRO with N={nn} skipped: {exc}")
                    continue
                vp_rows.append(_vp_row(d.name, f"kerr N={nn}", r))
                vp_starts.append(r.starts.assign(detector=d.name, fit=f"kerr N={nn}"))
            r = fit_free_modes(y, t, nz, [fk[0]], [tk[0]], f_bounds=(f_low, nz.f_high),
                               tau_bounds=(2.0 / nz.sample_rate, duration / 2), n_starts=4,
                               rng=rng)
            vp_rows.append(_vp_row(d.name, "free K=1", r))
            vp_starts.append(r.starts.assign(detector=d.name, fit="free K=1"))
    varpro = pd.DataFrame(vp_rows)

    summary = {
        "gps": float(gps),
        "detectors": [d.name for d in data],
        "supported_overtones": int(nsup),
        "log10_bayes": post.log10_bayes,
        "ln_evidence": [float(v) for v in post.log_evidence],
        "mass": summ["mass"], "spin": summ["spin"],
        "averaged": post.averaged(),
        "by_overtones": {str(k): post.summary(k) for k in range(max_overtones + 1)},
        "model_probability": {str(k): float(v)
                              for k, v in enumerate(post.model_probabilities())},
        "bayes_threshold_log10": threshold,
        "prior": {"mass_range_msun": list(map(float, mass_range)),
                  "spin_range": list(map(float, spin_range)),
                  "amplitudes": ("Zellner g-prior in the whitened metric (the signal "
                                 "isotropic in each model's signal space), its scale the "
                                 "expected optimal network SNR, log-uniform on snr_range "
                                 "and marginalised"),
                  "snr_range": list(map(float, post.snr_prior)),
                  "overtone_counts": "equal prior odds for N = 0..max_overtones",
                  "grid": list(map(int, grid))},
        "segment": {"duration_s": float(duration), "samples": n, **{"detectors": meta}},
        "modes": "(2,2,n), n = 0..N, Kerr QNM table",
        "network": ("coherent: common h+/hx amplitudes through antenna patterns"
                    if antenna else "independent amplitudes per detector"),
        "sky_rad": None if sky is None else {"ra": float(sky[0]), "dec": float(sky[1])},
        "antenna": None if antenna is None else {k: list(v) for k, v in antenna.items()},
        "warnings": sorted(set(warnings), key=warnings.index),
    }
    if truth is not None:
        summary["truth"] = _truth_check(truth, summary)
    if out is not None:
        _write_outputs(Path(out), summary, post, ev_t0, scan, varpro, vp_starts)
    return summary


def _truth_check(truth: tuple[float, float], summary: dict) -> dict:
    """Whether the averaged and each N's 90% intervals hold an injected (mass, spin)."""
    try:
        mass, spin = (float(x) for x in truth)
    except (TypeError, ValueError):
        raise InputError(f"truth {truth!r} must be (mass, spin).") from None

    def held(ci: dict, x: float) -> bool:
        return bool(ci["lo90"] <= x <= ci["hi90"])

    out = {"mass": mass, "spin": spin,
           "averaged_holds": {"mass": held(summary["averaged"]["mass"], mass),
                              "spin": held(summary["averaged"]["spin"], spin)},
           "by_overtones_holds": {k: {"mass": held(v["mass"], mass), "spin": held(v["spin"], spin)}
                                  for k, v in summary["by_overtones"].items()}}
    return out


def _shrink(noise: ToeplitzNoise, n: int) -> ToeplitzNoise:
    """The noise model of the first ``n`` samples (a leading block of a Cholesky factor
    is the Cholesky factor of the leading block of the matrix)."""
    if n == noise.n:
        return noise
    chol = noise.chol[:n, :n]
    return ToeplitzNoise(acf=noise.acf[:n], sample_rate=noise.sample_rate, f_low=noise.f_low,
                         f_high=noise.f_high, chol=chol,
                         log_det=2.0 * float(np.sum(np.log(np.diag(chol)))))


def _vp_row(det: str, fit: str, r) -> dict:
    row = {"detector": det, "fit": fit, "residual_chi2": r.residual_chi2,
           "n_starts": len(r.starts), "n_agree": r.n_agree, "fit_snr": r.linear.snr,
           "cond": r.linear.cond, "warnings": " ".join(r.warnings)}
    for k, v, s in zip(r.names, r.params, r.param_sigma, strict=True):
        row[k] = float(v)
        row[f"{k}_sigma"] = float(s)
    for k, (f, tau) in enumerate(zip(r.f_hz, r.tau_s, strict=True)):
        row[f"f{k}_hz"] = float(f)
        row[f"tau{k}_s"] = float(tau)
        row[f"amp{k}_strain"] = float(r.linear.amp_abs[k])
    return row


def _write_outputs(out: Path, summary: dict, post, ev_t0: pd.DataFrame, scan: pd.DataFrame,
                   varpro: pd.DataFrame, vp_starts: list[pd.DataFrame]) -> None:
    from ringsearch.analysis import plots
    from ringsearch.files import staged_directory, write_json

    with staged_directory(out) as stage:
        ev = pd.DataFrame({"n_overtones": np.arange(post.max_overtones + 1),
                           "ln_evidence": post.log_evidence,
                           "log10_bayes_vs_previous": [math.nan] + list(post.log10_bayes.values())})
        ev.to_csv(stage / "evidence.csv", index=False)
        ev_t0.to_csv(stage / "evidence_vs_t0.csv", index=False)
        grid_rows = []
        for k in range(post.max_overtones + 1):
            mm, ss = np.meshgrid(post.masses[k], post.spins[k], indexing="ij")
            grid_rows.append(pd.DataFrame({
                "n_overtones": k, "mass_msun": mm.ravel(), "spin": ss.ravel(),
                "ln_likelihood": post.log_likelihood[k].ravel(),
                "posterior_prob": post.posterior(k).ravel()}))
        pd.concat(grid_rows, ignore_index=True).to_parquet(stage / "posterior.parquet")
        scan.to_parquet(stage / "start_time_scan.parquet")
        scan.to_csv(stage / "start_time_scan.csv", index=False)
        varpro.to_csv(stage / "varpro.csv", index=False)
        if vp_starts:
            pd.concat(vp_starts, ignore_index=True).to_csv(stage / "varpro_starts.csv",
                                                          index=False)
        truth = summary.get("truth")
        plots.plot_posterior(post, stage / "posterior.png",
                             truth=None if truth is None else (truth["mass"], truth["spin"]),
                             supported=summary["supported_overtones"])
        plots.plot_bayes_factors(post, ev_t0, stage / "bayes_factors.png",
                                 threshold=summary["bayes_threshold_log10"])
        plots.plot_start_time_scan(scan, stage / "start_time_scan.png")
        write_json(stage / "summary.json", summary)
