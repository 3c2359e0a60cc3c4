"""Template bank: Kerr (mass, spin) points carrying the (2,2,n) modes n = 0..N.

A template is a point (M, chi) of the remnant box; the filter only needs each
template's list of (f, tau) for the modes (2,2,0) .. (2,2,N), which come from
:func:`ringsearch.physics.qnm.mode_f_tau`.

Placement (why stochastic, and with which match)
------------------------------------------------
The published damped-sinusoid metric (Creighton 1999, PRD 60, 022001; Nakano
et al. 2003, PRD 68, 102003) describes one damped sinusoid (N = 0) only.  With
N >= 1 overtones the template carries 2(N+1) free amplitudes and no published
metric exists, so we use *stochastic placement* (Harry, Allen & Sathyaprakash
2009, PRD 80, 104014) for every N, with real matches:

* the match of a signal subspace S to a template T is the worst case over all
  signal amplitudes/phases of the projection of the unit-norm signal onto T's
  span, i.e. the smallest singular value of ``E_T^T E_S`` (orthonormal bases).
  For N = 0 this is the usual match minimised over the signal's phase, so the
  bank guarantees the minimal match for *every* amplitude combination;
* stage 1 places templates with closed-form inner products of damped
  sinusoids that start together, in locally white noise (the approximation
  behind the published metric, cheap enough for tens of thousands of
  proposals);
* stage 2 fills the holes left by the real noise spectrum: random box points
  whose match with the PSD-weighted inner product (analytic spectra of the
  damped sinusoids on a frequency grid, weighted by 1/S(f) over
  [f_low, f_high]) is below the minimal match become templates, until a whole
  round of random points finds no hole.

Matches are evaluated at zero relative start time, a lower bound of the
fitting factor maximised over time shifts, so the stated coverage is
conservative.  :meth:`Bank.coverage` re-checks it by Monte Carlo.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ringsearch.errors import InputError, reason

#: A template lasts this many e-folds of its longest-lived mode: the amplitude
#: falls to e^-8 = 3e-4, the neglected energy fraction is e^-16 ~ 1e-7.
DECAY_TIMES: float = 8.0

_BANK_FORMAT = "ringsearch-bank/1"


def qnm_f_tau(mass: np.ndarray, spin: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Frequency (Hz) and damping time (s) of the (2,2,n) mode from the shipped QNM table.

    A thin indirection so tests can exercise the search before the table exists.

    Examples
    --------
    >>> f, tau = qnm_f_tau(np.array([62.0]), np.array([0.67]), 0)  # doctest: +SKIP
    """
    from ringsearch.physics.qnm import mode_f_tau

    f, tau = mode_f_tau(np.asarray(mass, float), np.asarray(spin, float), 2, 2, int(n))
    return np.asarray(f, float), np.asarray(tau, float)


def _modes(mass: np.ndarray, spin: np.ndarray, n_overtones: int) -> tuple[np.ndarray, np.ndarray]:
    """(f, tau) arrays of shape (len(mass), N+1)."""
    fs, taus = [], []
    for n in range(n_overtones + 1):
        f, tau = qnm_f_tau(mass, spin, n)
        fs.append(np.broadcast_to(f, np.shape(mass)))
        taus.append(np.broadcast_to(tau, np.shape(mass)))
    return np.stack(fs, axis=-1).astype(float), np.stack(taus, axis=-1).astype(float)


# --------------------------------------------------------------------------- matches
def _sigma_min(m: np.ndarray) -> np.ndarray:
    """Smallest singular value of each matrix in a stack (n, p, q), p >= q."""
    if m.shape[-1] == 2 and m.shape[-2] == 2:
        # closed form for 2x2 (the N = 0 case), much faster than a batched SVD
        fro = np.einsum("...ij,...ij->...", m, m)
        det = m[..., 0, 0] * m[..., 1, 1] - m[..., 0, 1] * m[..., 1, 0]
        disc = np.sqrt(np.maximum(fro**2 - 4 * det**2, 0.0))
        return np.sqrt(np.maximum((fro - disc) / 2, 0.0))
    mtm = np.einsum("...ki,...kj->...ij", m, m)
    return np.sqrt(np.maximum(np.linalg.eigvalsh(mtm)[..., 0], 0.0))


def white_cross_gram(fa: np.ndarray, ta: np.ndarray, fb: np.ndarray, tb: np.ndarray) -> np.ndarray:
    """Closed-form white-noise inner products of damped-sinusoid bases starting together.

    Bases are ordered ``[cos_0, sin_0, cos_1, sin_1, ...]``; ``fa``/``ta`` have
    shape (..., Ka) and ``fb``/``tb`` (..., Kb).  Uses
    ``int_0^inf e^{-a t} cos(b t) dt = a/(a^2+b^2)`` and ``... sin ... = b/(a^2+b^2)``.
    Returns (..., 2Ka, 2Kb) (a common factor 2/S0 dropped; it cancels in matches).

    Examples
    --------
    >>> g = white_cross_gram(np.array([250.0]), np.array([0.004]),
    ...                      np.array([250.0]), np.array([0.004]))
    >>> bool(np.allclose(g, g.T))
    True
    """
    wa, wb = 2 * np.pi * fa[..., :, None], 2 * np.pi * fb[..., None, :]
    a = 1 / ta[..., :, None] + 1 / tb[..., None, :]
    d, s = wa - wb, wa + wb

    def ic(b):
        return a / (a * a + b * b)

    def js(b):
        return b / (a * a + b * b)

    cc = 0.5 * (ic(d) + ic(s))
    ss = 0.5 * (ic(d) - ic(s))
    cs = 0.5 * (js(s) - js(d))  # cos(w_a t) sin(w_b t)
    sc = 0.5 * (js(s) + js(d))  # sin(w_a t) cos(w_b t)
    ka, kb = fa.shape[-1], fb.shape[-1]
    out = np.empty(cc.shape[:-2] + (2 * ka, 2 * kb))
    out[..., 0::2, 0::2] = cc
    out[..., 0::2, 1::2] = cs
    out[..., 1::2, 0::2] = sc
    out[..., 1::2, 1::2] = ss
    return out


def _white_match0(fa: np.ndarray, ta: np.ndarray, fb: Any, tb: Any) -> np.ndarray:
    """White-noise match (worst phase) of single damped sinusoids (fa, ta) with (fb, tb)."""
    fa, ta = np.asarray(fa, float)[:, None], np.asarray(ta, float)[:, None]
    fb = np.broadcast_to(np.asarray(fb, float), (fa.shape[0],))[:, None]
    tb = np.broadcast_to(np.asarray(tb, float), (fa.shape[0],))[:, None]
    la, lb = _white_inv_chol(fa, ta), _white_inv_chol(fb, tb)
    return _sigma_min(la @ white_cross_gram(fa, ta, fb, tb) @ np.swapaxes(lb, -1, -2))


def _white_inv_chol(f: np.ndarray, tau: np.ndarray) -> np.ndarray:
    """Inverse Cholesky factors L^{-1} of the white-noise Gram of each template (n, 2K, 2K)."""
    g = white_cross_gram(f, tau, f, tau)
    return np.linalg.inv(np.linalg.cholesky(g))


@dataclass
class MatchGrid:
    """Frequency grid and noise weights for PSD-weighted matches.

    ``weight[k] = sqrt(4 df / S(f_k))`` with 1/S averaged over the bin, so
    ``<a, b> = sum_k weight^2 Re(A conj B)`` is the inner product of DESIGN.md.
    """

    freqs: np.ndarray
    weight: np.ndarray

    @classmethod
    def build(cls, f_low: float, f_high: float, tau_max: float,
              psd: Any = None) -> MatchGrid:
        """Grid of spacing 1/(16 tau_max) over [f_low, f_high]; ``psd`` is a
        FrequencySeries, a ``(freqs, values)`` pair, or None for white noise."""
        df = min(1.0 / (16 * tau_max), 1.0)
        n = min(max(int(math.ceil((f_high - f_low) / df)), 8), 200_000)
        freqs = f_low + (np.arange(n) + 0.5) * (f_high - f_low) / n
        df = (f_high - f_low) / n
        if psd is None:
            inv = np.ones(n)
        else:
            pf, pv = _psd_arrays(psd)
            good = np.isfinite(pv) & (pv > 0)
            pf, pv = pf[good], pv[good]
            # bin average of 1/S through its cumulative integral (lines are narrower than a bin)
            cum = np.concatenate([[0.0], np.cumsum(0.5 * (1 / pv[1:] + 1 / pv[:-1]) * np.diff(pf))])
            edges = f_low + np.arange(n + 1) * df
            inv = np.diff(np.interp(edges, pf, cum)) / df
            inv = inv / np.median(inv)  # overall scale cancels in matches
        return cls(freqs=freqs, weight=np.sqrt(4 * df * np.maximum(inv, 0.0)))

    def basis(self, f: np.ndarray, tau: np.ndarray) -> np.ndarray:
        """Whitened real basis vectors, shape (..., 2K, 2 n_freq), of the templates (f, tau)."""
        nu = self.freqs
        f = np.asarray(f, float)[..., None]
        tau = np.asarray(tau, float)[..., None]
        ap = 1 / (1 / tau + 2j * np.pi * (nu - f))  # e^{-t/tau} e^{+i w t}
        am = 1 / (1 / tau + 2j * np.pi * (nu + f))  # e^{-t/tau} e^{-i w t}
        c, s = 0.5 * (ap + am), (ap - am) / 2j
        k = f.shape[-2]
        out = np.empty(f.shape[:-2] + (2 * k, 2 * nu.size))
        for comp, sl in ((c, slice(0, None, 2)), (s, slice(1, None, 2))):
            out[..., sl, : nu.size] = comp.real * self.weight
            out[..., sl, nu.size:] = comp.imag * self.weight
        return out

    def orthonormal(self, f: np.ndarray, tau: np.ndarray) -> np.ndarray:
        """Orthonormal bases (..., 2 n_freq, 2K) of the templates' spans (QR)."""
        q, _ = np.linalg.qr(np.swapaxes(self.basis(f, tau), -1, -2))
        return q


def _psd_arrays(psd: Any) -> tuple[np.ndarray, np.ndarray]:
    if hasattr(psd, "frequencies"):
        return np.asarray(psd.frequencies.value, float), np.asarray(psd.value, float)
    pf, pv = psd
    return np.asarray(pf, float), np.asarray(pv, float)


# --------------------------------------------------------------------------- the bank
@dataclass
class Bank:
    """A template bank: one row per (mass, spin) template with its (2,2,n) modes.

    ``table`` columns: ``template_id``, ``mass_msun``, ``spin`` and, for each
    n = 0..N, ``f22{n}_hz`` and ``tau22{n}_s``.  ``meta`` holds the box, the
    minimal match, N, f_low/f_high, the PSD on the match grid and placement
    statistics.
    """

    table: pd.DataFrame
    n_overtones: int
    meta: dict = field(default_factory=dict)

    # ----------------------------------------------------------------- access
    def __len__(self) -> int:
        return len(self.table)

    @property
    def n_modes(self) -> int:
        return self.n_overtones + 1

    @property
    def f_hz(self) -> np.ndarray:
        """Mode frequencies, shape (n_templates, N+1)."""
        return self.table[[f"f22{n}_hz" for n in range(self.n_modes)]].to_numpy(float)

    @property
    def tau_s(self) -> np.ndarray:
        """Mode damping times, shape (n_templates, N+1)."""
        return self.table[[f"tau22{n}_s" for n in range(self.n_modes)]].to_numpy(float)

    @property
    def duration_s(self) -> np.ndarray:
        """Length of each template (DECAY_TIMES e-folds of its longest-lived mode)."""
        return DECAY_TIMES * self.tau_s.max(axis=1)

    # ----------------------------------------------------------------- build
    @classmethod
    def from_points(cls, mass: Any, spin: Any, n_overtones: int = 0,
                    meta: dict | None = None) -> Bank:
        """A bank holding exactly the given (mass, spin) points.

        Examples
        --------
        >>> bank = Bank.from_points([62.0], [0.67])  # doctest: +SKIP
        >>> round(float(bank.f_hz[0, 0]))  # doctest: +SKIP
        275
        """
        mass = np.atleast_1d(np.asarray(mass, float))
        spin = np.atleast_1d(np.asarray(spin, float))
        _check_overtones(n_overtones)
        if mass.shape != spin.shape:
            raise InputError("mass and spin lists of a bank must have the same length.")
        if np.any(~np.isfinite(mass)) or np.any(mass <= 0):
            raise InputError(f"bank masses must be positive, got {mass.min()!r}.")
        if np.any(~np.isfinite(spin)) or np.any((spin < 0) | (spin >= 1)):
            raise InputError("bank spins must lie in [0, 1).")
        f, tau = _modes(mass, spin, n_overtones)
        table = {"template_id": np.arange(mass.size), "mass_msun": mass, "spin": spin}
        for n in range(n_overtones + 1):
            table[f"f22{n}_hz"] = f[:, n]
            table[f"tau22{n}_s"] = tau[:, n]
        return cls(pd.DataFrame(table), n_overtones, dict(meta or {}))

    @classmethod
    def from_box(cls, mass: tuple[float, float] = (20.0, 200.0),
                 spin: tuple[float, float] = (0.0, 0.99), n_overtones: int = 0,
                 min_match: float = 0.97, *, psd: Any = None, f_low: float = 20.0,
                 f_high: float = 2048.0, seed: int = 0, max_proposals: int = 400_000,
                 progress: bool = False) -> Bank:
        """Place templates so that every signal in the box has fitting factor >= ``min_match``.

        Parameters
        ----------
        mass, spin : (lo, hi)
            The remnant box (detector-frame solar masses; dimensionless spin).
        n_overtones : int
            N: each template carries the (2,2,0..N) modes.
        min_match : float
            Requested minimal match, in (0, 1).
        psd : FrequencySeries or (freqs, values), optional
            One-sided noise PSD for the matches (white noise when None).
        f_low, f_high : float
            Band of the inner product in Hz.
        seed : int
            Seed of the placement's random numbers (same seed, same bank).

        Examples
        --------
        >>> bank = Bank.from_box((50, 80), (0.5, 0.8), min_match=0.9)  # doctest: +SKIP
        >>> len(bank) > 0  # doctest: +SKIP
        True
        """
        lo_m, hi_m = _check_range("mass", mass, 0.0, math.inf)
        lo_s, hi_s = _check_range("spin", spin, 0.0, 1.0)
        if hi_s >= 1.0:
            raise InputError(f"spin range upper end must be below 1 (Kerr bound), got {hi_s}.")
        if not (0.0 < float(min_match) < 1.0):
            raise InputError(f"minimal match must lie strictly between 0 and 1, got {min_match}.")
        _check_overtones(n_overtones)
        _check_seed(seed)
        if not (0 < f_low < f_high):
            raise InputError(f"f_low {f_low} Hz must be positive and below f_high {f_high} Hz.")
        rng = np.random.default_rng(seed)
        mm = float(min_match)
        # spin <-> ln Q220 map: proposals are uniform in (ln M, ln Q220), where the
        # damped-sinusoid metric density is nearly flat (it is scale free in f).
        chi_grid = np.linspace(lo_s, hi_s, 257)
        f1, t1 = qnm_f_tau(np.ones_like(chi_grid), chi_grid, 0)
        lnq_grid = np.log(np.pi * f1 * t1)
        if np.any(np.diff(lnq_grid) <= 0):
            raise InputError("the (2,2,0) quality factor is not monotonic over the spin range.")

        f_box_min = float(qnm_f_tau(np.array([hi_m]), np.array([lo_s]), 0)[0][0])
        if f_box_min < f_low:
            raise InputError(f"mass range upper end {hi_m:g} puts the (2,2,0) mode at "
                             f"{f_box_min:.3g} Hz, below f_low = {f_low:g} Hz; lower the masses.")
        f_box_max = float(qnm_f_tau(np.array([lo_m]), np.array([hi_s]), 0)[0][0])
        if f_box_max > f_high:
            raise InputError(f"mass range lower end {lo_m:g} puts the (2,2,0) mode at "
                             f"{f_box_max:.3g} Hz, above f_high = {f_high:g} Hz; raise the "
                             "masses or the sample rate.")

        def propose(k: int) -> tuple[np.ndarray, np.ndarray]:
            m = np.exp(rng.uniform(np.log(lo_m), np.log(hi_m), k))
            lq = rng.uniform(lnq_grid[0], lnq_grid[-1], k)
            return m, np.clip(np.interp(lq, lnq_grid, chi_grid), lo_s, hi_s)

        # ---- stage 1: stochastic placement with closed-form white-noise matches
        cap = 4096
        pts_m, pts_s = np.empty(cap), np.empty(cap)
        lnf, lnq = np.empty(cap), np.empty(cap)
        fs = np.empty((cap, n_overtones + 1))
        ts = np.empty((cap, n_overtones + 1))
        linv = np.empty((cap, 2 * n_overtones + 2, 2 * n_overtones + 2))
        n_t = 0
        n_prop = 0
        block = 2000
        stop_accept = 2  # stop when a block of 2000 proposals adds <= 2 (0.1 %)
        wq = 3 * 2 * math.acosh(1 / mm)
        wf = max(3 * math.sqrt(1 / mm**2 - 1), 0.05)
        from tqdm import tqdm

        bar = tqdm(desc="placing templates", unit=" proposals", disable=not progress,
                   leave=False)
        while n_prop < max_proposals:
            bm, bs = propose(block)
            bf, bt = _modes(bm, bs, n_overtones)
            bl = _white_inv_chol(bf, bt)
            blnf, blnq = np.log(bf[:, 0]), np.log(np.pi * bf[:, 0] * bt[:, 0])
            added = 0
            for i in range(block):
                near = np.empty(0, int)
                if n_t:
                    # prune by distance in (ln f, ln Q) of the (2,2,0) mode: windows of three
                    # times the single-mode tolerances at this minimal match (match of equal-f
                    # modes is sech(dlnQ/2); of equal-Q modes 1/sqrt(1+(Q dlnf)^2)).  Pruning
                    # can only add redundant templates, never lose coverage.
                    near = np.flatnonzero((np.abs(lnf[:n_t] - blnf[i]) < wf / math.exp(blnq[i]))
                                          & (np.abs(lnq[:n_t] - blnq[i]) < wq))
                if near.size and n_overtones:
                    m0 = _white_match0(fs[near, 0], ts[near, 0], bf[i, 0], bt[i, 0])
                    near = near[m0 >= mm - 0.05]
                if near.size:
                    x = white_cross_gram(fs[near], ts[near], bf[i][None], bt[i][None])
                    m = linv[near] @ x @ np.swapaxes(bl[i], -1, -2)[None]
                    if _sigma_min(m).max() >= mm:
                        continue
                if n_t == cap:
                    cap *= 2
                    pts_m, pts_s, lnf, lnq = (np.resize(a, cap) for a in (pts_m, pts_s, lnf, lnq))
                    fs, ts, linv = (np.resize(a, (cap,) + a.shape[1:]) for a in (fs, ts, linv))
                pts_m[n_t], pts_s[n_t], lnf[n_t], lnq[n_t] = bm[i], bs[i], blnf[i], blnq[i]
                fs[n_t], ts[n_t], linv[n_t] = bf[i], bt[i], bl[i]
                n_t += 1
                added += 1
            n_prop += block
            bar.update(block)
            bar.set_postfix(templates=n_t)
            if added <= stop_accept:
                break
        bar.close()
        if n_prop >= max_proposals:
            raise InputError(f"bank placement did not converge within {max_proposals} proposals; "
                             "raise min_match's distance from 1 or shrink the box.")
        stage1 = n_t
        mass_pts, spin_pts = pts_m[:n_t].copy(), pts_s[:n_t].copy()

        # ---- stage 2: fill holes with the real PSD-weighted match
        grid = MatchGrid.build(f_low, f_high, float(np.max(ts[:n_t])) if n_t else 0.05, psd)
        bank = cls.from_points(mass_pts, spin_pts, n_overtones)
        filled = 0
        for _ in range(20):
            cm = rng.uniform(lo_m, hi_m, 500)
            cs = rng.uniform(lo_s, hi_s, 500)
            ff, _ = bank._fitting_factor(cm, cs, grid)
            holes = np.flatnonzero(ff < mm)
            if holes.size == 0:
                break
            # add holes greedily, skipping those a just-added hole already covers
            new_m, new_s = [], []
            for h in holes[np.argsort(ff[holes])]:
                if new_m:
                    trial = cls.from_points(np.array(new_m), np.array(new_s), n_overtones)
                    if trial._fitting_factor(cm[[h]], cs[[h]], grid)[0][0] >= mm:
                        continue
                new_m.append(cm[h])
                new_s.append(cs[h])
            bank = cls.from_points(np.r_[bank.table.mass_msun.to_numpy(), new_m],
                                   np.r_[bank.table.spin.to_numpy(), new_s], n_overtones)
            filled += len(new_m)
        bank.meta = {
            "format": _BANK_FORMAT,
            "mass_range_msun": [lo_m, hi_m],
            "spin_range": [lo_s, hi_s],
            "n_overtones": int(n_overtones),
            "min_match": mm,
            "f_low_hz": float(f_low),
            "f_high_hz": float(f_high),
            "seed": int(seed),
            "placement": "stochastic (white-noise closed form) + PSD-weighted hole filling",
            "n_proposals": int(n_prop),
            "n_stage1": int(stage1),
            "n_hole_fill": int(filled),
            "psd_freqs_hz": grid.freqs.tolist(),
            "psd_weight": grid.weight.tolist(),
        }
        return bank

    # ----------------------------------------------------------------- matches
    def match_grid(self) -> MatchGrid:
        """The PSD-weighted match grid stored with the bank (white noise if none)."""
        if "psd_freqs_hz" in self.meta:
            return MatchGrid(np.asarray(self.meta["psd_freqs_hz"], float),
                             np.asarray(self.meta["psd_weight"], float))
        f_low = float(self.meta.get("f_low_hz", 20.0))
        f_high = float(self.meta.get("f_high_hz", 2048.0))
        return MatchGrid.build(f_low, f_high, float(self.tau_s.max()))

    def _fitting_factor(self, mass: np.ndarray, spin: np.ndarray,
                        grid: MatchGrid) -> tuple[np.ndarray, np.ndarray]:
        """Worst-amplitude fitting factor and best template index for each signal (M, chi)."""
        sf, st = _modes(mass, spin, self.n_overtones)
        tf, tt = self.f_hz, self.tau_s
        # whitened bases and inverse Cholesky factors of the bank, computed once
        tb = grid.basis(tf, tt)  # (n, 2K, 2nf)
        tl = np.linalg.inv(np.linalg.cholesky(tb @ np.swapaxes(tb, -1, -2)))
        ff = np.zeros(len(mass))
        best = np.zeros(len(mass), int)
        n_cand = min(24, len(self))
        for i in range(len(mass)):
            # candidates: the best templates by the white-noise match of the (2,2,0) modes
            wm = _white_match0(tf[:, 0], tt[:, 0], sf[i, 0], st[i, 0])
            cand = np.argpartition(wm, -n_cand)[-n_cand:]
            sb = grid.basis(sf[i], st[i])
            sl = np.linalg.inv(np.linalg.cholesky(sb @ sb.T))
            m = tl[cand] @ (tb[cand] @ sb.T) @ sl.T[None]
            sm = _sigma_min(m)
            j = int(np.argmax(sm))
            ff[i], best[i] = sm[j], cand[j]
        return ff, best

    def fitting_factor(self, mass: Any, spin: Any) -> np.ndarray:
        """Fitting factor of signals at (mass, spin), worst case over their mode amplitudes.

        Uses the bank's stored noise spectrum.  The fitting factor is the best
        match over templates of the unit-norm signal's projection on the
        template's span, minimised over the signal's amplitudes and phases.

        Examples
        --------
        >>> bank = Bank.from_box((50, 80), (0.5, 0.8), min_match=0.9)  # doctest: +SKIP
        >>> bool(bank.fitting_factor([60.0], [0.7])[0] >= 0.9)  # doctest: +SKIP
        True
        """
        mass = np.atleast_1d(np.asarray(mass, float))
        spin = np.atleast_1d(np.asarray(spin, float))
        return self._fitting_factor(mass, spin, self.match_grid())[0]

    def coverage(self, n_points: int = 1000, seed: int = 1) -> pd.DataFrame:
        """Monte Carlo coverage: fitting factors of ``n_points`` uniform random box points.

        Returns a DataFrame with ``mass_msun, spin, fitting_factor, covered``;
        ``covered.mean()`` is the covered fraction.

        Examples
        --------
        >>> cov = bank.coverage(200, seed=3)  # doctest: +SKIP
        >>> cov.covered.mean() >= 0.99  # doctest: +SKIP
        True
        """
        if "mass_range_msun" not in self.meta:
            raise InputError("bank has no box recorded; coverage needs a bank made by from_box.")
        rng = np.random.default_rng(seed)
        lo_m, hi_m = self.meta["mass_range_msun"]
        lo_s, hi_s = self.meta["spin_range"]
        m = rng.uniform(lo_m, hi_m, n_points)
        s = rng.uniform(lo_s, hi_s, n_points)
        ff, best = self._fitting_factor(m, s, self.match_grid())
        return pd.DataFrame({"mass_msun": m, "spin": s, "fitting_factor": ff,
                             "best_template": best,
                             "covered": ff >= float(self.meta.get("min_match", 0.0))})

    # ----------------------------------------------------------------- storage
    def save(self, path: str | Path) -> Path:
        """Write the bank as Parquet with its metadata in the schema metadata.

        Examples
        --------
        >>> bank.save("bank.parquet")  # doctest: +SKIP
        """
        import pyarrow as pa
        import pyarrow.parquet as pq

        from ringsearch.files import atomic_path

        path = Path(path)
        tab = pa.Table.from_pandas(self.table, preserve_index=False)
        meta = dict(tab.schema.metadata or {})
        meta[b"ringsearch.bank"] = json.dumps(
            {**self.meta, "n_overtones": int(self.n_overtones)}).encode()
        tab = tab.replace_schema_metadata(meta)
        with atomic_path(path) as tmp:
            pq.write_table(tab, tmp)
        return path

    @classmethod
    def load(cls, path: str | Path) -> Bank:
        """Read a bank written by :meth:`save`.

        Examples
        --------
        >>> bank = Bank.load("bank.parquet")  # doctest: +SKIP
        """
        import pyarrow.parquet as pq

        path = Path(path)
        if not path.is_file():
            raise InputError(f"bank file {path} does not exist.")
        try:
            tab = pq.read_table(path)
        except Exception as exc:  # pyarrow raises several types for non-Parquet files
            raise InputError(f"bank file {path} is not a Parquet table ({reason(exc)}).") from None
        raw = (tab.schema.metadata or {}).get(b"ringsearch.bank")
        if raw is None:
            raise InputError(f"bank file {path} carries no ringsearch bank metadata.")
        meta = json.loads(raw)
        n = int(meta["n_overtones"])
        table = tab.to_pandas()
        need = ["template_id", "mass_msun", "spin"] + [
            c for k in range(n + 1) for c in (f"f22{k}_hz", f"tau22{k}_s")]
        missing = [c for c in need if c not in table.columns]
        if missing:
            raise InputError(f"bank file {path} lacks columns {missing}.")
        return cls(table, n, meta)

    def on_box_edge(self) -> np.ndarray:
        """True for templates whose neighbourhood reaches the edge of the bank's box.

        A template is an edge template when a point on the box boundary next to
        it (same spin at the lowest or highest mass, or same mass at the lowest
        or highest spin) has a (2,2,0) white-noise match of at least the bank's
        minimal match with it: a signal outside the box would then be fitted by
        this template, so its mass and spin are a boundary value, not an
        estimate.  Banks without a recorded box have no edge templates.

        Examples
        --------
        >>> bank = Bank.from_box((50, 80), (0.5, 0.8), min_match=0.9)  # doctest: +SKIP
        >>> bank.on_box_edge().mean()  # doctest: +SKIP
        0.4
        """
        if "mass_range_msun" not in self.meta or "spin_range" not in self.meta:
            return np.zeros(len(self), bool)
        lo_m, hi_m = (float(x) for x in self.meta["mass_range_msun"])
        lo_s, hi_s = (float(x) for x in self.meta["spin_range"])
        mm = float(self.meta.get("min_match", 0.97))
        m = self.table.mass_msun.to_numpy(float)
        s = self.table.spin.to_numpy(float)
        f0, t0 = self.f_hz[:, 0], self.tau_s[:, 0]
        edge = np.zeros(len(self), bool)
        for bm, bs in ((np.full_like(m, lo_m), s), (np.full_like(m, hi_m), s),
                       (m, np.full_like(s, lo_s)), (m, np.full_like(s, hi_s))):
            fb, tb = qnm_f_tau(bm, bs, 0)
            edge |= _white_match0(f0, t0, fb, tb) >= mm
        return edge

    def summary(self) -> dict:
        """Short description (count, box, N, minimal match) for reports."""
        keys = ("mass_range_msun", "spin_range", "min_match", "f_low_hz", "f_high_hz",
                "placement", "n_proposals", "seed")
        return {"n_templates": len(self), "n_overtones": self.n_overtones,
                **{k: self.meta[k] for k in keys if k in self.meta}}


def _check_range(name: str, rng: Any, lo: float, hi: float) -> tuple[float, float]:
    try:
        a, b = (float(x) for x in rng)
    except (TypeError, ValueError):
        raise InputError(f"{name} range must be two numbers LO:HI, got {rng!r}.") from None
    if not (math.isfinite(a) and math.isfinite(b)) or a >= b:
        raise InputError(f"{name} range {a}:{b} is empty (LO must be below HI, both finite).")
    if name == "mass" and a <= 0:
        raise InputError(f"mass range {a}:{b} is unphysical (masses must be positive "
                         "solar masses).")
    if a < lo or b > hi:
        raise InputError(f"{name} range {a}:{b} is unphysical (allowed {lo} to {hi}).")
    return a, b


def _check_overtones(n: Any) -> None:
    if not isinstance(n, int | np.integer) or n < 0 or n > 7:
        raise InputError(f"number of overtones must be an integer from 0 to 7, got {n!r}.")


def _check_seed(seed: Any) -> None:
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer) or seed < 0:
        raise InputError(f"bank placement seed must be an integer >= 0, got {seed!r}.")
