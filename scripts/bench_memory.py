"""Benchmark peak memory of a two-detector search against the data's duration.

Each duration runs in a fresh process (so each peak is its own): two detectors
of synthetic design-sensitivity noise at 4096 Hz, conditioned and searched
with a small bank (the memory of the data path does not depend on the bank's
size, which only sets the CPU time).  Reported: peak resident memory per
duration and its growth per second of data between the two longest.

Run: ``python scripts/bench_memory.py [--durations 512 4096 14400] [--json out.json]
[--smoke]``; the default includes 4 hours (14,400 s).
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
from pathlib import Path

from _bench import Figures, add_options, peak_rss_mb


def one(duration: float, sample_rate: float) -> dict:
    """The search of one duration in this process; returns its peak memory."""
    import time

    from ringsearch.data.noise import gaussian_noise
    from ringsearch.search.bank import Bank
    from ringsearch.search.engine import Search

    data = {det: gaussian_noise("design", duration, sample_rate, i + 1, gps_start=1e9,
                                detector=det) for i, det in enumerate(("H1", "L1"))}
    bank = Bank.from_points([60.0, 70.0, 80.0], [0.6, 0.7, 0.8])
    t = time.perf_counter()
    Search(bank=bank, n_slides=10).run(data)
    return {"duration_s": duration, "peak_rss_mb": peak_rss_mb(),
            "wall_s": time.perf_counter() - t}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--durations", type=float, nargs="+", default=[512.0, 4096.0, 14400.0],
                    help="seconds of data, each searched in a fresh process "
                         "(default 512 4096 14400: 4 hours, about 5 GB and a minute)")
    ap.add_argument("--sample-rate", type=float, default=4096.0)
    ap.add_argument("--one", type=float, help=argparse.SUPPRESS)  # internal: one duration
    add_options(ap)
    args = ap.parse_args(argv)
    if args.one is not None:
        print(json.dumps(one(args.one, args.sample_rate)))
        return 0
    durations = [32.0, 64.0] if args.smoke else list(args.durations)
    out = Figures(f"memory of a two-detector search at {args.sample_rate:g} Hz")
    peaks = {}
    with tempfile.TemporaryDirectory():
        for d in durations:
            res = subprocess.run([sys.executable, str(Path(__file__)), "--one", str(d),
                                  "--sample-rate", str(args.sample_rate)],
                                 capture_output=True, text=True, check=True)
            row = json.loads(res.stdout.strip().splitlines()[-1])
            peaks[d] = row["peak_rss_mb"]
            out.add(f"peak_rss_mb_{int(d)}s", row["peak_rss_mb"], "MB",
                    f"peak memory, {d:g} s of data")
    if len(durations) >= 2:
        a, b = sorted(durations)[-2:]
        out.add("growth_mb_per_s", (peaks[b] - peaks[a]) / (b - a), "MB/s",
                f"memory growth per second of data ({a:g} s to {b:g} s)")
    out.emit(args)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
