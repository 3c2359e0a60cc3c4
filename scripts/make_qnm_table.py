"""Build the shipped Kerr QNM table ``ringsearch/physics/data/qnm_table.npz``.

Every mode (l, m, n) in the table is followed continuously in spin from its
Schwarzschild value with our own Leaver solver (:mod:`ringsearch.physics.leaver`)
on a grid uniform in ``u = -log(1 - chi)``, from ``chi = 0`` to
``chi = 0.999``.  The log coordinate resolves both the square-root behaviour
of the extremal limit and the slow spirals that some m = 0 overtones make as
``chi -> 1`` (periodic in ``log(1 - chi)``).

Each mode's grid is refined adaptively, segment by segment (the u range is
cut into ``SEGMENTS`` equal pieces, each uniform inside): after following the
mode, the interpolant built from the nodes is compared with direct solves at
every interval midpoint; in each segment whose largest relative error (real
or imaginary part) exceeds ``TARGET`` the midpoints join the grid (step
halved there) and that segment is checked again.  The largest final error is
stored per mode (``interp_error``).

If the continued fraction stops converging for a mode before 0.999 (a few
high counter-rotating overtones), that mode ends at the last node that
converged (``spin_max``).

The run uses at most two worker processes and prints one line per finished
mode.  The output has no timestamps, so the same code gives the same bytes.

Usage::

    .venv/bin/python scripts/make_qnm_table.py [--out PATH] [--workers 2]
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import sys
import time
from pathlib import Path

import numpy as np

from ringsearch.files import atomic_path
from ringsearch.physics import leaver
from ringsearch.physics.qnm import _ModeInterpolant

#: Overtones per multipole l (the table's content).
OVERTONES = {2: 8, 3: 4, 4: 4}
#: Largest spin attempted.
SPIN_TOP = 0.999
#: Relative tolerance of each root (and of the depth-doubling test).
TOL = 1e-11
#: Largest continued-fraction depth tried before a spin counts as not converged.
MAX_DEPTH = 2 ** 17
#: The u range is cut into this many equal segments; each is refined on its own.
SEGMENTS = 8
#: Intervals per segment on the starting grid.
BASE_PER_SEGMENT = 32
#: Required interpolation accuracy (relative, real and imaginary parts).
TARGET = 3e-8
#: At most this many halvings of the grid step.
MAX_LEVEL = 4

DEFAULT_OUT = Path(__file__).resolve().parent.parent / "ringsearch/physics/data/qnm_table.npz"
U_TOP = float(-np.log1p(-SPIN_TOP))
SEG_LEN = U_TOP / SEGMENTS


def table_modes() -> list[tuple[int, int, int]]:
    return [(l, m, n) for l, nmax in OVERTONES.items() for m in range(-l, l + 1)
            for n in range(nmax)]


def _spin(u: np.ndarray) -> np.ndarray:
    return -np.expm1(-u)


def _solve(mode, chi, guess, A_guess, depth=None):
    l, m, n = mode
    return leaver.solve_at(l, m, n, float(chi), complex(guess), complex(A_guess), depth,
                           TOL, max_depth=MAX_DEPTH)


def _follow(mode, u: np.ndarray):
    """Follow one mode up the grid; stop at the first node that fails."""
    l, _, n = mode
    chi = _spin(u)
    om = np.full(u.size, np.nan + 0j)
    AA = np.full(u.size, np.nan + 0j)
    om[0] = leaver.schwarzschild_omega(l, n, TOL)
    AA[0] = leaver.schwarzschild_separation_constant(l)
    depth = None
    good = 1
    for i in range(1, u.size):
        j = slice(max(0, i - 3), i)
        g = leaver._lagrange(chi[j], om[j], chi[i])
        Ag = leaver._lagrange(chi[j], AA[j], chi[i])
        try:
            om[i], AA[i], depth = _solve(mode, chi[i], g, Ag, depth)
        except RuntimeError:
            break
        good = i + 1
    return om[:good], AA[:good]


def _solve_midpoints(mode, itp, intervals):
    """Direct solves at the midpoints of the given intervals (increasing order).

    Returns the solutions and the relative interpolation error at each; stops
    at the first midpoint that does not converge (NaN from there on).
    """
    um = itp.mid[intervals]
    w_i, A_i = itp.omega(um), itp.A(um)
    w_d = np.full(um.size, np.nan + 0j)
    A_d = np.full(um.size, np.nan + 0j)
    for k, (uu, wi, ai) in enumerate(zip(um, w_i, A_i, strict=True)):
        try:
            w_d[k], A_d[k], _ = _solve(mode, _spin(uu), wi, ai)
        except RuntimeError:
            break
    with np.errstate(divide="ignore", invalid="ignore"):
        err = np.maximum(np.abs(w_i.real - w_d.real) / np.abs(w_d.real),
                         np.abs(w_i.imag - w_d.imag) / np.abs(w_d.imag))
    return w_d, A_d, err


def build_mode(mode):
    """Follow a mode, then refine each u-segment until the interpolant meets TARGET."""
    t0 = time.time()
    h0 = SEG_LEN / BASE_PER_SEGMENT
    u = h0 * np.arange(BASE_PER_SEGMENT * SEGMENTS + 1)
    om, AA = _follow(mode, u)
    u = u[: om.size]
    done = np.zeros(SEGMENTS, bool)
    seg_err = np.zeros(SEGMENTS)
    for level in range(MAX_LEVEL + 1):
        itp = _ModeInterpolant(u, om, AA, SEG_LEN)
        seg = np.minimum((itp.mid / SEG_LEN).astype(int), SEGMENTS - 1)
        todo = np.nonzero(~done[seg])[0]
        if todo.size == 0:
            break
        w_d, A_d, err = _solve_midpoints(mode, itp, todo)
        failed = ~np.isfinite(w_d)
        if np.any(failed):  # the continued fraction gave up near the top: end the mode there
            last = todo[np.argmax(failed)]
            u, om, AA = u[: last + 1], om[: last + 1], AA[: last + 1]
            keep = todo < last
            todo, w_d, A_d, err = todo[keep], w_d[keep], A_d[keep], err[keep]
        refine = []
        for sgi in range(SEGMENTS):
            mine = seg[todo] == sgi
            if not np.any(mine):
                done[sgi] = done[sgi] or not np.any(seg[: u.size - 1] == sgi)
                continue
            seg_err[sgi] = float(np.max(err[mine]))
            if seg_err[sgi] <= TARGET or level == MAX_LEVEL:
                done[sgi] = True
            else:
                refine.append(mine)
        if not refine:
            break
        add = np.any(refine, axis=0)
        u = np.concatenate([u, itp.mid[todo[add]]])
        om = np.concatenate([om, w_d[add]])
        AA = np.concatenate([AA, A_d[add]])
        order = np.argsort(u, kind="stable")
        u, om, AA = u[order], om[order], AA[order]
    return mode, u, om, AA, float(seg_err.max()), time.time() - t0


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--out", type=Path, default=DEFAULT_OUT, help="output .npz path")
    p.add_argument("--workers", type=int, default=2, help="processes (at most 2)")
    p.add_argument("--modes", help="only these modes, e.g. '2,2,0;2,0,7' (for testing)")
    args = p.parse_args(argv)
    modes = table_modes()
    if args.modes:
        modes = [tuple(int(v) for v in s.split(",")) for s in args.modes.split(";")]
    # expensive modes first so the two workers finish together
    order = sorted(modes, key=lambda t: (-t[2], t[1] != 0, t[0]))
    results = {}
    t0 = time.time()
    workers = max(1, min(2, args.workers))
    with mp.get_context("fork").Pool(workers) as pool:
        for k, (mode, u, om, AA, err, dt) in enumerate(
                pool.imap_unordered(build_mode, order), 1):
            results[mode] = (u, om, AA, err)
            print(f"[{k:3d}/{len(modes)}] mode {str(mode):12s} {dt:6.1f} s  "
                  f"nodes {om.size:5d}  spin_max {_spin(u[-1]):.6f}  "
                  f"interpolation error {err:.1e}  elapsed {time.time() - t0:5.0f} s",
                  flush=True)
    counts = np.array([results[md][1].size for md in modes])
    offsets = np.concatenate([[0], np.cumsum(counts)])
    spin_max = np.array([_spin(results[md][0][-1]) for md in modes])
    errors = np.array([results[md][3] for md in modes])
    args.out.parent.mkdir(parents=True, exist_ok=True)
    with atomic_path(args.out) as tmp:
        with open(tmp, "wb") as fh:
            np.savez_compressed(
                fh, modes=np.array(modes, dtype=np.int16), offsets=offsets,
                u=np.concatenate([results[md][0] for md in modes]), segment_length=SEG_LEN,
                omega=np.concatenate([results[md][1] for md in modes]),
                A=np.concatenate([results[md][2] for md in modes]),
                spin_max=spin_max, interp_error=errors,
                info=np.array(f"Kerr QNMs, spin weight -2, M*omega and Leaver's separation "
                              f"constant A; Leaver continued fraction, tol {TOL}; per-mode "
                              f"nodes u = -log(1 - chi), uniform within segments of "
                              f"length segment_length"))
    print(f"largest interpolation error over all modes: {errors.max():.2e}", file=sys.stderr)
    print(f"wrote {args.out} ({args.out.stat().st_size / 1e6:.2f} MB) in "
          f"{time.time() - t0:.0f} s", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
