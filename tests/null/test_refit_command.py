"""Refusals of the refitting null: fits that missed their checks, too few replicates.

Each refusal is one line (UserError) naming what to change.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from ped2g.compare.pipeline import compare
from ped2g.config import validate
from ped2g.errors import UserError
from ped2g.null.refit_command import fit_engine
from ped2g.contracts.refit_null import RefitNull
from ped2g.contracts.fit_folder import FitSet


def _diagnostics(folder, passed):
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "diagnostics.json").write_text(json.dumps({"engine": "marginal", "checks": {"passed": passed}}))
    return folder


def test_a_fit_that_missed_its_checks_is_refused_in_one_line(tmp_path):
    folder = _diagnostics(tmp_path / "fits" / "north", passed=False)
    with pytest.raises(UserError) as err:
        fit_engine(folder, "north", "stop")
    text = str(err.value)
    assert "'north' missed its fit checks" in text and "\n" not in text
    assert "compare.null_model.kind: breeding_values" in text
    # kept under checks.on_failure: flag, it is used (with a warning in the log)
    assert fit_engine(folder, "north", "flag") == "marginal"
    assert fit_engine(_diagnostics(tmp_path / "fits" / "south", passed=True), "south") == "marginal"


def test_a_missing_diagnostics_file_is_one_line(tmp_path):
    with pytest.raises(UserError, match="diagnostics.json is missing or unreadable"):
        fit_engine(tmp_path, "east")


def _random_draws(rng, S, m, t):
    A = rng.normal(size=(S, m, t, t))
    G = A @ np.swapaxes(A, -1, -2) + t * np.eye(t)
    return G, G + np.eye(t), 5.0 + rng.normal(size=(S, m, t))


def test_compare_refuses_fewer_replicates_than_the_rule_needs():
    rng = np.random.default_rng(0)
    pops, traits = ["a", "b", "c"], ["x", "y"]
    G, P, mean = _random_draws(rng, 20, 3, 2)
    fits = FitSet(populations=pops, traits=traits, G=G, R=P - G, P=P, mean=mean, draw_index=np.arange(20), fits=[])
    Rn = 30
    Gr, Pr, mr = _random_draws(rng, Rn * 10, 3, 2)
    null = RefitNull(populations=pops, traits=traits, replicates=np.arange(Rn),
                     G=Gr.reshape(Rn, 10, 3, 2, 2), P=Pr.reshape(Rn, 10, 3, 2, 2), mean=mr.reshape(Rn, 10, 3, 2),
                     diagnostics=pd.DataFrame({"population": ["a"], "replicate": [0], "rhat_max": [1.0],
                                               "ess_bulk_min": [100.0], "ess_tail_min": [100.0],
                                               "divergences": [0], "seconds": [1.0]}),
                     shared_G=np.eye(2), attrs={})
    config = validate({"traits": traits, "compare": {"skewers": 20}})
    with pytest.raises(UserError) as err:
        compare(fits, None, config, refits=null)
    assert "needs at least 59" in str(err.value) and "compare.null_model.replicates" in str(err.value)
    # with enough replicates every pairwise row gets a p-value
    result = compare(fits, None, config, refits=null, check_replicates=False)
    dist = result.tables["distance"]
    assert dist["p_value"].notna().all() and (dist["p_value"] >= 1 / (Rn + 1)).all()
    assert result.summary["refit_null"]["replicates"] == Rn


@pytest.mark.parametrize("extra, config_text, words", [
    ([], "compare: {null_model: {pilot_replicates: 3}}\n", "run 'ped2g null-refit --pilot' for every population first"),
    (["--pilot", "--pilots", "x.nc"], "", "give one of the two"),
    (["--pilot"], "compare: {null_model: {pilot_replicates: 0}}\n", "no pilot refits to run"),
])
def test_pilot_options_that_do_not_fit_the_config_are_one_line(tmp_path, capsys, extra, config_text, words):
    from cli_runner import run_cli

    config = tmp_path / "config.yaml"
    config.write_text("traits: [wing, tarsus]\n" + config_text)
    status = run_cli(["null-refit", "--config", str(config), "--fits", str(tmp_path / "nofit"), "--population",
                      "a", "--out", str(tmp_path / "out.nc"), *extra])
    err = capsys.readouterr().err.strip().splitlines()
    errors = [ln for ln in err if "error:" in ln]
    assert status == 2 and len(errors) == 1 and words in errors[0], err
    assert not (tmp_path / "out.nc").exists()
