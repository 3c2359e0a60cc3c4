"""Shared test fixtures."""

from __future__ import annotations

from pathlib import Path

import pytest

#: Open strain shipped beside the repository (not part of it): ../shared/data/open-strain
OPEN_STRAIN = Path(__file__).resolve().parents[2] / "shared" / "data" / "open-strain"
GW150914_DIR = OPEN_STRAIN / "GW150914"
GW150914_FILES = {
    "H1": GW150914_DIR / "H-H1_LOSC_4_V2-1126259446-32.hdf5",
    "L1": GW150914_DIR / "L-L1_LOSC_4_V2-1126259446-32.hdf5",
}
#: Published merger time of GW150914 (Abbott et al. 2016, PRL 116, 061102).
GW150914_GPS = 1126259462.42


@pytest.fixture
def gw150914_files() -> dict[str, Path]:
    """Paths of the shipped GW150914 open-data files; skips when they are absent."""
    missing = [str(p) for p in GW150914_FILES.values() if not p.exists()]
    if missing:
        pytest.skip(f"open strain not found at {GW150914_DIR} (a clone without ../shared/data)")
    return dict(GW150914_FILES)
