"""Campaign report: figures in PNG and PDF and a self-contained, offline report.html."""

from __future__ import annotations

import re

import pytest
from test_campaign_execute import FAKE, small_spec

from ringsearch.campaign import run_campaign
from ringsearch.errors import InputError
from ringsearch.report import make_report


def test_report_is_self_contained(tmp_path):
    out = tmp_path / "out"
    spec = small_spec(injections={"count": 120}, data={"chunk_s": 64})
    run_campaign(spec, out, worker=FAKE, progress=False)
    path = make_report(out)
    text = path.read_text()
    assert path == out / "report.html"
    for name in ("efficiency_snr", "efficiency_distance", "found_missed", "recovered",
                 "background"):
        assert (out / "figures" / f"{name}.png").stat().st_size > 1000
        assert (out / "figures" / f"{name}.pdf").read_bytes().startswith(b"%PDF")
    # every image embedded, nothing fetched from elsewhere (opens offline)
    assert len(re.findall(r'src="data:image/png;base64,', text)) == 5
    assert not re.search(r'(src|href)="(?!data:)', text)
    assert "<script" not in text
    assert "ringsearch 0." in text and spec.config_hash in text
    assert "Sigmoid fits" in text and "wilson" in text
    for csv in ("efficiency.csv", "sigmoid.csv", "sensitivity.csv", "accuracy.csv"):
        assert (out / csv).exists()


def test_report_refuses_unfinished_campaign(tmp_path):
    out = tmp_path / "out"
    run_campaign(small_spec(), out, worker=FAKE, progress=False, max_chunks=1, finalize=False)
    with pytest.raises(InputError, match="unfinished"):
        make_report(out)
    with pytest.raises(InputError, match="not a campaign output folder"):
        make_report(tmp_path)
