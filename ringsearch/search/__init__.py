"""The ringdown search: template bank, matched filter, triggers, network statistic, significance.

Public API (stable; see DEVELOPERS.md):

* :class:`~ringsearch.search.engine.Search`, :class:`~ringsearch.search.engine.SearchConfig`
  and :class:`~ringsearch.search.engine.SearchResult`: the one search that
  ``ringsearch search`` and campaigns run
* :class:`~ringsearch.search.bank.Bank` (``from_box``, ``from_points``,
  ``save``/``load``, ``coverage``, ``fitting_factor``, ``on_box_edge``)
* :class:`~ringsearch.search.probe.Probe`: any template evaluated at any start
  time with the search's own numbers (refined start, SNR, amplitudes, veto)
* :func:`~ringsearch.search.correlate.snr_series`,
  :func:`~ringsearch.search.correlate.projection_snr` (one template)
* :func:`~ringsearch.search.veto.chisq_at`,
  :func:`~ringsearch.search.veto.reweighted_snr` (signal-consistency veto)
"""

from __future__ import annotations

from importlib import import_module
from typing import Any

_API = {
    "Search": "ringsearch.search.engine",
    "SearchConfig": "ringsearch.search.engine",
    "SearchResult": "ringsearch.search.engine",
    "Bank": "ringsearch.search.bank",
    "Probe": "ringsearch.search.probe",
    "snr_series": "ringsearch.search.correlate",
    "projection_snr": "ringsearch.search.correlate",
    "cluster_triggers": "ringsearch.search.triggers",
    "chisq_at": "ringsearch.search.veto",
    "reweighted_snr": "ringsearch.search.veto",
}

__all__ = list(_API)


def __getattr__(name: str) -> Any:
    if name in _API:
        return getattr(import_module(_API[name]), name)
    raise AttributeError(f"module 'ringsearch.search' has no attribute {name!r}")
