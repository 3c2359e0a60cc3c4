"""Remnant (mass, spin) posterior and the evidence for each overtone count.

For K = N+1 Kerr modes (l = m = 2, n = 0..N) at a grid point (mass, spin) the
data of one detector are ``y = A a + noise`` in whitened units (unit-variance
white noise), with ``A`` the whitened design matrix of
:func:`ringsearch.analysis.fits.damped_basis` and ``a`` the 2K real
amplitudes.

**The amplitude prior** is fixed before the data are seen and does not
favour parts of the (mass, spin) box by template norm: it is Zellner's
g-prior (Zellner 1986, in *Bayesian Inference and Decision Techniques*,
eds. Goel & Zellner, pp. 233-243), ``a ~ N(0, g (AᵀA)⁻¹)``, i.e. the whitened
signal ``A a`` is isotropic in the model's k-dimensional signal space with
variance g per direction.  Its scale is the expected optimal network SNR
``ρ̄ = sqrt(g k)`` (the same for every N: an extra overtone does not promise a
louder signal, it shares the same loudness among more directions), and ρ̄ is
marginalised with a log-uniform hyperprior on :data:`SNR_PRIOR`, a mixture of
g-priors in the manner of Liang et al. (2008), JASA 103, 410.  Per scale the
amplitudes integrate out in closed form:

``ln p(y | g) = -n/2 ln 2π - ½ yᵀy + ½ g/(1+g) ρ² - (k/2) ln(1+g)``,

with ``ρ² = bᵀ(AᵀA)⁻¹b``, ``b = Aᵀy`` the least-squares (projection) SNR²,
because ``y ~ N(0, I + g P)`` with P the projection onto the columns of A.
The scale is then integrated on a 1-D grid in ln ρ̄ (:func:`log_scale_marginal`).
No template norm enters, only the fit's SNR and the number of amplitudes, so
the (mass, spin) posterior at fixed N is ``∝ ∫ p(ρ̄) (1+g)^(-k/2)
exp(½ g/(1+g) ρ²(M, χ)) dρ̄``.

A network is analysed in one of two ways.  By default, with common (mass,
spin) but independent amplitudes in each detector (each detector's segment
starts at t0 plus its arrival delay): the detectors' projections add, and the
prior's k counts every detector's amplitudes; this needs no sky position and
is conservative: it ignores the amplitude and phase relations between
detectors.  Given antenna patterns for a sky position, the network is
coherent: common h+ and hx amplitudes per mode, seen through each detector's
(F+, Fx) — the Gram matrices and projections of the detectors add in
4K x 4K blocks, and the g-prior is taken in that network metric.

The prior is uniform in the (mass, spin) box, so the evidence of N overtones
is the grid average of the marginal likelihood; ``log10_bayes["N:N-1"]`` is
the log10 ratio of consecutive evidences, and with equal prior odds the
evidences weigh the N in the model-averaged remnant
(:meth:`RemnantPosterior.averaged`).  The coverage of the intervals over this
prior is measured by ``scripts/calibrate.py`` (``make calibrate``) and by
``tests/test_analysis_coverage.py``.
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

__all__ = ["marginal_log_likelihood", "log_scale_marginal", "projection_snr2",
           "RemnantPosterior", "remnant_posterior", "overtone_evidence", "credible_interval",
           "hpd_levels", "SNR_PRIOR"]

#: Signature of a QNM provider: (mass, spin, n) -> (f_hz, tau_s), vectorised.
ModeFunc = Callable[[np.ndarray, np.ndarray, int], tuple[np.ndarray, np.ndarray]]

LN10 = math.log(10.0)

#: Default range of the prior's scale, the expected optimal network SNR of the
#: ringdown (log-uniform).  Wide enough for any ringdown a search finds (from
#: below its threshold to the loudest signals expected of current detectors);
#: the posteriors barely depend on it, the Bayes factors only through the
#: logarithm of its width where the data's SNR lies inside it.
SNR_PRIOR: tuple[float, float] = (4.0, 200.0)

#: Points of the grid in ln(scale) on which the scale is marginalised
#: (trapezoid rule; the integrand is smooth on a scale of order 1 in ln g).
SCALE_POINTS: int = 64

#: Relative eigenvalue below which a direction of the Gram matrix counts as absent
#: (e.g. the hx amplitudes of a detector that only sees h+).
RANK_TOL: float = 1e-10


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


def _check_snr_prior(snr_prior: tuple[float, float]) -> tuple[float, float]:
    try:
        lo, hi = (float(x) for x in snr_prior)
    except (TypeError, ValueError):
        raise InputError(f"the SNR prior {snr_prior!r} must be two numbers lo:hi.") from None
    if not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo < hi):
        raise InputError(f"the SNR prior {lo}:{hi} must be two positive, increasing numbers.")
    return lo, hi


def projection_snr2(gram: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Least-squares SNR² ``bᵀG⁻¹b`` and the rank of G, batched over leading axes.

    Directions of G with eigenvalues below :data:`RANK_TOL` times the largest
    are dropped (the data cannot see them, and the prior spreads nothing
    there), so the result stays finite for singular G.

    Examples
    --------
    >>> g = np.array([[[2.0, 0.0], [0.0, 0.0]]]); b = np.array([[2.0, 0.0]])
    >>> projection_snr2(g, b)
    (array([2.]), array([1]))
    """
    lam, vec = np.linalg.eigh(np.asarray(gram, float))
    keep = lam > RANK_TOL * np.max(lam, axis=-1, keepdims=True)
    proj = np.einsum("...ij,...i->...j", vec, np.asarray(b, float))
    rho2 = np.sum(np.where(keep, proj**2 / np.where(keep, lam, 1.0), 0.0), axis=-1)
    return rho2, keep.sum(axis=-1)


def log_scale_marginal(rho2: np.ndarray, k: np.ndarray | int,
                       snr_prior: tuple[float, float] = SNR_PRIOR,
                       n_points: int = SCALE_POINTS) -> np.ndarray:
    """``ln ∫ p(ρ̄) (1+g)^(-k/2) exp(½ g/(1+g) ρ²) dρ̄`` with ``g = ρ̄²/k``.

    The likelihood ratio of the g-prior mixture against noise alone, for a fit
    of least-squares SNR² ``rho2`` with ``k`` amplitudes; ρ̄ (the expected
    optimal SNR) is log-uniform on ``snr_prior``, integrated by the trapezoid
    rule on ``n_points`` in ln ρ̄.

    Examples
    --------
    >>> float(log_scale_marginal(np.array(0.0), 2, (10.0, 10.0 + 1e-9), 2))  # (1+g)^-1
    ... # doctest: +ELLIPSIS
    -3.93...
    """
    lo, hi = _check_snr_prior(snr_prior)
    rho2 = np.asarray(rho2, float)
    k = np.maximum(np.asarray(k, float), 1.0)
    u = np.linspace(math.log(lo), math.log(hi), int(n_points))
    w = np.full(u.size, 1.0 / max(u.size - 1, 1))  # trapezoid weights of a unit-mass density
    w[[0, -1]] *= 0.5
    g = np.exp(2 * u)[(...,) + (None,) * rho2.ndim] / k       # (n_points, *shape)
    terms = -0.5 * k * np.log1p(g) + 0.5 * (g / (1 + g)) * rho2
    return logsumexp(terms, axis=0, b=w[(...,) + (None,) * rho2.ndim])


def marginal_log_likelihood(yw: np.ndarray, aw: np.ndarray,
                            snr_prior: tuple[float, float] = SNR_PRIOR) -> float:
    """Log-density of whitened data with the amplitudes and their scale integrated out.

    Parameters
    ----------
    yw : array, shape (n,)
        Whitened data (unit-variance white noise under the noise model).
    aw : array, shape (n, k)
        Whitened design matrix.
    snr_prior : (lo, hi)
        Range of the log-uniform prior on the expected optimal SNR (see the
        module's notes).

    Returns
    -------
    float
        ``ln ∫∫ N(yw; aw a, I) N(a; 0, g (awᵀaw)⁻¹) p(ρ̄) da dρ̄``, ``g = ρ̄²/k``.

    Examples
    --------
    >>> import numpy as np
    >>> y = np.array([0.3, -0.1, 0.2]); a = np.array([[1.0], [0.5], [0.0]])
    >>> noise_only = -0.5 * (y @ y + 3 * np.log(2 * np.pi))
    >>> bool(marginal_log_likelihood(y, a) < noise_only)   # no signal: the Occam factor
    True
    """
    yw = np.asarray(yw, float)
    aw = np.asarray(aw, float)
    rho2, rank = projection_snr2(aw.T @ aw, aw.T @ yw)
    base = -0.5 * len(yw) * math.log(2 * math.pi) - 0.5 * float(yw @ yw)
    return float(base + log_scale_marginal(rho2, rank, snr_prior))


#: A posterior whose 90% region covers more than this fraction of the box is
#: reported as dominated by its prior.
PRIOR_DOMINATED_AREA: float = 0.5

#: Posterior mass on the box's edge cells above which it is reported as railed.
RAILED_EDGE_MASS: float = 0.05


@dataclass
class RemnantPosterior:
    """Grid posterior over (mass, spin) for each overtone count, and the evidences.

    Attributes
    ----------
    masses, spins : list of arrays
        Per N, the grid (detector-frame solar masses; spin), possibly zoomed
        onto the posterior's bulk.
    log_likelihood : list of arrays
        Per N, the marginal log-likelihood on the grid (amplitudes and their
        scale integrated out), shape (n_mass, n_spin).
    snr_prior : (lo, hi)
        Range of the log-uniform prior on the expected optimal network SNR.
    t0_gps : float
        Start time analysed (reference detector).
    detectors : list of str
    warnings : list of str
    log_box_fraction : list of float
        Per N, ln(grid area / box area) (the zoom keeps the whole box's prior).
    box : ((mass_lo, mass_hi), (spin_lo, spin_hi))
        The prior box.
    best_snr : list of float
        Per N, the largest least-squares network SNR on the grid.
    """

    masses: list[np.ndarray]
    spins: list[np.ndarray]
    log_likelihood: list[np.ndarray]
    snr_prior: tuple[float, float]
    t0_gps: float
    detectors: list[str]
    warnings: list[str] = field(default_factory=list)
    log_box_fraction: list[float] = field(default_factory=list)
    box: tuple = ((0.0, 1.0), (0.0, 1.0))
    best_snr: list[float] = field(default_factory=list)

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

    def model_probabilities(self) -> np.ndarray:
        """Posterior probability of each N with equal prior odds (evidences normalised)."""
        z = self.log_evidence
        p = np.exp(z - z.max())
        return p / p.sum()

    def supported_overtones(self, threshold: float = 0.5) -> int:
        """Largest N reached by adding overtones while ``log10 B(N:N-1) > threshold``.

        The default 0.5 is Jeffreys' "substantial" evidence (# common practice);
        its false-claim and missed-overtone rates are measured by
        ``scripts/calibrate.py``.
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

    def marginal(self, n_overtones: int, axis: str, x: np.ndarray) -> np.ndarray:
        """The marginal density of ``axis`` ("mass" or "spin") for N at the points ``x``
        (per unit of x; zero outside N's grid)."""
        p = self.posterior(n_overtones)
        grid, w = ((self.masses[n_overtones], p.sum(axis=1)) if axis == "mass"
                   else (self.spins[n_overtones], p.sum(axis=0)))
        step = float(grid[1] - grid[0]) if len(grid) > 1 else 1.0
        dens = np.interp(x, grid, w / step, left=0.0, right=0.0)
        return dens

    def averaged(self, prob: float = 0.9, points: int = 4001) -> dict:
        """The remnant averaged over N with the evidences as weights (equal prior odds).

        Returns ``mass`` and ``spin`` (median and equal-tailed ``prob`` interval
        of the mixture of the N posteriors) and ``weights`` (per N).
        """
        w = self.model_probabilities()
        out: dict = {"weights": {str(n): float(v) for n, v in enumerate(w)}}
        for axis, (lo, hi) in zip(("mass", "spin"), self.box, strict=True):
            x = np.linspace(lo, hi, points)
            mix = sum(wn * self.marginal(n, axis, x) for n, wn in enumerate(w))
            out[axis] = credible_interval(x, mix, prob)
        return out

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

    def region_fraction(self, n_overtones: int, prob: float = 0.9) -> float:
        """Fraction of the prior box covered by N's highest-density region ``prob``."""
        p = self.posterior(n_overtones)
        level = hpd_levels(p, [prob])[0]
        frac = self.log_box_fraction[n_overtones] if self.log_box_fraction else 0.0
        return float(np.mean(p >= level) * math.exp(frac))

    def resolution_warnings(self, n_overtones: int) -> list[str]:
        """Warnings when the grid does not resolve the posterior, the box truncates it
        (railed) or the prior dominates it."""
        p = self.posterior(n_overtones)
        out = []
        if p.max() > 0.1:
            out.append(f"N={n_overtones}: one grid cell holds {100 * p.max():.0f}% of the "
                       "posterior; the grid does not resolve it (narrow the box or refine).")
        edge = p[0].sum() + p[-1].sum() + p[:, 0].sum() + p[:, -1].sum()
        if edge > RAILED_EDGE_MASS and (not self.log_box_fraction
                                        or self.log_box_fraction[n_overtones] == 0):
            out.append(f"N={n_overtones}: {100 * edge:.0f}% of the posterior lies on the edge "
                       "of the (mass, spin) box (railed): the box truncates it, so the "
                       "intervals are bounded by the box, not by the data.")
        area = self.region_fraction(n_overtones)
        if area > PRIOR_DOMINATED_AREA:
            out.append(f"N={n_overtones}: the 90% region covers {100 * area:.0f}% of the "
                       "(mass, spin) box, so the posterior is dominated by the prior: the "
                       "intervals say more about the box than about the data.")
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
                      grid: tuple[int, int] = (40, 40),
                      snr_prior: tuple[float, float] = SNR_PRIOR,
                      modes: ModeFunc | None = None, chunk: int = 4096, refine: int = 2,
                      upsample: int = 6,
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
    snr_prior : (lo, hi)
        Range of the log-uniform prior on the expected optimal network SNR,
        the scale of the g-prior on the amplitudes (see the module's notes);
        it is fixed before the data are seen.  A warning says when the data's
        SNR lies outside it.
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
        amplitudes.
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
    snr_prior = _check_snr_prior(snr_prior)
    if max_overtones < 0:
        raise InputError(f"max_overtones={max_overtones} must be >= 0.")
    modes = modes or kerr_modes()
    masses = np.linspace(mlo, mhi, int(grid[0]))
    spins = np.linspace(spin_range[0], spin_range[1], int(grid[1]))
    warnings: list[str] = []
    segments = []
    mm, ss = np.meshgrid(masses, spins, indexing="ij")
    f, tau = _grid_modes(modes, mm.ravel(), ss.ravel(), max_overtones)
    first = []
    for series, noise in zip(data, noises, strict=True):
        _check_segment_modes(series, noise, f, tau, warnings)
        y, t = series.segment(t0_gps, noise.n)
        yw = noise.whiten(y)
        first.append(_grid_stats(yw, t, noise, f, tau, chunk))
        segments.append((yw, t, noise))
    fpc = None
    if antenna is not None:
        missing = [d.name for d in data if d.name not in antenna]
        if missing:
            raise InputError(f"antenna patterns are missing for detector(s) {missing}.")
        fpc = [tuple(map(float, antenna[d.name])) for d in data]
        if any(math.hypot(*fc) == 0 for fc in fpc):
            raise InputError("a detector has zero antenna response at this sky position.")
    kmax = max_overtones + 1
    best = np.zeros(kmax)

    def evaluate(ms: np.ndarray, sp: np.ndarray, nmax: int, stats_list=None) -> np.ndarray:
        if stats_list is None:
            mm, ss = np.meshgrid(ms, sp, indexing="ij")
            f, tau = _grid_modes(modes, mm.ravel(), ss.ravel(), nmax)
            stats_list = [_grid_stats(yw, t, noise, f, tau, chunk) for yw, t, noise in segments]
        rho2, rank = _network_snr2(stats_list, fpc, nmax + 1)
        np.maximum(best[:nmax + 1], np.sqrt(rho2.max(axis=1)), out=best[:nmax + 1])
        base = sum(st[2] for st in stats_list)
        ll = base + log_scale_marginal(rho2, rank, snr_prior)
        return ll.reshape(nmax + 1, len(ms), len(sp))

    full = evaluate(masses, spins, max_overtones, first)
    top = float(best.max())
    if top > snr_prior[1]:
        warnings.append(f"the data's least-squares SNR ({top:.0f}) exceeds the SNR prior's "
                        f"upper end ({snr_prior[1]:g}); the Bayes factors then penalise "
                        "overtones less than a prior covering it would.")
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
                            snr_prior=snr_prior, t0_gps=float(t0_gps),
                            detectors=[s.name for s in data], warnings=warnings,
                            log_box_fraction=out_frac,
                            box=((float(mlo), float(mhi)),
                                 (float(spin_range[0]), float(spin_range[1]))),
                            best_snr=[float(x) for x in best])


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


def _network_snr2(stats_list, fpc, kmax: int) -> tuple[np.ndarray, np.ndarray]:
    """Network least-squares SNR² and number of amplitudes for N = 0..kmax-1: (kmax, G) each.

    Independent amplitudes (``fpc`` None): the detectors' SNR² and amplitude
    counts add.  Coherent: shared h+ and hx amplitudes seen through each
    detector's (F+, Fx), so detector d's whitened design is ``[F+_d A_d,
    Fx_d A_d]`` and the network Gram matrix and projection are sums of
    per-detector blocks (amplitude vector: h+ amplitudes, then hx).
    """
    g = stats_list[0][0].shape[0]
    rho2 = np.zeros((kmax, g))
    rank = np.zeros((kmax, g), dtype=np.int64)
    for nov in range(kmax):
        kk = 2 * (nov + 1)
        if fpc is None:
            for gram, bvec, _ in stats_list:
                r2, rk = projection_snr2(gram[:, :kk, :kk], bvec[:, :kk])
                rho2[nov] += r2
                rank[nov] += rk
            continue
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
        rho2[nov], rank[nov] = projection_snr2(m, b)
    return rho2, rank


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
                      snr_prior: tuple[float, float] = SNR_PRIOR,
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
        (median and 90% interval for the supported N), ``averaged`` (the
        remnant averaged over N, :meth:`RemnantPosterior.averaged`),
        ``snr_prior`` and ``warnings``.

    Notes
    -----
    A Bayes factor above ``threshold`` is not a false-alarm probability.  The
    rates at which the default threshold claims an overtone the data do not
    hold, and misses one they do, are measured over the prior by
    ``scripts/calibrate.py`` (README, "Overtone analysis"); so is the coverage
    of the intervals.  Higher (l, m) modes such as (3,3,0) or (2,1,0) are not
    in the model; data containing them can favour extra (2,2,n) terms.

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
                             snr_prior, modes, refine=refine, antenna=antenna)
    nsup = post.supported_overtones(threshold)
    summ = post.summary(nsup)
    return {"log10_bayes": post.log10_bayes, "log_evidence": post.log_evidence.tolist(),
            "supported_overtones": nsup, "mass": summ["mass"], "spin": summ["spin"],
            "averaged": post.averaged(), "snr_prior": list(post.snr_prior),
            "warnings": list(post.warnings) + post.resolution_warnings(nsup)}
