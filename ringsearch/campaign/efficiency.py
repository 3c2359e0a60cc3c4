"""Detection efficiency: binned fractions with binomial intervals, sigmoid fits, volume.

* :func:`binomial_interval` — Wilson score interval (Wilson 1927) by
  default, or Clopper–Pearson (Clopper & Pearson 1934); both through scipy
  (``scipy.stats.binomtest(...).proportion_ci``).
* :func:`efficiency_table` — found fraction per bin of a quantity (network
  optimal SNR or distance), per (injected, template) overtone-count pair.
* :func:`overtone_efficiency_table` — overtone-recovery efficiency: the
  fraction of injections whose data support at least k overtones, binned the
  same way and with the same intervals (it calls :func:`efficiency_table`).
* :func:`fit_sigmoid` — unbinned maximum-likelihood logistic fit of found
  against the quantity, giving the 50 % and 90 % points with delta-method
  uncertainties from the exact Fisher information.  scipy has no logistic
  regression with parameter covariance, so the likelihood, gradient and
  Hessian are written here and minimised with ``scipy.optimize.minimize``.
* :func:`sensitive_volume` — comoving volume (astropy Planck18) weighted by
  the efficiency in luminosity-distance bins, and the sensitive distance
  ``(3 V / 4 pi)^(1/3)``.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from ringsearch.errors import InputError

#: Columns of the efficiency table (DESIGN.md contract plus extras).
EFFICIENCY_COLUMNS = [
    "binned_by", "injected_overtones", "template_overtones", "bin_lo", "bin_hi",
    "bin_centre", "n_injected", "n_found", "efficiency", "ci_lo", "ci_hi",
    "confidence", "ci_method",
]


def binomial_interval(k, n, confidence: float = 0.9, method: str = "wilson"):
    """Two-sided binomial confidence interval on a proportion k / n.

    Parameters
    ----------
    k, n : int or array of int
        Successes and trials (n >= 1).
    confidence : float
        Confidence level, e.g. 0.9.
    method : {"wilson", "clopper-pearson"}
        Wilson score interval or the exact Clopper–Pearson interval.

    Returns
    -------
    lo, hi : numpy.ndarray

    Examples
    --------
    >>> lo, hi = binomial_interval(5, 10, 0.9)
    >>> round(float(lo), 3), round(float(hi), 3)
    (0.269, 0.731)
    """
    from scipy.stats import binomtest

    scipy_method = {"wilson": "wilson", "clopper-pearson": "exact"}.get(method)
    if scipy_method is None:
        raise InputError(f"unknown interval method {method!r}; use wilson or clopper-pearson.")
    k_arr, n_arr = np.broadcast_arrays(np.asarray(k, dtype=int), np.asarray(n, dtype=int))
    lo = np.empty(k_arr.shape)
    hi = np.empty(k_arr.shape)
    for idx in np.ndindex(k_arr.shape):
        if n_arr[idx] < 1:
            raise InputError("a binomial interval needs at least one trial.")
        ci = binomtest(int(k_arr[idx]), int(n_arr[idx])).proportion_ci(
            confidence_level=confidence, method=scipy_method)
        lo[idx], hi[idx] = ci.low, ci.high
    return lo, hi


def bin_edges(values: np.ndarray, spec: int | list[float]) -> np.ndarray:
    """Bin edges: the given list, or ``spec`` equal-width bins spanning the values.

    Examples
    --------
    >>> bin_edges(np.array([1.0, 3.0]), 2).round(6).tolist()
    [1.0, 2.0, 3.0]
    """
    if isinstance(spec, list | tuple | np.ndarray):
        return np.asarray(spec, dtype=float)
    values = np.asarray(values, dtype=float)
    values = values[np.isfinite(values)]
    if values.size == 0:
        raise InputError("no finite values to bin.")
    lo, hi = float(values.min()), float(values.max())
    if hi <= lo:
        hi = lo + max(abs(lo) * 1e-6, 1e-9)
    edges = np.linspace(lo, hi, int(spec) + 1)
    edges[-1] = np.nextafter(hi, np.inf)  # the largest value belongs to the last bin
    return edges


def efficiency_table(found: pd.DataFrame, by: str, edges: np.ndarray,
                     confidence: float = 0.9, method: str = "wilson") -> pd.DataFrame:
    """Found fraction per bin of ``found[by]``, per (injected, template) overtone count.

    Parameters
    ----------
    found : DataFrame
        One row per (injection, template overtone count) with columns
        ``injected_overtones, template_overtones, found`` (bool) and ``by``.
    by : str
        Column to bin in, e.g. ``"network_snr"`` or ``"distance_mpc"``.
    edges : array
        Bin edges (left-closed bins; values outside are ignored).
    confidence, method :
        Passed to :func:`binomial_interval`.

    Returns
    -------
    DataFrame with columns :data:`EFFICIENCY_COLUMNS`; empty bins are left out.

    Examples
    --------
    >>> df = pd.DataFrame({"injected_overtones": 0, "template_overtones": 0,
    ...                    "found": [False, True, True, True], "network_snr": [1, 2, 8, 9]})
    >>> t = efficiency_table(df, "network_snr", np.array([0, 5, 10]))
    >>> t["efficiency"].tolist()
    [0.5, 1.0]
    """
    rows = []
    edges = np.asarray(edges, dtype=float)
    for (n_inj, n_tpl), group in found.groupby(["injected_overtones", "template_overtones"]):
        x = group[by].to_numpy(dtype=float)
        hit = group["found"].to_numpy(dtype=bool)
        idx = np.searchsorted(edges, x, side="right") - 1
        ok = np.isfinite(x) & (idx >= 0) & (idx < len(edges) - 1)
        for b in range(len(edges) - 1):
            sel = ok & (idx == b)
            n = int(sel.sum())
            if n == 0:
                continue
            k = int(hit[sel].sum())
            lo, hi = binomial_interval(k, n, confidence, method)
            rows.append({
                "binned_by": by, "injected_overtones": int(n_inj),
                "template_overtones": int(n_tpl), "bin_lo": edges[b], "bin_hi": edges[b + 1],
                "bin_centre": 0.5 * (edges[b] + edges[b + 1]), "n_injected": n, "n_found": k,
                "efficiency": k / n, "ci_lo": float(lo), "ci_hi": float(hi),
                "confidence": confidence, "ci_method": method,
            })
    return pd.DataFrame(rows, columns=EFFICIENCY_COLUMNS)


#: Columns of the overtone-recovery efficiency table (``overtone_efficiency.csv``).
OVERTONE_EFFICIENCY_COLUMNS = [
    "population", "injected_overtones", "template_overtones", "required_overtones",
    "binned_by", "bin_lo", "bin_hi", "bin_centre", "n_injected", "n_supported", "efficiency",
    "ci_lo", "ci_hi", "confidence", "ci_method",
]

#: ``template_overtones`` of the rows that pool all injections: the evidence is
#: computed at the injection's true arrival time and does not depend on the search.
ALL_TEMPLATES = -1


def overtone_efficiency_table(rows: pd.DataFrame, max_overtones: int, by: str,
                              edges: np.ndarray, confidence: float = 0.9,
                              method: str = "wilson", population: str = "all"
                              ) -> pd.DataFrame:
    """Fraction of injections whose data support at least k overtones, per bin of ``by``.

    For each required count k = 1..``max_overtones`` the rows are marked
    "supported" when ``supported_overtones >= k`` and passed to
    :func:`efficiency_table`, so bins and binomial intervals are exactly
    those of the detection efficiency.  Rows with ``supported_overtones < 0``
    (evidence not computed) are left out.

    Parameters
    ----------
    rows : DataFrame
        One row per injection (or per injection and template overtone count)
        with ``injected_overtones``, ``template_overtones``,
        ``supported_overtones`` and ``by``.
    max_overtones : int
        Largest overtone count the evidence compared.
    by, edges, confidence, method :
        As for :func:`efficiency_table`.
    population : str
        Label stored in the ``population`` column (e.g. ``"all"``, ``"found"``).

    Returns
    -------
    DataFrame with columns :data:`OVERTONE_EFFICIENCY_COLUMNS`.

    Examples
    --------
    >>> df = pd.DataFrame({"injected_overtones": 1, "template_overtones": -1,
    ...                    "supported_overtones": [0, 1, 1, 0], "network_snr": [5, 6, 30, 31]})
    >>> t = overtone_efficiency_table(df, 1, "network_snr", np.array([0, 10, 40]))
    >>> t["efficiency"].tolist()
    [0.5, 0.5]
    """
    ok = rows[rows["supported_overtones"].to_numpy(float) >= 0]
    frames = []
    for k in range(1, int(max_overtones) + 1):
        marked = ok.assign(found=ok["supported_overtones"].to_numpy(int) >= k)
        t = efficiency_table(marked, by, edges, confidence, method)
        t = t.rename(columns={"n_found": "n_supported"})
        t["required_overtones"] = k
        t["population"] = population
        frames.append(t)
    if not frames or all(f.empty for f in frames):
        return pd.DataFrame(columns=OVERTONE_EFFICIENCY_COLUMNS)
    out = pd.concat([f for f in frames if not f.empty], ignore_index=True)
    return out[OVERTONE_EFFICIENCY_COLUMNS]


def fit_sigmoid(x, found) -> dict:
    """Maximum-likelihood logistic fit ``eff(x) = 1 / (1 + exp(-(a + b x)))``.

    Parameters
    ----------
    x : array
        The quantity (SNR or distance) of each injection.
    found : array of bool
        Whether each injection was found.

    Returns
    -------
    dict
        ``ok`` (bool), ``message``, and when ``ok``: ``x50, x50_err, x90,
        x90_err, a, b`` (for distance, where efficiency falls, ``b < 0``).
        The fit is refused (``ok = False``) when all or none are found, the
        two groups are perfectly separated (the slope runs away), or the 50 %
        point falls outside the sampled range.

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> x = rng.uniform(0, 10, 2000)
    >>> y = rng.random(2000) < 1 / (1 + np.exp(-(x - 5)))
    >>> fit = fit_sigmoid(x, y)
    >>> abs(fit["x50"] - 5) < 4 * fit["x50_err"]
    True
    """
    from scipy.optimize import minimize
    from scipy.special import expit

    x = np.asarray(x, dtype=float)
    y = np.asarray(found, dtype=float)
    keep = np.isfinite(x)
    x, y = x[keep], y[keep]
    n, k = len(x), int(y.sum())
    if n < 4 or k == 0 or k == n:
        return {"ok": False, "message": f"cannot fit a sigmoid to {k} found of {n}."}
    mu, sd = float(x.mean()), float(x.std()) or 1.0
    u = (x - mu) / sd
    design = np.column_stack([np.ones_like(u), u])

    def nll(p):
        z = design @ p
        return float(np.sum(np.logaddexp(0.0, z) - y * z))

    def grad(p):
        return design.T @ (expit(design @ p) - y)

    def hess(p):
        w = expit(design @ p)
        w = w * (1 - w)
        return (design * w[:, None]).T @ design

    res = minimize(nll, np.zeros(2), jac=grad, hess=hess, method="trust-exact")
    a_u, b_u = res.x
    if not res.success or abs(b_u) > 30:
        return {"ok": False, "message": "found and missed injections are (almost) perfectly "
                                        "separated; no sigmoid width can be measured."}
    cov_u = np.linalg.inv(hess(res.x))
    # back to the original variable: a + b x with b = b_u / sd, a = a_u - b_u mu / sd
    jac = np.array([[1.0, -mu / sd], [0.0, 1.0 / sd]])
    a, b = jac @ res.x
    cov = jac @ cov_u @ jac.T
    if not x.min() <= -a / b <= x.max():
        return {"ok": False, "message": f"the fitted 50% point {-a / b:.4g} lies outside the "
                                        f"sampled range [{x.min():.4g}, {x.max():.4g}]."}
    out = {"ok": True, "message": "", "a": float(a), "b": float(b), "n": n, "n_found": k}
    for name, level in (("x50", 0.0), ("x90", math.log(9.0))):
        value = (level - a) / b
        g = np.array([-1.0 / b, -(level - a) / b**2])
        out[name] = float(value)
        out[f"{name}_err"] = float(math.sqrt(max(g @ cov @ g, 0.0)))
    return out


def _redshift_of_distance(d_mpc: np.ndarray) -> np.ndarray:
    from astropy.cosmology import Planck18

    # Luminosity distance is monotonic in z: invert on a dense grid (faster than
    # astropy's z_at_value per point and exact to interpolation accuracy).
    z = np.concatenate([[0.0], np.geomspace(1e-6, 20.0, 4000)])
    dl = Planck18.luminosity_distance(z).to_value("Mpc")
    if np.any(np.asarray(d_mpc) > dl[-1]):
        raise InputError("distances beyond redshift 20 are not supported.")
    return np.interp(d_mpc, dl, z)


def comoving_volume_mpc3(d_mpc) -> np.ndarray:
    """Comoving volume (Planck18) inside luminosity distance ``d_mpc``.

    Examples
    --------
    >>> v = comoving_volume_mpc3(10.0)
    >>> bool(abs(v / (4 / 3 * np.pi * 10.0**3) - 1) < 0.01)  # Euclidean nearby
    True
    """
    from astropy.cosmology import Planck18

    z = _redshift_of_distance(np.asarray(d_mpc, dtype=float))
    return np.asarray(Planck18.comoving_volume(z).to_value("Mpc3"))


def sensitive_volume(table: pd.DataFrame) -> dict:
    """Sensitive comoving volume and distance from an efficiency-vs-distance table.

    ``V = sum_i eff_i * dV_i`` over luminosity-distance bins, with ``dV_i``
    the Planck18 comoving volume of the shell.  The efficiency inside the
    nearest bin's lower edge is taken equal to that bin's; beyond the
    farthest bin it is taken as zero (so V is a lower bound when the
    farthest bin still finds signals; ``warning`` says so).  Uncertainty:
    binomial variance per bin, propagated linearly.

    Parameters
    ----------
    table : DataFrame
        Rows of one (injected, template) pair binned in ``distance_mpc``.

    Returns
    -------
    dict
        ``volume_mpc3, volume_err_mpc3, distance_mpc, distance_err_mpc, warning``.

    Examples
    --------
    >>> t = pd.DataFrame({"bin_lo": [10.0, 20.0], "bin_hi": [20.0, 30.0],
    ...                   "efficiency": [1.0, 0.0], "n_injected": [10, 10]})
    >>> round(sensitive_volume(t)["distance_mpc"], 1)  # comoving: d_L / (1 + z)
    19.9
    """
    t = table.sort_values("bin_lo")
    lo = t["bin_lo"].to_numpy(float)
    hi = t["bin_hi"].to_numpy(float)
    eff = t["efficiency"].to_numpy(float)
    n = t["n_injected"].to_numpy(float)
    v_hi = comoving_volume_mpc3(hi)
    v_lo = comoving_volume_mpc3(lo)
    dv = v_hi - v_lo
    dv[0] = v_hi[0]  # the nearest bin also covers everything inside it
    volume = float(np.sum(eff * dv))
    err = float(math.sqrt(np.sum(dv**2 * eff * (1 - eff) / n)))
    distance = (3 * volume / (4 * math.pi)) ** (1 / 3)
    d_err = distance * err / (3 * volume) if volume > 0 else 0.0
    warning = ""
    if eff[-1] > 0.1:
        warning = (f"efficiency is still {eff[-1]:.2f} in the farthest distance bin; the "
                   f"volume is a lower bound.")
    return {"volume_mpc3": volume, "volume_err_mpc3": err, "distance_mpc": distance,
            "distance_err_mpc": d_err, "warning": warning}
