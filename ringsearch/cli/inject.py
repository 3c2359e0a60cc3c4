"""``ringsearch inject``: add a Kerr ringdown, an external waveform or a list of them to strain.

One signal is given by options (``--mass``, ``--gps``, ...); a list of
ringdowns by ``--injections FILE``, whose schema and checks live in
:mod:`ringsearch.data.injections` (the same tables campaigns use).
"""

from __future__ import annotations

import argparse
import math
import textwrap

from ringsearch.cli._strain_options import add_strain_input_options, strain_read_kwargs

_EPILOG = """\
examples:
  # a two-overtone ringdown at 400 Mpc radiating 2% of the remnant mass in (2,2,0)
  ringsearch inject H-H1_LOSC_4_V2-1126259446-32.hdf5 L-L1_LOSC_4_V2-1126259446-32.hdf5 \\
      --out inj --mass 70 --spin 0.7 --overtones 2 --gps 1126259452.0 \\
      --ra 1.95 --dec -1.27 --psi 0.8 --inclination 2.8 --distance 400 --epsilon 0.02 --plot

  # the same signal scaled to a network optimal SNR of 15 (PSD estimated from the data)
  ringsearch inject H1.hdf5 L1.hdf5 --out inj15 --mass 70 --spin 0.7 --overtones 1 \\
      --gps 1126259452.0 --ra 1 --dec 0.3 --psi 0 --inclination 0.5 --snr 15

  # one-column text strain: its detector, sample rate and first sample's GPS time
  ringsearch inject strain.txt --detector H1 --sample-rate 4096 --gps-start 1000000000 \\
      --out inj-txt --mass 70 --spin 0.7 --gps 1000000010 --ra 1 --dec 0.3 --psi 0 --snr 12

  # an external (e.g. numerical-relativity) waveform in units of the total mass
  ringsearch inject H1.hdf5 --out nr --waveform bbh.txt --units geometric --mass 65 \\
      --distance 500 --gps 1126259452.0 --ra 1 --dec 0.3 --psi 0

  # every row of an injection list (one ringdown per row; PSD estimated from the data)
  ringsearch inject H1.hdf5 L1.hdf5 --out inj-list --injections list.csv

Angles are in radians, masses in solar masses (detector frame unless --source-frame),
distances in Mpc.  --gps is the start of the ringdown (for --waveform: the peak of |h|,
or the file's time zero with --align file) at the Earth's centre; each detector sees it
at its own light-travel delay.  The output folder holds one GWOSC-layout HDF5 file per
detector and injection.json (source parameters, mode frequencies, antenna patterns,
arrival times and optimal SNRs per detector and for the network).

An injection list (--injections, CSV or Parquet) has one ringdown per row: columns gps,
mass, spin, injected_overtones, ratio_1..ratio_N (default 1), phase_0..phase_N (default
0), ra, dec, inclination, polarization, and either target_snr or distance_mpc with
epsilon; injection_id is optional.  The single-signal options are then refused, and the
folder holds the injected files, injections.parquet (the list with each row's arrival
times, optimal SNRs and (2,2,0) frequency) and a short injection.json.
"""


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "inject",
        help="add a multi-overtone Kerr ringdown or an external waveform to strain files",
        description=textwrap.fill(
            "Add a simulated black-hole ringdown (Kerr quasinormal modes (2,2,0)..(2,2,N), "
            "optionally (3,3,0), (2,1,0), (4,4,0)) or a user-supplied waveform to the strain "
            "of one or more detectors, each at its own arrival time, and write new strain "
            "files plus a JSON record with optimal SNRs.  The amplitude comes from the "
            "distance and radiated-energy fraction, or from a target network SNR.  "
            "--injections FILE adds every ringdown of a list (one per row) instead."
        ),
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("files", nargs="+", metavar="FILE",
                   help="strain files (GWOSC HDF5, GWF, text)")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (new or empty)")
    p.add_argument("--injections", metavar="FILE",
                   help="injection list (.csv or .parquet, one ringdown per row, schema in the "
                        "README) instead of the single-signal options below")
    g = p.add_argument_group("source (one signal)")
    g.add_argument("--mass", type=float, metavar="MSUN",
                   help="remnant mass in solar masses (total mass for --waveform), detector frame "
                        "unless --source-frame")
    g.add_argument("--source-frame", action="store_true",
                   help="--mass is in the source frame; redshift it with the distance")
    g.add_argument("--spin", type=float, metavar="CHI", help="remnant spin in [0, 1)")
    g.add_argument("--overtones", type=int, default=None, metavar="N",
                   help="highest overtone n of (2,2,n), 0-7 (default 0)")
    g.add_argument("--ratios", metavar="R1,R2,...",
                   help="|C_22n/C_220| for n = 1..N (default all 1)")
    g.add_argument("--phases", metavar="P1,P2,...",
                   help="arg(C_22n/C_220) in radians for n = 1..N (default all 0)")
    g.add_argument("--extra-mode", action="append", default=[], metavar="L,M,N:RATIO[:PHASE]",
                   help="add a mode relative to (2,2,0), e.g. 3,3,0:0.1:1.5 (repeatable)")
    g.add_argument("--gps", type=float, metavar="T",
                   help="GPS time (s) of the ringdown start at the geocentre; must fall "
                        "in the data")
    g.add_argument("--ra", type=float, help="right ascension in radians, 0 to 2 pi")
    g.add_argument("--dec", type=float, help="declination in radians, -pi/2 to pi/2")
    g.add_argument("--psi", type=float, help="polarisation angle in radians")
    g.add_argument("--inclination", type=float, default=None,
                   help="angle between the spin axis and the line of sight (rad, default 0)")
    g.add_argument("--azimuth", type=float, default=None,
                   help="azimuth of the observer around the spin axis (rad, default 0)")
    a = p.add_argument_group("amplitude (one of)")
    a.add_argument("--distance", type=float, metavar="MPC",
                   help="luminosity distance in Mpc (needs --epsilon for a Kerr ringdown)")
    a.add_argument("--epsilon", type=float, default=None,
                   help="fraction of the mass radiated in (2,2,0) (default 0.01 with --snr)")
    a.add_argument("--snr", type=float, metavar="RHO",
                   help="target network optimal SNR (sets the distance)")
    w = p.add_argument_group("external waveform")
    w.add_argument("--waveform", metavar="FILE",
                   help="time, h_plus, h_cross table (text, .npz or HDF5) instead of a Kerr "
                        "ringdown")
    w.add_argument("--units", choices=("geometric", "si"), default=None,
                   help="units of --waveform (default geometric: t/M and r h/M)")
    w.add_argument("--reference-distance", type=float, metavar="MPC",
                   help="distance at which an SI --waveform is given")
    w.add_argument("--align", choices=("peak", "file"), default=None,
                   help="what --gps marks for --waveform (default: the peak of |h|)")
    s = p.add_argument_group("SNR")
    s.add_argument("--psd", default="estimate", metavar="estimate|design|flat|FILE",
                   help="noise PSD for the optimal SNRs (default: Welch estimate from each "
                        "file, excluding every signal's support)")
    s.add_argument("--f-low", type=float, default=20.0, metavar="HZ",
                   help="lower frequency of the SNR integral in Hz (default 20)")
    s.add_argument("--f-high", type=float, default=None, metavar="HZ",
                   help="default: 0.8 x Nyquist, the search's band (open data are "
                        "anti-alias filtered near Nyquist)")
    p.add_argument("--detectors-file", metavar="TOML",
                   help="extra detector sites (one table per detector)")
    p.add_argument("--plot", action="store_true", help="also write injection.png")
    add_strain_input_options(p)
    p.set_defaults(func=run)


def _floats(text: str | None, what: str) -> list[float] | None:
    from ringsearch.errors import InputError

    if text is None:
        return None
    try:
        return [float(x) for x in text.split(",") if x.strip()]
    except ValueError:
        raise InputError(f"{what} {text!r} is not a comma-separated list of numbers.") from None


def _extra_modes(items: list[str]) -> dict:
    from ringsearch.errors import InputError

    out = {}
    for item in items:
        try:
            parts = item.split(":")
            lmn = tuple(int(v) for v in parts[0].split(","))
            ratio = float(parts[1])
            phase = float(parts[2]) if len(parts) > 2 else 0.0
            if len(lmn) != 3 or len(parts) > 3:
                raise ValueError
        except (ValueError, IndexError):
            raise InputError(f"--extra-mode {item!r} is not of the form L,M,N:RATIO[:PHASE]."
                             ) from None
        out[lmn] = ratio * complex(math.cos(phase), math.sin(phase))
    return out


def _group_files(paths: list[str], read_kw: dict) -> dict[str, list[str]]:
    """Files per detector (``read_kw``: the reading options of :func:`read_strain`)."""
    from ringsearch.data.io import detector_from_filename, read_strain

    groups: dict[str, list[str]] = {}
    for path in paths:
        det = (read_kw.get("detector") or detector_from_filename(path)
               or read_strain(path, **read_kw).name)
        groups.setdefault(det, []).append(path)
    return groups


def _quality_masks(paths: list[str], nsec: int):
    """The input file's 1 Hz GWOSC masks, when there is one file with the standard bits."""
    from pathlib import Path

    if len(paths) != 1 or Path(paths[0]).suffix.lower() not in (".hdf5", ".h5", ".hdf"):
        return None, None
    import h5py

    from ringsearch.data import io

    try:
        with h5py.File(paths[0], "r") as f:
            dq = f["quality/simple/DQmask"][()]
            inj = f["quality/injections/Injmask"][()]
            dq_names = [n.decode() if isinstance(n, bytes) else str(n)
                        for n in f["quality/simple/DQShortnames"][()]]
            inj_names = [n.decode() if isinstance(n, bytes) else str(n)
                         for n in f["quality/injections/InjShortnames"][()]]
    except (KeyError, OSError):
        return None, None
    if (dq_names[:len(io._GWOSC_DQ_NAMES)] != io._GWOSC_DQ_NAMES
            or inj_names[:len(io._GWOSC_INJ_NAMES)] != io._GWOSC_INJ_NAMES
            or dq.size != nsec or inj.size != nsec):
        return None, None
    keep_dq = (1 << len(io._GWOSC_DQ_NAMES)) - 1
    keep_inj = (1 << len(io._GWOSC_INJ_NAMES)) - 1
    return (dq & keep_dq).tolist(), (inj & keep_inj).tolist()


#: Options describing one signal, with the defaults they take without --injections (the
#: parser's default is None or empty, so that giving one with --injections is seen).
_SIGNAL_OPTIONS = {"mass": None, "source_frame": False, "spin": None, "overtones": 0,
                   "ratios": None, "phases": None, "extra_mode": [], "gps": None, "ra": None,
                   "dec": None, "psi": None, "inclination": 0.0, "azimuth": 0.0,
                   "distance": None, "epsilon": None, "snr": None, "waveform": None,
                   "units": "geometric", "reference_distance": None, "align": "peak"}


def _flag(name: str) -> str:
    return "--" + name.replace("_", "-")


def _one_sentence_list(items: list[str]) -> str:
    return items[0] if len(items) == 1 else f"{', '.join(items[:-1])} and {items[-1]}"


def _single_signal_options(args) -> None:
    """Check the options of one signal are there and fill in their defaults."""
    from ringsearch.errors import InputError

    missing = [_flag(n) for n in ("mass", "gps", "ra", "dec", "psi") if getattr(args, n) is None]
    if missing:
        raise InputError(f"{_one_sentence_list(missing)} {'is' if len(missing) == 1 else 'are'} "
                         f"required for one signal (or give a list with --injections FILE).")
    for name, default in _SIGNAL_OPTIONS.items():
        if getattr(args, name) is None:
            setattr(args, name, default)


def _read_strains(args) -> tuple[dict[str, list[str]], dict]:
    """Input files per detector and each detector's strain (a clear error for unknown sites)."""
    from ringsearch.data.io import read_strain
    from ringsearch.physics.detectors import get_detector

    read_kw = strain_read_kwargs(args)
    groups = _group_files(args.files, read_kw)
    for det in groups:
        get_detector(det)  # unknown site: a clear error before any work
    strains = {det: read_strain(paths, **{**read_kw, "detector": det})
               for det, paths in groups.items()}
    return groups, strains


def _write_injected(stage, out, inputs: list[str], description: str) -> str:
    """Write one detector's injected strain in the GWOSC layout, with the input's DQ masks."""
    from ringsearch.data.inject import strain_detector
    from ringsearch.data.io import write_gwosc_hdf5

    det = strain_detector(out)
    start = int(math.floor(out.t0.value))
    dur = int(math.ceil(out.duration.value))
    name = f"{det[0]}-{det}_RINGSEARCH_INJ-{start}-{dur}.hdf5"
    nsec = int(math.ceil(out.value.size * out.dt.value - 1e-9))
    dq, inj = _quality_masks(inputs, nsec)
    write_gwosc_hdf5(out, stage / name, dq_mask=dq, inj_mask=inj, description=description)
    return name


def run(args) -> int:
    from ringsearch.data.inject import inject, signal_snr
    from ringsearch.errors import InputError
    from ringsearch.files import staged_directory, write_json
    from ringsearch.physics.detectors import load_detectors

    if args.detectors_file:
        load_detectors(args.detectors_file)
    if args.injections is not None:
        return _run_list(args)
    _single_signal_options(args)
    if (args.snr is None) == (args.distance is None):
        raise InputError("give exactly one of --distance (with --epsilon) or --snr.")
    if args.snr is not None and args.waveform is None and args.epsilon is None:
        args.epsilon = 0.01
    if args.distance is not None and args.waveform is None and args.epsilon is None:
        raise InputError("--distance needs --epsilon, the fraction of the mass radiated in "
                         "(2,2,0).")
    groups, strains = _read_strains(args)
    distance = args.distance if args.distance is not None else 100.0
    mass = float(args.mass)
    if args.source_frame:
        from ringsearch.physics.ringdown import detector_frame_mass

        if args.snr is not None:
            raise InputError("--source-frame needs --distance (with --snr the distance, and "
                             "so the redshift, is not known in advance).")
        mass = float(detector_frame_mass(mass, distance))
    signal = _build_signal(args, mass, distance)
    psds = _psds(args, strains, signal)
    if args.snr is not None:
        rates = {det: float(s.sample_rate.value) for det, s in strains.items()}
        signal = _rescale(signal, args, psds, rates)
    record = _describe(signal, args)
    record["detectors"] = {}
    with staged_directory(args.out) as stage:
        injected = {}
        for det, strain in strains.items():
            out = inject(strain, signal, detector=det, require_overlap=True)
            injected[det] = out
            name = _write_injected(stage, out, groups[det],
                                   f"ringsearch injection at GPS {args.gps:.6f} "
                                   f"into {', '.join(groups[det])}")
            fp, fc = signal.antenna_pattern(det)
            rho = signal_snr(signal, det, psds[det], float(strain.sample_rate.value),
                             args.f_low, _f_high(args, strain))
            record["detectors"][det] = {
                "file": name, "inputs": groups[det],
                "arrival_gps": signal.arrival_time(det), "f_plus": fp, "f_cross": fc,
                "optimal_snr": rho, "f_high_hz": _f_high(args, strain),
            }
        record["network_optimal_snr"] = math.sqrt(
            sum(d["optimal_snr"] ** 2 for d in record["detectors"].values()))
        write_json(stage / "injection.json", record)
        if args.plot:
            _plot(signal, strains, injected, stage / "injection.png")
    for det, d in record["detectors"].items():
        print(f"{det}: arrival GPS {d['arrival_gps']:.6f}  optimal SNR {d['optimal_snr']:.3f}"
              f"  -> {args.out}/{d['file']}")
    print(f"network optimal SNR {record['network_optimal_snr']:.3f}")
    return 0


def _run_list(args) -> int:
    """``--injections FILE``: add every ringdown of an injection list to the strain."""
    from pathlib import Path

    from ringsearch.data.inject import inject
    from ringsearch.data.injections import make_sources, read_injection_table, source_from_row
    from ringsearch.errors import InputError, reason
    from ringsearch.files import atomic_path, staged_directory, write_json

    given = [_flag(n) for n in _SIGNAL_OPTIONS
             if getattr(args, n) is not None and getattr(args, n) is not False
             and getattr(args, n) != []]
    given += ["--plot"] * bool(args.plot)
    if given:
        raise InputError(f"{_one_sentence_list(given)} {'does' if len(given) == 1 else 'do'} "
                         f"not apply with --injections, whose rows give every signal.")
    table = read_injection_table(args.injections)
    groups, strains = _read_strains(args)
    rates = sorted({float(s.sample_rate.value) for s in strains.values()})
    if len(rates) > 1:
        raise InputError(f"--injections needs strain of one sample rate in every detector, "
                         f"not {' and '.join(f'{r:g}' for r in rates)} Hz.")
    fs = rates[0]
    f_high = _f_high(args, fs)
    # Unscaled sources: their supports (which do not depend on the distance) locate the
    # signals in the data and keep them out of the PSD estimate.
    unscaled = []
    for row in table.to_dict("records"):
        ident = int(row["injection_id"])
        try:
            src = source_from_row(row)
        except InputError as exc:
            raise InputError(f"injection {ident} of {args.injections} cannot be made "
                             f"({reason(exc)}).") from None
        for det, strain in strains.items():
            start, _ = src.support(det)
            t0 = float(strain.t0.value)
            t1 = t0 + strain.value.size / fs
            if not t0 <= start < t1:
                raise InputError(f"injection {ident} of {args.injections} (gps {row['gps']:.6f}) "
                                 f"reaches {det} at GPS {start:.6f}, outside the {det} data "
                                 f"[{t0:.6f}, {t1:.6f}).")
        unscaled.append(src)
    try:
        psds = _psds(args, strains, unscaled)
    except InputError as exc:
        if args.psd != "estimate":
            raise
        raise InputError(f"{reason(exc)}, once 1 s around each of the {len(unscaled)} listed "
                         f"signals is left out of the PSD estimate; give --psd, longer data "
                         f"or fewer signals.") from None
    sources, outputs = make_sources(table, psds, fs, args.f_low, f_high)
    joined = table.merge(outputs, on="injection_id", how="left", validate="one_to_one")
    record = {"injections_file": str(Path(args.injections).resolve()),
              "injections": len(table), "table": "injections.parquet", "psd": args.psd,
              "sample_rate_hz": fs, "f_low_hz": args.f_low, "f_high_hz": f_high,
              "network_optimal_snr_range": [float(joined["network_snr"].min()),
                                            float(joined["network_snr"].max())],
              "detectors": {}}
    with staged_directory(args.out) as stage:
        for det, strain in strains.items():
            out = inject(strain, sources, detector=det)
            name = _write_injected(stage, out, groups[det],
                                   f"ringsearch injections from {args.injections} "
                                   f"into {', '.join(groups[det])}")
            record["detectors"][det] = {"file": name, "inputs": groups[det]}
        with atomic_path(stage / "injections.parquet") as tmp:
            joined.to_parquet(tmp, index=False, engine="pyarrow")
        write_json(stage / "injection.json", record)
    for det, d in record["detectors"].items():
        print(f"{det}: {len(table)} injections -> {args.out}/{d['file']}")
    lo, hi = record["network_optimal_snr_range"]
    print(f"network optimal SNR {lo:.3f} to {hi:.3f}  -> {args.out}/injections.parquet")
    return 0


def _build_signal(args, mass: float, distance: float):
    from ringsearch.errors import InputError

    if args.waveform is not None:
        from ringsearch.physics.external import load_waveform

        if args.spin is not None or args.overtones or args.extra_mode or args.epsilon:
            raise InputError("--spin, --overtones, --extra-mode and --epsilon describe Kerr "
                             "ringdowns and do not apply with --waveform.")
        si = args.units == "si"
        return load_waveform(args.waveform, units=args.units, mass=None if si else mass,
                             distance=None if si and args.reference_distance is None
                             else distance,
                             reference_distance=args.reference_distance, t_ref=args.gps,
                             ra=args.ra, dec=args.dec, psi=args.psi, align=args.align)
    from ringsearch.physics.ringdown import RingdownSource, kerr_modes

    if args.spin is None:
        raise InputError("--spin is required for a Kerr ringdown.")
    modes = kerr_modes(args.overtones, _floats(args.ratios, "--ratios"),
                       _floats(args.phases, "--phases"), _extra_modes(args.extra_mode))
    return RingdownSource(mass=mass, spin=args.spin, distance=distance, epsilon=args.epsilon,
                          modes=modes, t0=args.gps, ra=args.ra, dec=args.dec, psi=args.psi,
                          inclination=args.inclination, azimuth=args.azimuth)


def _f_high(args, strain_or_rate) -> float:
    """Upper frequency of the SNR integral: --f-high, else 0.8 x Nyquist."""
    from ringsearch.errors import InputError

    rate = (float(strain_or_rate.sample_rate.value) if hasattr(strain_or_rate, "sample_rate")
            else float(strain_or_rate))
    if args.f_high is None:
        from ringsearch.data.condition import DEFAULT_F_HIGH_FRACTION

        return DEFAULT_F_HIGH_FRACTION * rate / 2  # the conditioning (and search) default
    if not args.f_low < args.f_high <= rate / 2:
        raise InputError(f"--f-high {args.f_high:g} Hz must lie above --f-low "
                         f"({args.f_low:g} Hz) and at or below Nyquist ({rate / 2:g} Hz).")
    return float(args.f_high)


def _psds(args, strains, signals) -> dict:
    """PSD per detector: --psd, or the Welch estimate without 1 s around every signal."""
    import numpy as np

    from ringsearch.data.noise import resolve_psd
    from ringsearch.data.psd import estimate_psd

    signals = signals if isinstance(signals, list) else [signals]
    out = {}
    for det, strain in strains.items():
        if args.psd == "estimate":
            windows = [(start - 1.0, end + 1.0)
                       for start, end in (s.support(det) for s in signals)]
            out[det] = estimate_psd(strain, seglen=min(4.0, float(strain.duration.value) / 4),
                                    exclude=windows)
        else:
            fs = float(strain.sample_rate.value)
            out[det] = resolve_psd(args.psd, np.arange(0.0, fs / 2 + 0.125, 0.125))
    return out


def _rescale(signal, args, psds, rates):
    from dataclasses import replace

    from ringsearch.data.inject import signal_snr
    from ringsearch.errors import InputError

    if not (args.snr > 0 and math.isfinite(args.snr)):
        raise InputError(f"--snr must be positive, got {args.snr!r}.")
    rho = math.sqrt(sum(signal_snr(signal, det, psd, rates[det], args.f_low,
                                   _f_high(args, rates[det])) ** 2
                        for det, psd in psds.items()))
    if rho <= 0:
        raise InputError("the signal has zero SNR in these detectors, so --snr cannot be "
                         "reached (check the sky position and polarisation).")
    factor = rho / args.snr
    if hasattr(signal, "with_distance"):
        return signal.with_distance(signal.distance * factor)
    return replace(signal, h_plus=signal.h_plus / factor, h_cross=signal.h_cross / factor)


def _describe(signal, args) -> dict:
    from ringsearch.physics.ringdown import RingdownSource

    rec: dict = {"gps_geocentre": args.gps, "ra_rad": args.ra, "dec_rad": args.dec,
                 "psi_rad": args.psi, "psd": args.psd, "f_low_hz": args.f_low,
                 "target_snr": args.snr}
    if isinstance(signal, RingdownSource):
        f, tau = signal.f_tau()
        rec["source"] = {
            "kind": "kerr_ringdown", "mass_msun": signal.mass,
            "mass_source_msun": signal.mass_source, "redshift": signal.redshift,
            "cosmology": signal.cosmology, "spin": signal.spin,
            "distance_mpc": signal.distance, "epsilon": signal.epsilon,
            "inclination_rad": signal.inclination, "azimuth_rad": signal.azimuth,
            "amplitude_220": signal.amplitude_220,
            "modes": [{"l": m.l, "m": m.m, "n": m.n, "ratio": m.ratio, "phase_rad": m.phase,
                       "f_hz": float(fk), "tau_s": float(tk)}
                      for m, fk, tk in zip(signal.modes, f, tau, strict=True)],
        }
    else:
        rec["source"] = {"kind": "external", "file": args.waveform, "units": args.units,
                         "mass_msun": args.mass if args.units == "geometric" else None,
                         "distance_mpc": args.distance, "align": args.align,
                         "peak_strain": float(max(abs(signal.h_plus).max(),
                                                  abs(signal.h_cross).max()))}
    return rec


def _plot(signal, strains, injected, path) -> None:
    import numpy as np

    from ringsearch.style import detector_colour, figure, save_figure

    fig, axes = figure(nrows=len(strains), ncols=1, squeeze=False,
                       figsize=(7, 2.2 * len(strains) + 0.6))
    for ax, (det, strain) in zip(axes[:, 0], strains.items(), strict=True):
        start, end = signal.support(det)
        fs = float(strain.sample_rate.value)
        # a ringdown's support is 30 damping times; show the first 12
        shown = 0.4 * (end - start) if hasattr(signal, "modes") else min(end - start, 0.5)
        t = np.arange(start - 0.005, start + shown, 1 / (8 * fs))
        ax.plot((t - _signal_gps(signal)) * 1e3, signal.detector_strain(det, t) / 1e-21,
                color=detector_colour(det), label=f"{det} injected signal")
        ax.set_ylabel("strain [1e-21]")
        ax.legend(loc="upper right")
    axes[-1, 0].set_xlabel("time since the geocentre start [ms]")
    save_figure(fig, path)


def _signal_gps(signal) -> float:
    return float(getattr(signal, "t0", getattr(signal, "t_ref", 0.0)))
