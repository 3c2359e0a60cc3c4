"""``ringsearch analyse``: overtone analysis of one candidate ringdown.

Thin wrapper over :func:`ringsearch.analysis.pipeline.analyse_candidate`:
parses the options, finds the start time (``--gps`` or a search output folder),
runs the analysis into ``--out`` and prints a short summary.
"""

from __future__ import annotations

import argparse
import math
import sys
import textwrap

from ringsearch.cli._strain_options import add_strain_input_options, pipeline_read_kwargs
from ringsearch.errors import InputError

_EPILOG = """\
examples:
  ringsearch analyse H-H1_LOSC_4_V2-1126259446-32.hdf5 --gps 1126259462.423 --out gw150914
      N = 0, 1, 2 overtones in H1 data, ringdown starting at the given GPS time
  ringsearch analyse H1.hdf5 L1.hdf5 --gps 1126259462.423 --shift L1=-0.007 --out cand
      two detectors with common (mass, spin) and their own amplitudes; L1's
      segment starts 7 ms earlier (its arrival-time offset)
  ringsearch analyse H1.hdf5 L1.hdf5 --gps 1126259462.423 --sky 1.95,-1.27 --out coh
      coherent network: common h+/hx amplitudes through each detector's antenna
      pattern at RA 1.95 rad, Dec -1.27 rad; start times shifted by the delays
  ringsearch analyse H1.hdf5 --from-search search-out --trigger 3 --out cand3
      start time of trigger_id 3 of search-out/triggers.parquet (default: the loudest
      candidate, each detector at its own start of the candidate's template)
  ringsearch analyse strain.txt --detector H1 --sample-rate 4096 --gps-start 1000000000 \
      --gps 1000000008.0 --out cand-txt
      one-column text strain: its detector, sample rate and first sample's GPS time

outputs in --out: summary.json (supported_overtones, log10_bayes {"N:N-1": x},
mass and spin {median, lo90, hi90} for the supported N, averaged (the remnant
averaged over N with the evidences as weights), model_probability, warnings, priors),
evidence.csv, evidence_vs_t0.csv, posterior.parquet (grid posterior for each N),
start_time_scan.parquet/.csv (amplitudes against t0), varpro.csv and
varpro_starts.csv (free-parameter fits and their starting points), and the
plots posterior.png, bayes_factors.png, start_time_scan.png.

priors, fixed before the data are seen: (mass, spin) uniform in the box; mode
amplitudes by Zellner's g-prior in the whitened metric (the signal isotropic in
each model's signal space, so no part of the box is favoured by its templates'
norm), its scale the expected optimal network SNR, log-uniform on --snr-prior
(default 4:200) and marginalised; N = 0..--max-overtones equally likely.  An
overtone is "supported" when adding it raises log10 of the evidence by more
than --threshold (default 0.5); how often that claims an overtone that is not
there, or misses one that is, is measured in the README ("Overtone analysis").
"""


def _range(name: str, text: str) -> tuple[float, float]:
    try:
        lo, hi = (float(x) for x in text.split(":"))
    except ValueError:
        raise InputError(f"{name} {text!r} is not of the form LO:HI.") from None
    if not (math.isfinite(lo) and math.isfinite(hi) and lo < hi):
        raise InputError(f"{name} {text!r} must have finite LO < HI.")
    return lo, hi


def _truth(text: str | None) -> tuple[float, float] | None:
    if text is None:
        return None
    try:
        mass, spin = (float(x) for x in text.split(","))
    except ValueError:
        raise InputError(f"--truth {text!r} is not of the form MASS,SPIN.") from None
    if not (math.isfinite(mass) and mass > 0 and math.isfinite(spin) and 0 <= spin < 1):
        raise InputError(f"--truth {text!r} needs a positive mass and a spin in [0, 1).")
    return mass, spin


def _grid(text: str) -> tuple[int, int]:
    try:
        a, b = (int(x) for x in text.split(","))
    except ValueError:
        raise InputError(f"--grid {text!r} is not of the form NMASS,NSPIN.") from None
    if a < 3 or b < 3 or a * b > 250_000:
        raise InputError(f"--grid {text!r} needs 3 to 500 points per axis.")
    return a, b


def _offsets(text: str) -> list[float]:
    try:
        vals = [float(x) for x in text.split(",") if x.strip()]
    except ValueError:
        raise InputError(f"--t0-offsets {text!r} is not a comma-separated list of ms.") from None
    if not vals or not all(math.isfinite(v) for v in vals):
        raise InputError(f"--t0-offsets {text!r} must list finite numbers of ms.")
    return vals


def _shifts(items: list[str] | None) -> dict[str, float]:
    out: dict[str, float] = {}
    for it in items or []:
        try:
            det, val = it.split("=")
            out[det.strip()] = float(val)
        except ValueError:
            raise InputError(f"--shift {it!r} is not of the form DET=SECONDS.") from None
        if not math.isfinite(out[det.strip()]) or abs(out[det.strip()]) > 0.1:
            raise InputError(f"--shift {it!r} must be a finite delay under 0.1 s.")
    return out


def _sky(text: str | None) -> tuple[float, float] | None:
    if text is None:
        return None
    try:
        ra, dec = (float(x) for x in text.split(","))
    except ValueError:
        raise InputError(f"--sky {text!r} is not of the form RA,DEC (radians).") from None
    return ra, dec


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "analyse",
        help="overtone analysis of a candidate: evidence for N overtones, remnant mass/spin",
        description=textwrap.fill(
            "Analyse a candidate ringdown: noise-weighted time-domain fits that exclude "
            "the data before the start time exactly, the (mass, spin) posterior with the "
            "mode amplitudes marginalised, the evidence and Bayes factors for 0..N "
            "overtones, fits against start time and free-frequency fits, with warnings "
            "when the numbers are not to be trusted."),
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("files", nargs="+", metavar="FILE",
                   help="strain files (GWOSC HDF5, GWF or text; one or more detectors)")
    src = p.add_mutually_exclusive_group(required=True)
    src.add_argument("--gps", type=float, metavar="T", help="ringdown start time (GPS s)")
    src.add_argument("--from-search", metavar="DIR",
                     help="search output folder; the start time comes from its triggers")
    p.add_argument("--trigger", type=int, metavar="ID",
                   help="trigger_id of DIR/triggers.parquet (default: the loudest candidate)")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (new or empty)")
    p.add_argument("--max-overtones", type=int, default=2, metavar="N",
                   help="largest overtone count compared (default 2)")
    p.add_argument("--mass", default="30:150", metavar="LO:HI",
                   help="detector-frame mass box in solar masses (default 30:150)")
    p.add_argument("--spin", default="0:0.95", metavar="LO:HI",
                   help="dimensionless spin box (default 0:0.95)")
    p.add_argument("--grid", default="40,40", metavar="NMASS,NSPIN",
                   help="posterior grid points in mass and spin at the start time (default 40,40)")
    p.add_argument("--duration", type=float, metavar="S",
                   help="segment length in s (default 10 damping times of the slowest mode)")
    p.add_argument("--f-low", type=float, default=20.0, metavar="HZ",
                   help="lower band edge in Hz (default 20)")
    p.add_argument("--f-high", type=float, metavar="HZ",
                   help="upper band edge in Hz (default 0.8 x Nyquist)")
    p.add_argument("--t0-offsets", default="-2,0,2,4,6,8,10", metavar="MS,...",
                   help="start times of the scan, in ms after T (default -2,0,...,10); "
                        "write --t0-offsets=-4,0,4 when the list starts with a minus sign")
    p.add_argument("--snr-prior", default="4:200", metavar="LO:HI",
                   help="range of the log-uniform prior on the ringdown's expected optimal "
                        "network SNR, the scale of the amplitude prior (default 4:200)")
    p.add_argument("--threshold", type=float, default=0.5, metavar="LOG10B",
                   help="log10 Bayes factor an added overtone must exceed (default 0.5)")
    p.add_argument("--shift", action="append", metavar="DET=SECONDS",
                   help="start-time offset of a detector (repeatable), e.g. L1=-0.007")
    p.add_argument("--sky", metavar="RA,DEC",
                   help="sky position in radians: coherent network through antenna patterns, "
                        "and start-time shifts from the geocentre delays")
    p.add_argument("--truth", metavar="MASS,SPIN",
                   help="the remnant injected into synthetic data: marked in posterior.png "
                        "and printed beside the estimates, with whether each interval holds it")
    p.add_argument("--no-varpro", action="store_true", help="skip the free-frequency fits")
    p.add_argument("--seed", type=int, default=0,
                   help="seed (integer >= 0) for the VARPRO starting points (default 0)")
    add_strain_input_options(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from ringsearch.analysis.pipeline import analyse_candidate, candidate_from_search

    if args.trigger is not None and args.from_search is None:
        raise InputError("--trigger needs --from-search DIR.")
    if args.gps is not None:
        if not math.isfinite(args.gps):
            raise InputError(f"--gps {args.gps} is not a finite GPS time.")
        gps = float(args.gps)
        shifts = _shifts(args.shift)
    else:
        found = candidate_from_search(args.from_search, args.trigger)
        gps = found["gps"]
        # per-detector start times of a coincident candidate, unless given explicitly
        shifts = _shifts(args.shift) or (found.get("time_shifts") if args.sky is None else None)
    if args.max_overtones < 0 or args.max_overtones > 5:
        raise InputError(f"--max-overtones {args.max_overtones} must be between 0 and 5.")
    if args.duration is not None and not (0 < args.duration <= 2.0):
        raise InputError(f"--duration {args.duration} must be between 0 and 2 s.")
    snr_prior = _range("--snr-prior", args.snr_prior)
    if snr_prior[0] <= 0:
        raise InputError(f"--snr-prior {args.snr_prior} must be positive SNRs.")
    summary = analyse_candidate(
        args.files, gps, out=args.out, max_overtones=args.max_overtones,
        mass_range=_range("--mass", args.mass), spin_range=_range("--spin", args.spin),
        duration=args.duration, f_low=args.f_low, f_high=args.f_high, grid=_grid(args.grid),
        t0_offsets_ms=_offsets(args.t0_offsets), snr_prior=snr_prior,
        threshold=args.threshold,
        time_shifts=shifts, run_varpro=not args.no_varpro, seed=args.seed,
        progress=sys.stderr.isatty(), sky=_sky(args.sky), truth=_truth(args.truth),
        **pipeline_read_kwargs(args))
    b = ", ".join(f"{k}: {v:+.2f}" for k, v in summary["log10_bayes"].items())
    av = summary["averaged"]
    m, s = av["mass"], av["spin"]
    weights = ", ".join(f"N={k} {v:.2f}" for k, v in av["weights"].items())
    print(f"start time {gps:.4f}: supported overtones N = {summary['supported_overtones']} "
          f"(log10 Bayes factors {b or 'none'})")
    print(f"remnant averaged over N ({weights}): mass {m['median']:.1f} "
          f"[{m['lo90']:.1f}, {m['hi90']:.1f}] Msun, spin {s['median']:.2f} "
          f"[{s['lo90']:.2f}, {s['hi90']:.2f}] (90%, detector frame)")
    for k, v in summary["by_overtones"].items():
        print(f"  N={k}: mass {v['mass']['median']:.1f} [{v['mass']['lo90']:.1f}, "
              f"{v['mass']['hi90']:.1f}], spin {v['spin']['median']:.2f} "
              f"[{v['spin']['lo90']:.2f}, {v['spin']['hi90']:.2f}]")
    if "truth" in summary:
        tr = summary["truth"]
        ok = tr["averaged_holds"]
        print(f"injected: mass {tr['mass']:g}, spin {tr['spin']:g}; the averaged 90% intervals "
              f"{'hold' if ok['mass'] else 'miss'} the mass and "
              f"{'hold' if ok['spin'] else 'miss'} the spin (over many injections a 90% "
              "interval misses one time in ten)")
    for w in summary["warnings"]:
        print(f"warning: {w}")
    print(f"wrote {args.out}")
    return 0
