"""Choosing the engine: ``model.engine`` is ``marginal``, ``latent`` or ``auto``.

``auto`` takes the marginal engine (breeding values integrated out; far better mixing of G per
gradient) whenever it applies -- while its dense eigendecomposition fits in the memory this
process has (:func:`ped2g.fit.marginal.memory_needed`) -- and the pre-rotated projections that every gradient touches (extra random-effect levels, and missing
trait values with ``model.missing_values: nuts``) stay below
:data:`ped2g.fit.marginal.AUTO_PROJECTION_CELLS` (beyond that each gradient is memory-bound and
the marginal engine loses its advantage); otherwise the latent engine (linear cost in the number
of animals, no dense matrices). The choice and its reason go into diagnostics.json.
"""

from __future__ import annotations

import importlib
from types import ModuleType

from ..errors import UserError
from .data import FitData

ENGINES = ("auto", "marginal", "latent")


def _load(name: str) -> ModuleType:
    return importlib.import_module(f"ped2g.fit.{name}")


def choose(data: FitData, requested: str, model_config: dict | None = None) -> tuple[str, ModuleType, str]:
    """Return (engine name, engine module, reason); ``model_config`` is ``config["model"]``.

    Raises
    ------
    UserError
        If ``requested`` is not one of :data:`ENGINES`, or the marginal engine is requested for
        data it cannot fit.
    """
    if requested not in ENGINES:
        raise UserError(f"config key 'model.engine' is {requested!r}; allowed: {', '.join(ENGINES)}")
    marginal = _load("marginal")
    ok, why = marginal.applicable(data, model_config)
    if requested == "marginal":
        if not ok:
            raise UserError(f"config key 'model.engine' asks for 'marginal', but {why}; use 'latent' or 'auto'")
        return "marginal", marginal, f"requested in the config; {why}"
    if requested == "latent":
        latent = _load("latent")
        return "latent", latent, "requested in the config"
    cells = marginal.projection_cells(data, model_config)
    if ok and cells <= marginal.AUTO_PROJECTION_CELLS:
        return "marginal", marginal, f"auto: the marginal engine applies ({why})"
    if ok:
        why = (f"the projections its gradients touch (extra random-effect levels, missing values "
               f"sampled by NUTS) have {cells:.3g} cells, "
               f"above {marginal.AUTO_PROJECTION_CELLS:.3g} where each gradient becomes memory-bound")
    latent = _load("latent")
    ok_l, why_l = latent.applicable(data)
    if not ok_l:
        raise UserError(f"population '{data.population}': no engine can fit these data ({why}; {why_l})")
    return "latent", latent, f"auto: the marginal engine does not apply ({why})"
