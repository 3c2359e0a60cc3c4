"""ringsearch: search detector strain for black-hole ringdowns and measure the search.

The package is layered; imports point one way only::

    physics -> data -> search -> analysis -> campaign -> report -> cli

The stable top-level API (see DEVELOPERS.md) is loaded lazily so that
``import ringsearch`` stays cheap and does not pull in gwpy until needed.
"""

from __future__ import annotations

from importlib import import_module
from typing import Any

__version__ = "0.1.0"

# public name -> module that defines it
_API = {
    "kerr_omega": "ringsearch.physics.qnm",
    "read_strain": "ringsearch.data.io",
    "estimate_psd": "ringsearch.data.psd",
    "optimal_snr": "ringsearch.physics.ringdown",
    "InputError": "ringsearch.errors",
}

__all__ = ["__version__", *_API]


def __getattr__(name: str) -> Any:
    if name in _API:
        return getattr(import_module(_API[name]), name)
    raise AttributeError(f"module 'ringsearch' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(__all__)
