"""Overtone analysis of a ringdown candidate.

Noise-weighted time-domain fits (Toeplitz covariance from the PSD, so data
before the start time is excluded exactly), start-time scans, variable
projection for free frequencies, and the amplitude-marginalised (mass, spin)
posterior with the evidence for each overtone count.

Modules: ``noise_model`` (PSD -> Toeplitz covariance, whitening), ``fits``
(fixed-frequency linear fits, start-time scan), ``varpro`` (free
frequencies), ``posterior`` (marginalised likelihood, evidence), ``plots``
and ``pipeline`` (end-to-end :func:`analyse_candidate`).
"""

from __future__ import annotations

from importlib import import_module
from typing import Any

# public name -> module that defines it (loaded lazily: pandas/scipy/gwpy on demand)
_API = {
    "toeplitz_noise": "ringsearch.analysis.noise_model",
    "DetectorSeries": "ringsearch.analysis.fits",
    "fit_amplitudes": "ringsearch.analysis.fits",
    "start_time_scan": "ringsearch.analysis.fits",
    "fit_free_modes": "ringsearch.analysis.varpro",
    "fit_kerr": "ringsearch.analysis.varpro",
    "remnant_posterior": "ringsearch.analysis.posterior",
    "overtone_evidence": "ringsearch.analysis.posterior",
    "analyse_candidate": "ringsearch.analysis.pipeline",
    "candidate_evidence": "ringsearch.analysis.pipeline",
    "prepare_detectors": "ringsearch.analysis.pipeline",
}

__all__ = list(_API)


def __getattr__(name: str) -> Any:
    if name in _API:
        return getattr(import_module(_API[name]), name)
    raise AttributeError(f"module 'ringsearch.analysis' has no attribute {name!r}")
