"""Template groups sharing a few correlations, with a bound on every member's SNR.

Neighbouring templates of a dense bank span nearly the same space: 24
two-overtone templates (144 basis functions) of ``injections/target.toml`` lie
within 1 % (in whitened amplitude) of a space of about 16 dimensions.  So
instead of correlating the data with every template's basis, the full-series
filter correlates it with an orthonormal basis of each group's *principal*
space and bounds what the rest could add.

For a group with whitened-orthonormal principal basis B (R functions) and
the rest D of its span, a member's projection coordinates are
``y = A_B^T (B^T x) + A_D^T (D^T x)`` with ``[A_B; A_D]`` orthonormal, so

    rho = |y| <= |b| + eps |d|,   b = B^T x,   d = D^T x,

where ``eps`` is the largest singular value of any member's ``A_D``: the
fraction of its whitened amplitude outside the principal space, at most
:data:`GROUP_RESIDUAL`.  ``|d|`` is not computed (that would cost the
correlations saved); it is bounded instead by :func:`residual_reach`: the
norm a chi-squared variable of ``rank - R`` degrees of freedom exceeds with
probability :data:`MISS_PROBABILITY` (Gaussian noise), plus the excess of
the whitened data's energy near the start time over its Gaussian value at
that probability (loud transients, whose whole amplitude could lie in D).
Wherever ``|b| + eps |d|_max`` reaches the threshold, every member's SNR is
computed exactly, by direct products of the data with its basis; elsewhere
no member reaches it unless both bounds fail.  The peaks found are those of
the per-template filter, and the tests check that they are, on Gaussian
noise with injections and on open data.  The gain is the ratio of basis
functions to principal functions (9 on the target bank) less the exact
evaluations.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.fft

from ringsearch.search.templates import basis_waveforms, template_samples

#: Largest fraction of any member's whitened amplitude left outside its
#: group's principal space.  The bound's slack is ``eps`` times the residual's
#: reach (about 12 in Gaussian noise), so 0.01 lowers the threshold at which
#: members are evaluated by about 0.12 in SNR.
GROUP_RESIDUAL: float = 0.01

#: Templates per group (neighbours in log frequency and log damping time).
#: Larger groups need fewer principal functions per template but more of them
#: per group, so their bound is reached more often.  Filter CPU time on 64 s
#: of design noise at 2048 Hz against the per-template single-precision
#: filter (10.3 s for the 1983 two-overtone templates of the target bank,
#: 1.05 s for its 516 one-mode templates), by group size 16/24/32/48/64:
#: 2.58/1.92/1.69/2.06/2.26 s (N = 2) and 1.22/0.86/1.18/2.02/2.27 s (N = 0).
GROUP_SIZE: int = 24

#: Cost of one correlation function per start time (FFT) over that of one
#: multiply-add of the exact evaluations, measured on this project's
#: development machine (about 9 ns against 0.1 ns): the cost model of
#: :func:`worth_grouping`.
FFT_OVER_PRODUCT: float = 90.0

#: Relative allowance added to the bound for single-precision correlations.
BOUND_SLACK: float = 1e-3

#: Probability per group and start time that the data's norm in a group's
#: residual space exceeds its bound in Gaussian noise: about 5 (group, start
#: time) pairs in a year of one detector's 2048 Hz data with the target bank's
#: 83 groups, and a peak is missed only if a member is near the threshold
#: there as well (a fraction of about 1e-3 of pairs).
MISS_PROBABILITY: float = 1e-12


@dataclass
class TemplateGroups:
    """Groups of templates, each with the principal basis of its span (one detector).

    ``members``: template indices per group; ``basis``: per group an
    (R, L) array of raw sampled functions whose correlations with the doubly
    whitened data are orthonormal coordinates ``b``; ``eps``: per group the
    largest member residual outside that space; ``length``: per group the
    samples L of its longest member; ``residual_dof``: per group the
    dimensions of its span outside the principal space.
    """

    members: list[np.ndarray]
    basis: list[np.ndarray]
    eps: np.ndarray
    length: np.ndarray
    residual_dof: np.ndarray

    def __len__(self) -> int:
        return len(self.members)

    @property
    def n_functions(self) -> int:
        """Principal functions of all groups: the correlations the filter computes."""
        return int(sum(b.shape[0] for b in self.basis))


def neighbour_groups(f_hz: np.ndarray, tau_s: np.ndarray, ok: np.ndarray,
                     size: int = GROUP_SIZE) -> list[np.ndarray]:
    """Accepted templates in groups of about ``size`` neighbours.

    Strips in the log frequency of the first mode, each sorted by its log
    damping time, cut into runs of ``size``.

    Examples
    --------
    >>> f = np.array([[100.0], [101.0], [300.0], [302.0]])
    >>> tau = np.array([[0.004], [0.004], [0.002], [0.002]])
    >>> [g.tolist() for g in neighbour_groups(f, tau, np.ones(4, bool), size=2)]
    [[2, 3], [0, 1]]
    """
    if size < 1:
        raise ValueError(f"group size must be at least 1, got {size}.")
    good = np.flatnonzero(np.asarray(ok, bool))
    if good.size == 0:
        return []
    lf = np.log(np.asarray(f_hz, float)[good, 0])
    lt = np.log(np.asarray(tau_s, float)[good, 0])
    order = good[np.argsort(lf, kind="stable")]
    n_strips = max(1, int(round(np.sqrt(good.size / size))))
    groups: list[np.ndarray] = []
    for strip in np.array_split(order, n_strips):
        strip = strip[np.argsort(lt[np.searchsorted(good, strip)], kind="stable")]
        groups += [strip[i:i + size] for i in range(0, strip.size, size)]
    return groups


def principal_rank(coords: np.ndarray, k2: int, eps: float) -> tuple[int, float]:
    """Smallest R whose leading space leaves every member at most ``eps`` outside.

    ``coords`` (G k2, rank) are the members' basis functions in the group's
    orthonormal eigenbasis (columns in decreasing eigenvalue).  Returns R and
    the largest member residual (spectral norm) it leaves.

    Examples
    --------
    >>> principal_rank(np.eye(4), 2, 0.1)
    (4, 0.0)
    """
    n, rank = coords.shape
    g = n // k2
    a = coords.reshape(g, k2, rank)
    # residual Gram blocks of every member for every R: sums over the trailing columns
    outer = np.einsum("gir,gjr->rgij", a, a)
    tail = np.concatenate([np.cumsum(outer[::-1], axis=0)[::-1],
                           np.zeros((1, g, k2, k2))])  # tail[R] = sum over r >= R

    def worst(r: int) -> float:
        return float(np.linalg.eigvalsh(tail[r])[..., -1].max())

    # the worst residual falls as R grows (each added direction can only shrink a
    # member's residual): bisect for the smallest R within eps
    lo, hi = 0, rank  # worst(rank) = 0
    while lo < hi:
        mid = (lo + hi) // 2
        if worst(mid) <= eps * eps:
            hi = mid
        else:
            lo = mid + 1
    return lo, float(np.sqrt(max(worst(lo), 0.0)))


def template_groups(f_hz: np.ndarray, tau_s: np.ndarray, grams: Any, response: Any,
                    sample_rate: float, pad: int, size: int = GROUP_SIZE,
                    eps: float = GROUP_RESIDUAL) -> TemplateGroups:
    """Each group's principal basis in one detector's whitened metric.

    ``grams`` are the templates' factored Gram matrices and ``response(n)``
    the data's filter response on the rfft grid of n samples, as for
    :func:`ringsearch.search.templates.template_grams` (whose Toeplitz form of
    the whitening's autocorrelation gives the inner products here too).

    Examples
    --------
    >>> from ringsearch.search.templates import template_grams
    >>> f, tau = np.array([[250.0], [252.0]]), np.array([[0.004], [0.004]])
    >>> flat = lambda n: np.ones(n // 2 + 1)
    >>> g = template_groups(f, tau, template_grams(f, tau, flat, 4096.0, 8), flat,
    ...                     4096.0, 8)
    >>> len(g), g.basis[0].shape[0] <= 4
    (1, True)
    """
    from scipy.linalg import toeplitz

    from ringsearch.search.templates import local_grid

    f = np.atleast_2d(np.asarray(f_hz, float))
    tau = np.atleast_2d(np.asarray(tau_s, float))
    k2 = 2 * f.shape[1]
    groups = neighbour_groups(f, tau, grams.ok, size)
    n_acf = local_grid(tau.max(), sample_rate, 8 * pad)
    acf = scipy.fft.irfft(np.asarray(response(n_acf), float) ** 2, n_acf)
    members, bases, eps_out, lengths, dof = [], [], [], [], []
    metric: dict[int, np.ndarray] = {}
    for g in groups:
        length = int(max(template_samples(tau[i], sample_rate) + 2 for i in g))
        if length not in metric:
            metric[length] = toeplitz(acf[:min(length, n_acf)])
        m = metric[length]
        e = np.matmul(grams.cinv[g], basis_waveforms(f[g], tau[g], length, sample_rate))
        e = e.reshape(-1, length)  # every member's orthonormal functions, stacked
        em = e @ m
        lam, vec = np.linalg.eigh(0.5 * ((em @ e.T) + (em @ e.T).T))
        lam, vec = lam[::-1], vec[:, ::-1]
        keep = lam > lam[0] * 1e-12
        lam, vec = lam[keep], vec[:, keep]
        r, worst = principal_rank(vec * np.sqrt(lam), k2, eps)
        members.append(np.asarray(g))
        bases.append((vec[:, :r] / np.sqrt(lam[:r])).T @ e)
        eps_out.append(worst)
        lengths.append(length)
        dof.append(lam.size - r)
    return TemplateGroups(members, bases, np.asarray(eps_out), np.asarray(lengths, int),
                          np.asarray(dof, int))


def worth_grouping(groups: TemplateGroups, k2: int, snr_threshold: float) -> np.ndarray:
    """Whether each group is cheaper filtered as a group than template by template.

    A group costs its R principal correlations plus, at the fraction of start
    times where its bound reaches the threshold in Gaussian noise (``|b|^2``
    chi-squared with R degrees of freedom), an exact evaluation of G k2 L
    multiply-adds; its members alone cost G k2 correlations.  Low thresholds
    and few functions per template (N = 0) make groups flag often.

    Examples
    --------
    >>> g = TemplateGroups([np.arange(24)], [np.zeros((16, 100))], np.array([0.01]),
    ...                    np.array([100]), np.array([20]))
    >>> worth_grouping(g, 6, 5.64).tolist(), worth_grouping(g, 2, 2.0).tolist()
    ([True], [False])
    """
    from scipy.stats import chi2

    out = np.zeros(len(groups), bool)
    for i, (m, b) in enumerate(zip(groups.members, groups.basis, strict=True)):
        r = b.shape[0]
        base, _ = reach_quantiles(int(groups.residual_dof[i]), 1)
        level = max(float(snr_threshold) / (1 + BOUND_SLACK) - float(groups.eps[i]) * base, 0.0)
        p_flag = float(chi2.sf(level * level, r))
        alone = m.size * k2
        grouped = r + p_flag * alone * float(groups.length[i]) / FFT_OVER_PRODUCT
        out[i] = grouped < 0.8 * alone  # groups carry some overhead of their own
    return out


def energy_sums(w: np.ndarray, start: int, n: int, longest: int, reach: int) -> np.ndarray:
    """Cumulative energy of ``w`` from ``start - reach`` (zero outside ``w``).

    ``c[t + span] - c[t]`` is the energy over ``[start + t - reach, start + t
    - reach + span)`` for ``t < n`` and ``span <= longest + 2 reach``.
    """
    lo, hi = start - reach, start + n + longest + reach
    seg = np.zeros(hi - lo)
    a, b = max(lo, 0), min(hi, w.size)
    if b > a:
        seg[a - lo:b - lo] = w[a:b]
    return np.concatenate([[0.0], np.cumsum(seg * seg)])


def window_energy(w: np.ndarray, start: int, n: int, length: int, reach: int) -> np.ndarray:
    """Energy of ``w`` over ``[t - reach, t + length + reach)`` for t in ``[start, start + n)``.

    Samples outside ``w`` count as zero.

    Examples
    --------
    >>> window_energy(np.ones(10), 0, 3, 2, 1).tolist()
    [3.0, 4.0, 4.0]
    """
    cs = energy_sums(w, start, n, length, reach)
    span = length + 2 * reach
    return np.maximum(cs[span:span + n] - cs[:n], 0.0)


def reach_quantiles(dof: int, window: int, p: float = MISS_PROBABILITY) -> tuple[float, float]:
    """The chi-squared quantiles at probability ``p`` that :func:`residual_reach` uses.

    Examples
    --------
    >>> [round(q, 1) for q in reach_quantiles(36, 100)]
    [11.4, 233.8]
    """
    from scipy.stats import chi2

    return (float(np.sqrt(chi2.isf(p, max(int(dof), 1)))),
            float(chi2.isf(p, max(int(window), 1))))


def residual_reach(dof: int, energy: np.ndarray, window: int,
                   p: float = MISS_PROBABILITY) -> np.ndarray:
    """Bound on the data's norm in a residual space of ``dof`` dimensions.

    The chi-squared quantile of ``dof`` at probability ``p``, plus the excess
    of ``energy`` (whitened data over ``window`` samples) above its own
    quantile at ``p``: zero in Gaussian noise but for a fraction p of times,
    the amplitude of a loud transient otherwise.

    Examples
    --------
    >>> r = residual_reach(36, np.array([100.0, 1e6]), 100)
    >>> bool(9 < r[0] < 12), bool(r[1] > 900)
    (True, True)
    """
    base, high = reach_quantiles(dof, window, p)
    return base + np.sqrt(np.maximum(np.asarray(energy, float) - high, 0.0))


def member_bound(b2: np.ndarray, reach: np.ndarray, eps: Any) -> np.ndarray:
    """Upper bound on every member's SNR from ``|b|^2`` and the residual's reach.

    The arguments broadcast (e.g. one row per group, ``eps`` of shape (G, 1)).

    Examples
    --------
    >>> member_bound(np.array([25.0]), np.array([10.0]), 0.1).round(3).tolist()
    [6.006]
    """
    return (np.sqrt(np.maximum(b2, 0.0)) + eps * reach) * (1.0 + BOUND_SLACK)


def exact_rho2(x: np.ndarray, samples: np.ndarray, basis: np.ndarray, cinv: np.ndarray,
               batch: int = 4096) -> np.ndarray:
    """Every member's on-grid rho^2 at the given start samples, by direct products.

    ``basis`` (G, k2, L) raw sampled functions and ``cinv`` (G, k2, k2) their
    inverse Cholesky factors; returns (len(samples), G) in double precision.

    Examples
    --------
    >>> u = np.ones((1, 1, 2)); c = np.ones((1, 1, 1))
    >>> exact_rho2(np.arange(5.0), np.array([0, 3]), u, c).tolist()
    [[1.0], [49.0]]
    """
    g, k2, length = basis.shape
    orth = np.matmul(cinv, basis).reshape(g * k2, length).T  # (L, G k2)
    out = np.empty((samples.size, g))
    for s in range(0, samples.size, batch):
        pos = samples[s:s + batch, None] + np.arange(length)
        beyond = pos >= x.size
        seg = x[np.minimum(pos, x.size - 1)]  # (n, L); the data end as zeros, as in FFTs
        if beyond.any():
            seg[beyond] = 0.0
        y = (seg @ orth).reshape(-1, g, k2)
        out[s:s + batch] = np.einsum("ngk,ngk->ng", y, y)
    return out
