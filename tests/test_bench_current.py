"""The current benchmark's ``--set``: a trial parameter is filled and checked as the config file's would be."""

from __future__ import annotations

import dataclasses

import pytest

from daemon.core.config import ConfigError
from estimators.current import CurrentParams
from tools.bench.current import trial_params


def test_a_trial_changes_only_the_keys_it_names():
    # GIVEN two keys set as they would be written in the config file (TOML values)
    p = trial_params(["current_walk_kn_per_sqrt_h=0.1", "rejections_before_reset = 5"])
    # THEN those two change, with the config's types, and every other key keeps its default
    assert p.current_walk_kn_per_sqrt_h == 0.1 and p.rejections_before_reset == 5
    changed = {f.name for f in dataclasses.fields(p) if getattr(p, f.name) != getattr(CurrentParams(), f.name)}
    assert changed == {"current_walk_kn_per_sqrt_h", "rejections_before_reset"}


@pytest.mark.parametrize("setting", ["nosuch_key=1", "current_walk_kn_per_sqrt_h=-1", "current_walk_kn_per_sqrt_h",
                                     "current_walk_kn_per_sqrt_h=fast", "rejections_before_reset=2.5"])
def test_a_trial_the_config_would_refuse_is_refused(setting):
    # an unknown key, a value out of its range, no value, not a number, a fraction for a count
    with pytest.raises(ConfigError):
        trial_params([setting])
