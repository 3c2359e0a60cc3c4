"""Benchmark the ringdown search against FFT floors and a naive filter, side by side.

Searches synthetic Gaussian noise (design PSD) of two detectors with a bank of
about a thousand templates (N = 0 by default) and reports, all measured in
this one process:

* the full-series filter (peak finding, one detector) in CPU seconds, grouped
  (:mod:`ringsearch.search.subspace`, what the search runs) and per template;
* the FFT floors: one complex inverse FFT of the chunk length per mode pair,
  per template, per chunk (scipy.fft, one worker), in complex128 and
  complex64, and the filter's ratio to each;
* a naive baseline: one numpy FFT correlation per basis function and template,
  redoing the data transform each time (timed on 40 templates, scaled to the
  bank), and its ratio to the filter;
* the per-detector triggers (filter + sub-sample refinement + veto), in noise
  and with a loud ringdown in the data;
* the wall time of the whole two-detector search (coincidences, time slides)
  and the peak resident memory.

Run: ``python scripts/bench_search.py [--duration 32] [--overtones 0]
[--min-match 0.995] [--json out.json] [--smoke]``.
"""

from __future__ import annotations

import argparse
import copy
import time

import numpy as np
import scipy.fft
from _bench import Figures, add_options, peak_rss_mb


def _cpu(fn) -> float:
    t = time.process_time()
    fn()
    return time.process_time() - t


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--duration", type=float, default=32.0, help="seconds of data (default 32)")
    ap.add_argument("--sample-rate", type=float, default=4096.0)
    ap.add_argument("--overtones", type=int, default=0)
    ap.add_argument("--min-match", type=float, default=0.995,
                    help="bank minimal match (default 0.995: ~1000 templates for N = 0)")
    ap.add_argument("--seed", type=int, default=1)
    add_options(ap)
    args = ap.parse_args(argv)
    if args.smoke:
        args.duration, args.sample_rate, args.min_match = 8.0, 2048.0, 0.9

    from ringsearch.data.condition import condition
    from ringsearch.data.noise import gaussian_noise
    from ringsearch.search.bank import Bank, qnm_f_tau
    from ringsearch.search.correlate import filter_length, filter_peaks, plan_chunks
    from ringsearch.search.engine import Search, _combined_psd
    from ringsearch.search.templates import basis_waveforms

    conds = {}
    for i, det in enumerate(("H1", "L1")):
        ts = gaussian_noise("design", args.duration, args.sample_rate, args.seed + i,
                            gps_start=1e9, detector=det)
        conds[det] = condition(ts)
    c = conds["H1"]
    fs = float(c.sample_rate)
    f_hi = min(c.f_high for c in conds.values())
    box = ((50.0, 100.0), (0.3, 0.9)) if args.smoke else ((20.0, 200.0), (0.0, 0.99))
    w_bank = time.perf_counter()
    network = _combined_psd({d: c.psd for d, c in conds.items()})
    bank = Bank.from_box(*box, args.overtones, args.min_match, psd=network,
                         f_low=20.0, f_high=f_hi, seed=args.seed)
    bank_wall = time.perf_counter() - w_bank
    out = Figures(f"search: {len(bank)} templates (N = {args.overtones}), "
                  f"{args.duration:g} s at {fs:g} Hz, two detectors")
    out.add("templates", len(bank), "", "templates in the bank")
    out.add("bank_wall_s", bank_wall, "s", "bank placement with the data's PSD (wall)")

    t_wall = time.perf_counter()
    res = Search(bank=bank).run(conds)
    out.add("search_wall_s", time.perf_counter() - t_wall, "s",
            f"whole two-detector search ({res.extra.get('n_slides', 0)} slides, wall)")
    out.add("peak_rss_mb", peak_rss_mb(), "MB",
            "peak resident memory after the search (before the floors and the baseline)")
    window = float(np.clip(bank.duration_s.max(), 0.05, 1.0))
    from ringsearch.search.probe import Probe

    setup = _cpu(lambda: Probe(c, bank.f_hz, bank.tau_s))
    probe = Probe(c, bank.f_hz, bank.tau_s)
    out.add("setup_cpu_s", setup, "CPU s",
            "per detector and bank: doubly whitened data and every template's Gram matrix")
    groups_cpu = _cpu(lambda: probe.groups)
    out.add("groups_cpu_s", groups_cpu, "CPU s",
            "per detector and bank: the template groups' principal bases")
    out.add("principal_functions", probe.groups.n_functions / (len(bank) * 2 * bank.n_modes),
            "x", "principal functions / basis functions")
    thr = 4.75 if args.overtones == 0 else 5.64  # the search's on-grid thresholds
    kw = {"weighted": probe.weighted, "grams": probe.grams}
    per_tmpl = out.add("per_template_cpu_s", _cpu(lambda: filter_peaks(
        c, bank.f_hz, bank.tau_s, thr, window / 2, **kw)), "CPU s",
        "per-template filter (one correlation per basis function), one detector")
    filt = out.add("filter_cpu_s", _cpu(lambda: filter_peaks(
        c, bank.f_hz, bank.tau_s, thr, window / 2, groups=probe.groups, **kw)), "CPU s",
        "full-series filter (grouped, what the search runs), one detector")
    out.add("per_template_over_filter", per_tmpl / filt, "x", "per-template / grouped filter")

    # FFT floors: one complex inverse FFT of the chunk length per mode pair, template, chunk
    plan = plan_chunks(c.whitened.size, fs, float(bank.duration_s.max()), filter_length(c))
    n_ffts = len(bank) * bank.n_modes * plan.n_chunks
    batch = max(1, min(64, n_ffts))
    rng = np.random.default_rng(0)
    floors = {}
    for name, dtype in (("floor128", np.complex128), ("floor64", np.complex64)):
        x = (rng.standard_normal((batch, plan.n_fft))
             + 1j * rng.standard_normal((batch, plan.n_fft))).astype(dtype)
        scipy.fft.ifft(x[:1], axis=-1, workers=1)  # plan / warm up
        reps = int(np.ceil(n_ffts / batch))
        floors[name] = _cpu(lambda x=x, reps=reps: [scipy.fft.ifft(x, axis=-1, workers=1)
                                                   for _ in range(reps)]) * n_ffts / (
            reps * batch)
    f128 = out.add("floor128_cpu_s", floors["floor128"], "CPU s",
                   "FFT floor, complex128 (one inverse FFT per mode, template, chunk)")
    f64 = out.add("floor64_cpu_s", floors["floor64"], "CPU s", "FFT floor, complex64")
    out.add("filter_over_floor128", filt / f128, "x", "filter / complex128 floor")
    out.add("filter_over_floor64", filt / f64, "x", "filter / complex64 floor")

    # naive baseline: numpy FFT correlation per basis function, data transform redone
    vals = np.asarray(c.whitened.value, float)
    n = int(scipy.fft.next_fast_len(vals.size + int(bank.duration_s.max() * fs) + 1))
    resp = c.filter_response(np.fft.rfftfreq(n, 1 / fs))
    sub = np.linspace(0, len(bank) - 1, min(40, len(bank))).astype(int)

    def naive():
        for i in sub:
            u = basis_waveforms(bank.f_hz[i], bank.tau_s[i], int(bank.duration_s[i] * fs) + 2,
                                fs)
            for row in u:
                np.fft.irfft(np.fft.rfft(vals, n) * np.conj(np.fft.rfft(row, n) * resp), n)

    naive_cpu = out.add("naive_cpu_s", _cpu(naive) * len(bank) / sub.size, "CPU s",
                        "naive numpy correlation per template (40 timed, scaled)")
    out.add("naive_over_filter", naive_cpu / filt, "x", "naive / filter")

    # triggers: filter + refinement + veto
    def triggers(cond):
        search = Search(bank=bank)
        probes = search.probes({"H1": cond}, bank)
        return _cpu(lambda: search.triggers({"H1": cond}, bank, probes))

    trig = out.add("triggers_cpu_s", triggers(c), "CPU s",
                   "triggers of one detector (filter, refinement, veto), noise")
    out.add("refine_veto_over_filter", (trig - filt) / filt, "x",
            "refinement + veto / filter, noise")
    f_inj, tau_inj = qnm_f_tau(np.array([65.0]), np.array([0.7]), 0)
    loud = copy.copy(c)
    tt = np.arange(vals.size) / fs - args.duration / 2
    ring = np.where(tt >= 0, np.exp(-np.clip(tt, 0, None) / tau_inj[0])
                    * np.cos(2 * np.pi * f_inj[0] * tt), 0.0)
    ring *= 20.0 / np.sqrt(np.sum(ring ** 2))  # already white: unit norm x SNR
    loud.whitened = c.whitened.copy()
    loud.whitened.value[:] = vals + ring
    trig_loud = triggers(loud)
    out.add("refine_veto_over_filter_loud", (trig_loud - filt) / filt, "x",
            "refinement + veto / filter, with a loud (SNR 20) ringdown")

    out.emit(args)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
