"""Injection campaigns: measure the ringdown search's efficiency per overtone count.

A campaign file (TOML, :mod:`ringsearch.campaign.spec`) is validated up
front, its injections drawn and placed (:mod:`~ringsearch.campaign.draw`),
its chunks run on local processes or a Dask cluster with atomic, resumable
outputs (:mod:`~ringsearch.campaign.execute`, the per-chunk search in
:mod:`~ringsearch.campaign.worker`), and the results turned into tables
(:mod:`~ringsearch.campaign.results`) and efficiency statistics
(:mod:`~ringsearch.campaign.efficiency`).
"""

from __future__ import annotations

from ringsearch.campaign.execute import campaign_status, run_campaign
from ringsearch.campaign.spec import CampaignSpec, load_spec, spec_from_dict

__all__ = ["CampaignSpec", "campaign_status", "load_spec", "run_campaign", "spec_from_dict"]
