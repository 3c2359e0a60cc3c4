"""Benchmark the ringdown search: throughput, ratio to the bare FFT floor, peak memory.

Searches synthetic Gaussian noise (design PSD) of two detectors with a bank of
about a thousand templates and reports

* throughput = templates x seconds of data / CPU second of the matched filter;
* the ratio of the filter's CPU time to the bare FFT time of the same
  correlations (one inverse FFT per basis function per chunk, plus the forward
  FFTs of the templates), timed in the same run on the same machine;
* the CPU cost of refining every peak above threshold between samples and
  evaluating the signal-consistency veto there, relative to the filter, on
  the noise and with a loud injected ringdown (which makes many peaks);
* the wall time of the whole search (bank placement, filter, veto,
  coincidence, time slides) and the peak resident memory.

Run: ``python scripts/bench_search.py [--duration 32] [--overtones 0] [--min-match 0.995]``.
"""

from __future__ import annotations

import argparse
import resource
import time

import numpy as np
import scipy.fft


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--duration", type=float, default=32.0, help="seconds of data (default 32)")
    ap.add_argument("--sample-rate", type=float, default=4096.0)
    ap.add_argument("--overtones", type=int, default=0)
    ap.add_argument("--min-match", type=float, default=0.995,
                    help="bank minimal match (default 0.995: ~1000 templates for N = 0)")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--veto-bins", type=int, default=8, help="pieces of the veto (default 8)")
    args = ap.parse_args()

    from ringsearch.data.condition import condition
    from ringsearch.data.noise import gaussian_noise
    from ringsearch.search.bank import Bank, qnm_f_tau
    from ringsearch.search.correlate import filter_length, filter_peaks, plan_chunks
    from ringsearch.search.engine import Search, _combined_psd

    conds = {}
    for i, det in enumerate(("H1", "L1")):
        ts = gaussian_noise("design", args.duration, args.sample_rate, args.seed + i,
                            gps_start=1e9, detector=det)
        conds[det] = condition(ts)

    c_wall, c_cpu = time.perf_counter(), time.process_time()
    f_hi = min(c.f_high for c in conds.values())
    bank = Bank.from_box((20.0, 200.0), (0.0, 0.99), args.overtones, args.min_match,
                         psd=_combined_psd(conds), f_low=20.0, f_high=f_hi, seed=args.seed)
    bank_cpu = time.process_time() - c_cpu
    print(f"bank: {len(bank)} templates (N = {args.overtones}, MM = {args.min_match}) "
          f"placed in {bank_cpu:.2f} CPU s")

    # the full-series filter alone (peak finding), one detector
    c = conds["H1"]
    window = float(np.clip(bank.duration_s.max(), 0.05, 1.0))
    t_cpu = time.process_time()
    filter_peaks(c, bank.f_hz, bank.tau_s, 5.0 * 0.95, window / 2)
    filt_cpu = time.process_time() - t_cpu

    # triggers with refinement and the veto (the engine's per-detector step)
    def triggers_cpu(cond) -> float:
        search = Search(bank=bank, veto_bins=args.veto_bins)
        probes = search.probes({"H1": cond}, bank)
        t0 = time.process_time()
        search.triggers({"H1": cond}, bank, probes)
        return time.process_time() - t0

    veto_total = triggers_cpu(c)
    veto_cpu = veto_total - filt_cpu
    # the same with a loud ringdown (SNR 20, 65 Msun, spin 0.7) in the data
    import copy

    f_inj, tau_inj = qnm_f_tau(np.array([65.0]), np.array([0.7]), 0)
    loud = copy.copy(c)
    w = np.asarray(c.whitened.value, float).copy()
    fs = float(c.sample_rate.value if hasattr(c.sample_rate, "value") else c.sample_rate)
    tt = np.arange(w.size) / fs - args.duration / 2
    ring = np.where(tt >= 0, np.exp(-np.clip(tt, 0, None) / tau_inj[0])
                    * np.cos(2 * np.pi * f_inj[0] * tt), 0.0)
    ring *= 20.0 / np.sqrt(np.sum(ring ** 2))  # already white: unit-norm x SNR
    loud.whitened = c.whitened.copy()
    loud.whitened.value[:] = w + ring
    veto_loud = triggers_cpu(loud) - filt_cpu

    # FFT floor: the same transforms, nothing else
    n = c.whitened.size
    plan = plan_chunks(n, float(c.sample_rate), float(bank.duration_s.max()), filter_length(c))
    k2 = 2 * bank.n_modes
    rng = np.random.default_rng(0)
    batch = max(1, min(256, 4_000_000 // (k2 * plan.n_fft)))
    x = rng.standard_normal((batch, k2, plan.n_fft))
    xs = scipy.fft.rfft(x, axis=-1)
    n_batches = int(np.ceil(len(bank) / batch))
    t_cpu = time.process_time()
    for _ in range(n_batches):
        scipy.fft.rfft(x, axis=-1)  # template spectra
        for _ in range(plan.n_chunks):
            scipy.fft.irfft(xs, plan.n_fft, axis=-1)  # correlations
    fft_cpu = time.process_time() - t_cpu

    # whole search, two detectors, with the same bank
    t_wall = time.perf_counter()
    res = Search(bank=bank, veto_bins=args.veto_bins).run(conds)
    search_wall = time.perf_counter() - t_wall
    total_wall = time.perf_counter() - c_wall
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0

    thr = len(bank) * args.duration / filt_cpu
    print(f"matched filter, one detector, {args.duration:g} s at {args.sample_rate:g} Hz: "
          f"{filt_cpu:.2f} CPU s ({plan.n_chunks} chunk(s) of {plan.n_fft} samples)")
    print(f"throughput: {thr:,.0f} template-seconds of data per CPU second")
    print(f"FFT floor: {fft_cpu:.2f} CPU s -> filter / floor = {filt_cpu / fft_cpu:.2f}")
    print(f"refinement + veto ({args.veto_bins} time slices), noise only: {veto_cpu:.2f} CPU s "
          f"({veto_cpu / filt_cpu:.0%} of the filter; triggers in all {veto_total:.2f} CPU s)")
    print(f"refinement + veto with a loud ringdown (SNR 20) in the data: {veto_loud:.2f} CPU s "
          f"({veto_loud / filt_cpu:.0%} of the filter)")
    print(f"full search (2 detectors, coincidence, "
          f"{res.extra.get('n_slides', 0)} slides): {search_wall:.2f} s wall; "
          f"with bank placement {total_wall:.2f} s wall")
    print(f"peak resident memory: {peak_mb:.0f} MB")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
