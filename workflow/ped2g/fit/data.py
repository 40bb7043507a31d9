"""The data of one population's fit, prepared once and handed to either engine.

:class:`FitData` is the contract between data preparation (reading the phenotype table, pruning
the pedigree, building design matrices, standardising) and the two engines (``marginal`` and
``latent``). Engines work on the standardised scale; results go back to original units with
``y_center`` and ``y_scale``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..pedigree.core import Pedigree

#: ``RandomEffect.level`` of a record whose level of that effect is unknown.
UNKNOWN_LEVEL = -1


@dataclass
class RandomEffect:
    """An extra random effect with its own covariance matrix across traits.

    Attributes
    ----------
    name : str
        Name used in outputs (``cov_<name>`` in posterior.nc).
    column : str
        The grouping column in the phenotype table.
    level : numpy.ndarray of int64, shape (n_records,)
        Level of each record, 0..n_levels-1, or :data:`UNKNOWN_LEVEL` (-1) where the record's
        cell is blank or a missing-value code: such a record gets no contribution from this
        effect (its row of the incidence matrix Z_c is all zero, docs/methods.md §2.13). Never
        index an array of levels with ``level`` directly (``u[-1]`` would be the last level):
        use :meth:`incidence`, :meth:`take` or :attr:`padded_level`.
    levels : list of str
        Level labels (known levels only).
    """

    name: str
    column: str
    level: np.ndarray
    levels: list[str]

    @property
    def n_levels(self) -> int:
        return len(self.levels)

    @property
    def known(self) -> np.ndarray:
        """Boolean mask (n_records,) of the records whose level is known."""
        return np.asarray(self.level) >= 0

    @property
    def n_unknown(self) -> int:
        """How many records have an unknown level."""
        return int((~self.known).sum())

    @property
    def padded_level(self) -> np.ndarray:
        """``level`` with unknown levels pointing at an extra row ``n_levels``: index an array of
        levels with one row of zeros appended (see :meth:`take`) to get each record's effect."""
        return np.where(self.known, self.level, self.n_levels).astype(np.int64)

    def incidence(self) -> np.ndarray:
        """The dense incidence matrix Z_c (n_records, n_levels): one 1 per record of a known level,
        a row of zeros for a record of an unknown level."""
        Z = np.zeros((len(self.level), self.n_levels))
        rows = np.flatnonzero(self.known)
        Z[rows, np.asarray(self.level)[rows]] = 1.0
        return Z

    def take(self, u: np.ndarray) -> np.ndarray:
        """Each record's effect from the level values ``u`` (..., n_levels, t): ``Z_c u`` along the
        level axis (second from last), zero for records of an unknown level."""
        u = np.asarray(u)
        pad = np.zeros(u.shape[:-2] + (1, u.shape[-1]), dtype=u.dtype)
        return np.concatenate([u, pad], axis=-2)[..., self.padded_level, :]


@dataclass
class FitData:
    """Everything an engine needs for one population.

    Attributes
    ----------
    population : str
    traits : list of str
    pedigree : Pedigree
        The pruned pedigree: phenotyped animals and their informative ancestors.
    phenotyped : numpy.ndarray of bool, shape (n_animals,)
        Whether each pedigree animal has at least one record.
    record_animal : numpy.ndarray of int64, shape (n_records,)
        Position in ``pedigree`` of the animal of each record.
    y : numpy.ndarray, shape (n_records, t)
        Standardised records ((y - y_center) / y_scale), NaN where missing.
    y_center, y_scale : numpy.ndarray, shape (t,)
        Per-trait mean and phenotypic SD of the raw records.
    X : numpy.ndarray, shape (n_records, p)
        Fixed-effect design shared by all traits; column 0 is the intercept. Numeric covariates
        are centred and scaled (see x_scale); categorical ones are treatment-coded against their
        first level.
    x_names : list of str
        Names of the columns of X.
    random : list of RandomEffect
    x_scale : numpy.ndarray, shape (p,), optional
        Numeric covariates are centred and divided by their SD so that one prior scale suits
        them; ``x_scale`` holds those SDs (1 for the intercept and the dummy columns). A
        coefficient in original units is ``beta[x, j] * y_scale[j] / x_scale[x]``.
    notes : list of str
        What preparation changed (animals added as founders, records dropped, ...), for the logs
        and diagnostics.json.
    """

    population: str
    traits: list[str]
    pedigree: Pedigree
    phenotyped: np.ndarray
    record_animal: np.ndarray
    y: np.ndarray
    y_center: np.ndarray
    y_scale: np.ndarray
    X: np.ndarray
    x_names: list[str]
    random: list[RandomEffect] = field(default_factory=list)
    x_scale: np.ndarray | None = None
    notes: list[str] = field(default_factory=list)

    @property
    def n_traits(self) -> int:
        return self.y.shape[1]

    @property
    def n_records(self) -> int:
        return self.y.shape[0]

    @property
    def missing(self) -> np.ndarray:
        """Boolean mask (n_records, t) of missing trait values."""
        return np.isnan(self.y)

    def with_records(self, y: np.ndarray, center: np.ndarray, scale: np.ndarray) -> "FitData":
        """A copy with other standardised records ``y`` (same animals, design and missing cells;
        NaN kept where this one is missing), centred and scaled by ``center`` and ``scale``.
        Used to refit simulated data sets on one population's design."""
        import copy

        new = copy.copy(self)
        new.y = np.where(self.missing, np.nan, y)
        new.y_center, new.y_scale = np.asarray(center, dtype=float), np.asarray(scale, dtype=float)
        return new

    @property
    def repeated_records(self) -> bool:
        """Whether some animal has more than one record."""
        return len(np.unique(self.record_animal)) < len(self.record_animal)
