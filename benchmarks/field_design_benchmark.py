"""The sparse engine against the marginal engine on a wild-population-style design (prints a table).

Design (invented; tests/fit/field_study.py, built with the project's simulator): 3 traits, a
pedigree of ``--animals`` animals in overlapping generations with 20% of parent links written as
unknown (so about 20% unknown sires), ``--phenotyped`` animals with ``--records`` records each in
successive years (repeated records), 12% of trait cells missing, a sex effect, and three extra
random effects: maternal on the dam column (blank where the pedigree names no dam), permanent
environment on the id column, cohort on the year column. Records are drawn from the model with
known covariances (:func:`field_study.simulate`).

Each engine is timed through everything a fit does before its summaries: building the model
(sparse: ordering and symbolic factorisation; marginal: the eigendecomposition and pre-rotated
designs), compiling it for nutpie (numba) and sampling. The marginal engine samples every extra
random-effect level as a non-centred NUTS parameter and its missing cells as NUTS parameters
(``model.missing_values: nuts``, so that it runs on nutpie and can be stopped by its wall-clock
cap); a run stopped by ``--cap-*`` reports how many iterations it reached and the time the whole
run would take at that pace.

Columns: build, compile and sampling seconds; iterations reached of chains x (warmup + draws);
gradient evaluations and core-milliseconds per gradient (sampling seconds x cores in use /
gradients); divergences; min bulk and tail ESS and max R-hat over the distinct elements of G and
of every extra covariance (Vehtari et al. 2021, as implemented in ArviZ); min bulk ESS per second
of everything (build + compile + sampling).

Usage (from the repository root)::

    python benchmarks/field_design_benchmark.py --chains 4 --warmup 300 --draws 300 --cap-sparse 1500 --cap-marginal 600

``--engines gibbs`` adds the blocked Gibbs candidate (benchmarks/baselines/field_gibbs.py: every
level drawn at once from one sparse factorisation per iteration, then each covariance and the fixed
effects given the levels), ``--chains`` chains of ``--gibbs-warmup`` + ``--gibbs-draws`` iterations
on ``--cores`` processes; its "gradients" column counts factorisations (iterations).

``--engines hybrid`` adds the candidate of benchmarks/baselines/field_hybrid.py: Gibbs steps for the
levels of the effects named by ``--gibbs-levels`` (default: every extra effect, and then the missing
cells too) between NUTS transitions of PyMC's sampler (at ``--target-accept``) for the covariances
and fixed effects, with the breeding values and the other effects integrated out.

``--random cohort`` (any of maternal, permanent, cohort) fits only those extra effects.

``--time-calls`` prints the median time of one log-likelihood with its gradient and of one draw of
every level (``sparse_mme.effects``) on this design, alone and with one BLAS thread (50 calls each).

NUTS runs at nutpie's default target acceptance of 0.8 unless ``--nutpie target_accept=X`` says
otherwise; the fit stage's default (``sampling.target_accept``) is 0.9.

``--nutpie KEY=VALUE`` adds a keyword for ``nutpie.sample`` over the engine's own, for example
``--nutpie low_rank_modified_mass_matrix=true`` (measured in benchmarks/README.md: not adopted).

Timings depend on the machine and what else runs on it; quote the command and load average.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "workflow"))
sys.path.insert(0, str(ROOT / "tests" / "fit"))
sys.path.insert(0, str(ROOT))


def _iterations(idata) -> int:
    total = 0
    for group in ("warmup_sample_stats", "sample_stats"):
        if group in idata.groups():
            total += int(np.isfinite(np.asarray(idata[group]["n_steps"].values, dtype=float)).sum())
    return total


def _total(idata, group: str, stat: str) -> int:
    if group not in idata.groups():
        return 0
    return int(np.nansum(np.asarray(idata[group][stat].values, dtype=float)))


def _option(text: str) -> tuple[str, object]:
    import yaml

    key, sep, value = text.partition("=")
    if not sep or not key:
        raise argparse.ArgumentTypeError(f"expected KEY=VALUE, got {text!r}")
    return key, yaml.safe_load(value)


def summary(idata, names: list[str]) -> dict[str, float]:
    """Min bulk and tail ESS and max R-hat over the distinct elements of each named (t, t) matrix."""
    import arviz as az

    out = {"ess_bulk": np.inf, "ess_tail": np.inf, "rhat": 0.0}
    per = {}
    for name in names:
        x = np.asarray(idata.posterior[name].values)
        keep = int(np.min(np.sum(np.all(np.isfinite(x), axis=(-1, -2)), axis=1)))
        x = x[:, :keep]
        iu = np.tril_indices(x.shape[-1])
        ds = az.convert_to_dataset({"v": x[..., iu[0], iu[1]]})
        b = float(np.min(az.ess(ds, method="bulk")["v"].values))
        t = float(np.min(az.ess(ds, method="tail")["v"].values))
        r = float(np.max(az.rhat(ds)["v"].values))
        per[name] = b
        out["ess_bulk"], out["ess_tail"], out["rhat"] = min(out["ess_bulk"], b), min(out["ess_tail"], t), max(out["rhat"], r)
    out["per"] = per
    out["kept"] = keep
    return out


def run_engine(name: str, data, cfg, args, cap: float) -> dict:
    import nutpie

    from ped2g.fit import sample
    from ped2g.fit.engine import get

    model_config = {**cfg["model"], "missing_values": "nuts"} if name == "marginal" else cfg["model"]
    eng = get(name)
    start = time.perf_counter()
    ok, why = eng.applies(data, model_config)
    built = eng.build(data, model_config)
    build_s = time.perf_counter() - start
    names = ["G", "R", *[f"cov_{e.name}" for e in data.random]]
    free = sum(int(np.prod(v.shape.eval())) if hasattr(v.shape, "eval") else 0 for v in built.model.free_RVs)
    start = time.perf_counter()
    with sample.numba_optimisation(built.numba_opt_level), sample.exact_numba_math():
        compiled = nutpie.compile_pymc_model(built.model, backend="numba", var_names=names)
    compile_s = time.perf_counter() - start
    start = time.perf_counter()
    # the BLAS threads the fit stage gives each chain (ped2g.fit.sample.blas_threads)
    with sample.blas_thread_limit(args.blas_threads or sample.blas_threads(min(args.chains, args.cores))):
        sampler = nutpie.sample(compiled, chains=args.chains, tune=args.warmup, draws=args.draws, seed=args.seed,
                                cores=args.cores, progress_bar=False, blocking=False,
                                **{**(built.nutpie_options or {}), **dict(args.nutpie)})
        stopped = False
        try:
            idata = sampler.wait(timeout=cap)
        except TimeoutError:
            idata = sampler.abort()
            stopped = True
    sample_s = time.perf_counter() - start
    iters = _iterations(idata)
    planned = args.chains * (args.warmup + args.draws)
    steps = _total(idata, "sample_stats", "n_steps") + _total(idata, "warmup_sample_stats", "n_steps")
    row = {"engine": name, "free": free, "build_s": build_s, "compile_s": compile_s, "sample_s": sample_s,
           "iterations": iters, "planned": planned, "gradients": steps,
           "core_ms_per_gradient": 1000 * sample_s * min(args.chains, args.cores) / max(steps, 1),
           "divergences": _total(idata, "sample_stats", "diverging"), "stopped": stopped,
           "total_s": build_s + compile_s + sample_s, "reason": why,
           "nutpie_options": {**(built.nutpie_options or {}), **dict(args.nutpie)}}
    if stopped:
        row["extrapolated_s"] = build_s + compile_s + sample_s * planned / max(iters, 1)
    if args.save:
        idata.to_netcdf(f"{args.save}.{name}.nc")
    if "posterior" in idata.groups() and idata.posterior.sizes["draw"] >= 4:
        s = summary(idata, names)
        if s["kept"] >= 4:
            row.update(ess_bulk=s["ess_bulk"], ess_tail=s["ess_tail"], rhat=s["rhat"], kept=s["kept"],
                       per=s["per"], ess_per_s=s["ess_bulk"] / row["total_s"])
    return row


def _gibbs_chain(job) -> object:
    from benchmarks.baselines.field_gibbs import BlockGibbs

    data, model_config, design, draws, warmup, seed, budget = job
    return BlockGibbs(data, model_config, design).run(draws, warmup, np.random.default_rng(seed),
                                                      time_budget=budget)


def run_gibbs(data, cfg, args) -> dict:
    """The blocked Gibbs candidate: ``args.chains`` chains on ``args.cores`` processes."""
    import multiprocessing

    import arviz as az

    from ped2g.fit import sparse_mme
    from ped2g.fit.sample import blas_thread_limit

    start = time.perf_counter()
    design = sparse_mme.design_for(data)
    build_s = time.perf_counter() - start
    seeds = np.random.SeedSequence(args.seed).generate_state(args.chains)
    jobs = [(data, cfg["model"], design, args.gibbs_draws, args.gibbs_warmup, int(s), args.cap_gibbs) for s in seeds]
    start = time.perf_counter()
    with blas_thread_limit(1), multiprocessing.get_context("fork").Pool(min(args.chains, args.cores)) as pool:
        chains = pool.map(_gibbs_chain, jobs)
    sample_s = time.perf_counter() - start
    keep = min(len(c.G) for c in chains)
    post = {"G": np.stack([c.G[:keep] for c in chains]), "R": np.stack([c.R[:keep] for c in chains])}
    for k, eff in enumerate(data.random):
        post[f"cov_{eff.name}"] = np.stack([c.covs[:keep, k] for c in chains])
    idata = az.from_dict(posterior=post)
    iters = sum(c.iterations for c in chains)
    planned = args.chains * (args.gibbs_warmup + args.gibbs_draws)
    acceptance = {k: round(float(np.mean([c.acceptance[k] for c in chains])), 3) for k in chains[0].acceptance}
    row = {"engine": "gibbs", "free": design.n_unknowns, "build_s": build_s, "compile_s": 0.0, "sample_s": sample_s,
           "iterations": iters, "planned": planned, "gradients": iters,
           "core_ms_per_gradient": 1000 * sample_s * min(args.chains, args.cores) / max(iters, 1),
           "divergences": 0, "stopped": iters < planned, "total_s": build_s + sample_s,
           "reason": f"blocked Gibbs, covariance acceptance {acceptance}", "nutpie_options": {}}
    if row["stopped"]:
        row["extrapolated_s"] = build_s + sample_s * planned / max(iters, 1)
    s = summary(idata, list(post))
    row.update(ess_bulk=s["ess_bulk"], ess_tail=s["ess_tail"], rhat=s["rhat"], kept=s["kept"], per=s["per"],
               ess_per_s=s["ess_bulk"] / row["total_s"])
    return row


def run_hybrid(data, cfg, args) -> dict:
    """The hybrid candidate (benchmarks/baselines/field_hybrid.py): Gibbs steps for the levels of
    ``--gibbs-levels`` (with every level drawn, also the missing cells), NUTS for the covariances and
    fixed effects with the breeding values and the other effects integrated out; PyMC's sampler at
    ``--target-accept``."""
    from benchmarks.baselines import field_hybrid
    from ped2g.fit import sample

    start = time.perf_counter()
    model, steps = field_hybrid.build(data, cfg["model"], drawn=args.gibbs_levels)
    build_s = time.perf_counter() - start
    settings = {"chains": args.chains, "warmup": args.warmup, "draws": args.draws, "seed": args.seed,
                "target_accept": args.target_accept, "sampler": "pymc"}
    run = sample.run(model, settings, "bench", progress=False, extra_steps=steps)
    info = run.info
    idata = run.idata
    iters = args.chains * (args.warmup + args.draws)
    grads = int(info["gradient_evaluations"])
    cores = min(args.chains, args.cores)
    row = {"engine": "hybrid", "free": None, "build_s": build_s, "compile_s": info["compile_seconds"] or 0.0,
           "sample_s": info["sampling_seconds"], "iterations": iters, "planned": iters, "gradients": grads,
           "core_ms_per_gradient": 1000 * info["sampling_seconds"] * cores / max(grads, 1),
           "divergences": int(info["divergences"]), "stopped": False,
           "reason": f"Gibbs steps for the levels of {args.gibbs_levels or 'every extra effect'} + NUTS",
           "nutpie_options": {}}
    row["total_s"] = row["build_s"] + row["compile_s"] + row["sample_s"]
    if args.save:
        idata.to_netcdf(f"{args.save}.hybrid.nc")
    names = ["G", "R", *[f"cov_{e.name}" for e in data.random]]
    s = summary(idata, names)
    row.update(ess_bulk=s["ess_bulk"], ess_tail=s["ess_tail"], rhat=s["rhat"], kept=s["kept"], per=s["per"],
               ess_per_s=s["ess_bulk"] / row["total_s"])
    return row


def time_calls(data, calls: int = 50) -> None:
    from ped2g.fit import sparse_mme
    from ped2g.fit.sample import blas_thread_limit

    design = sparse_mme.design_for(data)
    t = data.n_traits
    G, R = 0.3 * np.eye(t), 0.4 * np.eye(t)
    covs = np.array([0.1 * np.eye(t)] * len(data.random)).reshape(-1, t, t)
    resid = np.where(data.missing, 0.0, data.y)
    rng = np.random.default_rng(0)
    jobs = {"log L + gradient": lambda: sparse_mme.logp_and_grad(design, resid, G, R, covs),
            "level draw": lambda: sparse_mme.effects(design, resid[None], G[None], R[None],
                                                     covs[None] if len(covs) else None,
                                                     rng.standard_normal((1, design.n_unknowns)))}
    with blas_thread_limit(1):
        for name, job in jobs.items():
            job()
            times = []
            for _ in range(calls):
                start = time.perf_counter()
                job()
                times.append(time.perf_counter() - start)
            print(f"{name}: median {1000 * np.median(times):.2f} ms, min {1000 * min(times):.2f} ms "
                  f"({calls} calls, {design.n_unknowns:,} unknowns)", flush=True)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--animals", type=int, default=1500)
    parser.add_argument("--founders", type=int, default=120)
    parser.add_argument("--phenotyped", type=int, default=1000)
    parser.add_argument("--records", type=int, default=2, help="records per phenotyped animal")
    parser.add_argument("--years", type=int, default=9, help="breeding seasons (cohort levels: years + records)")
    parser.add_argument("--chains", type=int, default=4)
    parser.add_argument("--cores", type=int, default=2)
    parser.add_argument("--warmup", type=int, default=300)
    parser.add_argument("--draws", type=int, default=300)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--blas-threads", type=int, default=None,
                        help="BLAS threads while sampling (default: the fit stage's, CPUs / parallel chains)")
    parser.add_argument("--engines", nargs="+", default=["sparse", "marginal"], choices=["sparse", "marginal", "gibbs", "hybrid"])
    parser.add_argument("--gibbs-levels", nargs="+", default=None, choices=["maternal", "permanent", "cohort"],
                        help="hybrid candidate: the effects whose levels the Gibbs step draws (default: all)")
    parser.add_argument("--compound-adaptation", choices=["variance", "gradient"], default=None,
                        help="hybrid candidate: mass-matrix adaptation of PyMC's NUTS "
                             "(default: ped2g.fit.sample.COMPOUND_MASS_ADAPTATION)")
    parser.add_argument("--target-accept", type=float, default=0.9,
                        help="target acceptance of PyMC's NUTS in the hybrid candidate (the fit stage's default)")
    parser.add_argument("--gibbs-warmup", type=int, default=500, help="burn-in iterations per Gibbs chain")
    parser.add_argument("--gibbs-draws", type=int, default=5000, help="kept iterations per Gibbs chain")
    parser.add_argument("--cap-gibbs", type=float, default=1800.0, help="wall-clock cap of each Gibbs chain (s)")
    parser.add_argument("--cap-sparse", type=float, default=1800.0, help="wall-clock cap of sampling (s)")
    parser.add_argument("--cap-marginal", type=float, default=600.0, help="wall-clock cap of sampling (s)")
    parser.add_argument("--random", nargs="+", default=["maternal", "permanent", "cohort"],
                        choices=["maternal", "permanent", "cohort"], help="the extra random effects in the model")
    parser.add_argument("--save", default=None, metavar="PREFIX",
                        help="write each NUTS engine's draws and sampler statistics to PREFIX.<engine>.nc")
    parser.add_argument("--time-calls", action="store_true", help="time one gradient and one level draw, then stop")
    parser.add_argument("--nutpie", type=_option, action="append", default=[], metavar="KEY=VALUE",
                        help="extra keyword for nutpie.sample, over the engine's own (YAML value; repeatable), "
                             "e.g. low_rank_modified_mass_matrix=true")
    args = parser.parse_args(argv)
    if args.gibbs_levels and not set(args.gibbs_levels) <= set(args.random):
        parser.error(f"--gibbs-levels {' '.join(args.gibbs_levels)}: only effects in the model can be drawn "
                     f"(--random {' '.join(args.random)})")
    if args.compound_adaptation:
        from ped2g.fit import sample

        sample.COMPOUND_MASS_ADAPTATION = args.compound_adaptation
    if args.save and not Path(args.save).resolve().parent.is_dir():
        parser.error(f"--save {args.save}: folder {Path(args.save).resolve().parent} does not exist")

    import field_study

    start = time.perf_counter()
    data, cfg, truth = field_study.design(seed=args.seed, animals=args.animals, founders=args.founders,
                                          phenotyped=args.phenotyped, records_per_animal=args.records,
                                          years=args.years,
                                          random=[e for e in field_study.RANDOM if e["name"] in args.random])
    data = field_study.simulate(data, truth, np.random.default_rng(args.seed))
    levels = ", ".join(f"{e.name} {e.n_levels} levels ({int((~e.known).sum())} records unknown)" for e in data.random)
    print(f"design: {data.n_records} records of {int(data.phenotyped.sum())} animals, pedigree {data.pedigree.n} "
          f"after pruning, {data.n_traits} traits, {data.missing.mean():.1%} cells missing, "
          f"{int((data.pedigree.sire < 0).sum())} unknown sires, {levels}; simulated in "
          f"{time.perf_counter() - start:.1f} s", flush=True)
    print(f"load average at start: {' '.join(f'{x:.2f}' for x in os.getloadavg())}", flush=True)
    if args.time_calls:
        time_calls(data)
        return 0
    rows = []
    for name in args.engines:
        if name == "gibbs":
            row = run_gibbs(data, cfg, args)
        elif name == "hybrid":
            row = run_hybrid(data, cfg, args)
        else:
            row = run_engine(name, data, cfg, args, args.cap_sparse if name == "sparse" else args.cap_marginal)
        row["load"] = os.getloadavg()
        rows.append(row)
        print(row, flush=True)
    head = (f"{'engine':>8} {'build_s':>8} {'compile_s':>9} {'sample_s':>9} {'iters':>11} {'gradients':>9} "
            f"{'core_ms/grad':>12} {'div':>4} {'ESS_bulk':>8} {'ESS_tail':>8} {'Rhat_max':>8} {'ESS/s':>8} "
            f"{'total_s':>8}")
    print(head)
    for r in rows:
        ess = (f"{r['ess_bulk']:8.0f} {r['ess_tail']:8.0f} {r['rhat']:8.3f} {r['ess_per_s']:8.4f}"
               if "ess_bulk" in r else f"{'-':>8} {'-':>8} {'-':>8} {'-':>8}")
        total = f"{r['total_s']:8.0f}" + (f"  stopped; whole run ~{r['extrapolated_s']:.0f} s" if r["stopped"] else "")
        print(f"{r['engine']:>8} {r['build_s']:8.1f} {r['compile_s']:9.1f} {r['sample_s']:9.1f} "
              f"{r['iterations']:>5}/{r['planned']:<5} {r['gradients']:9d} {r['core_ms_per_gradient']:12.2f} "
              f"{r['divergences']:4d} {ess} {total}")
    print(f"load average at end: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
