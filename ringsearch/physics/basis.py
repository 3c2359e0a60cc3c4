"""The one real damped-sinusoid basis that the signal model, the search and the analysis share.

A ringdown with K modes of fixed frequencies ``f_k`` and damping times
``tau_k`` is a linear combination of the 2K real functions::

    u_{2k}(s)   = exp(-s / tau_k) cos(2 pi f_k s)
    u_{2k+1}(s) = exp(-s / tau_k) sin(2 pi f_k s)       for s >= 0, else 0,

with ``s`` the time since the start.  The complex amplitude ``A_k = a_{2k} +
i a_{2k+1}`` of mode k then gives ``Re[A_k exp(-i 2 pi f_k s)] exp(-s/tau_k)``
(the ``exp(-i omega t)`` convention of DESIGN.md).  Every place that needs
these functions -- the injected signal (:mod:`ringsearch.physics.ringdown`),
the search's templates (:mod:`ringsearch.search.templates`) and the
time-domain fits (:mod:`ringsearch.analysis`) -- calls :func:`damped_basis`.
"""

from __future__ import annotations

from typing import Any

import numpy as np


def damped_basis(s: Any, f_hz: Any, tau_s: Any, duration_s: Any = None) -> np.ndarray:
    """Damped cosines and sines ``[cos_0, sin_0, cos_1, ...]`` at times ``s`` since the start.

    Parameters
    ----------
    s : array_like
        Times since the start in seconds, shape ``(n,)`` or ``(..., n)`` with
        leading axes that broadcast against those of ``f_hz`` (e.g. one row of
        times per template, for templates with different sub-sample offsets).
        Times below 0 give 0.
    f_hz, tau_s : array_like
        Mode frequencies (Hz) and damping times (s), shape ``(..., K)``;
        ``tau_s`` must be positive.
    duration_s : float or array_like, optional
        Also zero at ``s >= duration_s`` (shape broadcasting against the
        leading axes); no cut by default.

    Returns
    -------
    numpy.ndarray
        Shape ``(..., 2K, n)``: row ``2k`` is the damped cosine of mode k,
        row ``2k + 1`` the damped sine.

    Examples
    --------
    >>> u = damped_basis(np.arange(3) / 4096, [250.0], [0.004])
    >>> u.shape, float(u[0, 0]), float(u[1, 0])
    ((2, 3), 1.0, 0.0)
    >>> damped_basis(np.arange(8) / 4096, np.ones((5, 2)) * 250, np.ones((5, 2)) * 4e-3).shape
    (5, 4, 8)
    """
    s = np.atleast_1d(np.asarray(s, dtype=float))
    f, tau = np.broadcast_arrays(np.atleast_1d(np.asarray(f_hz, dtype=float)),
                                 np.atleast_1d(np.asarray(tau_s, dtype=float)))
    t = s[..., None, :]  # (..., 1, n)
    on = t >= 0
    if duration_s is not None:
        on = on & (t < np.asarray(duration_s, dtype=float)[..., None, None])
    tc = np.where(on, t, 0.0)
    env = np.where(on, np.exp(-tc / tau[..., :, None]), 0.0)  # (..., K, n)
    ph = 2.0 * np.pi * f[..., :, None] * tc
    out = np.empty(env.shape[:-2] + (2 * env.shape[-2], env.shape[-1]))
    out[..., 0::2, :] = env * np.cos(ph)
    out[..., 1::2, :] = env * np.sin(ph)
    return out
