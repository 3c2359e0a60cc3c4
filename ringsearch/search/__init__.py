"""The ringdown search: template bank, matched filter, triggers, coincidence, significance.

Public API (stable; see DEVELOPERS.md):

* :class:`~ringsearch.search.bank.Bank` (``from_box``, ``from_points``,
  ``save``/``load``, ``coverage``, ``fitting_factor``)
* :func:`~ringsearch.search.filter.matched_filter`,
  :func:`~ringsearch.search.filter.snr_series`,
  :func:`~ringsearch.search.filter.projection_snr`
* :func:`~ringsearch.search.coincidence.coincident_candidates`,
  :func:`~ringsearch.search.significance.time_slide_background`,
  :func:`~ringsearch.search.significance.single_detector_far`
* :func:`~ringsearch.search.veto.chisq_at`,
  :func:`~ringsearch.search.veto.candidate_chisq`,
  :func:`~ringsearch.search.veto.reweighted_snr` (signal-consistency veto)
* :func:`~ringsearch.search.pipeline.run_search` -> ``SearchResult``
"""

from __future__ import annotations

from importlib import import_module
from typing import Any

_API = {
    "Bank": "ringsearch.search.bank",
    "matched_filter": "ringsearch.search.filter",
    "snr_series": "ringsearch.search.filter",
    "projection_snr": "ringsearch.search.filter",
    "cluster_triggers": "ringsearch.search.triggers",
    "coincident_candidates": "ringsearch.search.coincidence",
    "time_slide_background": "ringsearch.search.significance",
    "single_detector_far": "ringsearch.search.significance",
    "chisq_at": "ringsearch.search.veto",
    "candidate_chisq": "ringsearch.search.veto",
    "reweighted_snr": "ringsearch.search.veto",
    "run_search": "ringsearch.search.pipeline",
    "SearchResult": "ringsearch.search.pipeline",
}

__all__ = list(_API)


def __getattr__(name: str) -> Any:
    if name in _API:
        return getattr(import_module(_API[name]), name)
    raise AttributeError(f"module 'ringsearch.search' has no attribute {name!r}")
