"""``ringsearch search``: search strain files for ringdowns; write triggers, candidates, plots.

Thin wrapper over :func:`ringsearch.search.pipeline.run_search`; the whole
output folder is built with :func:`ringsearch.files.staged_directory`, so bad
input or an interruption leaves nothing in ``--out``.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import textwrap

from ringsearch.cli._strain_options import add_strain_input_options, pipeline_read_kwargs
from ringsearch.errors import InputError

_EPILOG = """\
examples:
  ringsearch search H-H1_LOSC_4_V2-1126259446-32.hdf5 L-L1_LOSC_4_V2-1126259446-32.hdf5 \\
      --out gw150914-search
      search both detectors over the default box (20-200 solar masses, spin 0-0.99)
  ringsearch search H1.hdf5 L1.hdf5 --out run2 --overtones 2 --mass 50:150 \\
      --gps-start 1126259461 --gps-end 1126259464
      templates with the (2,2,0..2) modes, start times restricted to a window
  ringsearch search H1.hdf5 --out run3 --bank run2/bank.parquet
      reuse a saved bank
  ringsearch search H1.hdf5 L1.hdf5 --out run4 --veto-bins 16 --veto-domain frequency
      signal-consistency test with 16 frequency bands instead of 8 time slices
  ringsearch search strain.txt --detector H1 --sample-rate 4096 --data-start 1000000000 \
      --out run5
      one-column text strain (here --gps-start is the searched window, so the first
      sample's GPS time is --data-start)

signal-consistency veto (on by default): at every trigger the template is split
into P pieces of equal expected SNR (time slices of the whitened template, or
frequency bands) and the SNR found in each piece is compared with the share a
ringdown would put there.  In Gaussian noise the statistic is chi-squared with
2(N+1)(P-1) degrees of freedom (fewer when a piece is numerically degenerate;
the table's chisq_dof says), and a signal exactly like the template leaves it
unchanged.  Triggers are ranked by the re-weighted SNR
rho / [(1 + chi2_r^3)/2]^(1/6) for chi2_r = chisq/dof > 1 (Babak et al. 2013,
PRD 87, 024033): clustering, coincidence, the network statistic and the FAR all
use it; the raw SNR stays in the snr columns.  --no-veto ranks by raw SNR.

outputs in DIR: triggers.parquet (one row per clustered trigger per detector),
candidates.parquet (coincident candidates with far_per_year / ifar_years, or
the single detector's triggers), background.parquet (time-slide coincidences),
bank.parquet, summary.json (loudest trigger per detector, candidates, FAR
method, analysed segments) and plots/*.png.
"""


def _range(text: str, name: str) -> tuple[float, float]:
    parts = text.split(":")
    try:
        if len(parts) != 2:
            raise ValueError
        lo, hi = (float(p) for p in parts)
    except ValueError:
        raise InputError(f"{name} {text!r} is not of the form LO:HI (two numbers).") from None
    if not (math.isfinite(lo) and math.isfinite(hi)):
        raise InputError(f"{name} {text!r} must hold finite numbers.")
    return lo, hi


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "search",
        help="search strain for black-hole ringdowns (matched filter, coincidence, FAR)",
        description=textwrap.fill(
            "Search detector strain for black-hole ringdowns with a bank of Kerr templates "
            "carrying the (2,2,0..N) quasinormal modes: whiten the data, correlate every "
            "template, maximise the SNR over all mode amplitudes and phases, cluster "
            "triggers, find coincidences between detectors and rank them by false-alarm "
            "rate from time slides (or, with one detector, from the data's own triggers).  "
            "Masses are detector-frame solar masses, times GPS seconds, frequencies Hz.",
            width=79),
        epilog=_EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("files", nargs="+", metavar="FILE",
                   help="strain files (GWOSC HDF5, GWF or text), one or more detectors")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (new or empty)")
    p.add_argument("--gps-start", type=float, metavar="T",
                   help="earliest template start time searched (GPS s); the GPS time of a "
                        "text file's first sample is --data-start")
    p.add_argument("--gps-end", type=float, metavar="T",
                   help="latest template start time searched (GPS s)")
    p.add_argument("--mass", default="20:200", metavar="LO:HI",
                   help="remnant mass range, detector-frame solar masses (default 20:200)")
    p.add_argument("--spin", default="0:0.99", metavar="LO:HI",
                   help="remnant dimensionless spin range, 0 <= LO < HI < 1 (default 0:0.99)")
    p.add_argument("--overtones", type=int, default=None, metavar="N",
                   help="overtones per template: modes (2,2,0..N), N from 0 to 7 (default 0, "
                        "or the count of --bank)")
    p.add_argument("--min-match", type=float, default=0.97, metavar="MM",
                   help="minimal match of the bank, in (0, 1) (default 0.97)")
    p.add_argument("--bank", metavar="FILE",
                   help="reuse a bank saved by an earlier search (its bank.parquet); "
                        "--mass, --spin and --min-match are then not used")
    p.add_argument("--snr-threshold", type=float, default=5.0, metavar="X",
                   help="threshold on the projection SNR (dimensionless) for a trigger "
                        "(default 5)")
    p.add_argument("--slides", type=int, default=100, metavar="K",
                   help="time slides for the background (default 100, capped by the data)")
    p.add_argument("--slide-step", type=float, metavar="S",
                   help="time-slide step in s (default: coincidence window + longest "
                        "template + cluster window)")
    p.add_argument("--tolerance", type=float, default=0.01, metavar="S",
                   help="timing tolerance added to the light-travel time (default 0.01 s)")
    p.add_argument("--f-low", type=float, default=20.0, metavar="HZ",
                   help="lower band edge of whitening and filter, in Hz (default 20)")
    p.add_argument("--f-high", type=float, metavar="HZ",
                   help="upper band edge in Hz (default 0.8 x Nyquist, below the anti-alias "
                        "roll-off of open data)")
    p.add_argument("--dq-level", default="CBC_CAT2", metavar="LEVEL",
                   help="GWOSC data-quality level to pass (default CBC_CAT2; NONE to skip)")
    p.add_argument("--seed", type=int, default=0,
                   help="seed of the bank placement, an integer >= 0 (default 0)")
    p.add_argument("--no-veto", action="store_true",
                   help="turn off the signal-consistency chi-squared and rank triggers by "
                        "raw SNR")
    p.add_argument("--veto-bins", type=int, default=8, metavar="P",
                   help="pieces of the chi-squared veto, an integer >= 2 (default 8)")
    p.add_argument("--veto-domain", choices=("time", "frequency"), default="time",
                   help="split the template into time slices (default) or frequency bands")
    p.add_argument("--no-plots", action="store_true", help="skip the figures")
    # --gps-start already is the searched window here, so only --data-start
    add_strain_input_options(p, start_flags=("--data-start",))
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from ringsearch.files import staged_directory, write_text
    from ringsearch.search.bank import Bank
    from ringsearch.search.pipeline import run_search

    mass = _range(args.mass, "--mass")
    spin = _range(args.spin, "--spin")
    bank = Bank.load(args.bank) if args.bank else None
    from pathlib import Path

    out = Path(args.out)
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise InputError(f"output folder {out} already exists and is not empty.")
    res = run_search(args.files, gps_start=args.gps_start, gps_end=args.gps_end, mass=mass,
                     spin=spin, n_overtones=args.overtones, min_match=args.min_match, bank=bank,
                     snr_threshold=args.snr_threshold, n_slides=args.slides,
                     slide_step_s=args.slide_step, tolerance_s=args.tolerance,
                     f_low=args.f_low, f_high=args.f_high, dq_level=args.dq_level,
                     seed=args.seed, progress=sys.stderr.isatty(), veto=not args.no_veto,
                     veto_bins=args.veto_bins, veto_domain=args.veto_domain,
                     **pipeline_read_kwargs(args))
    with staged_directory(out) as stage:
        from ringsearch.files import atomic_path

        for name, table in (("triggers", res.triggers), ("candidates", res.candidates),
                            ("background", res.background)):
            with atomic_path(stage / f"{name}.parquet") as tmp:
                table.to_parquet(tmp, index=False)
        res.bank.save(stage / "bank.parquet")
        summary = dict(res.summary)
        if not args.no_plots:
            summary["plots"] = _plots(res, stage / "plots")
        write_text(stage / "summary.json", json.dumps(summary, indent=2) + "\n")
    _print(res)
    return 0


def _plots(res, folder) -> list[str]:
    from ringsearch.search import plots

    folder.mkdir(parents=True, exist_ok=True)
    made = []
    best = res.summary.get("loudest_candidate")
    loud = {d: v for d, v in res.summary["loudest"].items() if v}
    if best is not None:
        around = float(best["gps"])
        tid = (best.get("template") or {}).get("template_id", best.get("template_id"))
        if tid is None:
            tid = next(iter(loud.values()))["template_id"]
        rows = {}
        for d in res.conditioned:
            t = res.triggers[res.triggers.detector == d]
            if len(t):
                near = t.iloc[(t.gps - around).abs().argsort()[:1]]
                rows[d] = near.iloc[0]
        made.append(plots.plot_snr_around(res.conditioned, res.bank, int(tid), around,
                                          folder / "snr_loudest.png"))
        if rows:
            made.append(plots.plot_whitened_fit(res.conditioned, rows,
                                                folder / "whitened_fit.png"))
        try:
            from ringsearch.data.plots import plot_qtransform

            for d, c in res.conditioned.items():
                made.append(plot_qtransform(c, folder / f"qtransform_{d}.png", around=around,
                                            window=0.5))
        except ImportError:  # pragma: no cover - data layer always present in releases
            pass
        made.append(plots.plot_bank(res.bank, folder / "bank.png", mark=int(tid)))
    else:
        made.append(plots.plot_bank(res.bank, folder / "bank.png"))
    sig = res.summary["significance"]
    made.append(plots.plot_far(res.candidates, res.background,
                               float(sig.get("background_time_s") or 0.0), folder / "far.png"))
    return [str(p.relative_to(folder.parent)) for p in made]


def _print(res) -> None:
    s = res.summary
    print(f"bank: {s['bank']['n_templates']} templates (N = {s['bank']['n_overtones']})")
    for det, v in s["loudest"].items():
        if v:
            veto = (f" (chisq {v['chisq']:.1f}/{v['chisq_dof']}, re-weighted "
                    f"{v['snr_reweighted']:.2f})" if v.get("chisq") is not None else "")
            print(f"{det}: loudest trigger gps {v['gps']:.4f} snr {v['snr']:.2f}{veto} "
                  f"mass {v['mass']:.1f} spin {v['spin']:.2f} f220 {v['f_hz']:.1f} Hz")
        else:
            print(f"{det}: no trigger above threshold")
    print(f"significance: {s['significance']['method']}")
    for c in s["candidates"][:5]:
        far = c.get("far_per_year")
        far_s = "n/a" if far is None else (("<= " if c.get("far_is_upper_limit") else "")
                                           + f"{far:.3g}/yr")
        print(f"candidate gps {c['gps']:.4f} network snr {c['network_snr']:.2f} FAR {far_s}")
