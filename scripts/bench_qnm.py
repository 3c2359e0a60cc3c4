"""Benchmark of the QNM interpolant: 10^6 (mass, spin) pairs for 8 overtones.

Prints wall-clock times (best of a few repeats) for ``kerr_omega`` and
``mode_f_tau`` over the (2, 2, n) modes n = 0..7, and for comparison one
direct Leaver solve.  Timing lives here, never in the tests.

Usage::

    .venv/bin/python scripts/bench_qnm.py [--pairs 1000000] [--repeat 3] [--json F] [--smoke]
"""

from __future__ import annotations

import argparse
import sys
import time

import numpy as np
from _bench import Figures, add_options

from ringsearch.physics import leaver, qnm


def _best(fn, repeat: int) -> float:
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--pairs", type=int, default=1_000_000)
    p.add_argument("--repeat", type=int, default=3)
    add_options(p)
    args = p.parse_args(argv)
    if args.smoke:
        args.pairs, args.repeat = 10_000, 1
    rng = np.random.default_rng(12345)
    mass = rng.uniform(5.0, 500.0, args.pairs)
    spin = rng.uniform(0.0, 0.99, args.pairs)
    modes = [(2, 2, n) for n in range(8)]
    for mode in modes:  # build the interpolants outside the timed region
        qnm.kerr_omega(*mode, 0.5)

    def omegas():
        for mode in modes:
            qnm.kerr_omega(*mode, spin)

    def f_taus():
        for mode in modes:
            qnm.mode_f_tau(mass, spin, *mode)

    t_w = _best(omegas, args.repeat)
    t_f = _best(f_taus, args.repeat)
    t0 = time.perf_counter()
    leaver.solve_at(2, 2, 0, 0.69, 0.528 - 0.081j)
    t_d = time.perf_counter() - t0
    out = Figures(f"QNM interpolant, {args.pairs} spins x {len(modes)} overtones")
    out.add("kerr_omega_s", t_w, "s", "kerr_omega for every spin and overtone (best of repeats)")
    out.add("kerr_omega_ns_per_value", t_w / (args.pairs * len(modes)) * 1e9, "ns",
            "kerr_omega per value")
    out.add("mode_f_tau_s", t_f, "s", "mode_f_tau for every (mass, spin) and overtone")
    out.add("leaver_solve_ms", t_d * 1e3, "ms", "one direct Leaver solve of (2,2,0)")
    out.emit(args)
    return 0


if __name__ == "__main__":
    sys.exit(main())
