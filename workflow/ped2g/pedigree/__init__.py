"""The pedigree stage: cleaning, ordering, inbreeding, A-inverse, pruning and summaries."""

from .core import Pedigree, mendelian_coefficients

__all__ = ["Pedigree", "mendelian_coefficients"]
