"""How much of each template's whitened power lies outside a band around its frequency.

Band-limiting the correlations (heterodyning each template onto a decimated
grid) saves in proportion to the data rate over the band's width.  A
ringdown starts abruptly, so its spectrum has Lorentzian tails (the Fourier
transform of a one-sided exponential): the band that keeps a fraction of its
whitened power is wide.  This measures, for every template of the target
campaign's bank (``injections/target.toml``, design PSD, 2048 Hz), the
half-width B around the (2,2,0) frequency that holds 99 % and 99.9 % of the
whitened power of all its modes and phases (an SNR loss of about 0.5 % and
0.05 %), and the ideal gain of a complex baseband at rate 2B over the real
data (a complex sample costs about two real ones).  The grouped filter's
ratio of correlations (:mod:`ringsearch.search.subspace`) is beside it: that
is why the search groups templates instead of band-limiting them.

Run: ``python scripts/bench_band.py [--json out.json] [--smoke]``.
"""

from __future__ import annotations

import argparse
import tomllib
from pathlib import Path

import numpy as np
from _bench import Figures, add_options

ROOT = Path(__file__).resolve().parents[1]


def band_halfwidths(power: np.ndarray, freqs: np.ndarray, f0: np.ndarray,
                    keep: float) -> np.ndarray:
    """Per row of ``power`` (normalised spectra on ``freqs``), the smallest half-width
    around ``f0`` holding at least ``keep`` of it."""
    out = np.empty(power.shape[0])
    for i in range(power.shape[0]):
        d = np.abs(freqs - f0[i])
        order = np.argsort(d, kind="stable")
        cum = np.cumsum(power[i, order])
        out[i] = d[order][min(np.searchsorted(cum, keep * cum[-1]), d.size - 1)]
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    add_options(ap)
    args = ap.parse_args(argv)

    from ringsearch.campaign import spec_from_dict
    from ringsearch.campaign.worker import campaign_bank
    from ringsearch.data.noise import design_psd
    from ringsearch.search.bank import Bank
    from ringsearch.search.templates import basis_waveforms

    fs = 2048.0
    if args.smoke:
        bank = Bank.from_box((60.0, 120.0), (0.3, 0.8), 2, 0.9, f_high=800.0, seed=0)
        title = f"whitened power outside a band: {len(bank)} templates (smoke)"
    else:
        path = ROOT / "injections" / "target.toml"
        spec = spec_from_dict(tomllib.loads(path.read_text()), origin=str(path),
                              base=path.parent)
        bank = campaign_bank(spec.config, 2)
        title = f"whitened power outside a band: target bank, {len(bank)} templates (N = 2)"
    n = 1 << 14
    freqs = np.fft.rfftfreq(n, 1 / fs)
    psd = np.asarray(design_psd(freqs).value, float)
    band = (freqs >= 20.0) & (freqs <= 0.8 * fs / 2) & np.isfinite(psd) & (psd > 0)
    weight = np.where(band, 1.0 / np.where(band, psd, 1.0), 0.0)
    u = basis_waveforms(bank.f_hz, bank.tau_s, int(bank.duration_s.max() * fs) + 2, fs)
    power = (np.abs(np.fft.rfft(u, n, axis=-1)) ** 2 * weight).sum(axis=1)
    out = Figures(title)
    for keep in (0.99, 0.999):
        b = band_halfwidths(power, freqs, bank.f_hz[:, 0], keep)
        gain = fs / (4.0 * np.maximum(b, freqs[1]))
        tag = f"{100 * keep:g} %"
        out.add(f"halfwidth_median_{keep}", float(np.median(b)), "Hz",
                f"half-band holding {tag} of the whitened power, median")
        out.add(f"halfwidth_p90_{keep}", float(np.percentile(b, 90)), "Hz",
                f"half-band holding {tag}, 90th percentile")
        out.add(f"decimation_gain_median_{keep}", float(np.median(gain)), "x",
                f"ideal gain of a complex baseband keeping {tag}, median")
        out.add(f"decimation_gain_p10_{keep}", float(np.percentile(gain, 10)), "x",
                f"ideal gain keeping {tag}, 10th percentile")
    out.emit(args)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
