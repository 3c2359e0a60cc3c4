"""``ringsearch campaign run|status|report`` from the command line: output and errors."""

from __future__ import annotations

import json

import pytest
from test_campaign_execute import FAKE, TOML, small_spec

from ringsearch.campaign import execute as ex
from ringsearch.campaign import run_campaign
from ringsearch.cli import main


def test_help_lists_the_actions(capsys):
    with pytest.raises(SystemExit):
        main(["campaign", "--help"])
    text = capsys.readouterr().out
    for word in ("run", "status", "report", "--workers 2", "--scheduler", "resumes"):
        assert word in text


def test_status_and_report(tmp_path, capsys):
    out = tmp_path / "out"
    run_campaign(small_spec(), out, worker=FAKE, progress=False, max_chunks=3, finalize=False)
    assert main(["campaign", "status", str(out)]) == 0
    assert "3 / 10" in capsys.readouterr().out
    assert main(["campaign", "report", str(out)]) == 2
    assert "unfinished" in capsys.readouterr().err
    run_campaign(small_spec(), out, worker=FAKE, progress=False)
    assert main(["campaign", "status", str(out), "--json"]) == 0
    status = json.loads(capsys.readouterr().out)
    assert status["complete"] and status["assembled"]
    assert main(["campaign", "report", str(out)]) == 0
    assert (out / "report.html").exists()


@pytest.mark.parametrize("edit, words", [
    (("count = 60", "count = 60\ncolour = 3"), "injections.colour"),
    (("low = 50, high = 80", "low = 80, high = 50"), "injections.mass.low"),
    (("low = 0.3, high = 0.9", "low = 0.3, high = 1.0"), "injections.spin"),
    (("chunk_s = 16", "chunk_s = 16\nduration_s = 64"), "more than the data can hold"),
])
def test_bad_campaign_files_exit_2_with_one_sentence(tmp_path, capsys, edit, words):
    path = tmp_path / "c.toml"
    path.write_text(TOML.replace(*edit))
    assert main(["campaign", "run", str(path), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err.strip()
    assert words in err and "Traceback" not in err and len(err.splitlines()) == 1
    assert not (tmp_path / "o").exists()  # nothing written


def test_dead_scheduler_exits_2(tmp_path, capsys, monkeypatch):
    pytest.importorskip("distributed")
    monkeypatch.setattr(ex, "SCHEDULER_TIMEOUT_S", 2.0)
    path = tmp_path / "c.toml"
    path.write_text(TOML)
    code = main(["campaign", "run", str(path), "--out", str(tmp_path / "o"),
                 "--scheduler", "tcp://127.0.0.1:9"])
    assert code == 2 and "did not answer" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()  # nothing written before the scheduler answered


def test_folders_that_hold_no_campaign_exit_2(tmp_path, capsys):
    busy = tmp_path / "busy"
    busy.mkdir()
    (busy / "notes.txt").write_text("mine")
    for argv in (["campaign", "status", str(busy)], ["campaign", "report", str(busy)]):
        assert main(argv) == 2
        err = capsys.readouterr().err
        assert "not a campaign output folder" in err and len(err.splitlines()) == 1
    path = tmp_path / "c.toml"
    path.write_text(TOML)
    assert main(["campaign", "run", str(path), "--out", str(busy)]) == 2
    assert "holds no campaign" in capsys.readouterr().err
    assert sorted(p.name for p in busy.iterdir()) == ["notes.txt"]  # left untouched


def test_other_campaign_in_folder_exits_2(tmp_path, capsys):
    path = tmp_path / "c.toml"
    path.write_text(TOML)
    out = tmp_path / "o"
    from ringsearch.campaign import load_spec

    run_campaign(load_spec(path), out, worker=FAKE, progress=False, max_chunks=1,
                 finalize=False)
    path.write_text(TOML.replace("seed = 3", "seed = 4"))
    assert main(["campaign", "run", str(path), "--out", str(out)]) == 2
    assert "different configuration" in capsys.readouterr().err
