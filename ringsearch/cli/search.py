"""``ringsearch search``: search strain files for ringdowns; write triggers, candidates, plots.

Thin layer over :class:`ringsearch.search.engine.Search` (the engine campaigns
use too); :meth:`SearchResult.write` builds the whole output folder with
:func:`ringsearch.files.staged_directory`, so bad input or an interruption
leaves nothing in ``--out``.
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
  ringsearch search inj/*.hdf5 --psd-from H1.hdf5 L1.hdf5 --bank run2/bank.parquet \
      --out run6
      search data made by `ringsearch inject`, whitened with the PSD of the data before
      injection (what a campaign does: then the two agree injection by injection)
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

network statistic (several detectors): every trigger seeds an event; each other
detector adds the same template's loudest refined peak within the light-travel
time plus --tolerance, even when it is below that detector's threshold, and the
re-weighted SNRs add in quadrature.  Time slides shift the detectors' data
circularly; each slide's coincident time comes from segment arithmetic, so gaps
and gates count exactly.  A FAR with no louder background event is an upper
limit (flagged), never 0.

outputs in DIR: triggers.parquet (one row per clustered trigger, with a stable
trigger_id), candidates.parquet (zero-lag candidates with far_per_year /
ifar_years; <DET>_trigger_id columns refer to triggers.parquet), background.parquet
(time-slide events), slides.parquet (shift and coincident seconds of each
slide), refused.parquet (templates a detector could not use), bank.parquet,
summary.json (loudest trigger per detector, candidates resolved by trigger id,
FAR method, analysed segments) and plots/*.png.

long data (more than about two --stretch lengths) are read, conditioned, filtered
and vetoed stretch by stretch, with margins that make each stretch's triggers and
candidates those of the whole series (checked at every boundary, widened where
not); each stretch whitens with its own PSD (unless --psd-from) and makes its own
time slides, and every FAR comes from the pooled background of all stretches.

what a candidate is not: a detection claim.  Its FAR comes from the data given
(tens of seconds around an event hold few independent slides) and says nothing
about data quality or instrumental artefacts; claims need a background over far
more data, checks of the instruments and review.
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
            "template, maximise the SNR over all mode amplitudes and phases, refine each "
            "peak between samples, test it with a signal-consistency chi-squared, cluster "
            "triggers, combine the detectors within their light-travel time and rank the "
            "candidates by false-alarm rate from time slides (or, with one detector, from "
            "the data's own triggers).  The same search runs inside every injection "
            "campaign.  "
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
                   help="threshold on a peak's refined projection SNR (dimensionless) for "
                        "a trigger in each detector (default 5)")
    p.add_argument("--slides", type=int, default=100, metavar="K",
                   help="time slides for the background (default 100, capped by the data)")
    p.add_argument("--slide-step", type=float, metavar="S",
                   help="time-slide step in s (default: coincidence window + longest "
                        "template + cluster window)")
    p.add_argument("--tolerance", type=float, default=0.01, metavar="S",
                   help="timing allowance added to the light-travel time between detectors "
                        "(default 0.01 s)")
    p.add_argument("--cluster-window", type=float, metavar="S",
                   help="one trigger per window across the bank, and one network event per "
                        "window (default: the longest template, clipped to 0.05-1 s)")
    p.add_argument("--gate-threshold", type=float, metavar="SIGMA",
                   help="gate whitened excursions above this many noise standard deviations "
                        "(default 100; inf turns gating off)")
    p.add_argument("--f-low", type=float, default=20.0, metavar="HZ",
                   help="lower band edge of whitening and filter, in Hz (default 20)")
    p.add_argument("--f-high", type=float, metavar="HZ",
                   help="upper band edge in Hz (default 0.8 x Nyquist, below the anti-alias "
                        "roll-off of open data)")
    p.add_argument("--psd-from", nargs="+", metavar="FILE",
                   help="estimate each detector's PSD from these strain files instead of the "
                        "searched ones (e.g. the same stretch before injections, as campaigns "
                        "do, or off-source data); same detectors as FILE")
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
    p.add_argument("--stretch", type=float, default=512.0, metavar="S",
                   help="search data longer than about two stretches of S seconds stretch by "
                        "stretch: memory stays near that of one stretch (about 0.6 GB for two "
                        "detectors at 4096 Hz) and each stretch estimates its own PSD and "
                        "slides its own data (default 512; 0 searches the whole series at "
                        "once)")
    p.add_argument("--no-plots", action="store_true", help="skip the figures")
    # --gps-start already is the searched window here, so only --data-start
    add_strain_input_options(p, start_flags=("--data-start",))
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from pathlib import Path

    from ringsearch.search.bank import Bank
    from ringsearch.search.engine import Search, SearchConfig

    mass = _range(args.mass, "--mass")
    spin = _range(args.spin, "--spin")
    bank = Bank.load(args.bank) if args.bank else None
    out = Path(args.out)
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise InputError(f"output folder {out} already exists and is not empty.")
    config = SearchConfig(
        mass=mass, spin=spin, n_overtones=args.overtones, min_match=args.min_match,
        bank_seed=args.seed, snr_threshold=args.snr_threshold, veto=not args.no_veto,
        veto_bins=args.veto_bins, veto_domain=args.veto_domain, tolerance_s=args.tolerance,
        n_slides=args.slides, slide_step_s=args.slide_step, f_low=args.f_low,
        f_high=args.f_high, gate_threshold=args.gate_threshold, dq_level=args.dq_level,
        gps_start=args.gps_start, gps_end=args.gps_end, cluster_window_s=args.cluster_window,
        stretch_s=None if args.stretch == 0 else args.stretch)
    search = Search(config, bank=bank)
    read = pipeline_read_kwargs(args)
    psds = search.estimate_psds(args.psd_from, **read) if args.psd_from else None
    res = search.run(args.files, progress=sys.stderr.isatty(), psds=psds, **read)
    res.write(out, plots=not args.no_plots)
    _print(res)
    return 0


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
    if "stretches" in s:
        print(f"searched in {s['stretches']['n_stretches']} stretches of about "
              f"{s['stretches']['stretch_s']:g} s (each with its own PSD and time slides)")
    print(f"significance: {s['significance']['method']}")
    if not s["candidates"]:
        print(s.get("note", "no candidate"))
    for c in s["candidates"][:5]:
        far = c.get("far_per_year")
        far_s = "n/a" if far is None else (("<= " if c.get("far_is_upper_limit") else "")
                                           + f"{far:.3g}/yr")
        edge = "  (template on the box edge)" if c.get("on_box_edge") else ""
        print(f"candidate gps {c['gps']:.4f} network snr {c['network_snr']:.2f} "
              f"FAR {far_s}{edge}")
