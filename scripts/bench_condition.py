"""Benchmark of the data layer: conditioning 4096 s of 4096 Hz strain.

Reports seconds of data conditioned per CPU-second (PSD estimate, whitening,
gate search) and the peak memory traced while conditioning, plus the cost of
generating the synthetic noise.  Not a test: numbers depend on the machine.

Usage::

    .venv/bin/python scripts/bench_condition.py [--duration 4096] [--sample-rate 4096]
        [--json F] [--smoke]
"""

from __future__ import annotations

import argparse
import time
import tracemalloc

from _bench import Figures, add_options, peak_rss_mb


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--duration", type=float, default=4096.0, help="seconds of strain")
    parser.add_argument("--sample-rate", type=float, default=4096.0, help="Hz")
    parser.add_argument("--seed", type=int, default=1)
    add_options(parser)
    args = parser.parse_args(argv)
    if args.smoke:
        args.duration = 64.0

    from ringsearch.data.condition import condition
    from ringsearch.data.noise import gaussian_noise

    c0 = time.process_time()
    w0 = time.perf_counter()
    strain = gaussian_noise("design", args.duration, args.sample_rate, args.seed)
    noise_cpu = time.process_time() - c0
    noise_wall = time.perf_counter() - w0

    tracemalloc.start()
    c0 = time.process_time()
    w0 = time.perf_counter()
    condition(strain)
    cond_cpu = time.process_time() - c0
    cond_wall = time.perf_counter() - w0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()

    out = Figures(f"conditioning {args.duration:g} s of {args.sample_rate:g} Hz strain")
    out.add("noise_cpu_s", noise_cpu, "CPU s", "synthetic noise")
    out.add("condition_cpu_s", cond_cpu, "CPU s", "conditioning (PSD, whitening, gates)")
    out.add("condition_wall_s", cond_wall, "s", "conditioning (wall)")
    out.add("data_s_per_cpu_s", args.duration / cond_cpu, "s/CPU s",
            "seconds of data conditioned per CPU second")
    out.add("condition_peak_traced_mib", peak / 2**20, "MiB", "peak traced memory while "
            "conditioning")
    out.add("peak_rss_mb", peak_rss_mb(), "MB", "peak resident memory of the process")
    out.add("noise_wall_s", noise_wall, "s", "synthetic noise (wall)")
    out.emit(args)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
