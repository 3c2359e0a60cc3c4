"""``ringsearch condition``: read strain, whiten and gate it, and show what was done."""

from __future__ import annotations

import argparse
import math
import textwrap

from ringsearch.cli._strain_options import add_strain_input_options, strain_read_kwargs

_EPILOG = """\
examples:
  ringsearch condition H-H1_LOSC_4_V2-1126259446-32.hdf5 L-L1_LOSC_4_V2-1126259446-32.hdf5 \\
      --out conditioned --around 1126259462.42
  ringsearch condition strain.txt --detector H1 --sample-rate 4096 --gps-start 1000000000 \\
      --out conditioned --f-low 30 --gate-threshold 10

DIR receives asd.png (all detectors with the Advanced LIGO design curve) and, per
detector, DIR/<det>/conditioning.json (band, PSD resolution, analysed segments,
gates), DIR/<det>/whitened.png and DIR/<det>/qtransform.png around --around.
"""


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "condition",
        help="whiten, band-limit and gate strain; plot the ASD and whitened data",
        description=textwrap.fill(
            "Read strain files (GWOSC HDF5, GWF, text), keep the times passing the "
            "data-quality level, estimate each detector's PSD (Welch, median average), "
            "whiten it with a truncated inverse-spectrum filter, gate loud glitches, and "
            "write plots plus a JSON record of what was analysed."
        ),
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("files", nargs="+", metavar="FILE", help="strain files (any detectors)")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (new or empty)")
    p.add_argument("--f-low", type=float, default=20.0, metavar="HZ",
                   help="low-frequency cut in Hz (default 20)")
    p.add_argument("--f-high", type=float, default=None, metavar="HZ",
                   help="upper band edge in Hz (default 0.8 x Nyquist)")
    p.add_argument("--seglen", type=float, default=4.0, metavar="S",
                   help="PSD segment length in seconds (default 4)")
    p.add_argument("--gate-threshold", type=float, default=None, metavar="SIGMA",
                   help="gate whitened excursions above this many noise sigmas (default 100; "
                        "'inf' turns gating off)")
    p.add_argument("--around", type=float, default=None, metavar="GPS",
                   help="centre of the whitened and Q-transform plots "
                        "(default: middle of the analysed data)")
    p.add_argument("--window", type=float, default=1.0, metavar="S",
                   help="half-width of those plots in seconds (default 1)")
    p.add_argument("--exclude-around", type=float, default=None, metavar="S",
                   help="leave +-S seconds around --around out of the PSD estimate")
    p.add_argument("--dq-level", default="CBC_CAT2", metavar="NAME",
                   help="GWOSC data-quality level to require: NONE, DATA, CBC_CAT1..3, "
                        "BURST_CAT1..3 (default CBC_CAT2)")
    p.add_argument("--keep-hw-injections", action="store_true",
                   help="do not drop times holding transient hardware injections")
    add_strain_input_options(p)
    p.set_defaults(func=run)


def run(args) -> int:
    from ringsearch.data.condition import condition
    from ringsearch.data.io import read_detectors
    from ringsearch.data.plots import plot_asd, plot_qtransform, plot_whitened
    from ringsearch.errors import InputError
    from ringsearch.files import staged_directory, write_json

    if not (args.window > 0 and math.isfinite(args.window)):
        raise InputError(f"--window {args.window!r} must be a positive number of seconds.")
    if args.exclude_around is not None and args.around is None:
        raise InputError("--exclude-around needs --around to say where the candidate is.")
    data = read_detectors(args.files, dq_level=args.dq_level,
                          injections="keep" if args.keep_hw_injections else "exclude",
                          **strain_read_kwargs(args))
    if args.around is not None:
        for det, (strain, _) in data.items():
            lo, hi = float(strain.t0.value), float(strain.t0.value + strain.duration.value)
            if not lo <= args.around <= hi:
                raise InputError(f"--around {args.around} is outside the {det} data "
                                 f"[{lo}, {hi}).")
    exclude = None
    if args.exclude_around is not None:
        if not args.exclude_around > 0:
            raise InputError(f"--exclude-around {args.exclude_around!r} must be positive.")
        exclude = (args.around - args.exclude_around, args.around + args.exclude_around)
    conds, sources = [], {}
    for det, (strain, segs) in data.items():
        sources[det] = list(getattr(strain, "source_files", args.files))
        if not segs:
            raise InputError(f"{det} has no data passing data-quality level {args.dq_level}.")
        conds.append(condition(strain, f_low=args.f_low, f_high=args.f_high, seglen=args.seglen,
                               analysable=segs, gate_threshold=args.gate_threshold,
                               psd_exclude=exclude))
    for c in conds:
        if not c.analysable:
            raise InputError(f"{c.detector} has no analysable time left after dropping the "
                             f"{c.edge:g} s corrupted by the whitening filter at each edge.")
    around = args.around
    if around is None:
        longest = max(conds[0].analysable, key=lambda s: float(s[1] - s[0]))
        around = float(longest[0] + longest[1]) / 2
    with staged_directory(args.out) as out:
        plot_asd({c.detector: c.psd for c in conds}, out / "asd.png", f_low=conds[0].f_low,
                 f_high=conds[0].f_high, title="Estimated strain ASD")
        for c in conds:
            sub = out / c.detector
            sub.mkdir()
            summary = c.summary()
            summary["files"] = sources[c.detector]
            summary["dq_level"] = args.dq_level
            summary["hw_injections_excluded"] = not args.keep_hw_injections
            summary["psd_excluded"] = list(exclude) if exclude else None
            write_json(sub / "conditioning.json", summary)
            plot_whitened(c, sub / "whitened.png", around=around, window=args.window,
                          title=f"{c.detector} whitened strain")
            plot_qtransform(c, sub / "qtransform.png", around=around, window=args.window)
    for c in conds:
        print(f"{c.detector}: {c.analysed_seconds:g} s analysable in {len(c.analysable)} "
              f"segment(s), band {c.f_low:g}-{c.f_high:g} Hz, {len(c.gates)} gate(s)")
    print(f"wrote {args.out}")
    return 0
