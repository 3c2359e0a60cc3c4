"""The chunk worker: noise, injections, conditioning, matched filter, match, background.

:func:`run_chunk` is a pure function of (campaign config, chunk row, the
chunk's injections), so it can run in any process or on any cluster node and
always give the same tables:

1. the chunk's strain per detector: seeded Gaussian noise from the PSD model
   (synthetic data) or the recorded strain cropped to the chunk (files);
2. the PSD of the uninjected data (Welch median, avoided windows left out),
   or the model PSD when ``data.whiten_with = "model"``;
3. one :class:`ringsearch.physics.ringdown.RingdownSource` per injection,
   scaled to its target network SNR when loudness is set by SNR; its optimal
   SNR per detector and network (same PSD and band as the filter);
4. the signals added to the strain and the strain conditioned
   (:func:`ringsearch.data.condition.condition`; gating on for recorded data,
   off for synthetic Gaussian noise unless ``data.gating`` says otherwise --
   an injection a gate removes is reported ``gated`` and counts as missed);
5. for each template overtone count N, the projection-SNR matched filter of
   every template of the bank (:mod:`ringsearch.search`), combined into a
   network statistic: ``stat^2(t) = rho_1^2(t) + sum_d max_{|dt| <= T_12}
   rho_d^2(t + dt)`` (per template, the other detectors maximised over the
   light-travel window, then maximised over templates);
6. the best statistic within ``search.match_window_s`` of each injection's
   arrival at the first detector (the *found* row), and the time-slide
   background: the other detectors' series shifted by multiples of
   ``threshold.slide_step_s`` (circularly within the chunk), maximised in
   blocks the length of the match window, away from injections and avoided
   windows;
7. optionally (``[overtones] enabled = true``) the overtone-count evidence
   of every injection (:func:`ringsearch.analysis.pipeline.candidate_evidence`
   at its arrival time, in the injected strain with the chunk's PSDs).

Only the few ``_search_*`` functions below touch the search layer's API.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
import pandas as pd

from ringsearch.campaign.draw import STREAM_NOISE, rng_for
from ringsearch.errors import InputError

#: Extra seconds added to the light-travel time between detectors when
#: maximising the other detectors' SNR around the first one's (timing error).
COINC_SLOP_S = 0.002

#: Seconds around each injection's arrival kept out of the background (covers
#: the longest template, the light-travel window and the whitening filter's
#: short-range ringing).
BACKGROUND_GUARD_S = 0.25


# --------------------------------------------------------------------------- checks


def _support(dist: dict) -> tuple[float, float]:
    if dist["dist"] == "fixed":
        return dist["value"], dist["value"]
    return dist["low"], dist["high"]


def prepare(config: dict) -> None:
    """Checks that need the physics and the search, run once before any chunk.

    Every injected mode must lie below the Nyquist frequency, the overtone
    evidence's spin box must lie in the QNM table, and every template bank
    must build within ``search.max_templates`` (the banks are cached, so an
    in-process run reuses them).  Raises InputError naming the key.
    """
    from ringsearch.physics.qnm import mode_f_tau

    fs = config["data"]["sample_rate"]
    inj = config["injections"]
    m_lo, _ = _support(inj["mass"])
    _, chi_hi = _support(inj["spin"])
    f_max = max(float(np.max(mode_f_tau(m_lo, chi_hi, 2, 2, n)[0]))
                for n in range(max(inj["overtones"]) + 1))
    if f_max >= fs / 2:
        raise InputError(f"'injections.mass' down to {m_lo} Msun with spin {chi_hi} puts a "
                         f"mode at {f_max:.0f} Hz, above the Nyquist frequency {fs / 2:g} Hz "
                         f"of 'data.sample_rate'.")
    ov = config.get("overtones")
    if ov and ov["enabled"]:
        from ringsearch.analysis.posterior import kerr22_spin_range

        lo, hi = kerr22_spin_range()
        if not lo <= ov["spin"][0] < ov["spin"][1] <= hi:
            raise InputError(f"'overtones.spin' = {ov['spin']} lies outside the QNM table's "
                             f"range [{lo:g}, {hi:.4g}] for (2,2,n) modes.")
    f_high = config["search"]["f_high"] or 0.8 * fs / 2
    for n in config["search"]["template_overtones"]:
        _search_bank(config, n, f_high)


# --------------------------------------------------------------------------- data


def analysable_segments(config: dict) -> list[list[tuple[float, float]]]:
    """Analysable GPS segments of each detector's files (DQ-passing, no NaN)."""
    from ringsearch.data.io import analysable_segments as segs_of

    out = []
    for det in config["data"]["detectors"]:
        segs = segs_of(config["data"]["files"][det], detector=det)
        out.append([(float(s[0]), float(s[1])) for s in segs])
    return out


@lru_cache(maxsize=8)
def _file_strain(paths: tuple[str, ...], det: str, sample_rate: float):
    from ringsearch.data.io import read_strain

    strain = read_strain(list(paths), detector=det)
    if strain.sample_rate.value != sample_rate:
        strain = strain.resample(sample_rate)
    return strain


def chunk_strain(config: dict, chunk: dict) -> dict:
    """The chunk's uninjected strain per detector (gwpy TimeSeries)."""
    data = config["data"]
    fs = data["sample_rate"]
    a, b = float(chunk["gps_start"]), float(chunk["gps_end"])
    out = {}
    if data["source"] == "synthetic":
        from ringsearch.data.noise import gaussian_noise

        duration = round((b - a) * fs) / fs
        for i, det in enumerate(data["detectors"]):
            rng = rng_for(config["campaign"]["seed"], STREAM_NOISE, chunk["data_index"], i)
            out[det] = gaussian_noise(data["psd"], duration, fs, rng, gps_start=a,
                                      detector=det)
    else:
        for det in data["detectors"]:
            full = _file_strain(tuple(data["files"][det]), det, fs)
            t0 = float(full.t0.value)
            i0 = int(math.ceil((a - t0) * fs - 1e-6))
            i1 = int(math.floor((b - t0) * fs + 1e-6))
            out[det] = full[max(i0, 0):min(i1, full.size)].copy()
    return out


def chunk_psds(config: dict, strains: dict) -> dict:
    """PSD per detector: Welch median of the uninjected data, or the model."""
    data = config["data"]
    out = {}
    for det, strain in strains.items():
        if data["whiten_with"] == "model":
            from ringsearch.data.noise import resolve_psd

            seglen = data["psd_seglen_s"]
            freqs = np.fft.rfftfreq(int(round(seglen * data["sample_rate"])),
                                    1.0 / data["sample_rate"])
            out[det] = resolve_psd(data["psd"], freqs)
        else:
            from ringsearch.data.psd import estimate_psd

            a, b = float(strain.t0.value), float(strain.t0.value) + strain.duration.value
            exclude = [w for w in data["avoid"] if w[1] > a and w[0] < b] or None
            out[det] = estimate_psd(strain, seglen=data["psd_seglen_s"], exclude=exclude)
    return out


# --------------------------------------------------------------------------- signals


def signal_snrs(src, psds: dict, fs: float, f_low: float, f_high: float) -> dict[str, float]:
    """Optimal SNR per detector of the signal exactly as injected (sampled in time).

    The sampled signal (zero-padded to at least 1 s) goes through
    :func:`ringsearch.optimal_snr`, so the SNR describes the very samples the
    filter sees, including the abrupt start of the ringdown.
    """
    from ringsearch.physics.ringdown import optimal_snr

    out = {}
    for det, psd in psds.items():
        start, _ = src.support(det)
        epoch = math.floor(start * fs) / fs
        duration = max(1.0, math.ceil((src.duration + 2.0 / fs) * fs) / fs)
        h = src.project(det, fs, epoch=epoch, duration=duration)
        out[det] = optimal_snr(h, psd, f_low, f_high)
    out["network"] = math.sqrt(sum(v * v for k, v in out.items()))
    return out


def make_sources(config: dict, injections: pd.DataFrame, psds: dict, f_high: float):
    """One RingdownSource per injection (moved to its target SNR if asked) and its SNRs."""
    from ringsearch.physics.ringdown import RingdownSource, kerr_modes

    fs = config["data"]["sample_rate"]
    f_low = config["data"]["f_low"]
    loud = config["injections"]["loudness"]
    sources, rows = [], []
    for r in injections.to_dict("records"):
        n = int(r["injected_overtones"])
        modes = kerr_modes(n, [r[f"ratio_{k}"] for k in range(1, n + 1)],
                           [r[f"phase_{k}"] for k in range(1, n + 1)])
        src = RingdownSource(
            float(r["mass"]), float(r["spin"]),
            distance=float(r["distance_mpc"]) if loud["by"] == "distance" else 100.0,
            epsilon=float(r["epsilon"]) if loud["by"] == "distance" else 0.01,
            modes=modes, t0=float(r["gps"]), ra=float(r["ra"]), dec=float(r["dec"]),
            psi=float(r["polarization"]), inclination=float(r["inclination"]),
            azimuth=float(r["phase_0"]) / 2.0)  # the (2,2) phase is 2 x azimuth
        src.check_sample_rate(fs)
        snrs = signal_snrs(src, psds, fs, f_low, f_high)
        if loud["by"] == "snr":
            if not snrs["network"] > 0:
                raise InputError(f"injection {r['injection_id']} has zero SNR in every "
                                 f"detector, so it cannot be scaled to a target SNR.")
            # strain scales as 1/distance at fixed detector-frame mass
            scale = float(r["target_snr"]) / snrs["network"]
            src = src.with_distance(src.distance / scale)
            snrs = {k: v * scale for k, v in snrs.items()}
        f, tau = src.f_tau()
        row = {"injection_id": int(r["injection_id"]),
               "arrival_gps": src.arrival_time(next(iter(psds))),
               **{f"snr_opt_{d}": snrs[d] for d in psds},
               "network_snr": snrs["network"], "f_0_hz": float(f[0]), "tau_0_s": float(tau[0])}
        if loud["by"] == "snr":
            # the distance this target SNR implies for epsilon = 0.01 (informative only)
            row["implied_distance_mpc"] = float(src.distance)
        else:
            row["mass_source"] = float(src.mass_source)
        sources.append(src)
        rows.append(row)
    return sources, pd.DataFrame(rows)


def inject(strain, sources, det: str):
    """A copy of ``strain`` with every source's signal at detector ``det`` added.

    Delegates to :func:`ringsearch.data.inject.inject`, which evaluates each
    signal at times relative to the strain's start (no precision lost to
    1e9-second GPS values) and leaves samples outside every signal untouched.
    """
    from ringsearch.data.inject import inject as add_signals

    return add_signals(strain, sources, det)


# --------------------------------------------------------------------------- overtone evidence


def evidence_columns(max_overtones: int) -> list[str]:
    """Per-injection columns the overtone evidence adds to the ``injections`` table."""
    return (["supported_overtones"]
            + [f"log10_bayes_{k}_{k - 1}" for k in range(1, max_overtones + 1)]
            + ["evidence_mass", "evidence_spin", "evidence_t0_gps", "evidence_note"])


def overtone_evidence_rows(config: dict, sources: list, strains: dict, psds: dict,
                           f_high: float) -> list[dict]:
    """Overtone-count evidence for every injection of a chunk (``[overtones]`` settings).

    Each injection is analysed in the injected strain (noise plus every
    signal of the chunk) with the chunk's PSDs, starting at its arrival time
    in each detector plus ``overtones.start_offset_ms`` (the detectors'
    arrival-time differences are passed as time shifts, so every detector's
    segment starts at its own arrival).  One noise-model cache serves the
    whole chunk.  Evidence is computed for every injection, found or not: it
    does not depend on the search, and the results layer reports both all
    injections and the found ones.  An injection the analysis refuses (e.g.
    too near a data edge) gets ``supported_overtones = -1`` and the reason in
    ``evidence_note``.
    """
    from ringsearch.analysis.pipeline import candidate_evidence

    ov = config["overtones"]
    dets = list(config["data"]["detectors"])
    n_max = ov["max_overtones"]
    cache: dict = {}
    rows = []
    for src in sources:
        arrival = {d: src.arrival_time(d) for d in dets}
        t0 = arrival[dets[0]] + ov["start_offset_ms"] / 1e3
        shifts = {d: arrival[d] - arrival[dets[0]] for d in dets}
        antenna = ({d: tuple(map(float, src.antenna_pattern(d))) for d in dets}
                   if ov["network"] == "coherent" else None)
        row: dict = {"supported_overtones": -1, "evidence_t0_gps": t0,
                     **{f"log10_bayes_{k}_{k - 1}": math.nan for k in range(1, n_max + 1)},
                     "evidence_mass": math.nan, "evidence_spin": math.nan, "evidence_note": ""}
        try:
            ev = candidate_evidence(
                strains, t0, tuple(ov["mass"]), tuple(ov["spin"]), n_max, psds=psds,
                grid=tuple(ov["grid"]), duration=ov["duration_s"],
                f_low=config["data"]["f_low"], f_high=f_high,
                threshold=ov["log10_bayes_threshold"],
                amp_prior_snr=ov["amplitude_prior_snr"], time_shifts=shifts, cache=cache,
                antenna=antenna)
        except InputError as exc:
            row["evidence_note"] = f"not analysed: {exc}"
        else:
            row["supported_overtones"] = int(ev["supported_overtones"])
            for key, value in ev["log10_bayes"].items():
                k, k1 = key.split(":")
                row[f"log10_bayes_{k}_{k1}"] = float(value)
            row["evidence_mass"] = float(ev["mass"]["median"])
            row["evidence_spin"] = float(ev["spin"]["median"])
            row["evidence_note"] = " ".join(ev.get("warnings", []))
        rows.append(row)
    return rows


# --------------------------------------------------------------------------- search adapter


def reference_psd(config: dict):
    """The PSD the banks are placed with: the model (synthetic data) or the Welch
    median of the first detector's whole recording (files), avoided windows left
    out.  It depends on the config alone, so every process builds the same bank."""
    data = config["data"]
    fs = data["sample_rate"]
    if data["source"] == "synthetic":
        from ringsearch.data.noise import resolve_psd

        return resolve_psd(data["psd"], np.fft.rfftfreq(int(round(data["psd_seglen_s"] * fs)),
                                                         1.0 / fs))
    from ringsearch.data.psd import estimate_psd

    det = data["detectors"][0]
    strain = _file_strain(tuple(data["files"][det]), det, fs)
    return estimate_psd(strain, seglen=data["psd_seglen_s"], exclude=data["avoid"] or None)


def _search_bank(config: dict, n_overtones: int, f_high: float):
    """The template bank for N overtones (cached per process: every chunk shares it)."""
    s = config["search"]
    key = (n_overtones, tuple(s["mass"]), tuple(s["spin"]), s["min_match"],
           config["data"]["f_low"], f_high, config["campaign"]["seed"])
    if key not in _BANKS:
        from ringsearch.search.bank import Bank

        if s["mass"][0] == s["mass"][1] and s["spin"][0] == s["spin"][1]:
            bank = Bank.from_points([s["mass"][0]], [s["spin"][0]], n_overtones)
        else:
            bank = Bank.from_box(tuple(s["mass"]), tuple(s["spin"]), n_overtones,
                                 s["min_match"], psd=reference_psd(config),
                                 f_low=config["data"]["f_low"],
                                 f_high=f_high, seed=config["campaign"]["seed"])
        if len(bank) > s["max_templates"]:
            raise InputError(f"the bank for {n_overtones} overtones has {len(bank)} templates, "
                             f"more than 'search.max_templates' = {s['max_templates']}; "
                             f"narrow the box or lower 'search.min_match'.")
        _BANKS[key] = bank
    return _BANKS[key]


_BANKS: dict = {}


def _search_snr2(cond, f_hz: np.ndarray, tau_s: np.ndarray) -> np.ndarray:
    """Projection SNR^2 of one template starting at every sample of ``cond``.

    Start times the filter leaves out (outside analysable time, too near an
    edge) hold 0, which never wins a maximum against real values.
    """
    from ringsearch.search.filter import snr_series

    fs = float(cond.sample_rate)
    t0 = float(cond.t0)
    out = np.zeros(cond.whitened.size)
    series = snr_series(cond, f_hz, tau_s)
    idx = np.round((series.gps - t0) * fs).astype(np.int64)
    out[idx] = series.snr**2
    return out


# --------------------------------------------------------------------------- statistic


def _light_samples(dets: list[str], fs: float) -> list[int]:
    """Light-travel window (plus ``COINC_SLOP_S``) from the first detector, in samples."""
    from ringsearch.search.coincidence import light_travel_time

    return [int(math.ceil((light_travel_time(dets[0], d) + COINC_SLOP_S) * fs))
            for d in dets[1:]]


def _window_max(x: np.ndarray, half: int) -> np.ndarray:
    if half <= 0:
        return x
    from scipy.ndimage import maximum_filter1d

    return maximum_filter1d(x, size=2 * half + 1, mode="constant", cval=0.0)


def network_statistic(conds: list, bank, slides: list[int], light: list[int]):
    """Maximum over templates of the network statistic, for zero lag and each slide.

    Returns ``(stat2, tid, slid, valid)``: zero-lag statistic^2 and best
    template per sample, an array (n_slides, n_samples) of the slid
    statistic^2, and where every detector's filter output exists (in the
    other detectors, somewhere within the light-travel window).
    """
    n = conds[0].whitened.size
    best = np.zeros(n)
    tid = np.full(n, -1, dtype=np.int64)
    slid = np.zeros((len(slides), n))
    valid = np.zeros(n, bool)
    f_all, tau_all = bank.f_hz, bank.tau_s
    for k in range(len(bank)):
        ref = _search_snr2(conds[0], f_all[k], tau_all[k])
        others = [_window_max(_search_snr2(c, f_all[k], tau_all[k]), h)
                  for c, h in zip(conds[1:], light, strict=True)]
        here = ref > 0
        for o in others:
            here &= o > 0
        valid |= here
        total = ref + sum(others) if others else ref
        better = here & (total > best)
        best[better] = total[better]
        tid[better] = k
        for j, shift in enumerate(slides):
            s = ref + sum(np.roll(o, shift * (i + 1)) for i, o in enumerate(others))
            np.maximum(slid[j], s, out=slid[j])
    return best, tid, slid, valid


def _mask_from_segments(t0: float, fs: float, n: int, segments) -> np.ndarray:
    mask = np.zeros(n, bool)
    for seg in segments:
        i0 = max(int(math.ceil((float(seg[0]) - t0) * fs)), 0)
        i1 = min(int(math.floor((float(seg[1]) - t0) * fs)), n)
        if i1 > i0:
            mask[i0:i1] = True
    return mask


def run_chunk(config: dict, chunk: dict, injections: pd.DataFrame) -> dict[str, pd.DataFrame]:
    """Inject, search and match one chunk; returns the tables ``results.assemble`` reads.

    Tables: ``injections`` (optimal SNRs per detector and network, derived
    distance, true f and tau; with ``[overtones]`` enabled also the overtone
    evidence, see :func:`overtone_evidence_rows`), ``found`` (best statistic near each
    injection, per template overtone count, with the template's mass, spin,
    f, tau), ``background`` (time-slide statistic maxima) and ``livetime``.

    Examples
    --------
    >>> tables = run_chunk(spec.config, chunks.iloc[0].to_dict(), inj_of_chunk0)
    ... # doctest: +SKIP
    """
    from ringsearch.data.condition import condition

    data, search, th = config["data"], config["search"], config["threshold"]
    fs = data["sample_rate"]
    dets = list(data["detectors"])
    f_high = search["f_high"] or 0.8 * fs / 2
    raw = chunk_strain(config, chunk)
    psds = chunk_psds(config, raw)
    sources, inj_table = make_sources(config, injections, psds, f_high)
    injected = {det: inject(raw[det], sources, det) for det in dets}
    if config.get("overtones", {}).get("enabled"):
        evidence = pd.DataFrame(overtone_evidence_rows(config, sources, injected, psds, f_high),
                                columns=evidence_columns(config["overtones"]["max_overtones"]))
        inj_table = pd.concat([inj_table, evidence], axis=1)
    conds = []
    for det in dets:
        conds.append(condition(injected[det], f_low=data["f_low"],
                               f_high=f_high, psd=psds[det], seglen=data["psd_seglen_s"],
                               gate_threshold=None if data["gating"] else math.inf))
    ref = conds[0]
    t0, n = float(ref.t0), ref.whitened.size
    # Samples where every detector's data can be trusted (shifted ones by their lag).
    ok = _mask_from_segments(t0, fs, n, ref.analysable)
    others_ok = [_mask_from_segments(t0, fs, n, c.analysable) for c in conds[1:]]
    for m in others_ok:
        ok &= m
    light = _light_samples(dets, fs)
    step = int(round(th["slide_step_s"] * fs))
    n_slides = th["slides"] if len(dets) > 1 else 0
    slides = [step * (j + 1) for j in range(n_slides) if step * (j + 1) < n]
    # Clean samples: analysable, away from every injection and avoided window.
    clean = ok.copy()
    arrivals = np.array([s.arrival_time(dets[0]) for s in sources])
    guard = int(math.ceil(BACKGROUND_GUARD_S * fs)) + max(light, default=0)
    for a in arrivals:
        c = int(round((a - t0) * fs))
        clean[max(c - guard, 0):max(min(c + guard + 1, n), 0)] = False
    for wa, wb in data["avoid"]:
        i0, i1 = int(math.floor((wa - t0) * fs)) - guard, int(math.ceil((wb - t0) * fs)) + guard
        clean[max(i0, 0):max(min(i1, n), 0)] = False
    half_w = int(round(search["match_window_s"] * fs))
    block = max(2 * half_w + 1, 1)
    # Injections the data conditioning gated away (loud signals can trip the gate):
    # the search misses them, so they count as missed, not as unsearched.
    reach = search["match_window_s"] + BACKGROUND_GUARD_S
    gated = np.zeros(len(sources), bool)
    for cond in conds:
        for g in cond.gates.itertuples():
            gated |= np.abs(arrivals - float(g.gps)) < float(g.width_s) / 2 + reach

    found_rows, bg_rows, live_rows = [], [], []
    for n_tpl in search["template_overtones"]:
        bank = _search_bank(config, n_tpl, f_high)
        stat2, tid, slid, valid = network_statistic(conds, bank, slides, light)
        searched = ok & valid
        table = bank.table
        for i_inj, (inj_id, a) in enumerate(zip(injections["injection_id"], arrivals,
                                                strict=True)):
            c = int(round((a - t0) * fs))
            i0, i1 = max(c - half_w, 0), min(c + half_w + 1, n)
            idx = np.arange(i0, i1)
            idx = idx[searched[idx]] if idx.size else idx
            row = {"injection_id": int(inj_id), "template_overtones": n_tpl,
                   "searched": bool(idx.size), "gated": bool(gated[i_inj]),
                   "stat": math.nan, "trigger_gps": math.nan,
                   "mass": math.nan, "spin": math.nan, "f_hz": math.nan, "tau_s": math.nan,
                   "template_id": -1}
            if idx.size:
                j = int(idx[np.argmax(stat2[idx])])
                k = int(tid[j])
                row.update(stat=float(math.sqrt(stat2[j])), trigger_gps=t0 + j / fs,
                           template_id=k, mass=float(table["mass_msun"].iloc[k]),
                           spin=float(table["spin"].iloc[k]),
                           f_hz=float(table["f220_hz"].iloc[k]),
                           tau_s=float(table["tau220_s"].iloc[k]))
            found_rows.append(row)
        # Background: maxima in disjoint blocks lying wholly in clean time, in the
        # first detector and in every other detector at its slid position.
        n_blocks = n // block
        live = 0
        for j, shift in enumerate(slides):
            both = clean & valid
            for i in range(len(dets) - 1):
                both &= np.roll(clean, shift * (i + 1))
            usable = both[:n_blocks * block].reshape(n_blocks, block).all(axis=1)
            blocks = slid[j, :n_blocks * block].reshape(n_blocks, block).max(axis=1)
            usable &= blocks > 0  # no template could start there (data edges)
            bg_rows.append(pd.DataFrame({"template_overtones": n_tpl, "slide": j + 1,
                                         "stat": np.sqrt(blocks[usable])}))
            live += int(usable.sum())
        live_rows.append({"template_overtones": n_tpl, "live_time_s": live * block / fs})
    background = (pd.concat(bg_rows, ignore_index=True) if bg_rows else
                  pd.DataFrame({"template_overtones": pd.Series(dtype=np.int64),
                                "slide": pd.Series(dtype=np.int64),
                                "stat": pd.Series(dtype=float)}))
    return {"injections": inj_table, "found": pd.DataFrame(found_rows),
            "background": background, "livetime": pd.DataFrame(live_rows)}
