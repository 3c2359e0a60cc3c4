"""``ringsearch noise``: write seeded synthetic Gaussian strain in the GWOSC HDF5 layout."""

from __future__ import annotations

import argparse
import textwrap

_EPILOG = """\
examples:
  ringsearch noise --out H-H1_SIM-1000000000-64.hdf5 --duration 64 --sample-rate 4096 \\
      --detector H1 --psd design --seed 1 --gps-start 1000000000
  ringsearch noise --out white.hdf5 --duration 16 --sample-rate 2048 --psd flat --seed 7
  ringsearch noise --out L1.hdf5 --duration 32 --sample-rate 4096 --detector L1 \\
      --psd my_asd.txt --seed 3

--psd FILE reads two columns (frequency in Hz, value); values whose median is above
1e-35 are taken as an ASD (per root hertz), otherwise as a PSD (per hertz).  The same
seed and options always give the same strain, sample for sample.
"""


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "noise",
        help="write seeded stationary Gaussian strain noise in the GWOSC HDF5 layout",
        description=textwrap.fill(
            "Generate stationary Gaussian noise coloured by a PSD (the analytic Advanced "
            "LIGO design curve, a flat PSD, or a PSD/ASD text file) and write it as a GWOSC-"
            "style HDF5 file that every ringsearch command reads like real data."
        ),
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("--out", required=True, metavar="FILE.hdf5",
                   help="output HDF5 file (.hdf5, .h5 or .hdf; replaced if it exists)")
    p.add_argument("--duration", type=float, required=True, metavar="S",
                   help="length of the series in seconds (a whole number of samples)")
    p.add_argument("--sample-rate", type=float, default=4096.0, metavar="HZ",
                   help="samples per second (default 4096)")
    p.add_argument("--detector", default="H1",
                   help="detector name stored in the file, e.g. H1, L1, V1 (default H1)")
    p.add_argument("--psd", default="design", metavar="design|flat|FILE",
                   help="noise spectrum (default: Advanced LIGO design curve)")
    p.add_argument("--flat-level", type=float, default=None, metavar="PER_HZ",
                   help="level of --psd flat in 1/Hz (default 1e-46, an ASD of 1e-23)")
    p.add_argument("--seed", type=int, required=True,
                   help="random seed (integer >= 0); the same seed gives the same samples")
    p.add_argument("--gps-start", type=float, default=1000000000.0, metavar="GPS",
                   help="GPS time of the first sample in s, 0 <= GPS < 1e10 (default 1000000000)")
    p.set_defaults(func=run)


def run(args) -> int:
    from ringsearch.data.io import write_gwosc_hdf5
    from ringsearch.data.noise import FLAT_LEVEL, flat_psd, gaussian_noise
    from ringsearch.errors import InputError

    if args.flat_level is not None and args.psd != "flat":
        raise InputError("--flat-level only applies with --psd flat.")
    psd = args.psd
    if args.psd == "flat":
        # a flat PSD at two frequencies is held flat at every frequency by gaussian_noise
        psd = flat_psd([0.0, 1.0], args.flat_level if args.flat_level is not None else FLAT_LEVEL)
    strain = gaussian_noise(psd, args.duration, args.sample_rate, args.seed,
                            gps_start=args.gps_start, detector=args.detector)
    write_gwosc_hdf5(strain, args.out,
                     description=f"Synthetic Gaussian noise, psd={args.psd}, seed={args.seed}")
    print(f"wrote {args.out}: {args.detector}, {args.duration:g} s at {args.sample_rate:g} Hz "
          f"from GPS {args.gps_start:.6f}")
    return 0
