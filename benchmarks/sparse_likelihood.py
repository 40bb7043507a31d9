"""Benchmark of the sparse engine's log-likelihood (docs/methods.md §2.14): time per value and
gradient, and the size of the factor (prints a table).

Simulated design per size n: a pedigree of n animals in overlapping generations (founders 10%,
then each animal's sire drawn from 2% of the animals of earlier generations and its dam from the
rest, 5% of dams unknown), one record per non-founder plus a second record for 20% of them, 10% of
trait cells missing; extra random effects: maternal (on the dam; -1 where unknown), permanent
environment (on the animal, repeated records) and cohort (generation x 10 groups). With
``--max-records M`` a design with more than M records keeps a random M of them. ``peak MB`` is the
process's peak resident memory so far (sizes run in the order given, so give them ascending).

Usage (from the repository root)::

    python benchmarks/sparse_likelihood.py --animals 1000 10000 100000 --traits 4 --max-records 50000

``--level-draw`` adds the time of one draw of every random-effect level from N(C^-1 r, C^-1)
(``sparse_mme.effects``: factorisation, solve and a triangular solve with noise), the unit of work
of a blocked Gibbs iteration (benchmarks/baselines/field_gibbs.py).
"""

from __future__ import annotations

import argparse
import resource
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "workflow"))


def simulated_design(n: int, t: int, seed: int = 1, max_records: int | None = None, missing: float = 0.1,
                     extra_effects: bool = True):
    from ped2g.fit import sparse_mme
    from ped2g.pedigree.core import Pedigree
    from ped2g.pedigree.relationships import inbreeding

    rng = np.random.default_rng(seed)
    n_gen = 6
    founders = max(n // 10, 20)
    gen = np.concatenate([np.zeros(founders, np.int64),
                          np.sort(rng.integers(1, n_gen, n - founders))])
    sire = -np.ones(n, np.int64)
    dam = -np.ones(n, np.int64)
    for g in range(1, n_gen):
        kids = np.flatnonzero(gen == g)
        parents = np.flatnonzero(gen < g)
        males = parents[: max(len(parents) // 50, 2)]
        females = parents[len(males):]
        sire[kids] = rng.choice(males, len(kids))
        dam[kids] = rng.choice(females, len(kids))
        dam[kids[rng.random(len(kids)) < 0.05]] = -1
    ped = Pedigree(ids=np.array([f"a{i}" for i in range(n)], dtype=object), sire=sire, dam=dam,
                   generation=gen, inbreeding=inbreeding(sire, dam))
    recorded = np.flatnonzero(gen > 0)
    rec = np.concatenate([recorded, recorded[rng.random(len(recorded)) < 0.2]])
    if max_records is not None and len(rec) > max_records:
        rec = np.sort(rng.choice(rec, max_records, replace=False))
    observed = rng.random((len(rec), t)) >= missing
    observed[~observed.any(axis=1), 0] = True
    dams = np.unique(dam[dam >= 0])
    maternal = np.where(dam[rec] >= 0, np.searchsorted(dams, dam[rec]), -1)
    animals, pe = np.unique(rec, return_inverse=True)
    cohort = gen[rec] * 10 + rng.integers(0, 10, len(rec))
    cohorts, cohort = np.unique(cohort, return_inverse=True)
    effects = [(maternal, len(dams)), (pe, len(animals)), (cohort, len(cohorts))] if extra_effects else []
    start = time.perf_counter()
    design = sparse_mme.build_design(ped, rec, observed, effects, keep_general=True)   # both routes are timed
    seconds = time.perf_counter() - start
    return design, observed, seconds


def kernel_phases(design, repeats: int) -> str:
    """Best-of-``repeats`` milliseconds of ``ldl_supernodal`` and ``selected_inverse_supernodal`` on the
    pattern of ``design`` (a diagonally dominant matrix of that pattern), as a text."""
    from ped2g.fit import sparse_factor as sf

    n = len(design.Lp) - 1
    rng = np.random.default_rng(0)
    Cx = np.where(design.Ci == design.Cj, 10.0, 0.01 * rng.random(len(design.Ci)))
    Lx, D = np.empty(len(design.Li)), np.empty(n)
    Zx, Zd = np.empty(len(design.Li)), np.empty(n)
    factor, inverse = [], []
    for _ in range(repeats + 1):
        start = time.perf_counter()
        assert sf.ldl_supernodal(design.Cp, design.Ci, Cx, design.snode, design.Lp, design.Li, Lx, D) == n
        middle = time.perf_counter()
        sf.selected_inverse_supernodal(design.snode, design.Lp, design.Li, Lx, D, Zx, Zd)
        factor.append(middle - start)
        inverse.append(time.perf_counter() - middle)
    widths = np.diff(design.snode)
    J = int(np.argmax(widths))
    counts = np.diff(design.Lp).astype(float)          # entries below the diagonal, column by column
    share = np.sum(counts[design.snode[J]: design.snode[J + 1]] ** 2) / np.sum(counts ** 2)
    return (f"  kernels on {n:,} unknowns: factorisation {1e3 * min(factor[1:]):.1f} ms, selected inverse "
            f"{1e3 * min(inverse[1:]):.1f} ms (widest supernode {widths[J]} columns, {100 * share:.0f}% of "
            f"the factorisation's multiply-adds)")


def main(argv=None) -> int:
    from ped2g.fit import sparse_mme

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--animals", type=int, nargs="+", default=[1000, 10000])
    parser.add_argument("--traits", type=int, default=4)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--max-records", type=int, default=None)
    parser.add_argument("--level-draw", action="store_true", help="also time one draw of all levels")
    parser.add_argument("--phases", action="store_true",
                        help="also time the factorisation and the selected inverse alone")
    parser.add_argument("--animal-model", action="store_true",
                        help="no extra random effects and every cell observed: the design of the canonical route, "
                             "timed by both routes (general: one factorisation of all traits; canonical: one "
                             "per trait)")
    args = parser.parse_args(argv)
    t = args.traits
    rng = np.random.default_rng(0)
    print(f"{'animals':>8} {'records':>8} {'unknowns':>9} {'nnz(C)':>11} {'nnz(L)':>12} {'design s':>9} "
          f"{'logL+grad s':>12} {'supernodes':>10} {'peak MB':>8}" + (f" {'draw s':>8}" if args.level_draw else ""))
    for n in args.animals:
        design, observed, build_s = simulated_design(n, t, max_records=args.max_records,
                                                     missing=0.0 if args.animal_model else 0.1,
                                                     extra_effects=not args.animal_model)
        G = 0.4 * np.eye(t) + 0.1
        R = 0.5 * np.eye(t) + 0.1
        covs = [] if args.animal_model else [0.1 * np.eye(t) + 0.02, 0.15 * np.eye(t) + 0.03, 0.05 * np.eye(t)]
        resid = np.where(observed, rng.normal(size=observed.shape), 0.0)
        sparse_mme.logp_and_grad(design, resid, G, R, covs)          # compile / warm up
        times = []
        for _ in range(args.repeats):
            start = time.perf_counter()
            value = sparse_mme.logp_and_grad(design, resid, G, R, covs)[0]
            times.append(time.perf_counter() - start)
        assert np.isfinite(value)
        canonical = ""
        if args.animal_model:
            sparse_mme.logp_and_grad(design, resid, G, R, covs, canonical=False)
            general = []
            for _ in range(args.repeats):
                start = time.perf_counter()
                sparse_mme.logp_and_grad(design, resid, G, R, covs, canonical=False)
                general.append(time.perf_counter() - start)
            canonical = f"  general route {min(general):.3f} s, canonical {min(times):.3f} s"
        draw = ""
        if args.level_draw:
            args_draw = (design, resid[None], G[None], R[None], np.array(covs)[None])
            sparse_mme.effects(*args_draw, rng.standard_normal((1, design.n_unknowns)))
            draws = []
            for _ in range(args.repeats):
                noise = rng.standard_normal((1, design.n_unknowns))
                start = time.perf_counter()
                sparse_mme.effects(*args_draw, noise)
                draws.append(time.perf_counter() - start)
            draw = f" {min(draws):>8.3f}"
        if args.phases:
            canonical += kernel_phases(design.univariate if design.canonical else design, args.repeats)
        nnz_c = 2 * len(design.Ci) - design.n_unknowns
        print(f"{n:>8} {len(observed):>8} {design.n_unknowns:>9} {nnz_c:>11,} {design.factor_nnz:>12,} "
              f"{build_s:>9.2f} {min(times):>12.3f} {len(design.snode) - 1:>10,} "
              f"{resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:>8.0f}{draw}{canonical}", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
