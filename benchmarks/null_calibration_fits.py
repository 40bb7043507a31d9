"""How often ped2g flags a difference between populations that truly share one G, on real fits.

Each replicate simulates an invented study (``ped2g.simulate.study``) whose populations all have
the ``reference`` G, runs ``ped2g fit`` on every population, then ``ped2g null`` and
``ped2g compare``, and counts the compared statistics flagged as different (observed and null
95 % HPD intervals do not overlap; and, separately, the paired HPD interval of observed - null
excludes 0). Unlike the conjugate stand-in of the test suite, these observed posteriors carry the
error of predicting breeding values from phenotypes, which the null lacks, so this measures how
far the null is anti-conservative in practice. Too slow for the test suite (minutes per
replicate); prints figures, does not pass or fail.

    python benchmarks/null_calibration_fits.py [--replicates 3] [--animals 300] [--phenotyped 250]
                                               [--draws 250] [--first-seed 100]
                                               [--keep DIR]
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from ped2g.simulate.study import StudySettings, simulate_study

POPULATIONS = ("amber", "birch", "cedar")


def run(cmd: list[str]) -> None:
    proc = subprocess.run([sys.executable, "-m", "ped2g", *cmd], capture_output=True, text=True)
    if proc.returncode not in (0, 1):  # 1 = a fit missed the convergence checks (flagged only)
        raise SystemExit(f"ped2g {cmd[0]} failed ({proc.returncode}): {proc.stderr.strip()[-500:]}")


def one_replicate(root: Path, seed: int, args: argparse.Namespace) -> pd.DataFrame:
    settings = StudySettings(populations=POPULATIONS, designs=("reference",) * len(POPULATIONS),
                             traits=("x", "y"), population_shift=0.0, animals=args.animals,
                             founders=40, years=6, phenotyped=args.phenotyped)
    study = simulate_study(settings, seed=seed)
    root.mkdir(parents=True, exist_ok=True)
    study.pedigree.to_csv(root / "pedigree.csv", index=False)
    study.phenotypes.to_csv(root / "phenotypes.csv", index=False)
    (root / "config.yaml").write_text(
        f"data: {{pedigree: {root / 'pedigree.csv'}, phenotypes: {root / 'phenotypes.csv'}}}\n"
        "traits: [x, y]\nfixed: {sex: categorical}\n"
        f"sampling: {{chains: 2, warmup: {args.draws}, draws: {args.draws}, seed: {seed}}}\n"
        "checks: {on_failure: flag}\n"
        "compare: {skewers: 200, null_model: {estimator: mendelian}}\n")
    config = str(root / "config.yaml")
    fits = []
    for pop in POPULATIONS:
        out = root / "fits" / pop
        run(["fit", "--config", config, "--population", pop, "--out", str(out), "--no-progress"])
        fits.append(str(out))
    run(["null", "--config", config, "--fits", *fits, "--out", str(root / "null")])
    run(["compare", "--config", config, "--fits", *fits, "--null", str(root / "null"),
         "--out", str(root / "compare")])
    tables = [pd.read_csv(p) for p in sorted((root / "compare").glob("*.csv"))]
    rows = pd.concat([t for t in tables if "hpd_overlap" in t.columns], ignore_index=True)
    rows = rows[rows["hpd_overlap"].notna()]
    rows["flag_overlap"] = ~rows["hpd_overlap"].astype(bool)
    rows["flag_paired"] = (rows["diff_hpd_lower"] > 0) | (rows["diff_hpd_upper"] < 0)
    rows["replicate"] = seed
    return rows[["replicate", "method", "statistic", "flag_overlap", "flag_paired"]]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--replicates", type=int, default=3)
    parser.add_argument("--animals", type=int, default=300)
    parser.add_argument("--phenotyped", type=int, default=250)
    parser.add_argument("--draws", type=int, default=250)
    parser.add_argument("--first-seed", type=int, default=100, help="seed of the first replicate (then +1 each)")
    parser.add_argument("--keep", type=Path, default=None)
    args = parser.parse_args()
    base = args.keep or Path(tempfile.mkdtemp(prefix="ped2g-null-cal-"))
    frames = []
    for r in range(args.replicates):
        start = time.perf_counter()
        frames.append(one_replicate(base / f"rep{r}", args.first_seed + r, args))
        f = frames[-1]
        print(f"replicate {r}: {len(f)} statistics, flagged {int(f.flag_overlap.sum())} (HPD overlap), "
              f"{int(f.flag_paired.sum())} (paired) in {time.perf_counter() - start:.0f} s", flush=True)
    rows = pd.concat(frames, ignore_index=True)
    by = rows.groupby(["method", "statistic"])[["flag_overlap", "flag_paired"]].mean()
    print(by.to_string())
    print(f"overall: HPD non-overlap {rows.flag_overlap.mean():.3f}, paired {rows.flag_paired.mean():.3f} "
          f"of {len(rows)} statistic x replicate cells (nominal 0.05)")
    print(f"inputs and outputs under {base}")
    np.seterr(all="ignore")


if __name__ == "__main__":
    main()
