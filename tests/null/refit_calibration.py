"""Calibration and power of the refitting null's tests over simulated studies.

Each simulated study takes a fixed design -- every population's pedigree, records, missing cells
and fixed-effect rows -- and simulates new records with known G, R and fixed effects; it is then
analysed exactly as the workflow does: each population is fitted (the "observed" fit), the
refitting null simulates ``replicates`` studies under the mean of the posterior-mean G matrices
and refits them, and the compare stage's :func:`ped2g.compare.pipeline.compare` gives every row
its p-value. When every population shares one G, a calibrated test has P(p <= 0.05) = 0.05 for
every statistic, within Monte Carlo error; with real differences the same share is the power.
With R replicates p takes the values k / (R + 1), so "p <= 0.05" has level exactly 0.05 when
0.05 (R + 1) is whole (R = 39, 99); "p < 0.05" would have 0.025 at R = 39.

To keep this affordable the observed fits use the refits' shorter chains (the estimate is the
posterior mean in both, so only its small Monte Carlo error differs), and each population's model
is compiled once for every study (only the records change).

Run as a script (the README quotes its tables)::

    python tests/null/refit_calibration.py --studies 20 --replicates 39            # shared G
    python tests/null/refit_calibration.py --studies 10 --replicates 39 --truth    # the demo's G

``--truth`` simulates with the demo's true G matrices (one population reduced along one axis,
one with a rotated leading axis), which gives the power. ``--recovery-only`` fits the simulated
studies without a null, to measure the fits' bias and interval coverage with other chain lengths
or priors, for example::

    python tests/null/refit_calibration.py --truth --recovery-only --studies 30 \
        --chains 2 --warmup 500 --draws 1000 --lkj-eta 1

``--shared-g`` runs only the observed fits and the pilots, and compares how elongated the null's
shared G is (leading eigenvalue's share, mean autonomy) with the truth. The slow test
(tests/null/test_refit_calibration.py) runs a tiny design.
"""

from __future__ import annotations

import argparse
import copy
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import yaml

from ped2g.compare.pipeline import compare
from ped2g.config import validate
from ped2g.null.refit import (DesignParameters, Refitter, bias_corrected_G, design_parameters,
                              replicate_name, shared_G, simulate_records)
from ped2g.contracts.refit_null import DIAGNOSTICS, RefitNull
from ped2g.contracts.fit_folder import FitSet
from ped2g.rng import generator

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "tests"))
from demo_findings import designed_findings  # noqa: E402  (tests/ holds the shared checks)


def demo_design(config_path: Path = ROOT / "config" / "config.yaml"):
    """The demo study's prepared populations, its validated config and its truth file."""
    from ped2g.config import load_config
    from ped2g.fit.prepare import prepare
    from ped2g.io import read_table
    from ped2g.pedigree.clean import read_raw_pedigree

    cfg = load_config(config_path)
    cols = cfg["data"]["columns"]
    ped, _ = read_raw_pedigree(ROOT / cfg["data"]["pedigree"], id_col=cols["id"], sire_col=cols["sire"],
                               dam_col=cols["dam"], missing=cfg["data"]["missing_parent"])
    phen = read_table(ROOT / cfg["data"]["phenotypes"], "phenotype table")
    truth = yaml.safe_load((ROOT / "resources_demo" / "truth.yaml").read_text(encoding="utf-8"))
    pops = list(truth["populations"])
    data = {p: prepare(cfg, phen, ped, p) for p in pops}
    return data, cfg, truth


def true_parameters(data, truth: dict, shared: bool) -> tuple[dict, dict]:
    """True G and design parameters per population from the demo's truth file (the records'
    fixed part from its intercepts and sex effects)."""
    Gs, params = {}, {}
    pops = list(data)
    G_ref = np.array(truth["populations"][pops[0]]["G"])
    for p, d in data.items():
        tp = truth["populations"][p]
        traits = d.traits
        intercept = np.array([tp["intercept"][t] for t in traits])
        sex = np.array([tp["sex_effect"][t] for t in traits])
        mu = intercept + d.X[:, 1:2] * sex if d.X.shape[1] > 1 else np.broadcast_to(intercept, (d.n_records, len(traits)))
        params[p] = DesignParameters(mu=np.array(mu, dtype=float), R=np.array(tp["R"]))
        Gs[p] = G_ref if shared else np.array(tp["G"])
    return Gs, params


def recovery_rows(rep, G_true: np.ndarray, R_true: np.ndarray, traits: list[str], mass: float = 0.9) -> list[dict]:
    """Bias and interval coverage of one fit: every lower-triangle element of G and every h2, with
    its posterior mean, HPD and equal-tailed intervals at ``mass`` and the true value."""
    from ped2g.intervals import equal_tailed, hpd

    t = len(traits)
    P_true = G_true + R_true
    rows = []
    values = {f"G[{traits[i]},{traits[j]}]": (rep.G[:, i, j], G_true[i, j]) for i in range(t) for j in range(i + 1)}
    values.update({f"h2[{traits[i]}]": (rep.G[:, i, i] / rep.P[:, i, i], G_true[i, i] / P_true[i, i]) for i in range(t)})
    for name, (draws, truth) in values.items():
        lo, hi = hpd(draws, mass)
        elo, ehi = equal_tailed(draws, mass)
        rows.append({"parameter": name, "truth": float(truth), "mean": float(draws.mean()), "sd": float(draws.std()),
                     "hpd_covers": bool(lo <= truth <= hi), "et_covers": bool(elo <= truth <= ehi)})
    return rows


def null_shared_G(refitters: dict, data: dict, observed: dict, config: dict, study: int, pilot: int,
                  run_seed: int = 1) -> tuple[np.ndarray, np.ndarray, dict, int]:
    """The refitting null's shared G for one study, as the workflow makes it: the mean of the
    observed posterior-mean G matrices (``G_bar``) and, with ``pilot`` > 0, its bias-corrected form
    from that many pilot refits per population (:func:`ped2g.null.refit.bias_corrected_G`).
    Returns (G_bar, the shared G, design parameters per population, the null's seed)."""
    pops = list(data)
    G_bar = shared_G([observed[p].G.mean(axis=0) for p in pops])
    params = {p: design_parameters(data[p], observed[p].means) for p in pops}
    seed = int(config["sampling"]["seed"]) + 1000 * study + 1_000_000 * (run_seed - 1)
    G0 = G_bar
    if pilot > 0:
        pilots = [refitters[p].refit(simulate_records(data[p], G_bar, params[p], generator(seed, "null_pilot", p, k)),
                                     replicate_name(p, k, "null_pilot") + f":{study}").G.mean(axis=0)
                  for p in pops for k in range(pilot)]
        G0 = bias_corrected_G(G_bar, pilots)
    return G_bar, G0, params, seed


def elongation(G: np.ndarray, sd: np.ndarray, skewers: int = 2000) -> dict[str, float]:
    """How elongated ``G`` is on the scale of the phenotypic SDs ``sd``: the leading eigenvalue's
    share of the trace and the mean autonomy over random unit gradients (ped2g's own
    :func:`ped2g.compare.evolvability.evolvability_means`)."""
    from ped2g.compare.evolvability import evolvability_means

    Gs = np.asarray(G, dtype=float) / np.outer(sd, sd)
    lam = np.linalg.eigvalsh(Gs)
    B = np.random.default_rng(0).standard_normal((skewers, len(sd)))
    B /= np.linalg.norm(B, axis=1, keepdims=True)
    return {"leading_share": float(lam[-1] / lam.sum()),
            "autonomy": float(evolvability_means(Gs[None, None], B)["autonomy"][0, 0])}


def shared_G_study(data: dict, config: dict, Gs: dict, params: dict, studies: int, pilot: int,
                   seed: int = 1, first: int = 0, progress=print) -> pd.DataFrame:
    """The elongation of the truth, of each observed posterior-mean G, of ``G_bar`` and of the
    bias-corrected shared G on studies ``first`` .. ``first + studies - 1`` (the streams of
    :func:`run`): does the null simulate from a G as elongated as the truth? Only the observed
    fits and the pilots are run, not the null's refits."""
    config = copy.deepcopy(config)
    config["checks"]["on_failure"] = "flag"
    refitters = {p: Refitter(d, "marginal", config) for p, d in data.items()}
    pops = list(data)
    rows = []
    for s in range(first, first + studies):
        Y = {p: simulate_records(d, Gs[p], params[p], generator(seed, "calibration", s, p)) for p, d in data.items()}
        observed = {p: refitters[p].refit(Y[p], f"calibration:{s}:{p}") for p in pops}
        G_bar, G0, _, _ = null_shared_G(refitters, data, observed, config, s, pilot, seed)
        sd = np.sqrt(np.diag(Gs[pops[0]] + params[pops[0]].R))
        mats = {"truth": Gs[pops[0]], "G_bar": G_bar, "shared G": G0,
                **{f"observed ({p})": observed[p].G.mean(axis=0) for p in pops}}
        measured = {k: elongation(M, sd) for k, M in mats.items()}
        rows += [{"study": s, "matrix": k.split(" (")[0], **m} for k, m in measured.items()]
        progress(f"study {s + 1}: shared G's leading share {measured['shared G']['leading_share']:.3f} "
                 f"(truth {measured['truth']['leading_share']:.3f})")
    return pd.DataFrame(rows)


def analyse(refitters: dict, data: dict, Y: dict, config: dict, replicates: int, study: int,
            truth: dict | None = None, pilot: int = 0, demo_truth: dict | None = None,
            run_seed: int = 1) -> pd.DataFrame:
    """Fit one simulated study, build its refitting null, and return every compare row (and, with
    ``truth`` = {population: (G, R)}, the fits' recovery rows in ``analyse.recovery``). With
    ``pilot`` > 0 the shared G is bias-corrected from that many pilot refits per population, as
    the workflow does (:func:`ped2g.null.refit.bias_corrected_G`). With ``demo_truth`` (the demo's
    truth file, when the study was simulated with its G matrices) the demo-findings test's checks
    on this study are left in ``analyse.findings``. ``run_seed`` (the script's ``--seed``) keeps
    the null's streams of runs with different seeds apart (seed 1 gives the streams it always did)."""
    pops = list(data)
    observed = {p: refitters[p].refit(Y[p], f"calibration:{study}:{p}") for p in pops}
    if truth is not None:
        analyse.recovery = [dict(r, population=p, study=study)
                            for p in pops for r in recovery_rows(observed[p], *truth[p], data[p].traits)]
    _, G0, params, seed = null_shared_G(refitters, data, observed, config, study, pilot, run_seed)
    reps = {p: [refitters[p].refit(simulate_records(data[p], G0, params[p],
                                                    generator(seed, "null_refit", p, r)),
                                   replicate_name(p, r) + f":{study}") for r in range(replicates)]
            for p in pops}
    traits = data[pops[0]].traits

    def stack(items, name, axis):
        return np.stack([getattr(i, name) for i in items], axis=axis)

    obs = [observed[p] for p in pops]
    fits = FitSet(populations=pops, traits=traits, G=stack(obs, "G", 1), R=stack(obs, "P", 1) - stack(obs, "G", 1),
                  P=stack(obs, "P", 1), mean=stack(obs, "mean", 1), draw_index=np.arange(obs[0].G.shape[0]), fits=[])
    null = RefitNull(
        populations=pops, traits=traits, replicates=np.arange(replicates),
        G=np.stack([stack([reps[p][r] for p in pops], "G", 1) for r in range(replicates)]),
        P=np.stack([stack([reps[p][r] for p in pops], "P", 1) for r in range(replicates)]),
        mean=np.stack([stack([reps[p][r] for p in pops], "mean", 1) for r in range(replicates)]),
        diagnostics=pd.DataFrame([{"population": p, "replicate": r,
                                   **{k: getattr(reps[p][r], k) for k in DIAGNOSTICS}}
                                  for p in pops for r in range(replicates)]),
        shared_G=G0, attrs={})
    # the share of p <= 0.05 needs no Holm-reachable replicate count: allow fewer replicates
    result = compare(fits, None, config, refits=null, check_replicates=False)
    if demo_truth is not None:
        analyse.findings = dict(designed_findings(result.tables["tensor"], result.loadings, result.tables["gmax"],
                                                  demo_truth), study=study)
    rows = pd.concat(result.tables.values(), ignore_index=True)
    rows = rows[rows["p_value"].notna()].copy()
    rows["study"] = study
    return rows


def run(data: dict, config: dict, Gs: dict, params: dict, studies: int, replicates: int,
        seed: int = 1, progress=print, with_null: bool = True, pilot: int = 0,
        demo_truth: dict | None = None, first: int = 0, checkpoint=None) -> pd.DataFrame:
    """Simulate and analyse studies ``first`` .. ``first + studies - 1`` on one design; every tested
    row of every study (none with ``with_null=False``, which only fits each study). Study ``s`` draws
    from the same streams whatever ``first`` is, so a run split over processes gives the rows of
    one long run. ``checkpoint(rows, recovery, findings)``, if given, is called after every study
    with everything so far, so an interrupted run keeps its finished studies.

    The fits' recovery of the true G and h2 (one row per study, population and parameter) is left
    in ``run.recovery``; with ``demo_truth``, the demo-findings checks per study in
    ``run.findings``."""
    config = copy.deepcopy(config)
    config["checks"]["on_failure"] = "flag"
    refitters = {p: Refitter(d, "marginal", config) for p, d in data.items()}
    out, recovery, findings = [], [], []
    truth = {p: (Gs[p], params[p].R) for p in data}
    for s in range(first, first + studies):
        start = time.perf_counter()
        Y = {p: simulate_records(d, Gs[p], params[p], generator(seed, "calibration", s, p))
             for p, d in data.items()}
        if with_null:
            out.append(analyse(refitters, data, Y, config, replicates, s, truth, pilot, demo_truth, seed))
            recovery += analyse.recovery
            if demo_truth is not None:
                findings.append(analyse.findings)
        else:
            for p in data:
                fit = refitters[p].refit(Y[p], f"recovery:{s}:{p}")
                recovery += [dict(r, population=p, study=s, rhat_max=fit.rhat_max, ess_bulk_min=fit.ess_bulk_min)
                             for r in recovery_rows(fit, *truth[p], data[p].traits)]
        progress(f"study {s + 1} ({s + 1 - first} of {studies}) in {time.perf_counter() - start:.0f} s")
        if checkpoint is not None:
            checkpoint(pd.concat(out, ignore_index=True) if out else pd.DataFrame(),
                       pd.DataFrame(recovery), pd.DataFrame(findings))
    run.recovery = pd.DataFrame(recovery)
    run.findings = pd.DataFrame(findings)
    return pd.concat(out, ignore_index=True) if out else pd.DataFrame()


def recovery_table(recovery: pd.DataFrame) -> pd.DataFrame:
    """Per parameter: mean bias, bias in posterior SDs, 90% HPD and equal-tailed coverage."""
    r = recovery.assign(bias=recovery["mean"] - recovery["truth"],
                        z=(recovery["mean"] - recovery["truth"]) / recovery["sd"])
    g = r.groupby("parameter", sort=False)
    return pd.DataFrame({"fits": g.size(), "truth_mean": g["truth"].mean(), "bias": g["bias"].mean(),
                         "bias_in_sd": g["z"].mean(), "hpd90_coverage": g["hpd_covers"].mean(),
                         "et90_coverage": g["et_covers"].mean()}).reset_index()


def findings_table(findings: pd.DataFrame) -> str:
    """The share of studies in which each check of the demo-findings test holds (its power)."""
    checks = [c for c in findings.columns if c != "study"]
    lines = [f"checks of tests/workflow/test_demo_findings.py over {len(findings)} studies (share holding):"]
    lines += [f"  {c}: {int(findings[c].sum())} of {len(findings)}" for c in checks]
    every = findings[checks].all(axis=1)
    lines.append(f"  all at once: {int(every.sum())} of {len(findings)}")
    return "\n".join(lines)


def clustered_se(hit: pd.Series, study: pd.Series) -> float:
    """Standard error of the share of ``hit`` with studies as clusters: the rows of one study share
    its data (an odd population is flagged in both of its pairs), so they are not independent.
    The ratio estimator's SE, sqrt(sum_s (h_s - p n_s)^2 / (S (S - 1))) / mean(n_s), with h_s and
    n_s the hits and rows of study s (Cochran 1977, Sampling Techniques, ch. 6, recalled from
    memory)."""
    per = pd.DataFrame({"h": hit.astype(float), "s": study}).groupby("s")["h"].agg(["sum", "size"])
    S = len(per)
    if S < 2:
        return float("nan")
    p = per["sum"].sum() / per["size"].sum()
    return float(np.sqrt(((per["sum"] - p * per["size"]) ** 2).sum() / (S * (S - 1))) / per["size"].mean())


def share_table(rows: pd.DataFrame, level: float = 0.05) -> pd.DataFrame:
    """Per statistic: rows, share with p <= level (the reading rule before Holm), its binomial Monte
    Carlo SE at ``level`` over the rows (``mc_se``; a lower bound, since rows of one study are
    dependent), its SE with studies as clusters (``cluster_se``, :func:`clustered_se`), the mean
    p-value (0.5 + 0.5 / (R + 1) under the null), share supported (Holm within each study)."""
    hit = rows["p_value"] <= level * (1 + 1e-9)
    g = rows.assign(hit=hit).groupby(["method", "statistic"])
    table = pd.DataFrame({
        "rows": g.size(),
        "share_p_at_or_below": g["hit"].mean().astype(float),
        "mean_p": g["p_value"].mean(),
        "share_supported": g["supported"].apply(lambda s: float(s.fillna(False).astype(bool).mean())),
    })
    table["mc_se"] = np.sqrt(level * (1 - level) / table["rows"])
    table["cluster_se"] = [clustered_se(d["hit"], d["study"]) for _, d in g]
    return table.reset_index()


def overall(rows: pd.DataFrame, level: float = 0.05) -> str:
    """One line: the share of all tested rows with p <= level, with a standard error over studies
    (each study's share is one observation, so the dependence of rows within a study is kept), and a
    Kolmogorov-Smirnov test of the randomised p-values p - U / (R + 1) against uniform."""
    from scipy import stats

    hit = rows["p_value"] <= level * (1 + 1e-9)
    per_study = hit.groupby(rows["study"]).mean()
    se = per_study.std(ddof=1) / np.sqrt(len(per_study))
    u = generator(0, "calibration-ks").uniform(size=len(rows))
    randomised = rows["p_value"].to_numpy() - u / (rows["n_replicates"].astype(float).to_numpy() + 1)
    ks = stats.kstest(randomised, "uniform")
    return (f"all {len(rows)} tested rows: share p <= {level:g} = {hit.mean():.3f} (SE over {len(per_study)} "
            f"studies {se:.3f}); mean p = {rows['p_value'].mean():.3f}; KS of randomised p against "
            f"uniform: D = {ks.statistic:.3f} (rows of one study are dependent: read D, not its p-value)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--studies", type=int, default=20)
    parser.add_argument("--replicates", type=int, default=39)
    parser.add_argument("--truth", action="store_true", help="simulate with the demo's true G matrices (power)")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--first-study", type=int, default=0,
                        help="index of the first study (split one run over processes: --first-study 0 "
                             "--studies 10 and --first-study 10 --studies 10 give the rows of --studies 20)")
    parser.add_argument("--out", default=None, help="CSV of every tested row")
    parser.add_argument("--recovery-only", action="store_true", help="fit the studies without a null")
    parser.add_argument("--chains", type=int, default=None, help="chains per fit (default: the refits')")
    parser.add_argument("--warmup", type=int, default=None, help="tuning iterations per chain")
    parser.add_argument("--draws", type=int, default=None, help="kept draws per chain")
    parser.add_argument("--lkj-eta", type=float, default=None, help="model.priors.lkj_eta of the fits")
    parser.add_argument("--pilot", type=int, default=None,
                        help="pilot refits per population for the shared G's bias correction "
                             "(default: compare.null_model.pilot_replicates of the demo config; 0: none)")
    parser.add_argument("--shared-g", action="store_true",
                        help="only measure how elongated the null's shared G is against the truth (observed "
                             "fits and pilots, no refits)")
    parser.add_argument("--tables", default=None, metavar="CSV",
                        help="only print the tables of a CSV written by an earlier run with --out")
    args = parser.parse_args()
    if args.tables:
        rows = pd.read_csv(args.tables)
        print(share_table(rows).to_string(index=False, float_format=lambda x: f"{x:.3f}"))
        print(overall(rows))
        recovery = Path(str(args.tables).replace(".csv", "") + "_recovery.csv")
        found = Path(str(args.tables).replace(".csv", "") + "_findings.csv")
        if found.exists():
            print(findings_table(pd.read_csv(found)))
        if recovery.exists():
            print(recovery_table(pd.read_csv(recovery)).to_string(index=False, float_format=lambda x: f"{x:.3f}"))
        return

    def save(rows: pd.DataFrame, recovery: pd.DataFrame, findings: pd.DataFrame) -> None:
        stem = str(args.out).replace(".csv", "")
        if len(rows):
            rows.to_csv(args.out, index=False)
        recovery.to_csv(stem + "_recovery.csv", index=False)
        if len(findings):
            findings.to_csv(stem + "_findings.csv", index=False)

    checkpoint = save if args.out else None
    data, cfg, truth = demo_design()
    cfg = validate({**cfg, "compare": {**cfg["compare"], "null_model": {**cfg["compare"]["null_model"]}}})
    for key in ("chains", "warmup", "draws"):
        if getattr(args, key) is not None:
            cfg["compare"]["null_model"]["refit"][key] = getattr(args, key)
    if args.lkj_eta is not None:
        cfg["model"]["priors"]["lkj_eta"] = args.lkj_eta
    chains = cfg["compare"]["null_model"]["refit"]
    Gs, params = true_parameters(data, truth, shared=not args.truth)
    start = time.perf_counter()
    if args.recovery_only:
        run(data, cfg, Gs, params, args.studies, 0, args.seed, with_null=False, first=args.first_study)
        rec = run.recovery
        if args.out:
            rec.to_csv(args.out, index=False)
        print(f"recovery of {len(rec.groupby(['study', 'population']))} fits, {chains['chains']} chain(s) x "
              f"({chains['warmup']} + {chains['draws']}), lkj_eta {cfg['model']['priors']['lkj_eta']:g}, "
              f"{time.perf_counter() - start:.0f} s; 90% intervals")
        print(recovery_table(rec).to_string(index=False, float_format=lambda x: f"{x:.3f}"))
        print(recovery_summary(rec))
        return
    pilot = int(cfg["compare"]["null_model"]["pilot_replicates"] if args.pilot is None else args.pilot)
    if args.shared_g:
        table = shared_G_study(data, cfg, Gs, params, args.studies, pilot, args.seed, args.first_study)
        if args.out:
            table.to_csv(args.out, index=False)
        summary = table.groupby("matrix", sort=False)[["leading_share", "autonomy"]].agg(["mean", "std"])
        print(f"elongation on the phenotypic-SD scale over {args.studies} studies ({pilot} pilots per population), "
              f"{time.perf_counter() - start:.0f} s; mean and SD over studies (observed: over studies and populations)")
        print(summary.to_string(float_format=lambda x: f"{x:.3f}"))
        return
    rows = run(data, cfg, Gs, params, args.studies, args.replicates, args.seed, pilot=pilot,
               demo_truth=truth if args.truth else None, first=args.first_study, checkpoint=checkpoint)
    if args.out:
        save(rows, run.recovery, run.findings)
    print(f"{args.studies} studies x {args.replicates} null replicates, "
          f"{'the demo truth (power)' if args.truth else 'one shared G (calibration)'}, "
          f"{pilot} pilot refits per population for the shared G's bias correction, "
          f"{time.perf_counter() - start:.0f} s")
    print(share_table(rows).to_string(index=False, float_format=lambda x: f"{x:.3f}"))
    print(overall(rows))
    if args.truth:
        print(findings_table(run.findings))
    print(f"recovery of the fits ({chains['chains']} chain(s) x ({chains['warmup']} + {chains['draws']}) each; "
          "90% intervals):")
    print(recovery_table(run.recovery).to_string(index=False, float_format=lambda x: f"{x:.3f}"))
    print(recovery_summary(run.recovery))


def recovery_summary(rec: pd.DataFrame) -> str:
    """Coverage over all G elements, covariances and h2, and the mean bias in posterior SDs."""
    kinds = {"G variances": rec.parameter.str.match(r"G\[(\w+),\1\]"),
             "G covariances": rec.parameter.str.startswith("G") & ~rec.parameter.str.match(r"G\[(\w+),\1\]"),
             "h2": rec.parameter.str.startswith("h2")}
    z = (rec["mean"] - rec["truth"]) / rec["sd"]
    return "; ".join(f"{k}: HPD {rec[m].hpd_covers.mean():.3f}, equal-tailed {rec[m].et_covers.mean():.3f}, "
                     f"bias {z[m].mean():+.2f} SD" for k, m in kinds.items())


if __name__ == "__main__":
    main()
