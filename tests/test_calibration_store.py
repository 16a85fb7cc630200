"""Saving and loading the learnt calibration."""

from __future__ import annotations

import json
import logging

import pytest

from daemon.core.calibration_store import calibration_path, load_calibration, save_calibration
from daemon.errors import OutputError
from estimators.current import Calibration, CurrentEstimator, CurrentParams
from estimators.runner import run
from tests.synth import synth_passage, tacking_legs


def test_learnt_calibration_persists_and_reloads(tmp_path):
    # GIVEN an estimator that has calibrated itself on tacks
    syn = synth_passage(21, 1800, tacking_legs(1800, 300), k=1.06, offset_deg=3.0)
    est = CurrentEstimator(CurrentParams())
    for _ in run(est, syn.samples):
        pass
    cal = est.calibration()
    # WHEN it is saved and loaded again
    save_calibration(tmp_path, cal, saved_utc_s=1.0)
    back = load_calibration(tmp_path)
    # THEN it is the same, and a new estimator starting from it reports it at once
    assert back == cal
    assert abs(back.stw_scale - 1.06) < 0.02
    assert not list(tmp_path.glob("*.tmp"))
    fresh = CurrentEstimator(CurrentParams(), back)
    assert fresh.calibration().stw_scale == back.stw_scale


def test_missing_file_is_no_calibration(tmp_path):
    assert load_calibration(tmp_path) is None


@pytest.mark.parametrize("text", ["{not json", json.dumps({"format": "something else"}),
                                  json.dumps({"format": "offwatch-calibration-1", "calibration": {"stw_scale": "x"}})])
def test_corrupt_file_is_logged_and_ignored(tmp_path, caplog, text):
    calibration_path(tmp_path).write_text(text)
    with caplog.at_level(logging.WARNING):
        assert load_calibration(tmp_path) is None
    assert "corrupt" in caplog.text


def test_unwritable_directory_raises_output_error(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("")
    with pytest.raises(OutputError):
        save_calibration(blocker / "sub", Calibration(), saved_utc_s=0.0)
