"""The pedigree stage: cleaning, ordering, inbreeding, A-inverse, pruning and summaries.

Public API (import from the submodules; they are not imported here so ``ped2g --help`` stays
fast):

* :mod:`ped2g.pedigree.clean` -- ``read_raw_pedigree``, ``clean_pedigree``,
  ``order_parents_first``;
* :mod:`ped2g.pedigree.relationships` -- ``inbreeding``, ``relationship_inverse``,
  ``relationship_matrix``, ``log_det_relationship``, ``ancestors``;
* :mod:`ped2g.pedigree.prune` -- ``prune``;
* :mod:`ped2g.pedigree.summary` -- ``summarise``.
"""

from .core import Pedigree, mendelian_coefficients

__all__ = ["Pedigree", "mendelian_coefficients"]
