"""``ringsearch spectrum``: print Kerr QNM frequencies (and optionally plot them).

Thin wrapper over :mod:`ringsearch.physics.qnm`: parses the modes, asks the
table's interpolant for ``M*omega`` and, given a mass, the frequency in Hz and
damping time in seconds.
"""

from __future__ import annotations

import argparse
import json
import math
import textwrap

from ringsearch.errors import InputError

_DEFAULT_MODES = [(2, 2, 0), (2, 2, 1), (2, 2, 2), (2, 2, 3)]

_EPILOG = """\
examples:
  ringsearch spectrum --spin 0.69 --mass 68
      the (2,2,n) modes n = 0..3 of a 68 solar-mass black hole with spin 0.69
  ringsearch spectrum --spin 0.69 --mass 68 --mode 2,2,0 --mode 2,2,1 --json
      the same two modes as JSON (keys l, m, n, spin, omega_re, omega_im, f_hz, tau_s)
  ringsearch spectrum --spin 0.9 --mode 3,3,0 --plot tracks.png
      also draw f and tau against spin for the requested modes (needs --mass
      for physical units; without it the dimensionless M*omega is drawn)

Frequencies are dimensionless M*omega (time dependence exp(-i omega t), so
Im(omega) < 0).  Modes (l, m, n): l = 2 with n = 0..7, l = 3 and 4 with
n = 0..3, every |m| <= l; spins 0 <= chi <= 0.999 (six high counter-rotating
overtones of l = 2 stop between 0.994 and 0.998; the error message says where).
"""


def _parse_mode(text: str) -> tuple[int, int, int]:
    parts = text.split(",")
    try:
        if len(parts) != 3:
            raise ValueError
        l, m, n = (int(p) for p in parts)
    except ValueError:
        raise InputError(f"--mode {text!r} is not of the form L,M,N (three integers).") from None
    return l, m, n


def _parse_float(name: str, text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise InputError(f"{name} {text!r} is not a number.") from None
    if not math.isfinite(v):
        raise InputError(f"{name} {text!r} is not a finite number.")
    return v


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "spectrum",
        help="Kerr quasinormal-mode frequencies and damping times",
        description=textwrap.fill(
            "Print the complex quasinormal-mode frequencies M*omega of a Kerr black hole "
            "of the given spin and, with --mass, each mode's frequency (Hz) and damping "
            "time (s). Values come from ringsearch's shipped table of Leaver "
            "continued-fraction solutions."),
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("--spin", required=True, metavar="CHI",
                   help="dimensionless spin, 0 <= CHI <= 0.999")
    p.add_argument("--mass", metavar="M",
                   help="detector-frame mass in solar masses (adds f_hz and tau_s)")
    p.add_argument("--mode", action="append", metavar="L,M,N", default=None,
                   help="mode to report; repeat for several (default: 2,2,0 to 2,2,3)")
    p.add_argument("--json", action="store_true", help="print a JSON list instead of a table")
    p.add_argument("--plot", metavar="FILE",
                   help="also save a figure (PNG or PDF) of the modes against spin")
    p.set_defaults(func=run)


def spectrum_rows(spin: float, modes, mass: float | None = None) -> list[dict]:
    """One dict per mode with ``l, m, n, spin, omega_re, omega_im`` (+ ``f_hz, tau_s``)."""
    from ringsearch.physics import qnm

    rows = []
    for l, m, n in modes:
        w = qnm.kerr_omega(l, m, n, spin)
        row = {"l": l, "m": m, "n": n, "spin": spin,
               "omega_re": w.real, "omega_im": w.imag}
        if mass is not None:
            f, tau = qnm.mode_f_tau(mass, spin, l, m, n)
            row["f_hz"], row["tau_s"] = f, tau
        rows.append(row)
    return rows


def _format_table(rows: list[dict], with_mass: bool) -> str:
    head = ["l", "m", "n", "spin", "Re(M*omega)", "Im(M*omega)"]
    if with_mass:
        head += ["f [Hz]", "tau [ms]"]
    lines = []
    for r in rows:
        cells = [str(r["l"]), str(r["m"]), str(r["n"]), f"{r['spin']:.6g}",
                 f"{r['omega_re']:.8f}", f"{r['omega_im']:.8f}"]
        if with_mass:
            cells += [f"{r['f_hz']:.4f}", f"{r['tau_s'] * 1e3:.5f}"]
        lines.append(cells)
    widths = [max(len(h), *(len(c[i]) for c in lines)) for i, h in enumerate(head)]
    out = ["  ".join(h.rjust(w) for h, w in zip(head, widths, strict=True))]
    out += ["  ".join(c.rjust(w) for c, w in zip(cells, widths, strict=True)) for cells in lines]
    out.append("(M*omega dimensionless, time dependence exp(-i omega t); "
               "f in Hz, tau in ms, detector-frame mass)" if with_mass else
               "(M*omega dimensionless, time dependence exp(-i omega t))")
    return "\n".join(out)


def plot_tracks(path, modes, spin: float, mass: float | None = None) -> None:
    """Draw each mode against spin (f and tau with a mass, else M*omega), mark ``spin``."""
    from pathlib import Path

    import numpy as np

    from ringsearch.physics import qnm
    from ringsearch.style import colour, figure, save_figure

    if Path(path).suffix.lower() not in (".png", ".pdf"):
        raise InputError(f"--plot {path} must end in .png or .pdf.")
    fig, (ax1, ax2) = figure(nrows=1, ncols=2, figsize=(9, 3.8))
    for i, (l, m, n) in enumerate(modes):
        top = qnm.spin_range(l, m, n)[1]
        chi = np.linspace(0.0, top, 400)
        label = f"({l},{m},{n})"
        if mass is not None:
            f, tau = qnm.mode_f_tau(mass, chi, l, m, n)
            f0, tau0 = qnm.mode_f_tau(mass, spin, l, m, n)
            ax1.plot(chi, f, color=colour(i), label=label)
            ax2.plot(chi, tau * 1e3, color=colour(i), label=label)
            ax1.plot([spin], [f0], "o", color=colour(i))
            ax2.plot([spin], [tau0 * 1e3], "o", color=colour(i))
        else:
            w = qnm.kerr_omega(l, m, n, chi)
            w0 = qnm.kerr_omega(l, m, n, spin)
            ax1.plot(chi, w.real, color=colour(i), label=label)
            ax2.plot(chi, w.imag, color=colour(i), label=label)
            ax1.plot([spin], [w0.real], "o", color=colour(i))
            ax2.plot([spin], [w0.imag], "o", color=colour(i))
    ax1.set_xlabel("spin chi (dimensionless)")
    ax2.set_xlabel("spin chi (dimensionless)")
    if mass is not None:
        ax1.set_ylabel("frequency f [Hz]")
        ax2.set_ylabel("damping time tau [ms]")
        ax2.set_yscale("log")
        fig.suptitle(f"Kerr QNMs of a {mass:g} solar-mass black hole (dots: spin {spin:g})")
    else:
        ax1.set_ylabel("Re(M omega) (dimensionless)")
        ax2.set_ylabel("Im(M omega) (dimensionless)")
        fig.suptitle(f"Kerr QNMs against spin (dots: spin {spin:g})")
    ax1.legend(fontsize="small")
    save_figure(fig, path)


def run(args: argparse.Namespace) -> int:
    spin = _parse_float("--spin", args.spin)
    mass = None if args.mass is None else _parse_float("--mass", args.mass)
    if mass is not None and mass <= 0:
        raise InputError(f"--mass {args.mass} must be a positive number of solar masses.")
    modes = _DEFAULT_MODES if not args.mode else [_parse_mode(t) for t in args.mode]
    rows = spectrum_rows(spin, modes, mass)
    if args.plot:
        plot_tracks(args.plot, modes, spin, mass)
    if args.json:
        from ringsearch.files import json_safe

        print(json.dumps(json_safe(rows), indent=1, allow_nan=False))
    else:
        print(_format_table(rows, mass is not None))
    return 0
