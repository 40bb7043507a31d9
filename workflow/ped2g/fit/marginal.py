"""The marginal engine: breeding values integrated out exactly.

Model (standardised scale; records r = 1..n, traits k)::

    Y = X beta + Z a + sum_c Z_c u_c + E,   cov(vec a) = A (x) G,  rows of E ~ N(0, R)

Integrating ``a`` out, the rows of ``Y`` are jointly normal with covariance
``K (x) G + I (x) R`` (record-major), ``K = Z A_pp Z'`` the relationships between the records'
animals (A_pp: the phenotyped animals; their ancestors marginalise out). With ``K = U Lambda U'``
computed once (``numpy.linalg.eigh``, O(n^3)), the rotated records ``U'(Y - X beta - ...)`` are
independent, row i with covariance ``lambda_i G + R``. The log-likelihood is then a sum of n small
normal log-densities (one Op, :mod:`ped2g.fit.marginal_likelihood_op`), O(n k^3) per gradient after the O(n p k)
products by the pre-rotated designs ``U'X`` and ``U'Z_c``. This is the classic rotation used to
make animal-model likelihoods cheap (e.g. Thompson & Shaw 1990 [M]; the same as the "spectral
decomposition" trick of linear mixed model software, common practice).

What NUTS samples: the covariance parameters, the fixed effects and, for extra random effects,
their levels in non-centred form ``u_c = W_c L_c'`` with ``W_c`` standard normal. Missing trait
values (the rotation mixes records, so missing cells cannot simply be dropped) are handled
exactly in one of two ways (``model.missing_values``):

* ``gibbs``: a data-augmentation Gibbs step draws the missing cells from their exact conditional
  distribution between NUTS transitions (:mod:`ped2g.fit.augment`); the dense work is paid once
  per iteration, not per gradient. This needs PyMC's own NUTS (nutpie has no Gibbs steps),
  compiled with PyTensor's numba backend. Its chains mix more slowly the larger the share of a
  trait's information that is missing.
* ``nuts``: each missing cell is a NUTS parameter entering through a pre-rotated column of
  ``U'``; every gradient then streams ``n x n_missing`` numbers from memory, cheap while those
  projections are small.

``auto`` takes ``nuts`` while the projections have at most :data:`AUTO_JOINT_CELLS` cells and
``gibbs`` above (on the demo's former islets of 500 records, the Gibbs route left one trait's variance
at bulk ESS 303 and tail ESS 118 where the joint route passed the checks; at n = 8,000 the joint
route cannot finish).

Breeding values are drawn afterwards from their exact conditional distribution given each draw by
pathwise conditioning (Matheron's rule; e.g. Wilson et al. 2020, ICML [M])::

    a_post = a_prior + (A[:, p] Z' V^{-1} (Y* - Z a_prior - e_prior)) G

with ``a_prior`` simulated down the pedigree, ``e_prior ~ N(0, R)``, ``Y*`` the records with the
fixed and extra random effects removed, ``V^{-1}`` applied in the rotated basis and ``A[:, p] M``
computed as a sparse solve with A-inverse. With ``conditional_mean=True`` the prior terms are left
out, which gives the BLUP when G and R are known (Henderson 1975).

Limits: the eigendecomposition holds ``24 n^2`` bytes at its peak (the matrix and LAPACK's
divide-and-conquer workspace; ``U`` alone is ``8 n^2``) and takes O(n^3) time (17.5 s at
n = 8,000 on two cores), so :func:`applicable` refuses data sets whose eigendecomposition would
not fit in the memory this process has (:func:`ped2g.machine.available_memory`: what is free, or
a cluster job's memory limit); the latent engine fits those.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
import scipy.linalg
import scipy.sparse.linalg

from ..config import with_defaults
from .data import FitData

#: Bytes per cell of the n x n record relationship matrix that the eigendecomposition holds at
#: its peak: the matrix, overwritten by U (8), and the workspace of LAPACK's divide-and-conquer
#: driver (16; measured peak RSS 0.44 GB at n = 4,000 over a 0.18 GB start).
EIGEN_BYTES_PER_CELL = 24
#: Memory of the rest of a fit beside the eigendecomposition (compiled model, draws, arrays).
OTHER_BYTES = 1.0e9
#: Share of the available memory the marginal engine plans to fill at most.
MEMORY_SHARE = 0.8
#: Largest total size (in float64 cells) of the pre-rotated projections of missing cells and
#: extra random-effect levels (n_records x (n_missing + n_levels)); 2.5e8 cells = 2 GB.
MAX_PROJECTION_CELLS = 2.5e8
#: Above this many projection cells (80 MB) each gradient streams the projections from main
#: memory twice and the engine slows sharply (measured: 0.96 ms per gradient with 0.95e6 cells,
#: 96 ms with 16.3e6 cells), so ``model.engine: auto`` prefers the latent engine there.
AUTO_PROJECTION_CELLS = 1.0e7
#: LLVM optimisation level for numba when compiling this engine's model (``NUMBA_OPT``; numba's
#: default is 3). Measured with empty caches, 4 traits: level 1 compiles the Gibbs route in 17.1 s
#: instead of 30.7 s (n = 500) and the nutpie route in 27.5 s instead of 33.4 s (n = 2,000), while
#: sampling took 35.1 s against 34.0 s (Gibbs route) and 0.458 against 0.448 ms per gradient
#: (nutpie) at n = 2,000: the hot loops are the likelihood kernel and BLAS, which level 1 compiles
#: about as well. (The latent engine keeps level 3: its gradient was 10% slower at level 1.)
NUMBA_OPT_LEVEL = 1
#: Seconds the eigendecomposition took at n = 8,000 on two cores (see the module docstring); the
#: time announced before a long one scales it by n^3.
EIGEN_SECONDS_AT_8000 = 17.5
#: An eigendecomposition expected to take longer than this is announced in the log before it
#: starts, and its time logged after: the LAPACK call holds the interpreter while it runs, so no
#: progress line can be written in between.
EIGEN_ANNOUNCE_SECONDS = 10.0
#: Ways to handle missing trait values (``model.missing_values``); see the module docstring.
MISSING_MODES = ("auto", "gibbs", "nuts")
#: ``auto`` samples missing cells jointly by NUTS up to this many projection cells (records x
#: missing cells; 8 MB): measured 0.96 ms per gradient at 0.95e6 cells.
AUTO_JOINT_CELLS = 1.0e6


@dataclass
class Rotation:
    """The one-off eigendecomposition ``K = U diag(lam) U'`` and the pre-rotated arrays."""

    U: np.ndarray            # (n, n)
    lam: np.ndarray          # (n,)
    rot_y: np.ndarray        # (n, t): U' y with missing cells set to 0
    rot_X: np.ndarray        # (n, p)
    missing_rows: list[np.ndarray]  # per trait j: record positions of the missing cells
    rot_Z: list[np.ndarray]  # per extra random effect: (n, n_levels)
    seconds: float           # time taken by the eigendecomposition


def missing_mode(data: FitData, model_config: dict | None) -> str:
    """How missing trait values are handled: ``"none"`` (no missing cell), ``"gibbs"`` or ``"nuts"``."""
    from ..errors import UserError

    requested = with_defaults(model_config, "model")["missing_values"]
    if requested not in MISSING_MODES:
        raise UserError(f"config key 'model.missing_values' is {requested!r}; allowed: {', '.join(MISSING_MODES)}")
    if not data.missing.any():
        return "none"
    if requested == "auto":
        return "nuts" if float(data.n_records) * int(data.missing.sum()) <= AUTO_JOINT_CELLS else "gibbs"
    return requested


def _projection_cells(data: FitData, model_config: dict | None = None) -> float:
    n = data.n_records
    cells = sum(r.n_levels for r in data.random)
    if missing_mode(data, model_config) == "nuts":
        cells += int(data.missing.sum())
    return float(n) * cells


def memory_needed(n_records: int) -> float:
    """Peak bytes of a marginal fit of ``n_records`` records (the eigendecomposition dominates)."""
    return EIGEN_BYTES_PER_CELL * float(n_records) ** 2 + OTHER_BYTES


def applicable(data: FitData, model_config: dict | None = None,
               memory: float | None = None) -> tuple[bool, str]:
    """Whether the marginal engine can fit these data; if not, why.

    It needs a dense eigendecomposition of the n x n record relationship matrix, so
    :func:`memory_needed` must stay within :data:`MEMORY_SHARE` of ``memory`` (bytes; by default
    :func:`ped2g.machine.available_memory`, not checked where that is unknown), and pre-rotated
    projections of at most :data:`MAX_PROJECTION_CELLS` cells (extra random-effect levels, and
    missing trait values when they are NUTS parameters, ``model.missing_values: nuts``).
    """
    from ..machine import available_memory

    n = data.n_records
    need = memory_needed(n)
    if memory is None:
        memory = available_memory()
    if memory is not None and need > MEMORY_SHARE * memory:
        return False, (f"{n} records need {need / 1e9:.1f} GB for the dense {n}x{n} eigendecomposition "
                       f"and this process has {memory / 1e9:.1f} GB available")
    cells = _projection_cells(data, model_config)
    if cells > MAX_PROJECTION_CELLS:
        return False, (f"missing trait values and extra random-effect levels need "
                       f"{8 * cells / 1e9:.1f} GB of pre-rotated projections (limit "
                       f"{8 * MAX_PROJECTION_CELLS / 1e9:.1f} GB)")
    return True, (f"{n} records: dense eigendecomposition of the record relationships "
                  f"({need / 1e9:.1f} GB at its peak; its time grows as n^3)")


def projection_cells(data: FitData, model_config: dict | None = None) -> float:
    """Size of the pre-rotated projections NUTS touches per gradient, in float64 cells."""
    return _projection_cells(data, model_config)


def record_relationships(data: FitData) -> np.ndarray:
    """``K = Z A_pp Z'``: the additive relationships between the animals of every pair of records."""
    from ..pedigree.relationships import relationship_matrix

    animals, inverse = np.unique(data.record_animal, return_inverse=True)
    A_pp = relationship_matrix(data.pedigree, subset=animals)
    if len(inverse) == len(animals) and np.array_equal(inverse, np.arange(len(animals))):
        return A_pp   # one record per animal, in pedigree order: no n x n copy
    return A_pp[np.ix_(inverse, inverse)]


def eigendecomposition_seconds(n_records: int) -> float:
    """Expected seconds of the eigendecomposition of ``n_records`` records on two cores."""
    return EIGEN_SECONDS_AT_8000 * (n_records / 8000.0) ** 3


def rotation(data: FitData, log: logging.Logger | None = None) -> Rotation:
    """Compute the eigendecomposition and the rotated arrays of ``data`` (O(n^3); the engine
    object :class:`MarginalEngine` computes it once per design). One expected to last longer
    than :data:`EIGEN_ANNOUNCE_SECONDS` is announced in ``log`` and its time logged after."""
    import time

    log = log or logging.getLogger("ped2g.fit")
    n = data.n_records
    expected = eigendecomposition_seconds(n)
    announce = expected > EIGEN_ANNOUNCE_SECONDS
    if announce:
        log.info("population %s: eigendecomposition of the %d x %d record relationships, expected to take "
                 "about %.0f s on two cores (no progress lines until it ends)", data.population, n, n, expected)
    start = time.perf_counter()
    K = record_relationships(data)
    # K is symmetric, so its transpose (a Fortran-ordered view) is K itself: LAPACK then works in
    # place, where a C-ordered argument would be copied first (8 n^2 bytes more at the peak).
    lam, U = scipy.linalg.eigh(K.T, overwrite_a=True, check_finite=False, driver="evd")
    del K
    lam = np.clip(lam, 0.0, None)
    seconds = time.perf_counter() - start
    if announce:
        log.info("population %s: eigendecomposition done in %.1f s", data.population, seconds)
    Ut = np.ascontiguousarray(U.T)
    miss = data.missing
    y0 = np.where(miss, 0.0, data.y)
    missing_rows = [np.flatnonzero(miss[:, j]) for j in range(data.n_traits)]
    rot_Z = []
    for eff in data.random:
        # U' Z_c: sum the columns of U' over the records of each level (a record of an unknown
        # level has a row of zeros in Z_c, so it adds to no column).
        rot_Z.append(Ut @ eff.incidence())
    return Rotation(U=U, lam=lam, rot_y=Ut @ y0, rot_X=Ut @ data.X, missing_rows=missing_rows,
                    rot_Z=rot_Z, seconds=seconds)


def with_rotated_records(rot: Rotation, data: FitData) -> Rotation:
    """``rot`` (computed for the same design) with the rotated records ``U'y`` of ``data``."""
    import copy

    new = copy.copy(rot)
    new.rot_y = rot.U.T @ np.where(data.missing, 0.0, data.y)
    return new


def build_model(data: FitData, model_config: dict, rot: Rotation | None = None):
    """The PyMC model with the breeding values integrated out (see the module docstring).

    Free variables: the covariance priors of G, R and each extra effect, ``beta`` (p, t),
    ``<name>_z`` (levels x t) per extra random effect and, with missing cells, ``missing`` (one
    value per missing cell, trait by trait, record order within a trait). With
    ``model.missing_values`` resolving to ``gibbs`` the model also holds ``rot_y_completed``, the
    rotated completed records; both are then updated by the Gibbs step of :func:`extra_steps`,
    not by NUTS.
    """
    import pymc as pm
    import pytensor.tensor as pt

    from . import augment
    from .marginal_likelihood_op import scaled_pair_logp
    from .priors import covariance_prior, shared_priors

    rot = rot if rot is not None else rotation(data)
    mode = missing_mode(data, model_config)
    t = data.n_traits
    priors = with_defaults(model_config, "model")["priors"]
    coords = {"trait": data.traits, "trait2": data.traits, "x": data.x_names}
    with pm.Model(coords=coords) as model:
        G, _, R, _, beta = shared_priors(data, model_config)
        lam = pm.Data("rot_lambda", rot.lam)
        rot_X = pm.Data("rot_X", rot.rot_X)
        total_missing = int(data.missing.sum())
        if mode == "gibbs":
            rot_y = pm.Flat(augment.ROTATED_NAME, shape=rot.rot_y.shape, initval=rot.rot_y)
            pm.Flat(augment.MISSING_NAME, shape=total_missing, initval=np.zeros(total_missing))
        else:
            rot_y = pm.Data("rot_y", rot.rot_y)
        resid = rot_y - rot_X @ beta
        for c, eff in enumerate(data.random):
            cov_c, chol_c = covariance_prior(f"cov_{eff.name}", t, priors)
            z = pm.Normal(f"{eff.name}_z", 0.0, 1.0, shape=(eff.n_levels, t))
            rot_Z = pm.Data(f"rot_Z_{eff.name}", rot.rot_Z[c])
            resid = resid - rot_Z @ (z @ chol_c.T)
        if mode == "nuts":
            missing = pm.Flat(augment.MISSING_NAME, shape=total_missing)
            Ut = rot.U.T
            start = 0
            filled = []
            for j, rows in enumerate(rot.missing_rows):
                if len(rows):
                    proj = pm.Data(f"rot_missing_{j}", np.ascontiguousarray(Ut[:, rows]))
                    filled.append(pt.dot(proj, missing[start:start + len(rows)]))
                    start += len(rows)
                else:
                    filled.append(pt.zeros(data.n_records))
            resid = resid + pt.stack(filled, axis=1)
        pm.Potential("loglik", scaled_pair_logp(resid, lam, G, R))
    return model


def extra_steps(model, data: FitData, rot: Rotation | None = None) -> list:
    """Step methods that run beside NUTS: the missing-value Gibbs step when the model has one."""
    from . import augment

    if augment.ROTATED_NAME not in model.named_vars:
        return []
    rot = rot if rot is not None else rotation(data)
    core = augment.MissingValueDraw(data, rot.U, rot.lam, rot.rot_X, rot.rot_Z, rot_y0=rot.rot_y)
    return [augment.make_step(model, core, data)]


def _posterior_draws(idata, name: str, index: np.ndarray) -> np.ndarray:
    arr = idata.posterior[name].values
    arr = arr.reshape(-1, *arr.shape[2:])
    return arr[index]


def breeding_values(data: FitData, idata, rng: np.random.Generator, max_draws: int | None = None,
                    conditional_mean: bool = False, chunk: int = 32, rot: Rotation | None = None) -> np.ndarray:
    """Breeding values of every pedigree animal, (S, n_animals, t), standardised scale.

    Exact conditional draws (or, with ``conditional_mean=True``, conditional means) given each
    posterior draw of G, R, beta, the missing values and the extra random effects; see the module
    docstring for the formula. Draws are processed in chunks of ``chunk``.
    """
    from ..pedigree.relationships import relationship_inverse
    from ..contracts.fit_folder import thin_indices
    from ..simulate.breeding_values import simulate_breeding_values

    rot = rot if rot is not None else rotation(data)
    post = idata.posterior
    n_total = post.sizes["chain"] * post.sizes["draw"]
    index = thin_indices(n_total, max_draws)
    G = _posterior_draws(idata, "G", index)
    R = _posterior_draws(idata, "R", index)
    beta = _posterior_draws(idata, "beta", index)
    missing = _posterior_draws(idata, "missing", index) if "missing" in post else None
    extras = []
    for eff in data.random:
        z = _posterior_draws(idata, f"{eff.name}_z", index)
        chol = np.linalg.cholesky(_posterior_draws(idata, f"cov_{eff.name}", index))
        extras.append((eff, np.einsum("slk,sjk->slj", z, chol)))
    ped = data.pedigree
    n_all, n, t = ped.n, data.n_records, data.n_traits
    lu = scipy.sparse.linalg.splu(relationship_inverse(ped).tocsc())
    y0 = np.where(data.missing, 0.0, data.y)
    out = np.empty((len(index), n_all, t))
    for lo in range(0, len(index), chunk):
        sl = slice(lo, min(lo + chunk, len(index)))
        S = sl.stop - sl.start
        ystar = np.broadcast_to(y0, (S, n, t)).copy()
        if missing is not None:
            start = 0
            for j, rows in enumerate(rot.missing_rows):
                ystar[:, rows, j] = missing[sl, start:start + len(rows)]
                start += len(rows)
        ystar -= np.einsum("rp,spt->srt", data.X, beta[sl])
        for eff, u in extras:
            ystar -= eff.take(u[sl])      # zero for records of an unknown level
        if conditional_mean:
            prior = np.zeros((S, n_all, t))
            d = ystar
        else:
            prior = simulate_breeding_values(ped, G[sl], rng)
            e = rng.standard_normal((S, n, t)) @ np.swapaxes(np.linalg.cholesky(R[sl]), -1, -2)
            d = ystar - prior[:, data.record_animal, :] - e
        d_rot = np.matmul(rot.U.T, d)                               # (S, n, t)
        V = rot.lam[None, :, None, None] * G[sl][:, None] + R[sl][:, None]
        w_rot = np.linalg.solve(V, d_rot[..., None])[..., 0]
        w = np.matmul(rot.U, w_rot)                                  # V^{-1} d, (S, n, t)
        padded = np.zeros((n_all, S, t))
        np.add.at(padded, data.record_animal, np.swapaxes(w, 0, 1))
        x = lu.solve(padded.reshape(n_all, S * t)).reshape(n_all, S, t)
        out[sl] = prior + np.einsum("ast,stv->sav", x, G[sl])
    return out


def data_values(data: FitData, model_config: dict, rot: Rotation | None = None) -> dict[str, np.ndarray]:
    """The model's data that change when only the records change (for ``compiled.with_data``).

    Empty when a model built for other records cannot be reused: the Gibbs route for missing
    values (its model holds the records as the initial value of a sampled variable) and fixed
    covariances (converted to the standardised scale of the records when the model is built).
    Callers then build a model per data set.
    """
    if missing_mode(data, model_config) == "gibbs" or model_config.get("fixed_covariances"):
        return {}
    return {"rot_y": (rot if rot is not None else rotation(data)).rot_y}


class MarginalEngine:
    """The marginal engine behind the interface of :mod:`ped2g.fit.engine`.

    One object per population: it computes the eigendecomposition once for the population's
    design and reuses it for other records on the same design (the refitting null), so no
    n x n matrix is kept on the shared :class:`FitData`.
    """

    name = "marginal"

    def __init__(self, memory: float | None = None):
        self.memory = memory
        self._design: tuple[FitData, Rotation] | None = None

    def rotation(self, data: FitData) -> Rotation:
        """The eigendecomposition of ``data``'s design (computed once) with ``data``'s records."""
        if self._design is not None:
            first, rot = self._design
            if first is data:
                return rot
            if _same_design(first, data):
                return with_rotated_records(rot, data)
        rot = rotation(data)
        self._design = (data, rot)
        return rot

    def applies(self, data: FitData, model_config: dict) -> tuple[bool, str]:
        return applicable(data, model_config, self.memory)

    def prefers(self, data: FitData, model_config: dict) -> tuple[bool, str]:
        """Whether ``model.engine: auto`` should take this engine when it applies, and why not."""
        cells = projection_cells(data, model_config)
        if cells <= AUTO_PROJECTION_CELLS:
            return True, ""
        return False, (f"the projections its gradients touch (extra random-effect levels, missing values "
                       f"sampled by NUTS) have {cells:.3g} cells, "
                       f"above {AUTO_PROJECTION_CELLS:.3g} where each gradient becomes memory-bound")

    def build(self, data: FitData, model_config: dict):
        from .engine import BuiltModel

        rot = self.rotation(data)
        model = build_model(data, model_config, rot)
        return BuiltModel(model=model, extra_steps=extra_steps(model, data, rot), nutpie_options=None,
                          numba_opt_level=NUMBA_OPT_LEVEL, missing_values=missing_mode(data, model_config),
                          timings={"eigendecomposition_seconds": rot.seconds})

    def data_values(self, data: FitData, model_config: dict) -> dict[str, np.ndarray]:
        return data_values(data, model_config, self.rotation(data))

    def breeding_values(self, data: FitData, idata, rng: np.random.Generator, max_draws: int | None = None,
                        conditional_mean: bool = False) -> np.ndarray:
        return breeding_values(data, idata, rng, max_draws, conditional_mean, rot=self.rotation(data))


def _same_design(a: FitData, b: FitData) -> bool:
    """Whether two data sets share animals, design and missing cells (only the records differ)."""
    return (a.pedigree is b.pedigree and np.array_equal(a.record_animal, b.record_animal)
            and np.array_equal(a.X, b.X) and np.array_equal(a.missing, b.missing)
            and len(a.random) == len(b.random)
            and all(np.array_equal(x.level, y.level) for x, y in zip(a.random, b.random)))
