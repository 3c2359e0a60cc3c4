"""Benchmark of the data layer: conditioning 4096 s of 4096 Hz strain.

Reports seconds of data conditioned per CPU-second (PSD estimate, whitening,
gate search) and the peak memory traced while conditioning, plus the cost of
generating the synthetic noise.  Not a test: numbers depend on the machine.

Usage::

    .venv/bin/python scripts/bench_condition.py [--duration 4096] [--sample-rate 4096]
"""

from __future__ import annotations

import argparse
import json
import resource
import time
import tracemalloc


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--duration", type=float, default=4096.0, help="seconds of strain")
    parser.add_argument("--sample-rate", type=float, default=4096.0, help="Hz")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    args = parser.parse_args(argv)

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
    cond = condition(strain)
    cond_cpu = time.process_time() - c0
    cond_wall = time.perf_counter() - w0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()

    result = {
        "duration_s": args.duration,
        "sample_rate_hz": args.sample_rate,
        "input_mib": strain.value.nbytes / 2**20,
        "noise_cpu_s": round(noise_cpu, 3),
        "noise_wall_s": round(noise_wall, 3),
        "condition_cpu_s": round(cond_cpu, 3),
        "condition_wall_s": round(cond_wall, 3),
        "data_s_per_cpu_s": round(args.duration / cond_cpu, 1),
        "condition_peak_traced_mib": round(peak / 2**20, 1),
        "process_max_rss_mib": round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
                                     1),
        "analysed_s": cond.analysed_seconds,
        "gates": len(cond.gates),
    }
    if args.json:
        print(json.dumps(result))
    else:
        for key, value in result.items():
            print(f"{key:28s} {value}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
