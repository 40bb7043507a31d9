"""Benchmark of the fit stage's engines against two baselines (prints a table; never fails).

For each pedigree size n, one simulated data set (4 traits by default, 80% of animals with one
record, 10% of trait values missing at random, a sex effect) is fitted by

* ``marginal``: breeding values integrated out (ped2g.fit.marginal), where its one-off dense
  eigendecomposition fits (its cost is reported as setup time); missing cells drawn by the Gibbs
  step between NUTS transitions (``model.missing_values: gibbs``, what ``auto`` takes for large
  data; PyMC's NUTS);
* ``marginal_nuts``: the same with the missing cells as NUTS parameters (nutpie), for comparison;
* ``latent``: breeding values sampled through the pedigree recursion (ped2g.fit.latent);
* ``sparse``: breeding values integrated out through the sparse mixed-model equations
  (ped2g.fit.sparse; setup = ordering and symbolic factorisation), missing cells dropped exactly;
* ``sparse_gibbs``: the same engine's canonical route on completed records, the missing cells
  drawn by its Gibbs step between NUTS transitions (``model.missing_values: gibbs``; PyMC's NUTS);
* ``dense``: the same latent model through a dense Cholesky factor of A (baseline; setup = forming
  and factorising A), skipped above ``--dense-max-n``;
* ``gibbs``: blocked Gibbs sampling on Henderson's mixed model equations with inverse-Wishart
  conditionals (baseline; chains run in parallel processes, one per core);
* ``gibbs_canonical``: the same Gibbs sampler with the breeding values drawn by the sparse
  engine's canonical route and the fixed effects as a block of their own (the fair Gibbs
  reference on large pedigrees, where one sparse LU of the whole system per iteration is slow).

Columns: setup, compile and sampling seconds; gradient evaluations (NUTS leapfrog steps, warmup
included) and milliseconds per gradient (Gibbs: iterations and ms per iteration); the minimum
bulk ESS over the distinct elements of G and its R-hat; that ESS per second of sampling and per
second of everything (setup + compile + sampling). ESS and R-hat follow Vehtari et al. (2021) as
implemented in ArviZ. A NUTS run stopped by ``--nuts-budget`` before it has enough draws reports
an upper bound instead (``<=`` in the ESS/s columns): its iterations per second, which bounds the
ESS per second when ESS <= the number of iterations (generous to the stopped run; NUTS chains
that are still adapting or mix slowly are far below it).

Usage (from the repository root)::

    python benchmarks/fit_benchmark.py --sizes 500 2000 --chains 4 --warmup 500 --draws 500
    python benchmarks/fit_benchmark.py --sizes 8000 --engines marginal latent gibbs --csv out.csv

Timings depend on the machine and on what else runs on it; quote the command with the table.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

ENGINES = ("marginal", "marginal_nuts", "latent", "sparse", "sparse_gibbs", "dense", "gibbs", "gibbs_canonical")
DEFAULT_ENGINES = ("marginal", "latent", "dense", "gibbs")


# --------------------------------------------------------------------------------------------
# Simulated data
# --------------------------------------------------------------------------------------------

def simulate_pedigree(n: int, rng: np.random.Generator, cohorts: int = 10, unknown_sire: float = 0.1,
                      sire_share: float = 1 / 8):
    """A pedigree of ``n`` animals in overlapping cohorts.

    Cohort 0 are founders (n / cohorts animals). Each later animal has a dam drawn from the
    females of the previous two cohorts and, with probability ``1 - unknown_sire``, a sire drawn
    from a share ``sire_share`` of the males of those cohorts (so half-sib families are large;
    a small share, as in a herd bred by a few sires, also keeps the sparse factor's dense root
    small).
    """
    from ped2g.pedigree.core import Pedigree
    from ped2g.pedigree.relationships import inbreeding

    size = np.diff(np.linspace(0, n, cohorts + 1).round().astype(int))
    cohort = np.repeat(np.arange(cohorts), size)
    male = rng.random(n) < 0.5
    sire = -np.ones(n, dtype=np.int64)
    dam = -np.ones(n, dtype=np.int64)
    for c in range(1, cohorts):
        kids = np.flatnonzero(cohort == c)
        pool = np.flatnonzero((cohort < c) & (cohort >= c - 2))
        females = pool[~male[pool]]
        males = pool[male[pool]]
        males = rng.choice(males, size=max(1, int(len(males) * sire_share)), replace=False)
        dam[kids] = rng.choice(females, size=len(kids))
        has_sire = rng.random(len(kids)) >= unknown_sire
        sire[kids[has_sire]] = rng.choice(males, size=int(has_sire.sum()))
    generation = np.zeros(n, dtype=np.int64)
    for i in range(n):
        parents = [p for p in (sire[i], dam[i]) if p >= 0]
        generation[i] = 1 + max(generation[p] for p in parents) if parents else 0
    ids = np.array([f"b{i:06d}" for i in range(n)], dtype=object)
    ped = Pedigree(ids=ids, sire=sire, dam=dam, generation=generation, inbreeding=inbreeding(sire, dam))
    return ped, male


def true_covariances(t: int) -> tuple[np.ndarray, np.ndarray]:
    """G and R of the simulation: heritabilities 0.2..0.5, genetic correlations 0.5^|i-j|,
    residual correlations 0.2, phenotypic variances near 1."""
    h2 = np.linspace(0.2, 0.5, t)
    idx = np.arange(t)
    corr_g = 0.5 ** np.abs(idx[:, None] - idx[None, :])
    corr_e = np.full((t, t), 0.2) + 0.8 * np.eye(t)
    G = np.sqrt(np.outer(h2, h2)) * corr_g
    R = np.sqrt(np.outer(1 - h2, 1 - h2)) * corr_e
    return G, R


def simulate_data(n: int, t: int, seed: int, recorded: float = 0.8, missing: float = 0.1,
                  cohorts: int = 10, sire_share: float = 1 / 8):
    """A FitData with ``n`` pedigree animals in ``cohorts`` cohorts (the pedigree's depth); returns
    (data, G_true, R_true) on the standardised scale."""
    from ped2g.fit.data import FitData
    from ped2g.rng import generator
    from ped2g.simulate.breeding_values import simulate_breeding_values

    rng = generator(seed, "fit-benchmark", n)
    ped, male = simulate_pedigree(n, rng, cohorts=cohorts, sire_share=sire_share)
    G, R = true_covariances(t)
    a = simulate_breeding_values(ped, G, rng)
    a = np.asarray(a).reshape(n, t)
    rec = np.sort(rng.choice(n, size=int(round(recorded * n)), replace=False))
    X = np.column_stack([np.ones(len(rec)), male[rec].astype(float)])
    y = X @ np.vstack([np.zeros(t), 0.3 * np.ones(t)]) + a[rec] + rng.standard_normal((len(rec), t)) @ np.linalg.cholesky(R).T
    y[rng.random(y.shape) < missing] = np.nan
    y[np.all(np.isnan(y), axis=1), 0] = 0.0  # keep every record with at least one value
    center, scale = np.nanmean(y, axis=0), np.nanstd(y, axis=0, ddof=1)
    data = FitData(population="bench", traits=[f"trait_{j + 1}" for j in range(t)], pedigree=ped,
                   phenotyped=np.isin(np.arange(n), rec), record_animal=rec, y=(y - center) / scale,
                   y_center=center, y_scale=scale, X=X, x_names=["intercept", "sex[M]"])
    s = np.outer(scale, scale)
    return data, G / s, R / s


# --------------------------------------------------------------------------------------------
# Runs
# --------------------------------------------------------------------------------------------

def _g_summary(G: np.ndarray) -> tuple[float, float]:
    """Minimum bulk ESS and maximum R-hat over the distinct elements of G (chains, draws, t, t)."""
    import arviz as az

    t = G.shape[-1]
    iu = np.triu_indices(t)
    x = G[..., iu[0], iu[1]]  # (chains, draws, q)
    ds = az.convert_to_dataset({"g": x})
    ess = az.ess(ds, method="bulk")["g"].values
    rhat = az.rhat(ds)["g"].values
    return float(np.min(ess)), float(np.max(rhat))


def _total(idata, group: str, stat: str) -> int:
    if group not in idata.groups():
        return 0
    values = np.asarray(idata[group][stat].values, dtype=float)
    return int(np.nansum(values))


def _iterations(idata) -> int:
    total = 0
    for group in ("warmup_sample_stats", "sample_stats"):
        if group in idata.groups():
            total += int(np.isfinite(np.asarray(idata[group]["n_steps"].values, dtype=float)).sum())
    return total


def _model_config(missing_values: str) -> dict:
    return {"priors": {"sd_scale": 1.0, "lkj_eta": 2.0}, "fixed_covariances": None,
            "missing_values": missing_values}


def _marginal_rotation(data, model_config):
    """The marginal engine's eigendecomposition and its seconds, or why the engine does not apply."""
    from ped2g.fit import marginal

    ok, why = marginal.applicable(data, model_config)
    if not ok:
        return why
    start = time.perf_counter()
    rot = marginal.rotation(data)
    return rot, time.perf_counter() - start


def _compound_run(model, steps, args, setup: float, build: float, note: str, **run_kw) -> dict:
    """Sample ``model`` with the Gibbs ``steps`` through ped2g.fit.sample (PyMC's sampler) and
    return the table's row."""
    from ped2g.fit import sample

    settings = {"chains": args.chains, "warmup": args.warmup, "draws": args.draws, "seed": args.seed,
                "target_accept": args.target_accept}
    run = sample.run(model, settings, "bench", progress=False, extra_steps=steps, **run_kw)
    info = run.info
    compile_s = build + (info["compile_seconds"] or 0.0)
    sample_s = info["sampling_seconds"]
    steps_n = info["gradient_evaluations"]
    ess, rhat = _g_summary(np.asarray(run.idata.posterior["G"].values))
    total = setup + compile_s + sample_s
    note = f"{note}; sampler {info['sampler']} (" + " + ".join(info.get("compound_steps", ["NUTS"])) + ")"
    return {"setup_s": setup, "compile_s": compile_s, "sample_s": sample_s, "gradients": steps_n,
            "ms_per_gradient": 1000 * sample_s / max(steps_n, 1), "min_ess_G": ess, "max_rhat_G": rhat,
            "ess_per_s_sampling": ess / sample_s, "ess_per_s_total": ess / total, "total_s": total,
            "divergences": info["divergences"], "note": note}


def run_marginal_gibbs(data, args) -> dict:
    """The marginal engine's Gibbs route through ped2g.fit.sample (Gibbs step for missing cells + NUTS)."""
    from ped2g.fit import marginal

    model_config = _model_config("gibbs")
    prepared = _marginal_rotation(data, model_config)
    if isinstance(prepared, str):
        return {"note": prepared}
    rot, setup = prepared
    start = time.perf_counter()
    model = marginal.build_model(data, model_config, rot)
    steps = marginal.extra_steps(model, data, rot)
    build = time.perf_counter() - start
    return _compound_run(model, steps, args, setup, build, f"eigendecomposition {rot.seconds:.1f} s",
                         numba_opt_level=marginal.NUMBA_OPT_LEVEL)


def run_sparse_gibbs(data, args) -> dict:
    """The sparse engine's canonical route on completed records, the missing cells drawn by its
    Gibbs step between NUTS transitions (``model.missing_values: gibbs``; PyMC's sampler)."""
    from ped2g.fit import sparse

    start = time.perf_counter()
    built = sparse.SparseEngine().build(data, _model_config("gibbs"))
    setup = built.timings["sparse_design_seconds"]
    build = time.perf_counter() - start - setup
    return _compound_run(built.model, built.extra_steps, args, setup, build,
                         f"missing cells: {built.missing_values}")


def run_nuts(engine: str, data, args) -> dict:
    import nutpie

    from ped2g.fit import latent, marginal, sample, sparse, sparse_mme

    model_config = _model_config("nuts")
    setup = 0.0
    module = {"marginal": marginal, "sparse": sparse}.get(engine, latent)
    if engine == "marginal":
        prepared = _marginal_rotation(data, model_config)
        if isinstance(prepared, str):
            return {"note": prepared}
        rot, setup = prepared
        model = marginal.build_model(data, model_config, rot)
        note = f"eigendecomposition {rot.seconds:.1f} s"
    elif engine == "latent":
        model = latent.build_model(data, model_config)
        note = ""
    elif engine == "sparse":
        start = time.perf_counter()
        design = sparse_mme.design_for(data)
        setup = time.perf_counter() - start
        model = sparse.build_model(data, model_config, design)
        factored = design.univariate if design.canonical else design
        note = (f"{'canonical route, one-trait systems of ' if design.canonical else ''}"
                f"{factored.n_unknowns:,} unknowns, {factored.factor_nnz:,} non-zeros in the factor")
    else:
        from benchmarks.baselines import dense_latent

        if data.pedigree.n > args.dense_max_n:
            return {"note": f"skipped: dense A needs {dense_latent.dense_bytes(data.pedigree.n) / 1e9:.1f} GB "
                            f"and O(n^3) work (--dense-max-n {args.dense_max_n})"}
        model, setup = dense_latent.build_model(data, model_config)
        note = "setup = form and factor dense A"
    options = dict(getattr(module, "NUTPIE_OPTIONS", {}))
    with sample.numba_optimisation(getattr(module, "NUMBA_OPT_LEVEL", None)), sample.exact_numba_math():
        start = time.perf_counter()
        compiled = nutpie.compile_pymc_model(model, backend="numba", var_names=["G"])
        compile_s = time.perf_counter() - start
    if args.progress:        # the fit stage's progress lines, to stderr (a long run shows where it is)
        import logging

        logging.basicConfig(stream=sys.stderr, level=logging.INFO, format="%(asctime)s %(message)s")
        progress = sample.ProgressLog(logging.getLogger("fit_benchmark"), f"n = {data.pedigree.n}, {engine}",
                                      args.chains, args.warmup, args.draws, interval=args.progress)
        compiled = sample._NutpieProgress(compiled, progress.nutpie_callback, 1000)
    start = time.perf_counter()
    # the BLAS threads the fit stage gives each chain (ped2g.fit.sample.blas_threads)
    with sample.blas_thread_limit(sample.blas_threads(min(args.chains, args.cores))):
        sampler = nutpie.sample(compiled, chains=args.chains, tune=args.warmup, draws=args.draws,
                                seed=args.seed, cores=args.cores, progress_bar=False, blocking=False,
                                target_accept=args.target_accept, **options)
        try:
            idata = sampler.wait(timeout=args.nuts_budget)
        except TimeoutError:
            idata = sampler.abort()
            note = (note + "; " if note else "") + f"stopped by --nuts-budget {args.nuts_budget:.0f} s"
    sample_s = time.perf_counter() - start
    steps = _total(idata, "sample_stats", "n_steps") + _total(idata, "warmup_sample_stats", "n_steps")
    divergences = _total(idata, "sample_stats", "diverging")
    bound = _iterations(idata) / (setup + compile_s + sample_s)
    if "posterior" not in idata.groups():
        return {"setup_s": setup, "compile_s": compile_s, "sample_s": sample_s, "gradients": steps,
                "ms_per_gradient": 1000 * sample_s / max(steps, 1), "ess_per_s_bound": bound,
                "note": note + f" (still in warmup after {_iterations(idata)} iterations)"}
    G = np.asarray(idata.posterior["G"].values)
    kept = int(np.min(np.sum(np.all(np.isfinite(G), axis=(-1, -2)), axis=1)))
    if kept < 4:
        return {"setup_s": setup, "compile_s": compile_s, "sample_s": sample_s, "gradients": steps,
                "ms_per_gradient": 1000 * sample_s / max(steps, 1), "ess_per_s_bound": bound,
                "note": note + " (too few draws)"}
    if kept < args.draws:
        note += f" after {kept} draws per chain"
    ess, rhat = _g_summary(G[:, :kept])
    total = setup + compile_s + sample_s
    return {"setup_s": setup, "compile_s": compile_s, "sample_s": sample_s, "gradients": steps,
            "ms_per_gradient": 1000 * sample_s / max(steps, 1), "min_ess_G": ess, "max_rhat_G": rhat,
            "ess_per_s_sampling": ess / sample_s, "ess_per_s_total": ess / total, "total_s": total,
            "divergences": divergences, "note": note}


def _gibbs_chain(payload):
    from benchmarks.baselines import gibbs

    data, iterations, warmup, seed, chain, budget, levels = payload
    rng = np.random.default_rng([seed, chain])
    return gibbs.run_gibbs(data, iterations, warmup, rng, time_budget=budget, levels=levels)


def run_gibbs(data, args, levels: str = "joint") -> dict:
    start = time.perf_counter()
    payloads = [(data, args.gibbs_iterations, args.gibbs_warmup, args.seed, c, args.gibbs_budget, levels)
                for c in range(args.chains)]
    with ProcessPoolExecutor(max_workers=args.cores) as pool:
        chains = list(pool.map(_gibbs_chain, payloads))
    wall = time.perf_counter() - start
    kept = min(len(c["G"]) for c in chains)
    iterations = sum(c["iterations"] for c in chains)
    ms = 1000 * sum(c["seconds"] for c in chains) / max(iterations, 1)
    if kept < 4:
        return {"sample_s": wall, "gradients": iterations, "ms_per_gradient": ms,
                "ess_per_s_bound": iterations / wall,
                "note": f"gradients = iterations, ms per iteration; only {kept} kept iterations "
                        f"within --gibbs-budget (still in warmup)"}
    G = np.stack([c["G"][:kept] for c in chains])
    ess, rhat = _g_summary(G)
    note = "" if kept == args.gibbs_iterations else f"stopped by --gibbs-budget after {kept} kept iterations"
    return {"setup_s": 0.0, "compile_s": 0.0, "sample_s": wall, "gradients": iterations,
            "ms_per_gradient": ms,
            "min_ess_G": ess, "max_rhat_G": rhat, "ess_per_s_sampling": ess / wall,
            "ess_per_s_total": ess / wall, "total_s": wall, "divergences": 0,
            "note": ("gradients = iterations, ms per iteration; " + note).strip("; ")}


COLUMNS = [  # key, header, width, format
    ("n", "n", 6, "{:d}"), ("engine", "engine", 8, "{}"), ("setup_s", "setup_s", 7, "{:.1f}"),
    ("compile_s", "compile_s", 9, "{:.1f}"), ("sample_s", "sample_s", 8, "{:.1f}"),
    ("gradients", "grads", 8, "{:d}"), ("ms_per_gradient", "ms/grad", 8, "{:.3f}"),
    ("min_ess_G", "minESS_G", 8, "{:.0f}"), ("max_rhat_G", "Rhat_G", 6, "{:.3f}"),
    ("ess_per_s_sampling", "ESS/s_sm", 8, "{:.2f}"), ("ess_per_s_total", "ESS/s_all", 9, "{:.3g}"),
    ("divergences", "div", 4, "{:d}"),
]


def format_header() -> str:
    return " ".join(head.rjust(width) if key != "engine" else head.ljust(width)
                    for key, head, width, _ in COLUMNS)


def format_row(row: dict) -> str:
    cells = []
    for key, _, width, fmt in COLUMNS:
        value = row.get(key)
        text = "-" if value is None else fmt.format(value)
        if key == "ess_per_s_total" and value is None and row.get("ess_per_s_bound") is not None:
            text = "<=" + "{:.2g}".format(row["ess_per_s_bound"])
        cells.append(text.ljust(width) if key == "engine" else text.rjust(width))
    return " ".join(cells) + ("  " + row["note"] if row.get("note") else "")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[500, 2000, 8000, 32000],
                        help="pedigree sizes n (default: 500 2000 8000 32000)")
    parser.add_argument("--traits", type=int, default=4, help="number of traits (default 4)")
    parser.add_argument("--cohorts", type=int, default=10,
                        help="cohorts of the simulated pedigree, about its number of generations (default 10)")
    parser.add_argument("--engines", nargs="+", default=list(DEFAULT_ENGINES), choices=ENGINES,
                        help=f"what to run (default: {' '.join(DEFAULT_ENGINES)})")
    parser.add_argument("--chains", type=int, default=4)
    parser.add_argument("--cores", type=int, default=min(2, os.cpu_count() or 1))
    parser.add_argument("--warmup", type=int, default=500)
    parser.add_argument("--draws", type=int, default=500)
    parser.add_argument("--target-accept", type=float, default=0.9)
    parser.add_argument("--compound-adaptation", choices=["variance", "gradient"], default=None,
                        help="mass-matrix adaptation of PyMC's NUTS in compound runs (marginal, sparse_gibbs; "
                             "default: ped2g.fit.sample.COMPOUND_MASS_ADAPTATION)")
    parser.add_argument("--nuts-budget", type=float, default=None,
                        help="seconds of sampling per NUTS run before it stops early (default: none)")
    parser.add_argument("--gibbs-iterations", type=int, default=2000, help="kept Gibbs iterations per chain")
    parser.add_argument("--gibbs-warmup", type=int, default=500)
    parser.add_argument("--gibbs-budget", type=float, default=600.0,
                        help="seconds per Gibbs chain before it stops early (default 600)")
    parser.add_argument("--dense-max-n", type=int, default=8000,
                        help="largest n for the dense-Cholesky baseline (default 8000)")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--missing", type=float, default=0.1,
                        help="share of trait values missing at random (default 0.1; 0 gives the sparse engine's "
                             "canonical route)")
    parser.add_argument("--recorded", type=float, default=0.8,
                        help="share of the animals with a record (default 0.8)")
    parser.add_argument("--sire-share", type=float, default=1 / 8,
                        help="share of each cohort's males that sire offspring (default 1/8)")
    parser.add_argument("--kernels-only", action="store_true",
                        help="fit nothing: time the sparse engine's two kernels on each size's design "
                             "(benchmarks/sparse_likelihood.py --phases)")
    parser.add_argument("--progress", type=float, default=None, metavar="SECONDS",
                        help="write a progress line of each NUTS run (nutpie) to stderr every SECONDS")
    parser.add_argument("--csv", help="also write the table to this CSV file")
    args = parser.parse_args(argv)
    if args.compound_adaptation:
        from ped2g.fit import sample

        sample.COMPOUND_MASS_ADAPTATION = args.compound_adaptation

    import pandas as pd

    if not args.kernels_only:
        print(format_header(), flush=True)
    rows = []
    for n in args.sizes:
        data, _, _ = simulate_data(n, args.traits, args.seed, recorded=args.recorded, missing=args.missing,
                                   cohorts=args.cohorts, sire_share=args.sire_share)
        if args.kernels_only:
            from benchmarks.sparse_likelihood import kernel_phases
            from ped2g.fit import sparse_mme

            design = sparse_mme.design_for(data)
            print(f"n = {n}, {len(data.record_animal):,} records, "
                  f"{len(np.unique(data.pedigree.sire[data.pedigree.sire >= 0])):,} sires, "
                  f"{'canonical route' if design.canonical else 'general route'}:"
                  + kernel_phases(design.univariate if design.canonical else design, 3), flush=True)
            continue
        for engine in args.engines:
            if engine in ("gibbs", "gibbs_canonical"):
                row = run_gibbs(data, args, "joint" if engine == "gibbs" else "canonical")
            elif engine == "marginal":
                row = run_marginal_gibbs(data, args)
            elif engine == "sparse_gibbs":
                row = run_sparse_gibbs(data, args)
            else:
                row = run_nuts("marginal" if engine == "marginal_nuts" else engine, data, args)
            row = {"n": n, "engine": engine, **row}
            rows.append(row)
            print(format_row(row), flush=True)
    if args.csv:
        pd.DataFrame(rows).to_csv(args.csv, index=False)
    return 0


if __name__ == "__main__":
    sys.exit(main())
