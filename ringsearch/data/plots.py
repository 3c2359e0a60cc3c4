"""Figures that show what the data layer did: ASDs, whitened series, time-frequency maps.

Every figure goes through :func:`ringsearch.style.figure` and
:func:`ringsearch.style.save_figure` (Okabe–Ito colours, atomic writes) and
labels its axes with units.  The time-frequency map uses gwpy's Q-transform.
"""

from __future__ import annotations

import os
import warnings
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np

from ringsearch.errors import InputError, reason
from ringsearch.style import PALETTE, detector_colour, figure, save_figure


def plot_asd(psds, path: str | os.PathLike, reference="design", f_low: float | None = None,
             f_high: float | None = None, title: str | None = None) -> Path:
    """Amplitude spectral densities, with a reference curve.

    Parameters
    ----------
    psds : FrequencySeries or mapping of label -> FrequencySeries
        Estimated one-sided PSDs (1/Hz); their square roots are drawn.
    path : path
        Output PNG/PDF.
    reference : "design", FrequencySeries or None
        Reference PSD drawn dashed (default: the analytic Advanced LIGO design
        curve of :func:`ringsearch.data.noise.design_psd`).
    f_low, f_high : float, optional
        Band edges, shaded outside.

    Returns
    -------
    pathlib.Path

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from ringsearch.data.noise import gaussian_noise
    >>> from ringsearch.data.psd import estimate_psd
    >>> psd = estimate_psd(gaussian_noise("design", 16.0, 2048, 1))
    >>> plot_asd({"H1": psd}, pathlib.Path(tempfile.mkdtemp()) / "asd.png").exists()
    True
    """
    from ringsearch.data.noise import design_psd

    if not isinstance(psds, Mapping):
        psds = {psds.name or "estimate": psds}
    fig, ax = figure(figsize=(7, 4.2))
    fmax = 0.0
    for label, psd in psds.items():
        f = psd.frequencies.value
        ok = f > 0
        ax.loglog(f[ok], np.sqrt(psd.value[ok]), lw=0.8, label=f"{label} (estimated)",
                  color=detector_colour(str(label)))
        fmax = max(fmax, float(f[-1]))
    if reference is not None:
        if isinstance(reference, str):
            fr = np.geomspace(10.0, max(fmax, 20.0), 600)
            ref, ref_label = design_psd(fr), "Advanced LIGO design (Ajith 2011)"
        else:
            ref, ref_label = reference, reference.name or "reference"
        fr = ref.frequencies.value
        ok = fr > 0
        ax.loglog(fr[ok], np.sqrt(ref.value[ok]), ls="--", lw=1.4, color=PALETTE["black"],
                  label=ref_label)
    if f_low:
        ax.axvspan(1e-3, f_low, color="0.85", zorder=0)
    if f_high:
        ax.axvspan(f_high, fmax * 2 if fmax else f_high * 2, color="0.85", zorder=0)
    ax.set_xlim(8.0, fmax or None)
    ax.set_xlabel("Frequency [Hz]")
    ax.set_ylabel(r"Strain ASD [1/$\sqrt{\mathrm{Hz}}$]")
    ax.legend(fontsize="small")
    if title:
        ax.set_title(title)
    save_figure(fig, path)
    return Path(path)


def _as_list(conds) -> Sequence:
    return list(conds) if isinstance(conds, (list, tuple)) else [conds]


def plot_whitened(conds, path: str | os.PathLike, around: float, window: float = 1.0,
                  title: str | None = None) -> Path:
    """Whitened strain (in units of its noise sigma) around a GPS time.

    Parameters
    ----------
    conds : ConditionedData or list of them
        One curve per detector.
    path : path
        Output PNG/PDF.
    around : float
        GPS time at the centre of the plot.
    window : float
        Half-width of the plot in seconds.

    Returns
    -------
    pathlib.Path

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from ringsearch.data.noise import gaussian_noise
    >>> from ringsearch.data.condition import condition
    >>> cond = condition(gaussian_noise("design", 16.0, 2048, 1))
    >>> out = pathlib.Path(tempfile.mkdtemp()) / "w.png"
    >>> plot_whitened(cond, out, around=8.0, window=0.5).exists()
    True
    """
    if not window > 0:
        raise InputError(f"plot window {window!r} s must be positive.")
    conds = _as_list(conds)
    fig, axes = figure(nrows=len(conds), sharex=True, squeeze=False,
                       figsize=(7, 1.2 + 1.8 * len(conds)))
    drawn = False
    for ax, cond in zip(axes[:, 0], conds, strict=True):
        w = cond.whitened
        t = w.times.value
        sel = (t >= around - window) & (t <= around + window)
        if sel.any():
            ax.plot(t[sel] - around, w.value[sel] / cond.sigma, lw=0.6,
                    color=detector_colour(cond.detector), label=cond.detector)
            drawn = True
        for g in cond.gates.itertuples():
            if abs(g.gps - around) <= window + g.width_s:
                ax.axvspan(g.gps - around - g.width_s / 2, g.gps - around + g.width_s / 2,
                           color=PALETTE["orange"], alpha=0.3, zorder=0, label="gate")
        ax.set_ylabel(f"{cond.detector} whitened\n[noise $\\sigma$]")
        if ax.get_legend_handles_labels()[0]:
            ax.legend(fontsize="small", loc="upper right")
    if not drawn:
        raise InputError(f"GPS {around} is outside the conditioned data.")
    ax = axes[-1, 0]
    ax.set_xlim(-window, window)
    ax.set_xlabel(f"Time from GPS {around:.3f} [s]")
    if title:
        ax.set_title(title)
    save_figure(fig, path)
    return Path(path)


def plot_qtransform(cond, path: str | os.PathLike, around: float, window: float = 1.0,
                    frange: tuple[float, float] | None = None,
                    qrange: tuple[float, float] = (4.0, 32.0), title: str | None = None) -> Path:
    """Normalised Q-transform energy of the whitened data around a GPS time.

    Uses gwpy's ``TimeSeries.q_transform`` on the already whitened series.

    Parameters
    ----------
    cond : ConditionedData
    path : path
    around : float
        GPS time at the centre.
    window : float
        Half-width in seconds.
    frange : (float, float), optional
        Frequency range in Hz (default ``(f_low, min(f_high, 1024))``).
    qrange : (float, float)
        Range of Q values searched.

    Returns
    -------
    pathlib.Path

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from ringsearch.data.noise import gaussian_noise
    >>> from ringsearch.data.condition import condition
    >>> cond = condition(gaussian_noise("design", 16.0, 2048, 1))
    >>> out = pathlib.Path(tempfile.mkdtemp()) / "q.png"
    >>> plot_qtransform(cond, out, around=8.0, window=0.5).exists()
    True
    """
    w = cond.whitened
    t0, t1 = float(w.t0.value), float(w.t0.value + w.duration.value)
    lo, hi = max(t0, around - window), min(t1, around + window)
    if hi <= lo:
        raise InputError(f"GPS {around} is outside the conditioned data of {cond.detector}.")
    if frange is None:
        f_lo = max(cond.f_low, 10.0)
        frange = (f_lo, min(cond.f_high, 1024.0) if f_lo < 512.0 else cond.f_high)
    try:
        with warnings.catch_warnings():  # gwpy warns when it trims the band to the Q range
            warnings.simplefilter("ignore", UserWarning)
            qt = w.q_transform(qrange=qrange, frange=frange, outseg=(lo, hi), whiten=False,
                               fduration=min(2.0, (t1 - t0) / 4))
    except Exception as exc:  # gwpy/scipy raise assorted types for too narrow a band
        raise InputError(f"the Q-transform of {cond.detector} around GPS {around} failed for "
                         f"the band {frange[0]:g}-{frange[1]:g} Hz ({reason(exc)}).") from None
    fig, ax = figure(figsize=(7, 3.8))
    times = qt.times.value - around
    freqs = qt.frequencies.value
    # Energies above 25 are far outside Gaussian noise (mean 1); clip there.
    mesh = ax.pcolormesh(times, freqs, qt.value.T, shading="auto", cmap="viridis",
                         vmin=0.0, vmax=25.0)
    ax.set_yscale("log")
    ax.set_xlabel(f"Time from GPS {around:.3f} [s]")
    ax.set_ylabel("Frequency [Hz]")
    cbar = fig.colorbar(mesh, ax=ax)
    cbar.set_label("Normalised energy [dimensionless]")
    ax.set_title(title or f"{cond.detector} Q-transform")
    save_figure(fig, path)
    return Path(path)
