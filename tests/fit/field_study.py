"""An invented wild-population-style study for the sparse engine's tests and benchmark.

Built with the project's own simulator: :func:`ped2g.simulate.study.simulate_study` makes the
pedigree (overlapping generations, parents written as unknown at random), the phenotyped animals,
their repeated records in successive years and the missing cells. On top, the phenotype table gets
a ``dam`` column (the dam as written in the pedigree; blank where the pedigree does not name her,
so some records have an unknown dam). Three extra random effects go with it: a maternal effect on
``dam``, a permanent-environment effect on ``id`` and a cohort effect on ``year``.

Two kinds of records:

* :func:`tables` -- the raw tables for the command line (the simulator's records, with a maternal
  and a cohort effect added per dam and per year), for end-to-end runs;
* :func:`simulate` -- records drawn exactly from the model on a prepared design, through the
  refitting null's record simulator (:func:`ped2g.null.refit.simulate_records`: breeding values
  down the pruned pedigree, one draw per level of each extra effect, nothing for records of an
  unknown level), for recovery and benchmarks where the truth must be the model's.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ped2g.config import validate
from ped2g.fit.prepare import prepare, standardise
from ped2g.null.refit import DesignParameters, simulate_records
from ped2g.pedigree.clean import clean_pedigree
from ped2g.simulate.study import StudySettings, simulate_study

TRAITS = ("mass", "wing", "tail")
RANDOM = [{"name": "maternal", "column": "dam"}, {"name": "permanent", "column": "id"},
          {"name": "cohort", "column": "year"}]
#: Share of the phenotypic variance of each extra effect in the truth, and the correlation
#: parameter of its structure rho^|k-l| (invented values, each covariance positive definite).
EFFECT_SHARES = {"maternal": (0.15, 0.4), "permanent": (0.12, 0.2), "cohort": (0.08, -0.3)}


def settings(animals: int = 300, founders: int = 40, phenotyped: int = 200, records_per_animal: int = 2,
             years: int = 9, missing: float = 0.12, unknown_parents: float = 0.2) -> StudySettings:
    return StudySettings(populations=("north",), traits=TRAITS, animals=animals, founders=founders,
                         years=years, phenotyped=phenotyped, records_per_animal=records_per_animal,
                         permanent_fraction=0.1, unknown_parent_fraction=unknown_parents,
                         missing_value_fraction=missing, duplicate_rows=0, absent_parents=0,
                         stray_whitespace=0, missing_parent_codes=("NA", ""))


def _structure(sd: np.ndarray, share: float, rho: float) -> np.ndarray:
    t = len(sd)
    k = np.arange(t)
    return share * np.outer(sd, sd) * rho ** np.abs(k[:, None] - k[None, :])


def tables(seed: int = 7, **kw):
    """(raw pedigree table, phenotype table with ``dam``, truth dict) for the command line."""
    st = simulate_study(settings(**kw), seed=seed)
    truth = st.truth["populations"]["north"]
    G, R = np.array(truth["G"]), np.array(truth["R"])
    sd = np.sqrt(np.diag(G + R))
    covs = {name: _structure(sd, *EFFECT_SHARES[name]) for name in EFFECT_SHARES}
    ped = st.pedigree.astype(str)
    written_dam = dict(zip(ped["id"], ped["dam"].where(~ped["dam"].isin(["NA", "", "nan"]), "")))
    phen = st.phenotypes.copy()
    phen.insert(3, "dam", [written_dam.get(i, "") for i in phen["id"]])
    rng = np.random.default_rng(seed + 1)
    for name, column in (("maternal", "dam"), ("cohort", "year")):
        values = phen[column].astype(str)
        levels = sorted(set(values) - {""})
        u = rng.standard_normal((len(levels), len(TRAITS))) @ np.linalg.cholesky(covs[name]).T
        index = {v: i for i, v in enumerate(levels)}
        eff = np.array([u[index[v]] if v in index else np.zeros(len(TRAITS)) for v in values])
        for j, trait in enumerate(TRAITS):
            phen[trait] = phen[trait] + eff[:, j]
    return st.pedigree, phen, {"G": G, "R": R, **covs}


def config(random=None, **model):
    return validate({"traits": list(TRAITS), "fixed": {"sex": "categorical"},
                     "random": RANDOM if random is None else random, "model": model})


def design(seed: int = 7, model: dict | None = None, random: list | None = None, **kw):
    """(prepared FitData, validated config, truth dict in original units) of the study."""
    ped_raw, phen, truth = tables(seed, **kw)
    raw = ped_raw.fillna("").astype(str)
    raw.index = range(2, 2 + len(raw))
    ped, _ = clean_pedigree(raw, missing=("NA", ""))
    phen = phen.astype({"dam": str, "year": str}).fillna({"dam": ""})
    phen = phen.astype(object).where(phen.notna(), "").astype(str)
    phen.index = range(2, 2 + len(phen))
    cfg = config(random, **(model or {}))
    data = prepare(cfg, phen, ped, "north")
    return data, cfg, truth


def simulate(data, truth: dict, rng: np.random.Generator, mean: float = 10.0):
    """A copy of ``data`` with records drawn from the model with the true covariances (original
    units, then standardised as the fit does); same animals, levels and missing cells."""
    covs = [truth[eff.name] for eff in data.random]
    params = DesignParameters(mu=np.full((data.n_records, data.n_traits), mean), R=truth["R"], covariances=covs)
    Y = simulate_records(data, truth["G"], params, rng)
    y, center, scale = standardise(Y)
    return data.with_records(y, center, scale)
