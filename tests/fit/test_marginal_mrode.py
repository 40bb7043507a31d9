"""The marginal engine reproduces Mrode's (2014) published BLUP solutions with G and R known.

With G and R held fixed and a very wide normal prior on the sex effects, the posterior of the sex
effects is Gaussian, so its mode is the BLUE (to a relative error of order prior variance^-1),
and the conditional mean of the breeding values given the mode is the BLUP (Henderson 1975).
Source of the expected values: Mrode (2014), p. 74 (see tests/fit/mrode.py). Tolerance 1e-3
(the book prints three decimals).
"""

import arviz as az
import numpy as np
import pymc as pm
import pytest

from ped2g.fit import marginal
from ped2g.fit.prepare import prepare

from mrode import SOLUTIONS, config, pedigree, phenotypes


def map_idata(model):
    point = pm.find_MAP(model=model, progressbar=False, maxeval=20000, seed=1)
    names = ["G", "R", "beta"] + (["missing"] if "missing" in point else [])
    return az.from_dict(posterior={k: np.asarray(point[k])[None, None] for k in names})


@pytest.mark.parametrize("example", ["E3", "E1", "E2"])
def test_mrode_blup(example):
    cfg = config(example)
    data = prepare(cfg, phenotypes(), pedigree(), "demo")
    # A posterior mode needs every unknown as a model parameter: missing cells (if any) by NUTS,
    # not by the Gibbs step.
    model = marginal.build_model(data, {**cfg["model"], "missing_values": "nuts"})
    idata = map_idata(model)
    beta = idata.posterior["beta"].values[0, 0]
    female = data.y_center + data.y_scale * beta[0]
    male = female + data.y_scale * beta[data.x_names.index("sex[M]")]
    bv = marginal.breeding_values(data, idata, np.random.default_rng(0), conditional_mean=True)[0]
    bv = bv * data.y_scale
    order = [data.pedigree.index[str(i)] for i in range(1, 9)]
    for j, trait in enumerate(data.traits):
        got = np.concatenate([[male[j], female[j]], bv[order, j]])
        np.testing.assert_allclose(got, SOLUTIONS[example][trait], atol=1e-3, err_msg=trait)
