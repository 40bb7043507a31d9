"""An invented multi-population study with known G, R, means and fixed effects.

:func:`simulate_study` builds, for every population, a pedigree with overlapping generations,
simulates breeding values down it (:func:`~ped2g.simulate.breeding_values.simulate_breeding_values`)
and phenotypic records on top, then writes them the way field data arrive: some parents unknown,
some parents listed only as parents (no row of their own), a few exact duplicate rows, a few
identifiers with stray white space, missing trait values. Every true parameter goes into the
truth dict (written as ``truth.yaml`` by ``ped2g simulate``).

The model of a record of animal i of population j (one row of the phenotype table) is

    y = μ_j + s_j [male] + u_i + c_brood + p_i + e,
    u ~ MatrixNormal(0, A_j, G_j),  c ~ N(0, C_j),  p ~ N(0, E_j^perm),  e ~ N(0, R_j),

so the phenotypic covariance of a record is ``P_j = G_j + C_j + E_j^perm + R_j``. ``μ_j`` is the
expected value of a female, ``s_j`` the male − female difference. The reference G is built on
the scale of the reference population's phenotypic standard deviations,

    G_std = D_h C_g D_h,   D_h = diag(sqrt(h²)),   (C_g)_kl = ρ_g^|k−l|,

and converted to original units with the phenotypic SDs ``σ_k = cv · μ_k``:
``G = diag(σ) G_std diag(σ)``. The other populations change G_std in one known way
(``designs``):

* ``reference`` — G_std itself.
* ``reduced`` — the variance along one eigen-axis ``e_a`` of the reference is multiplied by
  ``reduction``: ``G_std − (1 − κ) λ_a e_a e_a'``; every other axis is unchanged.
* ``rotated`` — the leading axis is turned by ``rotation_degrees`` toward the second axis,
  ``Q G_std Q'`` with Q the plane rotation of (e_1, e_2); the eigenvalues are unchanged.

Assumptions built into the simulation (state them with any result checked against it): additive
infinitesimal inheritance (no dominance, epistasis or genotype-by-environment interaction);
unrelated, non-inbred founders drawn from one base population per population with covariance G;
random mating among the breeding animals and no selection; residuals independent between records
and normal; parents that are written as unknown were known to the simulation, so the recorded
pedigree misses relationships that exist (as in the field).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, NamedTuple

import numpy as np
import pandas as pd

from .. import __version__
from ..errors import UserError
from ..pedigree.core import Pedigree
from ..pedigree.relationships import inbreeding
from ..rng import generator
from . import DEMO_SEED
from .breeding_values import covariance_factor, simulate_breeding_values

__all__ = ["StudySettings", "Study", "simulate_study", "DESIGNS", "DEMO_SEED"]

#: Ways a population's G can differ from the reference's.
DESIGNS = ("reference", "reduced", "rotated")

_DEMO_TRAITS = ("snout_vent", "head_width", "hind_limb", "body_mass")
_DEMO_MEANS = (64.0, 11.0, 28.0, 9.5)
_SIG = 10  # significant digits of every true parameter (rounded before use, so exact)
_SUMMARY_SIG = 6  # significant digits of quantities derived from them


@dataclass(frozen=True)
class StudySettings:
    """Every size and feature of an invented study. The defaults make the demo study.

    Attributes
    ----------
    populations : tuple of str
        Population names (also the prefix of every animal id).
    designs : tuple of str, optional
        Per population, how its G differs from the reference: ``reference``, ``reduced`` or
        ``rotated``. Default: cycle through those three in that order. All ``reference`` gives
        populations with one common G (a null scenario).
    traits : tuple of str
        Trait names (phenotype columns).
    trait_means : tuple of float, optional
        Expected value of each trait in females of the first population (positive). Default:
        the demo's means for the demo's traits, otherwise 10, 20, 30, ...
    population_shift : float
        Population k's means are the first's times ``1 + population_shift * k``.
    phenotypic_cv : float
        Phenotypic SD of each trait as a fraction of its mean, in the first population.
    heritability : tuple of float, optional
        Narrow-sense heritability of each trait in the reference design. Default: evenly from
        0.60 down to 0.55.
    genetic_correlation, residual_correlation : float
        ρ of the correlation structures ρ^|k−l| (neighbouring traits in the list correlate most).
    reduction : float
        In ``reduced`` populations, the fraction of the reference's variance kept along the
        reference's eigen-axis ``reduced_axis`` (0 = leading axis).
    reduced_axis : int
    rotation_degrees : float
        In ``rotated`` populations, the angle the leading axis is turned toward the second.
    sex_effect : float
        Male − female difference of every trait, in phenotypic SDs.
    G : mapping of str to matrix, optional
        Give the G of every population directly (original units); overrides the designs.
    R : matrix, optional
        Give the residual covariance (original units), the same in every population.
    animals : int
        Animals per population in the true pedigree (founders included).
    founders : int
        Founders per population (half of them male).
    years : int
        Breeding seasons after the founding one; each adds a cohort.
    max_breeding_age : int
        Animals breed from age 1 to this age, so generations overlap when it exceeds 1.
    breeding_males : float
        Fraction of the living males that sire offspring in a season.
    phenotyped : int
        Animals per population with records.
    records_per_animal : int
        Records per phenotyped animal (in successive years) — more than 1 gives repeated records.
    permanent_fraction : float
        Permanent-environment variance of the animal as a fraction of the phenotypic variance.
    brood_fraction : float
        Common-environment (brood: same dam, same season) variance as a fraction of the
        phenotypic variance; above 0 adds a ``brood`` column to the phenotype table.
    unknown_parent_fraction : float
        Each parent of a non-founder is written as unknown with this probability.
    missing_value_fraction : float
        Each trait value is missing with this probability (every record keeps at least one).
    duplicate_rows : int
        Exact duplicate rows added to the pedigree table (in all).
    absent_parents : int
        Founders with offspring left out of the pedigree table (in all), so they appear only as
        parents.
    stray_whitespace : int
        Identifier cells of the pedigree table given a leading or trailing space (in all).
    missing_parent_codes : tuple of str
        Codes written for an unknown parent, picked at random.
    decimals : int
        Decimals the trait values are rounded to (measurement precision).
    """

    populations: tuple[str, ...] = ("ostrel", "penwick", "quillan")
    designs: tuple[str, ...] | None = None
    traits: tuple[str, ...] = _DEMO_TRAITS
    trait_means: tuple[float, ...] | None = None
    population_shift: float = 0.04
    phenotypic_cv: float = 0.08
    heritability: tuple[float, ...] | None = None
    genetic_correlation: float = 0.6
    residual_correlation: float = 0.3
    reduction: float = 0.1
    reduced_axis: int = 1
    rotation_degrees: float = 45.0
    sex_effect: float = 0.5
    G: Mapping[str, Any] | None = field(default=None, compare=False)
    R: Any = field(default=None, compare=False)
    animals: int = 840
    founders: int = 60
    years: int = 10
    max_breeding_age: int = 3
    breeding_males: float = 0.5
    phenotyped: int = 600
    records_per_animal: int = 1
    permanent_fraction: float = 0.0
    brood_fraction: float = 0.0
    unknown_parent_fraction: float = 0.15
    missing_value_fraction: float = 0.05
    duplicate_rows: int = 4
    absent_parents: int = 3
    stray_whitespace: int = 4
    missing_parent_codes: tuple[str, ...] = ("NA", "")
    decimals: int = 3

    def __post_init__(self) -> None:
        for name in ("populations", "traits", "designs", "trait_means", "heritability",
                     "missing_parent_codes"):
            value = getattr(self, name)
            if value is not None and not isinstance(value, tuple):
                if isinstance(value, (str, bytes)) or not isinstance(value, Sequence):
                    raise UserError(f"study setting '{name}' must be a list, got {value!r}")
                object.__setattr__(self, name, tuple(value))
        _validate(self)

    @classmethod
    def from_mapping(cls, values: Mapping[str, Any], source: str = "study settings") -> "StudySettings":
        """Settings from a mapping (e.g. a YAML file); unknown keys end in one clear line."""
        if not isinstance(values, Mapping):
            raise UserError(f"{source} must be a mapping of setting: value, got {type(values).__name__}")
        allowed = [f.name for f in dataclasses.fields(cls)]
        for key in values:
            if key not in allowed:
                raise UserError(f"{source}: unknown setting '{key}' (allowed: {', '.join(allowed)})")
        return cls(**dict(values))

    @property
    def population_designs(self) -> tuple[str, ...]:
        """The design of each population (``designs`` or the default cycle)."""
        if self.designs is not None:
            return self.designs
        return tuple(DESIGNS[k % len(DESIGNS)] for k in range(len(self.populations)))

    @property
    def means(self) -> np.ndarray:
        """Female means of the first population, one per trait."""
        if self.trait_means is not None:
            return np.asarray(self.trait_means, dtype=float)
        if self.traits == _DEMO_TRAITS:
            return np.asarray(_DEMO_MEANS)
        return 10.0 * np.arange(1, len(self.traits) + 1)

    @property
    def heritabilities(self) -> np.ndarray:
        """Heritability of each trait in the reference design."""
        if self.heritability is not None:
            return np.asarray(self.heritability, dtype=float)
        t = len(self.traits)
        return np.array([0.6]) if t == 1 else np.linspace(0.60, 0.55, t)


def _validate(s: StudySettings) -> None:
    def need(ok: bool, key: str, what: str) -> None:
        if not ok:
            raise UserError(f"study setting '{key}' {what}")

    def is_int(v: Any) -> bool:
        return isinstance(v, (int, np.integer)) and not isinstance(v, bool)

    def is_number(v: Any) -> bool:
        return isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool)

    for key in ("population_shift", "phenotypic_cv", "genetic_correlation", "residual_correlation",
                "reduction", "rotation_degrees", "sex_effect", "breeding_males",
                "permanent_fraction", "brood_fraction", "unknown_parent_fraction",
                "missing_value_fraction"):
        need(is_number(getattr(s, key)) and math.isfinite(getattr(s, key)), key, "must be a number")
    for key in ("trait_means", "heritability"):
        values = getattr(s, key)
        need(values is None or all(is_number(v) and math.isfinite(v) for v in values), key,
             "must be a list of numbers, one per trait")
    need(len(s.populations) >= 1, "populations", "needs at least one population name")
    need(all(isinstance(p, str) and p.strip() == p and p and " " not in p for p in s.populations),
         "populations", "must be non-empty names without spaces")
    need(len(set(s.populations)) == len(s.populations), "populations", "has a name twice")
    need(len(s.traits) >= 1 and all(isinstance(x, str) and x for x in s.traits), "traits",
         "needs at least one non-empty trait name")
    need(len(set(s.traits)) == len(s.traits), "traits", "has a name twice")
    reserved = {"id", "population", "sex", "year", "brood"}
    need(not reserved & set(s.traits), "traits", f"must not use the column names {sorted(reserved)}")
    t = len(s.traits)
    if s.designs is not None:
        need(len(s.designs) == len(s.populations), "designs",
             f"needs one entry per population ({len(s.populations)}), got {len(s.designs)}")
        bad = [d for d in s.designs if d not in DESIGNS]
        if bad:
            need(False, "designs", f"has {bad[0]!r}; allowed: {', '.join(DESIGNS)}")
    designs = s.population_designs
    need(s.trait_means is None or len(s.trait_means) == t, "trait_means", f"needs {t} values (one per trait)")
    need(bool(np.all(s.means > 0)), "trait_means", "must all be positive (mean-standardisation needs it)")
    need(s.heritability is None or len(s.heritability) == t, "heritability", f"needs {t} values (one per trait)")
    h2 = s.heritabilities
    need(bool(np.all((h2 > 0) & (h2 < 1))), "heritability", "values must lie between 0 and 1")
    for key in ("permanent_fraction", "brood_fraction", "unknown_parent_fraction",
                "missing_value_fraction"):
        need(0 <= getattr(s, key) < 1, key, "must be in [0, 1)")
    need(bool(np.all(h2 + s.permanent_fraction + s.brood_fraction < 1)), "heritability",
         "plus permanent_fraction plus brood_fraction must stay below 1 for every trait")
    for key in ("genetic_correlation", "residual_correlation"):
        need(-1 < getattr(s, key) < 1, key, "must be between -1 and 1")
    need(0 < s.phenotypic_cv, "phenotypic_cv", "must be positive")
    need(0 < s.reduction <= 1, "reduction", "must be in (0, 1]")
    need(not ("reduced" in designs and s.G is None)
         or (is_int(s.reduced_axis) and 0 <= s.reduced_axis < t), "reduced_axis",
         f"must be an integer from 0 to {t - 1} (an eigen-axis of the {t}-trait G)")
    need(t >= 2 or "rotated" not in designs, "designs", "'rotated' needs at least two traits")
    for key in ("animals", "founders", "years", "max_breeding_age", "phenotyped",
                "records_per_animal", "duplicate_rows", "absent_parents", "stray_whitespace",
                "decimals"):
        need(is_int(getattr(s, key)), key, "must be an integer")
    need(s.founders >= 4, "founders", "must be at least 4 (two of each sex)")
    need(s.years >= 1, "years", "must be at least 1")
    need(s.animals >= s.founders + s.years, "animals",
         "must be at least founders + years (one offspring per season)")
    need(s.max_breeding_age >= 1, "max_breeding_age", "must be at least 1")
    need(0 < s.breeding_males <= 1, "breeding_males", "must be in (0, 1]")
    need(s.records_per_animal >= 1, "records_per_animal", "must be at least 1")
    need(s.absent_parents >= 0 and s.absent_parents <= s.founders * len(s.populations) // 2,
         "absent_parents", "must be between 0 and half the founders")
    need(1 <= s.phenotyped <= s.animals - s.absent_parents, "phenotyped",
         "must be between 1 and animals minus absent_parents")
    need(s.duplicate_rows >= 0 and s.stray_whitespace >= 0, "duplicate_rows",
         "and stray_whitespace must not be negative")
    need(0 <= s.decimals <= 10, "decimals", "must be from 0 to 10")
    need(len(s.missing_parent_codes) >= 1
         and all(isinstance(c, str) and c.strip() == c for c in s.missing_parent_codes),
         "missing_parent_codes", "needs at least one code without surrounding spaces")
    if s.G is not None:
        need(isinstance(s.G, Mapping) and sorted(s.G) == sorted(s.populations), "G",
             f"must give a matrix for each population ({', '.join(s.populations)})")
        for pop in s.populations:
            _check_matrix(s.G[pop], t, f"G.{pop}")
    if s.R is not None:
        _check_matrix(s.R, t, "R")


def _check_matrix(M: Any, t: int, key: str) -> np.ndarray:
    try:
        M = np.asarray(M, dtype=float)
    except (TypeError, ValueError):
        raise UserError(f"study setting '{key}' must be a {t} x {t} matrix of numbers") from None
    if M.shape != (t, t):
        raise UserError(f"study setting '{key}' must be a {t} x {t} matrix, got shape {M.shape}")
    lam = np.linalg.eigvalsh(0.5 * (M + M.T)) if np.all(np.isfinite(M)) else np.array([-1.0])
    if not np.allclose(M, M.T) or lam[0] <= 1e-10 * max(lam[-1], 0):
        raise UserError(f"study setting '{key}' must be a symmetric positive-definite matrix")
    return M


class Study(NamedTuple):
    """What :func:`simulate_study` returns.

    Attributes
    ----------
    pedigree : pandas.DataFrame
        The raw pedigree table as written (columns ``id, sire, dam``; all strings, with the
        unknown-parent codes, duplicates, absent parents and stray white space).
    phenotypes : pandas.DataFrame
        The phenotype table: ``id, population, sex, year`` (plus ``brood`` when there is a brood
        effect) and one column per trait (NaN = missing).
    truth : dict
        Every true parameter (see ``truth.yaml``), plain Python types.
    animals : pandas.DataFrame
        One row per animal of the true pedigree: ``id, population, sire, dam`` (complete
        parentage, empty = founder), ``sex, year, generation, inbreeding, phenotyped`` and the
        true breeding value of every trait.
    """

    pedigree: pd.DataFrame
    phenotypes: pd.DataFrame
    truth: dict
    animals: pd.DataFrame


# ---------------------------------------------------------------------------------------------
# True parameters


def _ar_correlation(t: int, rho: float) -> np.ndarray:
    k = np.arange(t)
    return rho ** np.abs(k[:, None] - k[None, :])


def _round_sig(x: np.ndarray, digits: int = _SIG) -> np.ndarray:
    x = np.asarray(x, dtype=float)
    return np.vectorize(lambda v: float(f"{v:.{digits}g}"), otypes=[float])(x) if x.size else x


def _axes(M: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues (descending) and unit eigenvectors (columns), each with a positive largest loading."""
    lam, vec = np.linalg.eigh(M)
    lam, vec = lam[::-1], vec[:, ::-1]
    big = vec[np.argmax(np.abs(vec), axis=0), np.arange(vec.shape[1])]
    return lam, vec * np.where(big < 0, -1.0, 1.0)


def _combination(v: np.ndarray, traits: Sequence[str]) -> str:
    return " ".join(f"{c:+.2f}*{name}" for c, name in zip(v, traits))


def _true_parameters(s: StudySettings) -> dict[str, dict[str, Any]]:
    """G, R, C, E, means and sex effects of every population, and how each G was made."""
    t = len(s.traits)
    h2 = s.heritabilities
    sd = s.phenotypic_cv * s.means
    W = np.diag(sd)
    D_h = np.diag(np.sqrt(h2))
    G_std = D_h @ _ar_correlation(t, s.genetic_correlation) @ D_h
    C_e = _ar_correlation(t, s.residual_correlation)
    e2 = 1.0 - h2 - s.brood_fraction - s.permanent_fraction
    R_std = np.diag(np.sqrt(e2)) @ C_e @ np.diag(np.sqrt(e2))
    lam, E = _axes(G_std)
    out: dict[str, dict[str, Any]] = {}
    for k, (pop, design) in enumerate(zip(s.populations, s.population_designs)):
        if s.G is not None:
            G = np.asarray(s.G[pop], dtype=float)
            how = "given directly in the settings"
            design = "given"
        elif design == "reference":
            G = W @ G_std @ W
            how = ("reference: G_std = D_h C D_h on the scale of the reference phenotypic SDs, "
                   f"heritabilities {', '.join(f'{v:.3g}' for v in h2)}, genetic correlations "
                   f"{s.genetic_correlation}^|k-l| between traits k and l")
        elif design == "reduced":
            a = s.reduced_axis
            v = E[:, a]
            G = W @ (G_std - (1.0 - s.reduction) * lam[a] * np.outer(v, v)) @ W
            how = (f"reduced: the genetic variance along the trait combination {_combination(v, s.traits)} "
                   f"(eigen-axis {a + 1} of the reference G, in units of the reference phenotypic SDs) "
                   f"is {s.reduction:g} times the reference's; every other eigen-axis is unchanged")
        else:  # rotated
            theta = math.radians(s.rotation_degrees)
            e1, e2v = E[:, 0], E[:, 1]
            Q = (np.eye(t) + (math.cos(theta) - 1.0) * (np.outer(e1, e1) + np.outer(e2v, e2v))
                 + math.sin(theta) * (np.outer(e2v, e1) - np.outer(e1, e2v)))
            G = W @ (Q @ G_std @ Q.T) @ W
            lead = math.cos(theta) * e1 + math.sin(theta) * e2v
            how = (f"rotated: the same eigenvalues as the reference, but the leading genetic axis is "
                   f"turned by {s.rotation_degrees:g} degrees from the reference's "
                   f"({_combination(e1, s.traits)}) toward its second axis "
                   f"({_combination(e2v, s.traits)}), giving {_combination(lead, s.traits)} "
                   "(in units of the reference phenotypic SDs)")
        R = np.asarray(s.R, dtype=float) if s.R is not None else W @ R_std @ W
        C = s.brood_fraction * (W @ C_e @ W)
        Eperm = s.permanent_fraction * (W @ C_e @ W)
        G, R, C, Eperm = (_round_sig(0.5 * (M + M.T)) for M in (G, R, C, Eperm))
        covariance_factor(G)  # G must stay a covariance matrix after rounding
        intercept = _round_sig(s.means * (1.0 + s.population_shift * k))
        sex = _round_sig(s.sex_effect * sd)
        out[pop] = {"design": design, "how": how, "G": G, "R": R, "brood": C,
                    "permanent": Eperm, "intercept": intercept, "sex_effect": sex, "ref_sd": sd}
    return out


# ---------------------------------------------------------------------------------------------
# Pedigree of one population


def _population_pedigree(s: StudySettings, pop: str, rng: np.random.Generator) -> dict[str, np.ndarray]:
    """True pedigree of one population: overlapping cohorts, random mating, full-sib broods."""
    n_off = s.animals - s.founders
    per_year = np.diff(np.round(np.linspace(0, n_off, s.years + 1)).astype(int))
    n = s.animals
    sire = np.full(n, -1, dtype=np.int64)
    dam = np.full(n, -1, dtype=np.int64)
    year = np.zeros(n, dtype=np.int64)
    male = np.zeros(n, dtype=bool)
    male[rng.permutation(s.founders)[: s.founders // 2]] = True
    brood = np.arange(n, dtype=np.int64)  # founders: a brood of their own
    n_broods = s.founders
    pos = s.founders
    for y in range(1, s.years + 1):
        born = np.arange(pos)
        age = y - year[born]
        adult = born[(age >= 1) & (age <= s.max_breeding_age)]
        males, females = adult[male[adult]], adult[~male[adult]]
        if males.size == 0 or females.size == 0:
            raise UserError(
                f"study settings: population {pop} has no breeding {'males' if males.size == 0 else 'females'} "
                f"in season {y}; raise 'founders' or 'max_breeding_age'")
        studs = rng.choice(males, size=max(1, round(s.breeding_males * males.size)), replace=False)
        c = per_year[y - 1]
        mothers = np.sort(rng.choice(females, size=c, replace=True))
        uniq, first = np.unique(mothers, return_index=True)
        mates = rng.choice(studs, size=uniq.size, replace=True)
        which = np.searchsorted(uniq, mothers)
        idx = np.arange(pos, pos + c)
        dam[idx] = mothers
        sire[idx] = mates[which]
        year[idx] = y
        male[idx] = rng.random(c) < 0.5
        brood[idx] = n_broods + which
        n_broods += uniq.size
        pos += c
    generation = np.zeros(n, dtype=np.int64)
    for i in range(s.founders, n):
        generation[i] = 1 + max(generation[sire[i]], generation[dam[i]])
    return {"sire": sire, "dam": dam, "year": year, "male": male, "brood": brood,
            "generation": generation}


# ---------------------------------------------------------------------------------------------
# The study


def _matrix(M: np.ndarray) -> list[list[float]]:
    return [[float(v) for v in row] for row in np.asarray(M)]


def _by_trait(v: np.ndarray, traits: Sequence[str]) -> dict[str, float]:
    return {name: float(x) for name, x in zip(traits, v)}


def simulate_study(settings: StudySettings | None = None, seed: int = DEMO_SEED) -> Study:
    """Simulate an invented multi-population study.

    Parameters
    ----------
    settings : StudySettings, optional
        Sizes and features; the defaults make the demo study (3 populations of 840 animals,
        600 phenotyped, 4 traits). For a small, fast study in a test, e.g.
        ``StudySettings(populations=("a", "b"), traits=("x", "y"), animals=120, founders=20,
        years=4, phenotyped=90)``.
    seed : int
        The one seed; every random stream is derived from it by name (:mod:`ped2g.rng`), so
        a population's data do not depend on which other populations are simulated.

    Returns
    -------
    Study
        ``(pedigree, phenotypes, truth, animals)``; see :class:`Study`.

    Notes
    -----
    Breeding values follow ``u_i = ½(u_sire + u_dam) + φ_i``, ``φ_i ~ N(0, b_i G)`` down the
    *true* pedigree (Mrode 2014, p. 25); records are ``y = μ + s·[male] + u + c + p + e`` (see
    the module docstring). The written pedigree then loses some parent links, some parents'
    rows, and gains duplicates and stray white space; the truth dict lists each of these.
    """
    s = StudySettings() if settings is None else settings
    if not isinstance(s, StudySettings):
        raise UserError(f"settings must be a StudySettings, got {type(s).__name__}")
    if not isinstance(seed, (int, np.integer)) or isinstance(seed, bool) or seed < 0:
        raise UserError(f"seed must be a non-negative integer, got {seed!r}")
    seed = int(seed)
    t = len(s.traits)
    params = _true_parameters(s)
    width = len(str(s.animals))
    animal_frames, pheno_frames, ped_rows = [], [], []
    pop_truth: dict[str, Any] = {}
    features: dict[str, Any] = {"unknown_parent_links": {}, "absent_parents": [],
                                "duplicate_rows": [], "stray_whitespace": []}
    founder_candidates: list[tuple[str, int]] = []
    hidden: dict[str, tuple[np.ndarray, np.ndarray]] = {}
    animal_ids: dict[str, np.ndarray] = {}
    for pop in s.populations:
        p = params[pop]
        ped_d = _population_pedigree(s, pop, generator(seed, "study", pop, "pedigree"))
        ids = np.array([f"{pop}{k + 1:0{width}d}" for k in range(s.animals)], dtype=object)
        animal_ids[pop] = ids
        F = inbreeding(ped_d["sire"], ped_d["dam"])
        ped = Pedigree(ids=ids, sire=ped_d["sire"], dam=ped_d["dam"],
                       generation=ped_d["generation"], inbreeding=F)
        U = simulate_breeding_values(ped, p["G"], generator(seed, "study", pop, "breeding_values"))[0]

        rng = generator(seed, "study", pop, "records")
        # Parent links written as unknown (each independently).
        nonfounder = ped_d["sire"] >= 0
        hide_s = nonfounder & (rng.random(s.animals) < s.unknown_parent_fraction)
        hide_d = nonfounder & (rng.random(s.animals) < s.unknown_parent_fraction)
        hidden[pop] = (hide_s, hide_d)
        # Founders with offspring whose link to them is still written: candidates to leave out.
        shown_parents = np.union1d(ped_d["sire"][nonfounder & ~hide_s], ped_d["dam"][nonfounder & ~hide_d])
        founder_candidates += [(pop, int(i)) for i in shown_parents if i < s.founders]
        # Phenotyped animals are chosen after the absent parents (below); draw their order now.
        pop_truth[pop] = {"ped": ped, "U": U, "order": rng.permutation(s.animals),
                          "rng": rng, **ped_d}
    table_rng = generator(seed, "study", "tables")
    if len(founder_candidates) < s.absent_parents:
        raise UserError(f"study setting 'absent_parents' = {s.absent_parents} but only "
                        f"{len(founder_candidates)} founders have offspring listed; lower it")
    pick = table_rng.choice(len(founder_candidates), size=s.absent_parents, replace=False)
    absent = {founder_candidates[i] for i in sorted(pick)}

    for k, pop in enumerate(s.populations):
        p, d = params[pop], pop_truth[pop]
        ids, rng = animal_ids[pop], d["rng"]
        gone = np.zeros(s.animals, dtype=bool)
        gone[[i for (q, i) in absent if q == pop]] = True
        order = d["order"][~gone[d["order"]]]
        phenotyped = np.zeros(s.animals, dtype=bool)
        phenotyped[order[: s.phenotyped]] = True
        who = np.flatnonzero(phenotyped)
        # Records: y = mu + sex + u + brood + permanent + e.
        n_rec = who.size * s.records_per_animal
        rec_animal = np.repeat(who, s.records_per_animal)
        rec_index = np.tile(np.arange(s.records_per_animal), who.size)
        brood_eff = (simulate_breeding_values(_unrelated(d["brood"].max() + 1), p["brood"], rng)[0]
                     if s.brood_fraction > 0 else None)
        perm_eff = (simulate_breeding_values(_unrelated(s.animals), p["permanent"], rng)[0]
                    if s.permanent_fraction > 0 else None)
        resid = simulate_breeding_values(_unrelated(n_rec), p["R"], rng)[0]
        y = (p["intercept"][None, :] + d["male"][rec_animal, None] * p["sex_effect"][None, :]
             + d["U"][rec_animal] + resid)
        if brood_eff is not None:
            y += brood_eff[d["brood"][rec_animal]]
        if perm_eff is not None:
            y += perm_eff[rec_animal]
        y = np.round(y, s.decimals)
        miss = rng.random((n_rec, t)) < s.missing_value_fraction
        empty = np.flatnonzero(miss.all(axis=1))
        miss[empty, rng.integers(0, t, size=empty.size)] = False
        y[miss] = np.nan
        pheno = pd.DataFrame({"id": ids[rec_animal], "population": pop,
                              "sex": np.where(d["male"][rec_animal], "M", "F"),
                              "year": d["year"][rec_animal] + 1 + rec_index})
        if s.brood_fraction > 0:
            pheno["brood"] = [_brood_label(ids, d, i) for i in rec_animal]
        for j, name in enumerate(s.traits):
            pheno[name] = y[:, j]
        pheno_frames.append(pheno)

        # The written pedigree.
        hide_s, hide_d = hidden[pop]
        codes = list(s.missing_parent_codes)
        for i in range(s.animals):
            if gone[i]:
                continue
            cells = []
            for parent, hide in ((d["sire"], hide_s), (d["dam"], hide_d)):
                if parent[i] < 0 or hide[i]:
                    cells.append(codes[int(rng.integers(len(codes)))])
                else:
                    cells.append(ids[parent[i]])
            ped_rows.append([ids[i], cells[0], cells[1]])
        features["unknown_parent_links"][pop] = int(hide_s.sum() + hide_d.sum())

        sire_ids = np.where(d["sire"] >= 0, ids[np.maximum(d["sire"], 0)], "")
        dam_ids = np.where(d["dam"] >= 0, ids[np.maximum(d["dam"], 0)], "")
        frame = pd.DataFrame({"id": ids, "population": pop, "sire": sire_ids, "dam": dam_ids,
                              "sex": np.where(d["male"], "M", "F"), "year": d["year"],
                              "generation": d["generation"], "inbreeding": d["ped"].inbreeding,
                              "phenotyped": phenotyped})
        for j, name in enumerate(s.traits):
            frame[f"bv_{name}"] = d["U"][:, j]
        animal_frames.append(frame)
        pop_truth[pop] = _population_truth(s, pop, p, d, phenotyped, n_rec, int(miss.sum()))

    features["absent_parents"] = sorted(animal_ids[q][i] for (q, i) in absent)
    pedigree = _mess_up(ped_rows, s, table_rng, features)
    phenotypes = pd.concat(pheno_frames, ignore_index=True)
    animals = pd.concat(animal_frames, ignore_index=True)
    truth = _truth(s, seed, params, pop_truth, features)
    return Study(pedigree=pedigree, phenotypes=phenotypes, truth=truth, animals=animals)


def _unrelated(n: int) -> Pedigree:
    """A pedigree of n unrelated founders: simulating on it draws n independent N(0, M) rows."""
    return Pedigree(ids=np.arange(n).astype(str).astype(object), sire=np.full(n, -1, dtype=np.int64),
                    dam=np.full(n, -1, dtype=np.int64), generation=np.zeros(n, dtype=np.int64),
                    inbreeding=np.zeros(n))


def _brood_label(ids: np.ndarray, d: dict[str, np.ndarray], i: int) -> str:
    if d["dam"][i] < 0:
        return f"{ids[i]}/{d['year'][i]}"
    return f"{ids[d['dam'][i]]}/{d['year'][i]}"


def _mess_up(rows: list[list[str]], s: StudySettings, rng: np.random.Generator,
             features: dict[str, Any]) -> pd.DataFrame:
    """Add stray white space to some id cells, then exact duplicates of some rows."""
    cells = [(r, c) for r in range(len(rows)) for c in range(3)
             if rows[r][c] and rows[r][c] not in s.missing_parent_codes]
    if s.stray_whitespace > len(cells) or s.duplicate_rows > len(rows):
        raise UserError("study settings 'stray_whitespace' or 'duplicate_rows' exceed the table size")
    for k in rng.choice(len(cells), size=s.stray_whitespace, replace=False):
        r, c = cells[k]
        value = rows[r][c]
        rows[r][c] = f" {value}" if rng.random() < 0.5 else f"{value} "
        features["stray_whitespace"].append(value)
    features["stray_whitespace"].sort()
    dup = rng.choice(len(rows), size=s.duplicate_rows, replace=False)
    out = list(rows)
    for r in sorted(dup, reverse=True):
        where = int(rng.integers(r + 1, len(out) + 1))
        out.insert(where, list(rows[r]))
    features["duplicate_rows"] = sorted(rows[r][0].strip() for r in dup)
    return pd.DataFrame(out, columns=["id", "sire", "dam"])


def _population_truth(s: StudySettings, pop: str, p: dict[str, Any], d: dict[str, Any],
                      phenotyped: np.ndarray, n_rec: int, n_missing: int) -> dict[str, Any]:
    traits = s.traits
    G, R, C, E = p["G"], p["R"], p["brood"], p["permanent"]
    P = _round_sig(G + R + C + E)
    sdG = np.sqrt(np.diag(G))
    mean = _round_sig(p["intercept"] + 0.5 * p["sex_effect"])
    on_ref = G / np.outer(p["ref_sd"], p["ref_sd"])
    lam, vec = _axes(on_ref)
    sdP = np.sqrt(np.diag(P))
    entry: dict[str, Any] = {
        "design": p["design"],
        "how_G_differs": p["how"],
        "intercept": _by_trait(p["intercept"], traits),
        "sex_effect": _by_trait(p["sex_effect"], traits),
        "mean": _by_trait(mean, traits),
        "G": _matrix(G),
        "R": _matrix(R),
    }
    if s.brood_fraction > 0:
        entry["brood"] = _matrix(C)
    if s.permanent_fraction > 0:
        entry["permanent"] = _matrix(E)
    entry.update({
        "P": _matrix(P),
        "heritability": _by_trait(_round_sig(np.diag(G) / np.diag(P), _SUMMARY_SIG), traits),
        "genetic_correlation": _matrix(_round_sig(G / np.outer(sdG, sdG), _SUMMARY_SIG)),
        "G_variance_standardised": _matrix(_round_sig(G / np.outer(sdP, sdP), _SUMMARY_SIG)),
        "G_mean_standardised": _matrix(_round_sig(G / np.outer(mean, mean), _SUMMARY_SIG)),
        "G_reference_scale": _matrix(_round_sig(on_ref, _SUMMARY_SIG)),
        "G_reference_scale_eigenvalues": [float(v) for v in _round_sig(lam, _SUMMARY_SIG)],
        "G_reference_scale_eigenvectors": [_by_trait(_round_sig(vec[:, k], _SUMMARY_SIG), traits)
                                           for k in range(len(traits))],
        "animals_in_true_pedigree": int(s.animals),
        "founders": int(s.founders),
        "phenotyped_animals": int(phenotyped.sum()),
        "records": int(n_rec),
        "missing_trait_values": n_missing,
        "generations_true_pedigree": int(d["generation"].max()),
        "mean_inbreeding_true_pedigree": float(_round_sig(d["ped"].inbreeding.mean(), _SUMMARY_SIG)),
        "max_inbreeding_true_pedigree": float(_round_sig(d["ped"].inbreeding.max(), _SUMMARY_SIG)),
    })
    return entry


ASSUMPTIONS = [
    "Additive infinitesimal inheritance: no dominance, epistasis or genotype-by-environment interaction.",
    "Founders of each population are unrelated, not inbred, and drawn from a base population with that population's G.",
    "Random mating among breeding animals, one sire per dam per season, no selection and no migration between populations.",
    "Breeding values were simulated down the true pedigree; the written pedigree hides some parent links (unknown_parent_links), so relationships exist that the data do not show.",
    "Records: y = intercept + sex_effect*[male] + breeding value (+ brood + permanent effects when present) + residual, all normal; residuals independent between records.",
    "G, R and P are in original units; heritability = diag(G)/diag(P); mean = intercept + sex_effect/2 (a 50:50 sex ratio).",
    "G_reference_scale is G divided by the reference phenotypic SDs (phenotypic_cv times the first population's female means); the designed differences (reduced, rotated) are exact on this scale. G_variance_standardised divides by each population's own phenotypic SDs and G_mean_standardised by its own means, so on those scales the differences also include the changed scaling.",
    "A posterior that misses these values is not by itself a failure: with {phenotyped} phenotyped animals per population, G is estimated with wide uncertainty.",
]


def _truth(s: StudySettings, seed: int, params: dict, pop_truth: dict, features: dict) -> dict[str, Any]:
    settings = {}
    for f in dataclasses.fields(s):
        v = getattr(s, f.name)
        if f.name in ("G", "R") and v is not None:
            v = ({q: _matrix(np.asarray(m, dtype=float)) for q, m in v.items()} if f.name == "G"
                 else _matrix(np.asarray(v, dtype=float)))
        elif isinstance(v, tuple):
            v = list(v)
        settings[f.name] = v
    settings["designs"] = list(s.population_designs)
    return {
        "about": ("Invented study simulated by ped2g; every number below is a true parameter of "
                  "the simulation, not an estimate."),
        "made_with": {"command": f"ped2g.simulate.study.simulate_study(settings, seed={seed}) "
                                 "with the settings below", "seed": seed,
                      "ped2g_version": __version__},
        "traits": list(s.traits),
        "populations": pop_truth,
        "data_features": features,
        "assumptions": [a.format(phenotyped=s.phenotyped) for a in ASSUMPTIONS],
        "settings": settings,
    }
