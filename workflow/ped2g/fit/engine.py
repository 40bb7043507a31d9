"""The engine interface, the engines and the choice between them (``model.engine``).

An engine fits the animal model of one population (docs/methods.md §2). It is an object with the
methods of :class:`Engine`; :func:`get` makes one by name (one object per population: an engine
may keep what it computed for the population's design, as the marginal engine keeps its
eigendecomposition). The fit stage (:mod:`ped2g.fit.pipeline`) and the refitting null
(:mod:`ped2g.null.refit`) use engines only through this interface.

Choosing: ``auto`` tries the engines in the order of :data:`AUTO_ORDER` and takes the first that
prefers itself and applies (docs/methods.md §2.9). The sparse engine (every random effect
integrated out through the sparse mixed-model equations) comes first and prefers itself for designs
with extra random effects (maternal, permanent-environment, cohort, ...) and whenever the marginal
engine cannot fit the data in memory; it applies while its factor fits. The marginal engine
(breeding values integrated out; far better mixing of G per gradient than the latent engine)
applies while its dense eigendecomposition fits in the memory this process has
(:func:`ped2g.fit.marginal.memory_needed`) and prefers itself while the pre-rotated projections that
every gradient touches stay below :data:`ped2g.fit.marginal.AUTO_PROJECTION_CELLS`; otherwise the
latent engine (linear cost in the number of animals, no dense matrices). So a design without extra
random effects that fits in memory (the demo) keeps the marginal engine. The choice and its reason
go into diagnostics.json.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np

from ..errors import UserError
from .data import FitData

#: Values of ``model.engine``; ``auto`` tries the engines in the order of :data:`AUTO_ORDER`.
#: The sparse engine is tried first: it prefers itself for extra random effects and beyond the
#: marginal engine's memory (:meth:`ped2g.fit.sparse.SparseEngine.prefers`).
ENGINES = ("auto", "marginal", "latent", "sparse")
AUTO_ORDER = ("sparse", "marginal", "latent")


@dataclass
class BuiltModel:
    """What an engine hands the sampler and the fit's diagnostics for one data set.

    Attributes
    ----------
    model : pymc.Model
        On the standardised scale, with the Deterministics ``G``, ``R`` (t, t), ``beta`` (p, t,
        rows in the order of ``FitData.x_names``) and ``cov_<name>`` (t, t) per extra random
        effect; covariances from :func:`ped2g.fit.priors.covariance_prior` and fixed effects from
        :func:`ped2g.fit.priors.fixed_effects_prior`, so every engine has the same prior. Large
        arrays enter as ``pm.Data``.
    extra_steps : list
        PyMC step methods for variables NUTS must not move; with any, the sampler is PyMC's own
        (:func:`ped2g.fit.sample.run`).
    nutpie_options : dict or None
        Extra keyword arguments for ``nutpie.sample``.
    numba_opt_level : int or None
        LLVM optimisation level for numba while compiling this model (None: numba's own).
    missing_values : str
        How missing trait values are handled: ``none``, ``gibbs``, ``nuts`` or ``masked``
        (recorded in diagnostics.json).
    timings : dict
        Seconds spent building, recorded with the sampler's figures in diagnostics.json.
    """

    model: Any
    extra_steps: list = field(default_factory=list)
    nutpie_options: dict | None = None
    numba_opt_level: int | None = None
    missing_values: str = "none"
    timings: dict[str, float] = field(default_factory=dict)


class Engine(Protocol):
    """What every engine provides (``model_config`` is ``config["model"]``)."""

    name: str

    def applies(self, data: FitData, model_config: dict) -> tuple[bool, str]:
        """Whether the engine can fit these data on this machine, and why (or why not)."""

    def prefers(self, data: FitData, model_config: dict) -> tuple[bool, str]:
        """Whether ``auto`` should take it when it applies; if not, why."""

    def build(self, data: FitData, model_config: dict) -> BuiltModel:
        """The model for ``data`` and what the sampler and diagnostics need with it."""

    def data_values(self, data: FitData, model_config: dict) -> dict[str, np.ndarray]:
        """The model's ``pm.Data`` values that change when only the records change (for
        ``compiled.with_data``); empty when a model must be built per data set instead."""

    def breeding_values(self, data: FitData, idata, rng: np.random.Generator, max_draws: int | None = None,
                        conditional_mean: bool = False) -> np.ndarray:
        """Breeding values of every animal of ``data.pedigree``, shape (S, n_animals, t),
        standardised scale, for S = at most ``max_draws`` evenly thinned pooled draws of
        ``idata.posterior`` (chain-major). An engine that integrates them out draws them from
        their exact conditional distribution given each draw (with ``conditional_mean``, the
        conditional means: BLUP with known G and R); one that samples them returns its draws."""


def get(name: str) -> Engine:
    """A new engine object of the given name (``marginal``, ``latent`` or ``sparse``)."""
    if name == "marginal":
        from .marginal import MarginalEngine

        return MarginalEngine()
    if name == "latent":
        from .latent import LatentEngine

        return LatentEngine()
    if name == "sparse":
        from .sparse import SparseEngine

        return SparseEngine()
    raise UserError(f"engine {name!r} is not one of {', '.join(AUTO_ORDER)}")


def choose(data: FitData, requested: str, model_config: dict | None = None) -> tuple[str, Engine, str]:
    """Return (engine name, engine, reason) for ``model.engine`` = ``requested``.

    Raises
    ------
    UserError
        If ``requested`` is not one of :data:`ENGINES`, or the engine requested cannot fit the data.
    """
    model_config = model_config or {}
    if requested not in ENGINES:
        raise UserError(f"config key 'model.engine' is {requested!r}; allowed: {', '.join(ENGINES)}")
    if requested != "auto":
        engine = get(requested)
        ok, why = engine.applies(data, model_config)
        if not ok:
            others = " or ".join(f"'{e}'" for e in (*AUTO_ORDER, "auto") if e != requested)
            raise UserError(f"config key 'model.engine' asks for '{requested}', but {why}; use {others}")
        return engine.name, engine, f"requested in the config; {why}"
    passed = []
    for name in AUTO_ORDER:
        engine = get(name)
        # prefers first: it is cheap, and an engine that is not wanted need not analyse the design
        preferred, why_preferred = engine.prefers(data, model_config)
        if not preferred:
            passed.append((name, why_preferred))
            continue
        ok, why = engine.applies(data, model_config)
        if not ok:
            passed.append((name, why))
            continue
        what = f"{why_preferred}; {why}" if why_preferred else f"the {name} engine applies ({why})"
        skipped = "".join(f"; not {n}: {w}" for n, w in passed)
        return name, engine, f"auto: {what}{skipped}"
    raise UserError(f"population '{data.population}': no engine can fit these data "
                    f"({'; '.join(w for _, w in passed)})")
