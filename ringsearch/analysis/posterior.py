"""Remnant (mass, spin) posterior and the evidence for each overtone count.

For K = N+1 Kerr modes (l = m = 2, n = 0..N) at a grid point (mass, spin) the
data of one detector are ``y = A a + noise`` in whitened units (unit-variance
white noise), with ``A`` the whitened design matrix of
:func:`ringsearch.analysis.fits.damped_basis` and ``a`` the 2K real
amplitudes.  Under the Gaussian amplitude prior ``a ~ N(0, σ_a² I)`` the
amplitudes integrate out in closed form:

``ln p(y) = -n/2 ln 2π - ½ yᵀy + ½ bᵀM⁻¹b - ½ ln det M - 2K ln σ_a``,

with ``M = AᵀA + I/σ_a²`` and ``b = Aᵀy`` (Woodbury identity and the matrix
determinant lemma; only 2K×2K matrices are factored).  The whitening Jacobian
``-½ ln det C`` is common to every model and is dropped.

A network is analysed in one of two ways.  By default, with common (mass,
spin) but independent amplitudes in each detector (each detector's segment
starts at t0 plus its arrival delay), so the log-likelihoods add; this needs
no sky position and is conservative: it ignores the amplitude and phase
relations between detectors.  Given antenna patterns for a sky position, the
network is coherent: common h+ and hx amplitudes per mode, seen through each
detector's (F+, Fx) — the Gram matrices and projections of the detectors add
in 4K x 4K blocks.

The prior is uniform in the (mass, spin) box, so the evidence of N overtones
is the grid average of the marginal likelihood; ``log10_bayes["N:N-1"]`` is
the log10 ratio of consecutive evidences.  The Bayes factors depend on the
amplitude prior width ``σ_a`` (in strain): the Occam penalty of an extra mode
grows like ``2 ln(σ_a / σ_fit)``; its value is always reported.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy.special import logsumexp

from ringsearch.analysis.fits import DetectorSeries, damped_basis
from ringsearch.analysis.noise_model import ToeplitzNoise
from ringsearch.errors import InputError

__all__ = ["marginal_log_likelihood", "default_amp_sigma", "RemnantPosterior",
           "remnant_posterior", "overtone_evidence", "credible_interval", "hpd_levels"]

#: Signature of a QNM provider: (mass, spin, n) -> (f_hz, tau_s), vectorised.
ModeFunc = Callable[[np.ndarray, np.ndarray, int], tuple[np.ndarray, np.ndarray]]

LN10 = math.log(10.0)


def kerr_modes() -> ModeFunc:
    """The (2,2,n) QNM provider from :mod:`ringsearch.physics.qnm` (the shipped table)."""
    from ringsearch.physics import qnm

    def modes(mass, spin, n):
        return qnm.mode_f_tau(mass, spin, l=2, m=2, n=n)

    return modes


def kerr22_spin_range() -> tuple[float, float]:
    """Spin range over which the shipped table covers every (2,2,n) mode."""
    from ringsearch.physics import qnm

    ranges = [qnm.spin_range(2, 2, n) for n in range(8)]
    return max(r[0] for r in ranges), min(r[1] for r in ranges)


def _check_spin_box(spin_range: tuple[float, float], use_table: bool) -> None:
    """Spins must lie in the shipped table's range (or in [0, 1) for a custom provider)."""
    lo, hi = spin_range
    if use_table:
        tlo, thi = kerr22_spin_range()
    else:
        tlo, thi = 0.0, 0.999999
    if not (tlo <= lo < hi <= thi):
        raise InputError(f"the spin range {lo}:{hi} is outside the QNM table's range "
                         f"[{tlo}, {thi}] (or empty).")


def marginal_log_likelihood(yw: np.ndarray, aw: np.ndarray, amp_sigma: float) -> float:
    """Log-density of whitened data with the linear amplitudes integrated out.

    Parameters
    ----------
    yw : array, shape (n,)
        Whitened data (unit-variance white noise under the noise model).
    aw : array, shape (n, 2K)
        Whitened design matrix (columns in strain per unit amplitude).
    amp_sigma : float
        Standard deviation of the Gaussian prior on each real amplitude (strain).

    Returns
    -------
    float
        ``ln ∫ N(yw; aw a, I) N(a; 0, σ² I) da`` (exact, closed form).

    Examples
    --------
    >>> import numpy as np
    >>> y = np.array([0.3, -0.1]); a = np.array([[1.0], [0.5]])
    >>> cov = np.eye(2) + 4.0 * a @ a.T   # y ~ N(0, I + sigma^2 A A^T), sigma = 2
    >>> quad, logdet = y @ np.linalg.solve(cov, y), np.linalg.slogdet(cov)[1]
    >>> direct = -0.5 * (quad + logdet + 2 * np.log(2 * np.pi))
    >>> bool(np.isclose(marginal_log_likelihood(y, a, 2.0), direct))
    True
    """
    yw = np.asarray(yw, float)
    aw = np.asarray(aw, float)
    if amp_sigma <= 0 or not math.isfinite(amp_sigma):
        raise InputError(f"the amplitude prior width {amp_sigma} must be positive and finite.")
    k2 = aw.shape[1]
    m = aw.T @ aw + np.eye(k2) / amp_sigma**2
    b = aw.T @ yw
    c = np.linalg.cholesky(m)
    z = np.linalg.solve(c, b)
    return float(-0.5 * len(yw) * math.log(2 * math.pi) - 0.5 * yw @ yw + 0.5 * z @ z
                 - np.sum(np.log(np.diag(c))) - k2 * math.log(amp_sigma))


def default_amp_sigma(series: DetectorSeries, noise: ToeplitzNoise, f_hz: float, tau_s: float,
                      snr: float = 10.0) -> float:
    """Amplitude prior width: the strain amplitude giving optimal SNR ``snr`` for one mode.

    A single damped sinusoid of this amplitude at the start of the segment
    would have optimal SNR ``snr`` (averaged over phase) in ``series``'s noise.

    Examples
    --------
    >>> import numpy as np
    >>> from ringsearch.analysis.noise_model import toeplitz_noise
    >>> fr = np.linspace(0, 2048, 2049)
    >>> tn = toeplitz_noise(fr, np.full_like(fr, 1e-46), 4096.0, 400, f_low=0.0, f_high=2048.0)
    >>> s = DetectorSeries("H1", np.zeros(4096), 0.0, 4096.0)
    >>> 1e-22 < default_amp_sigma(s, tn, 250.0, 0.004) < 1e-20
    True
    """
    t = np.arange(noise.n) / noise.sample_rate
    aw = noise.whiten(damped_basis(t, [f_hz], [tau_s]))
    unit = math.sqrt(0.5 * float(np.sum(aw**2)))
    return snr / unit


@dataclass
class RemnantPosterior:
    """Grid posterior over (mass, spin) for each overtone count, and the evidences."""

    masses: list[np.ndarray]           # per N: grid of detector-frame solar masses
    spins: list[np.ndarray]            # per N: grid of spins
    log_likelihood: list[np.ndarray]   # per N: (n_mass, n_spin), amplitudes marginalised
    amp_sigma: dict[str, float]        # prior width per detector (strain)
    t0_gps: float
    detectors: list[str]
    warnings: list[str] = field(default_factory=list)
    log_box_fraction: list[float] = field(default_factory=list)  # per N: ln(grid/prior area)

    @property
    def max_overtones(self) -> int:
        return len(self.log_likelihood) - 1

    @property
    def log_evidence(self) -> np.ndarray:
        """Natural-log evidence per N under the uniform (mass, spin) prior."""
        frac = self.log_box_fraction or [0.0] * len(self.log_likelihood)
        return np.array([logsumexp(ll) - math.log(ll.size) + fr
                         for ll, fr in zip(self.log_likelihood, frac, strict=True)])

    @property
    def log10_bayes(self) -> dict[str, float]:
        """``{"N:N-1": log10 Z_N / Z_{N-1}}``."""
        z = self.log_evidence
        return {f"{n}:{n - 1}": float((z[n] - z[n - 1]) / LN10) for n in range(1, len(z))}

    def supported_overtones(self, threshold: float = 0.5) -> int:
        """Largest N reached by adding overtones while ``log10 B(N:N-1) > threshold``.

        The default 0.5 is Jeffreys' "substantial" evidence (# common practice).
        """
        z = self.log_evidence
        n = 0
        while n + 1 < len(z) and (z[n + 1] - z[n]) / LN10 > threshold:
            n += 1
        return n

    def posterior(self, n_overtones: int) -> np.ndarray:
        """Normalised posterior probabilities of the grid cells for N overtones."""
        ll = self.log_likelihood[n_overtones]
        p = np.exp(ll - ll.max())
        return p / p.sum()

    def summary(self, n_overtones: int) -> dict[str, dict[str, float]]:
        """Median and 90% equal-tailed interval of mass and spin (marginals)."""
        p = self.posterior(n_overtones)
        return {"mass": credible_interval(self.masses[n_overtones], p.sum(axis=1)),
                "spin": credible_interval(self.spins[n_overtones], p.sum(axis=0))}

    def contains(self, mass: float, spin: float, n_overtones: int, prob: float = 0.9) -> bool:
        """Whether (mass, spin) lies inside the highest-posterior-density region ``prob``.

        The grid density is interpolated bilinearly to the point and compared
        with the HPD threshold; points outside the grid are outside the region.
        """
        from scipy.interpolate import RegularGridInterpolator

        p = self.posterior(n_overtones)
        level = hpd_levels(p, [prob])[0]
        ms, sp = self.masses[n_overtones], self.spins[n_overtones]
        if not (ms[0] <= mass <= ms[-1] and sp[0] <= spin <= sp[-1]):
            return False
        interp = RegularGridInterpolator((ms, sp), p)
        return bool(interp([[mass, spin]])[0] >= level)

    def resolution_warnings(self, n_overtones: int) -> list[str]:
        """Warnings when the grid does not resolve the posterior or truncates it."""
        p = self.posterior(n_overtones)
        out = []
        if p.max() > 0.1:
            out.append(f"N={n_overtones}: one grid cell holds {100 * p.max():.0f}% of the "
                       "posterior; the grid does not resolve it (narrow the box or refine).")
        edge = p[0].sum() + p[-1].sum() + p[:, 0].sum() + p[:, -1].sum()
        if edge > 0.05 and self.log_box_fraction and self.log_box_fraction[n_overtones] == 0:
            out.append(f"N={n_overtones}: {100 * edge:.0f}% of the posterior lies on the edge "
                       "of the (mass, spin) box; the prior box truncates it.")
        return out


def credible_interval(x: np.ndarray, weights: np.ndarray, prob: float = 0.9
                      ) -> dict[str, float]:
    """Median and equal-tailed ``prob`` interval of a gridded 1-D density.

    Each grid value is treated as the centre of a cell of uniform density; the
    cumulative distribution is interpolated linearly between cell edges.

    Examples
    --------
    >>> import numpy as np
    >>> x = (np.arange(100) + 0.5) / 100; w = np.ones_like(x)   # uniform on [0, 1]
    >>> ci = credible_interval(x, w)
    >>> round(ci["median"], 3), round(ci["lo90"], 3), round(ci["hi90"], 3)
    (0.5, 0.05, 0.95)
    """
    x = np.asarray(x, float)
    w = np.asarray(weights, float)
    w = w / w.sum()
    if len(x) > 1:
        dx = np.diff(x)
        edges = np.concatenate([[x[0] - dx[0] / 2], x[:-1] + dx / 2, [x[-1] + dx[-1] / 2]])
    else:
        edges = np.array([x[0], x[0]])
    cdf = np.concatenate([[0.0], np.cumsum(w)])
    # interp needs an increasing xp: nudge flat stretches (zero-probability cells)
    cdf_s = cdf + np.arange(len(cdf)) * 1e-15
    lo, hi = (1 - prob) / 2, 1 - (1 - prob) / 2
    return {"median": float(np.interp(0.5, cdf_s, edges)),
            "lo90" if prob == 0.9 else "lo": float(np.interp(lo, cdf_s, edges)),
            "hi90" if prob == 0.9 else "hi": float(np.interp(hi, cdf_s, edges))}


def hpd_levels(p: np.ndarray, probs: Sequence[float]) -> list[float]:
    """Density thresholds of the highest-posterior-density regions holding ``probs``.

    Examples
    --------
    >>> import numpy as np
    >>> hpd_levels(np.array([0.5, 0.3, 0.2]), [0.5, 0.8])
    [0.5, 0.3]
    """
    flat = np.sort(np.asarray(p, float).ravel())[::-1]
    cum = np.cumsum(flat) / flat.sum()
    out = []
    for q in probs:
        i = int(np.searchsorted(cum, q - 1e-12))
        out.append(float(flat[min(i, len(flat) - 1)]))
    return out


def _grid_modes(modes: ModeFunc, mm: np.ndarray, ss: np.ndarray, nmax: int):
    fs, taus = [], []
    for n in range(nmax + 1):
        f, tau = modes(mm, ss, n)
        fs.append(np.asarray(f, float))
        taus.append(np.asarray(tau, float))
    return np.stack(fs, axis=-1), np.stack(taus, axis=-1)   # (G, K)


def remnant_posterior(data: Sequence[DetectorSeries], noises: Sequence[ToeplitzNoise],
                      t0_gps: float, mass_range: tuple[float, float],
                      spin_range: tuple[float, float], max_overtones: int = 2,
                      grid: tuple[int, int] = (40, 40), amp_sigma: float | dict | None = None,
                      amp_prior_snr: float = 10.0, modes: ModeFunc | None = None,
                      chunk: int = 4096, refine: int = 2, upsample: int = 6,
                      antenna: Mapping[str, tuple[float, float]] | None = None
                      ) -> RemnantPosterior:
    """Amplitude-marginalised likelihood on a (mass, spin) grid for N = 0..N_max.

    Parameters
    ----------
    data, noises : sequences
        Band-passed strain of each detector and the matching noise model
        (one Toeplitz factorisation per detector, reused for every grid point).
    t0_gps : float
        Ringdown start time (GPS s) at the reference detector; each detector's
        segment starts at ``t0_gps + series.time_shift``.
    mass_range, spin_range : (lo, hi)
        The uniform-prior box (detector-frame solar masses; dimensionless spin).
    max_overtones : int
        Largest overtone count N analysed (modes (2,2,0..N)).
    grid : (n_mass, n_spin)
        Grid size.
    amp_sigma : float or {detector: float}, optional
        Gaussian prior width of every real amplitude, in strain.  Default: per
        detector, the amplitude at which the fundamental mode at the box centre
        has optimal SNR ``max(amp_prior_snr, 2 rho_0)`` (see
        :func:`default_amp_sigma`), where ``rho_0`` is the largest
        least-squares SNR of the fundamental mode alone on the grid.  Scaling
        with the data keeps a loud signal from being shrunk by the prior (which
        would bias (mass, spin) and let extra modes win by relieving the
        shrinkage); the width used is reported in ``amp_sigma``.  When the
        fit of some N still reaches more than :data:`SHRINKAGE_LIMIT` prior
        widths (overtones interfering destructively with the fundamental), a
        warning says that B(N+1:N) is biased upwards.
    modes : callable, optional
        QNM provider ``(mass, spin, n) -> (f_hz, tau_s)``; default the shipped
        Kerr table (:func:`kerr_modes`).
    refine : int
        Up to this many zooms per N: when the posterior of N overtones (cells
        above 1e-7 of its total) fits in under 60% of the grid along an axis,
        its grid is recomputed over that sub-box (plus one cell).  The
        evidence keeps the prior of the whole box (``log_box_fraction``); the
        neglected mass outside is below ~1e-7 per cell.  Without this a coarse
        grid under-resolves sharp (high-SNR) posteriors and biases the Bayes
        factors towards models with broader posteriors.
    antenna : {detector: (F+, Fx)}, optional
        Antenna patterns at the source's sky position (and any polarisation
        angle: the free h+/hx amplitudes absorb it).  When given, the network
        is coherent: common h+ and hx amplitudes per mode, seen by each
        detector through its response (each detector's segment still starts
        at ``t0_gps + time_shift``).  Without it every detector has its own
        amplitudes.  The prior width then applies to the h+/hx amplitudes
        (key ``"plus_cross"`` of ``amp_sigma`` in the result).
    upsample : int
        The log-likelihood of each N is then interpolated (bicubic spline) onto
        a grid this many times finer, on which the evidence, credible regions
        and plots are computed (1 switches this off).

    Returns
    -------
    RemnantPosterior
        With one (possibly zoomed) grid per N.

    Examples
    --------
    >>> import numpy as np
    >>> from ringsearch.analysis.noise_model import toeplitz_noise
    >>> def toy(m, s, n):   # a made-up spectrum for the example only
    ...     return 16000.0 / m * (1 + 0.3 * s) * (1 - 0.02 * n), m * 6e-5 / (1 + 2 * n)
    >>> fr = np.linspace(0, 2048, 2049)
    >>> tn = toeplitz_noise(fr, np.full_like(fr, 1e-46), 4096.0, 300, f_low=0.0, f_high=2048.0)
    >>> s = DetectorSeries("H1", np.zeros(4096), 0.0, 4096.0)
    >>> post = remnant_posterior([s], [tn], 0.3, (50, 90), (0.1, 0.9), 1, (8, 8), modes=toy)
    >>> sorted(post.log10_bayes)
    ['1:0']
    """
    if len(data) == 0 or len(data) != len(noises):
        raise InputError("remnant_posterior needs one noise model per detector series.")
    mlo, mhi = mass_range
    if not (0 < mlo < mhi):
        raise InputError(f"the mass range {mlo}:{mhi} must be positive and increasing.")
    _check_spin_box(spin_range, use_table=modes is None)
    if max_overtones < 0:
        raise InputError(f"max_overtones={max_overtones} must be >= 0.")
    modes = modes or kerr_modes()
    masses = np.linspace(mlo, mhi, int(grid[0]))
    spins = np.linspace(spin_range[0], spin_range[1], int(grid[1]))
    warnings: list[str] = []
    sigmas: dict[str, float] = {}
    segments = []
    mm, ss = np.meshgrid(masses, spins, indexing="ij")
    f, tau = _grid_modes(modes, mm.ravel(), ss.ravel(), max_overtones)
    first = []
    for series, noise in zip(data, noises, strict=True):
        _check_segment_modes(series, noise, f, tau, warnings)
        y, t = series.segment(t0_gps, noise.n)
        yw = noise.whiten(y)
        stats = _grid_stats(yw, t, noise, f, tau, chunk)
        first.append(stats)
        if isinstance(amp_sigma, dict) and series.name in amp_sigma:
            sig = float(amp_sigma[series.name])
        elif amp_sigma is not None and not isinstance(amp_sigma, dict):
            sig = float(amp_sigma)
        else:
            fc, tc = modes(np.array([0.5 * (mlo + mhi)]), np.array([np.mean(spin_range)]), 0)
            unit = default_amp_sigma(series, noise, float(np.ravel(fc)[0]),
                                     float(np.ravel(tc)[0]), 1.0)
            gram, bvec = stats[0][:, :2, :2], stats[1][:, :2]
            rho0 = math.sqrt(max(0.0, float(np.max(np.einsum(
                "gi,gi->g", bvec, np.linalg.solve(gram, bvec[..., None])[..., 0])))))
            sig = unit * max(amp_prior_snr, 2.0 * rho0)
        if not (sig > 0 and math.isfinite(sig)):
            raise InputError(f"the amplitude prior width {sig} must be positive and finite.")
        sigmas[series.name] = sig
        segments.append((yw, t, noise, sig))
    fpc = None
    if antenna is not None:
        missing = [d.name for d in data if d.name not in antenna]
        if missing:
            raise InputError(f"antenna patterns are missing for detector(s) {missing}.")
        fpc = [tuple(map(float, antenna[d.name])) for d in data]
        if any(math.hypot(*fc) == 0 for fc in fpc):
            raise InputError("a detector has zero antenna response at this sky position.")
        # one prior width for the h+ and hx amplitudes: the widest per-detector width
        # referred to the polarisations through the detector's response |F|
        pol = max(sig / math.hypot(*fc)
                  for (_, _, _, sig), fc in zip(segments, fpc, strict=True))
        if isinstance(amp_sigma, dict) and "plus_cross" in amp_sigma:
            pol = float(amp_sigma["plus_cross"])
        elif amp_sigma is not None and not isinstance(amp_sigma, dict):
            pol = float(amp_sigma)
        sigmas = {"plus_cross": pol}

    def evaluate(ms: np.ndarray, sp: np.ndarray, nmax: int, stats_list=None) -> np.ndarray:
        if stats_list is None:
            mm, ss = np.meshgrid(ms, sp, indexing="ij")
            f, tau = _grid_modes(modes, mm.ravel(), ss.ravel(), nmax)
            stats_list = [_grid_stats(yw, t, noise, f, tau, chunk)
                          for yw, t, noise, _ in segments]
        if fpc is not None:
            ll = _ll_coherent(stats_list, fpc, sigmas["plus_cross"], nmax + 1)
        else:
            ll = 0.0
            for (_, _, _, sig), st in zip(segments, stats_list, strict=True):
                ll = ll + _ll_from_stats(*st, sig, nmax + 1)
        return ll.reshape(nmax + 1, len(ms), len(sp))

    full = evaluate(masses, spins, max_overtones, first)
    warnings.extend(_shrinkage_warnings(full, first, [s.name for s in data], sigmas, fpc))
    box = (mhi - mlo) * (spin_range[1] - spin_range[0])
    out_m, out_s, out_ll, out_frac = [], [], [], []
    for k in range(max_overtones + 1):
        ms, sp, ll, frac = masses, spins, full[k], 0.0
        for _ in range(int(refine)):
            # zoom onto the bulk of this N's posterior when it fills a small part of the grid
            p = np.exp(ll - ll.max())
            keep = p / p.sum() > 1e-7
            im = np.flatnonzero(keep.any(axis=1))
            js = np.flatnonzero(keep.any(axis=0))
            i0, i1 = max(im[0] - 1, 0), min(im[-1] + 1, len(ms) - 1)
            j0, j1 = max(js[0] - 1, 0), min(js[-1] + 1, len(sp) - 1)
            if (i1 - i0) > 0.6 * (len(ms) - 1) and (j1 - j0) > 0.6 * (len(sp) - 1):
                break
            ms = np.linspace(ms[i0], ms[i1], int(grid[0]))
            sp = np.linspace(sp[j0], sp[j1], int(grid[1]))
            ll = evaluate(ms, sp, k)[k]
            frac = math.log((ms[-1] - ms[0]) * (sp[-1] - sp[0]) / box)
        if upsample > 1 and len(ms) >= 4 and len(sp) >= 4:
            ms, sp, ll = _upsample(ms, sp, ll, int(upsample))
        out_m.append(ms)
        out_s.append(sp)
        out_ll.append(ll)
        out_frac.append(frac)
    return RemnantPosterior(masses=out_m, spins=out_s, log_likelihood=out_ll,
                            amp_sigma=sigmas, t0_gps=float(t0_gps),
                            detectors=[s.name for s in data], warnings=warnings,
                            log_box_fraction=out_frac)


#: Posterior-mode amplitudes beyond this many prior widths mean the prior shrinks the model.
SHRINKAGE_LIMIT = 2.0


def _shrinkage_warnings(full: np.ndarray, stats_list, names: Sequence[str],
                        sigmas: Mapping[str, float], fpc) -> list[str]:
    """Warn when the amplitude prior is too narrow for the N-overtone model's best fit.

    At the grid point of largest marginal likelihood of each N < N_max, the
    posterior-mode amplitudes of every detector (for a coherent network, the
    common h+/hx amplitudes) are compared with the prior width.  If one
    exceeds :data:`SHRINKAGE_LIMIT` widths, the prior pulls that model's fit
    (and its (mass, spin)) away from the data, and a model with one more
    nearly degenerate overtone can win by relieving the pull: the Bayes
    factor B(N+1:N) is then biased upwards.  This happens when overtones
    much louder than the fundamental interfere destructively with it, so
    that the fundamental-only SNR that sets the default width is small.
    """
    out = []
    for nov in range(full.shape[0] - 1):
        g = int(np.argmax(full[nov].ravel()))
        kk = 2 * (nov + 1)
        if fpc is not None:
            # network Gram matrix and projection of the common h+/hx amplitudes
            m = np.zeros((2 * kk, 2 * kk))
            b = np.zeros(2 * kk)
            for (gram, bvec, _), (fp, fc) in zip(stats_list, fpc, strict=True):
                gk, bk = gram[g, :kk, :kk], bvec[g, :kk]
                m += np.block([[fp * fp * gk, fp * fc * gk], [fp * fc * gk, fc * fc * gk]])
                b += np.concatenate([fp * bk, fc * bk])
            fits = [("the network", m, b, sigmas["plus_cross"])]
        else:
            fits = [(name, gram[g, :kk, :kk], bvec[g, :kk], sigmas[name])
                    for name, (gram, bvec, _) in zip(names, stats_list, strict=True)]
        worst, where = 0.0, ""
        for name, m, b, sig in fits:
            # posterior-mode amplitudes: directions the data do not constrain stay near
            # zero, so only amplitudes the data demand can reach several prior widths
            amap = np.linalg.solve(m + np.eye(len(b)) / sig**2, b)
            ratio = float(np.max(np.abs(amap))) / sig
            if ratio > worst:
                worst, where = ratio, name
        if worst > SHRINKAGE_LIMIT:
            out.append(f"N={nov}: the fitted amplitudes at the likelihood peak reach "
                       f"{worst:.1f} prior widths in {where}, so the amplitude prior shrinks "
                       f"this fit and B({nov + 1}:{nov}) is biased towards more overtones; "
                       "rerun with a wider amplitude prior (amp_sigma) to check.")
    return out


def _upsample(ms: np.ndarray, sp: np.ndarray, ll: np.ndarray, factor: int):
    """Bicubic-spline interpolation of the log-likelihood onto a ``factor`` times finer grid.

    The log-likelihood is close to quadratic on the scale of a cell, which a
    cubic spline reproduces, so this resolves posteriors narrower than the
    computed grid (high SNR, the thin mass-spin ridge) for the cost of an
    interpolation instead of ``factor**2`` more likelihood evaluations.
    """
    from scipy.interpolate import RectBivariateSpline

    spl = RectBivariateSpline(ms, sp, ll, kx=3, ky=3, s=0)
    fm = np.linspace(ms[0], ms[-1], factor * (len(ms) - 1) + 1)
    fsp = np.linspace(sp[0], sp[-1], factor * (len(sp) - 1) + 1)
    fine = spl(fm, fsp)
    # a spline may overshoot next to a sharp peak: never exceed the largest computed
    # value by more than the spread of one cell's neighbours allows
    cap = ll.max() + max(0.0, float(np.ptp(ll)) / max(len(ms), len(sp)))
    return fm, fsp, np.minimum(fine, cap)


def _grid_stats(yw: np.ndarray, t: np.ndarray, noise: ToeplitzNoise, f: np.ndarray,
                tau: np.ndarray, chunk: int) -> tuple[np.ndarray, np.ndarray, float]:
    """Whitened Gram matrices (G, 2K, 2K), projections (G, 2K) and ``-n/2 ln 2π - yᵀy/2``."""
    g, kmax = f.shape
    k2 = 2 * kmax
    gram = np.empty((g, k2, k2))
    bvec = np.empty((g, k2))
    step = max(1, chunk // k2)
    for s0 in range(0, g, step):
        sl = slice(s0, min(g, s0 + step))
        ng = sl.stop - sl.start
        x = damped_basis(t, f[sl], tau[sl])              # (n, ng, k2)
        xw = noise.whiten(x.reshape(len(t), ng * k2)).reshape(len(t), ng, k2)
        gram[sl] = np.einsum("ngi,ngj->gij", xw, xw, optimize=True)
        bvec[sl] = np.einsum("ngi,n->gi", xw, yw, optimize=True)
    base = -0.5 * len(yw) * math.log(2 * math.pi) - 0.5 * float(yw @ yw)
    return gram, bvec, base


def _ll_from_stats(gram: np.ndarray, bvec: np.ndarray, base: float, sig: float,
                   kmax: int) -> np.ndarray:
    """Marginal log-likelihood for N = 0..kmax-1 at every grid point: (kmax, G)."""
    ll = np.empty((kmax, gram.shape[0]))
    for nov in range(kmax):
        kk = 2 * (nov + 1)
        m = gram[:, :kk, :kk] + np.eye(kk) / sig**2
        c = np.linalg.cholesky(m)
        z = np.linalg.solve(c, bvec[:, :kk, None])[..., 0]
        ll[nov] = (base + 0.5 * np.sum(z**2, axis=1)
                   - np.sum(np.log(np.diagonal(c, axis1=1, axis2=2)), axis=1)
                   - kk * math.log(sig))
    return ll


def _ll_coherent(stats_list, fpc, sig: float, kmax: int) -> np.ndarray:
    """Coherent network: shared h+ and hx amplitudes seen through each detector's (F+, Fx).

    Detector d's whitened design is ``[F+_d A_d, Fx_d A_d]``, so the network
    Gram matrix and projection are sums of per-detector blocks; the amplitude
    vector is (h+ amplitudes, hx amplitudes), 2 x 2K reals with prior N(0, σ²).
    """
    g = stats_list[0][0].shape[0]
    ll = np.empty((kmax, g))
    base = sum(st[2] for st in stats_list)
    for nov in range(kmax):
        kk = 2 * (nov + 1)
        m = np.zeros((g, 2 * kk, 2 * kk))
        b = np.zeros((g, 2 * kk))
        for (gram, bvec, _), (fp, fc) in zip(stats_list, fpc, strict=True):
            gk, bk = gram[:, :kk, :kk], bvec[:, :kk]
            m[:, :kk, :kk] += fp * fp * gk
            m[:, :kk, kk:] += fp * fc * gk
            m[:, kk:, :kk] += fp * fc * gk
            m[:, kk:, kk:] += fc * fc * gk
            b[:, :kk] += fp * bk
            b[:, kk:] += fc * bk
        m += np.eye(2 * kk) / sig**2
        c = np.linalg.cholesky(m)
        z = np.linalg.solve(c, b[..., None])[..., 0]
        ll[nov] = (base + 0.5 * np.sum(z**2, axis=1)
                   - np.sum(np.log(np.diagonal(c, axis1=1, axis2=2)), axis=1)
                   - 2 * kk * math.log(sig))
    return ll


def _check_segment_modes(series: DetectorSeries, noise: ToeplitzNoise, f: np.ndarray,
                         tau: np.ndarray, warnings: list[str]) -> None:
    """Errors and warnings for segments that cannot hold or resolve the grid's modes."""
    dt = 1.0 / noise.sample_rate
    tau_max = float(tau[:, 0].max())
    tau_min = float(tau[:, 0].min())
    if tau_min < dt:
        # its template is (numerically) a single sample: the fits are singular
        raise InputError(
            f"the fundamental mode decays within one sample at the grid's low-mass end (tau "
            f"{tau_min * 1e3:.3g} ms < {dt * 1e3:.3g} ms); raise the lower end of the mass range.")
    if noise.duration < 3.0 * tau_max:
        raise InputError(
            f"the {noise.duration * 1e3:.1f} ms segment is shorter than 3 damping times of the "
            f"slowest mode on the grid ({tau_max * 1e3:.2f} ms); use a longer duration.")
    kmax = f.shape[1]
    if 2 * kmax > noise.n // 4:
        raise InputError(f"{kmax} modes cannot be constrained by a {noise.n}-sample segment.")
    for n in range(1, kmax):
        if np.median(tau[:, n]) < 2 * dt:
            warnings.append(f"{series.name}: overtone n={n} decays within two samples "
                            f"(median tau {np.median(tau[:, n]) * 1e3:.3f} ms); it is "
                            "unconstrained and its Bayes factor reflects the prior only.")
    if float(f.max()) > noise.f_high or float(f.min()) < noise.f_low:
        warnings.append(f"{series.name}: some mode frequencies on the grid "
                        f"({f.min():.0f}-{f.max():.0f} Hz) lie outside the analysis band "
                        f"[{noise.f_low:.0f}, {noise.f_high:.0f}] Hz and carry little weight.")


def overtone_evidence(data: Sequence[DetectorSeries], noises: Sequence[ToeplitzNoise],
                      t0_gps: float, mass_range: tuple[float, float],
                      spin_range: tuple[float, float], max_overtones: int = 2,
                      grid: tuple[int, int] = (20, 20), threshold: float = 0.5,
                      amp_sigma: float | dict | None = None, amp_prior_snr: float = 10.0,
                      modes: ModeFunc | None = None, refine: int = 2,
                      antenna: Mapping[str, tuple[float, float]] | None = None) -> dict:
    """Compact overtone-count evidence for one candidate (for campaigns).

    Arguments as for :func:`remnant_posterior` (``antenna`` makes the network
    coherent).

    Returns
    -------
    dict
        ``log10_bayes`` ({"N:N-1": float}), ``log_evidence`` (list, natural
        log), ``supported_overtones`` (int, see
        :meth:`RemnantPosterior.supported_overtones`), ``mass``/``spin``
        (median and 90% interval for the supported N), ``amp_sigma`` and
        ``warnings``.

    Notes
    -----
    Calibration (measured; ``tests/test_analysis_calibration.py``).  A
    Bayes factor above ``threshold`` is not a false-alarm probability.  For
    data holding exactly N = 1 overtone the rate of ``log10 B(2:1) > 0.5`` is:

    * 1.1% (9/800; 90% interval 0.6-1.9%) for single-detector exact-model
      (2,2,0)+(2,2,1) injections at SNR 30, overtone ratio U(0.5, 1.5);
    * 0.7% (2/300) for two-detector Kerr injections at network SNR 35
      (prograde + mirror modes, spheroidal harmonics, isotropic inclination,
      band-passed strain, independent amplitudes), overtone ratio
      U(0.5, 1.5); 0.3% (1/300) with the coherent network; 1.0% (3/300) for
      ratio U(1, 2), of which 3% (3/93) among the injections whose first
      overtone is itself clearly detected (log10 B(1:0) > 2);
    * about 2% (2/95) at network SNR 100, ratio U(1, 2).

    The noise-free value of ``log10 B(2:1)`` for such data is only -0.2 to
    -0.8: the (2,2,2) amplitude is nearly degenerate with (2,2,0) and (2,2,1)
    over a few samples, so its Occam penalty is small and noise of order one
    in ln B crosses a threshold of 0.5 now and then.  What is *not* a cause:
    mirror modes and spheroidal-harmonic mixing (in one detector a (2,2,n)
    mirror mode oscillates at the same f and tau, so the per-detector model
    represents a non-precessing Kerr ringdown exactly; the coherent model's
    free h+/hx amplitudes do too), the band-pass of the abrupt start (residual
    chi^2 ~ 1e-6 SNR^2 at the true remnant), or the grid (15 x 15 and 30 x 30
    agree to 0.05 in log10 B).

    The amplitude prior width matters, and is the one systematic found.  The
    default width scales with the SNR of the fundamental mode alone; when a
    loud overtone interferes destructively with the fundamental (overtone
    about twice the fundamental at the start, relative phase near pi) that
    SNR is small, the prior shrinks the N-overtone amplitudes, and N+1
    nearly degenerate modes win by relieving the shrinkage: noise-free exact
    N = 1 data then give log10 B(2:1) from about 0 up to +0.6 (1 of 67
    one-overtone injections of ``injections/overtones.toml``; in noise that
    injection exceeded 0.5 in 73% of draws).  The analysis detects this and
    adds a warning ("... prior widths ...") when, at the likelihood peak of
    some N < N_max, a posterior-mode amplitude exceeds
    :data:`SHRINKAGE_LIMIT` prior widths; rerunning with a wider
    ``amp_sigma`` (ten times) restores the Occam penalty (log10 B(2:1)
    about -1.8).  Noise-free on that campaign's injections the warning fired
    for 0 of 67 pure, 2 of 67 one-overtone and 4 of 66 two-overtone signals.
    A fixed wide prior is not a free fix: three times the injected (2,2,0)
    strain amplitude gave 0/300 false N = 2 supports at SNR 35 but cut the
    fraction of one-overtone injections supporting N >= 1 from 49% to 24%.
    Higher (l, m) modes such as (3,3,0) or (2,1,0) are *not* in the model;
    data containing them can favour extra (2,2,n) terms systematically.

    Examples
    --------
    >>> import numpy as np
    >>> from ringsearch.analysis.noise_model import toeplitz_noise
    >>> def toy(m, s, n):   # a made-up spectrum for the example only
    ...     return 16000.0 / m * (1 + 0.3 * s) * (1 - 0.02 * n), m * 6e-5 / (1 + 2 * n)
    >>> fr = np.linspace(0, 2048, 2049)
    >>> tn = toeplitz_noise(fr, np.full_like(fr, 1e-46), 4096.0, 300, f_low=0.0, f_high=2048.0)
    >>> s = DetectorSeries("H1", np.zeros(4096), 0.0, 4096.0)
    >>> overtone_evidence([s], [tn], 0.3, (50, 90), (0.1, 0.9), 1, modes=toy)["supported_overtones"]
    0
    """
    post = remnant_posterior(data, noises, t0_gps, mass_range, spin_range, max_overtones, grid,
                             amp_sigma, amp_prior_snr, modes, refine=refine, antenna=antenna)
    nsup = post.supported_overtones(threshold)
    summ = post.summary(nsup)
    return {"log10_bayes": post.log10_bayes, "log_evidence": post.log_evidence.tolist(),
            "supported_overtones": nsup, "mass": summ["mass"], "spin": summ["spin"],
            "amp_sigma": post.amp_sigma,
            "warnings": list(post.warnings) + post.resolution_warnings(nsup)}
