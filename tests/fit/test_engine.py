"""The engine choice follows model.engine, the design and the engines' limits (docs/methods.md §2.9).

Oracles: the rule as documented (extra random effects, or a marginal engine beyond memory: sparse
where its factor fits; otherwise marginal while it prefers itself; else latent) and exact
arithmetic of the memory need (24 bytes x records^2 + a constant, docs/methods.md §2.5).
"""

import dataclasses

import numpy as np
import pytest

from ped2g.errors import UserError
from ped2g.fit import engine, marginal, sparse
from ped2g.fit.data import FitData
from ped2g.pedigree.core import Pedigree


def data_with(n, missing_fraction, seed=0):
    rng = np.random.default_rng(seed)
    ped = Pedigree(ids=np.array([f"a{i}" for i in range(n)], dtype=object), sire=-np.ones(n, np.int64),
                   dam=-np.ones(n, np.int64), generation=np.zeros(n, np.int64), inbreeding=np.zeros(n))
    y = rng.normal(size=(n, 4))
    y[rng.random((n, 4)) < missing_fraction] = np.nan
    return FitData(population="p", traits=list("abcd"), pedigree=ped, phenotyped=np.ones(n, bool),
                   record_animal=np.arange(n), y=y, y_center=np.zeros(4), y_scale=np.ones(4),
                   X=np.ones((n, 1)), x_names=["intercept"])


def test_auto_takes_marginal_for_small_data_and_latent_beyond_its_limits():
    name, _, reason = engine.choose(data_with(300, 0.1), "auto")
    assert name == "marginal" and "applies" in reason
    # a few missing cells (300 records x ~120 cells <= AUTO_JOINT_CELLS) are sampled jointly by NUTS
    assert marginal.missing_mode(data_with(300, 0.1), {}) == "nuts"
    assert marginal.missing_mode(data_with(300, 0.1), {"missing_values": "gibbs"}) == "gibbs"
    # Missing cells drawn by the Gibbs step (the default) cost no projections per gradient...
    many = data_with(6000, 0.1)
    name, _, reason = engine.choose(many, "auto", {"missing_values": "auto"})
    assert name == "marginal" and marginal.missing_mode(many, {}) == "gibbs"
    # ...but as NUTS parameters 6000 records x ~2400 missing cells = 1.4e7 cells > AUTO_PROJECTION_CELLS
    name, _, reason = engine.choose(many, "auto", {"missing_values": "nuts"})
    assert name == "latent" and "memory-bound" in reason
    assert marginal.missing_mode(data_with(50, 0.0), {"missing_values": "nuts"}) == "none"
    with pytest.raises(UserError, match="model.missing_values' is 'maybe'"):
        marginal.missing_mode(many, {"missing_values": "maybe"})
    with pytest.raises(UserError, match="allowed: auto, marginal, latent"):
        engine.choose(many, "fast")


def test_marginal_engine_needs_its_eigendecomposition_to_fit_in_memory(monkeypatch):
    from ped2g import machine

    data = data_with(2000, 0.0)
    need = marginal.memory_needed(2000)
    assert need == 24 * 2000 ** 2 + marginal.OTHER_BYTES
    # just enough memory, then just too little (a SLURM job's limit, say)
    monkeypatch.setattr(machine, "available_memory", lambda: need / marginal.MEMORY_SHARE * 1.01)
    assert engine.choose(data, "auto")[0] == "marginal"
    monkeypatch.setattr(machine, "available_memory", lambda: need / marginal.MEMORY_SHARE * 0.99)
    name, _, reason = engine.choose(data, "auto")
    # beyond the marginal engine's memory the sparse engine is taken, and the reason says why
    assert name == "sparse" and "need 1.1 GB" in reason and "eigendecomposition" in reason
    assert "marginal engine does not apply" in reason
    # ...unless its own factor does not fit either: then the latent engine
    monkeypatch.setattr(sparse, "BYTES_PER_FACTOR_NONZERO", 1e9)
    name, _, reason = engine.choose(data, "auto")
    assert name == "latent" and "sparse factor" in reason and "eigendecomposition" in reason
    with pytest.raises(UserError, match="model.engine' asks for 'marginal'.*need 1.1 GB"):
        engine.choose(data, "marginal")
    # where the available memory cannot be read, the engine is not refused on memory grounds
    monkeypatch.setattr(machine, "available_memory", lambda: None)
    assert engine.choose(data, "auto")[0] == "marginal"


def test_extra_random_effects_take_the_sparse_engine(monkeypatch):
    # The sparse engine integrates every extra level out; on the field design measured it finished
    # sooner per effective sample than the marginal engine sampling each level (benchmarks/README.md),
    # so auto takes it for extra random effects, within memory or beyond the marginal engine's.
    import field_study
    from ped2g import machine

    data, cfg, _ = field_study.design(seed=2, animals=120, founders=20, phenotyped=60)
    assert [e.name for e in data.random] == ["maternal", "permanent", "cohort"]
    name, eng, reason = engine.choose(data, "auto", cfg["model"])
    assert name == "sparse" and isinstance(eng, sparse.SparseEngine)
    assert "maternal, permanent, cohort" in reason and "integrated out" in reason and "non-zeros" in reason
    # the same records without the extra effects keep the marginal engine, and the reason says why
    plain = dataclasses.replace(data, random=[])
    name, _, reason = engine.choose(plain, "auto", cfg["model"])
    assert name == "marginal" and "not sparse: without extra random effects" in reason
    # beyond the marginal engine's memory the design goes to the sparse engine, saying so
    need = marginal.memory_needed(data.n_records)
    monkeypatch.setattr(machine, "available_memory", lambda: need / marginal.MEMORY_SHARE * 0.99)
    name, eng, reason = engine.choose(data, "auto", cfg["model"])
    assert name == "sparse" and "marginal engine does not apply" in reason
    # ...and if its factor does not fit either, to the latent engine
    monkeypatch.setattr(sparse, "BYTES_PER_FACTOR_NONZERO", 1e12)
    assert engine.choose(data, "auto", cfg["model"])[0] == "latent"
    # asked for by name, the marginal engine still runs a design with extra effects
    monkeypatch.setattr(machine, "available_memory", lambda: None)
    assert engine.choose(data, "marginal", cfg["model"])[0] == "marginal"


def test_the_demo_keeps_the_marginal_engine():
    # The demo's config has no extra random effects and its populations fit in memory many times
    # over (at most a few hundred records each): auto keeps the marginal engine.
    from pathlib import Path

    from ped2g.config import load_config
    from ped2g.fit.command import load_pedigree
    from ped2g.fit.prepare import prepare
    from ped2g.io import read_table

    root = Path(__file__).resolve().parents[2]
    config = load_config(root / "config" / "config.yaml")
    assert config["random"] == [] and config["model"]["engine"] == "auto"
    config["data"] = {**config["data"], "pedigree": str(root / config["data"]["pedigree"]),
                      "phenotypes": str(root / config["data"]["phenotypes"])}
    phen = read_table(config["data"]["phenotypes"], "phenotype table")
    ped = load_pedigree(None, config)
    for population in sorted(set(phen["population"])):
        data = prepare(config, phen, ped, population)
        name, _, reason = engine.choose(data, "auto", config["model"])
        assert name == "marginal", (population, reason)
        assert "not sparse: without extra random effects the marginal engine fits in memory" in reason
