"""Time and memory of ``ped2g null`` at the planned scale.

Default scale: 1,000 posterior draws x 6 populations x 8 traits, pedigrees of 2,000 animals each
(80 % phenotyped). Builds stand-in fit folders (random positive-definite G draws and random
discrete-generation pedigrees; not real fits) in a temporary folder, runs ``ped2g null`` as a
child process and prints its wall time and peak resident memory. Prints figures; does not pass
or fail.

    python benchmarks/null_benchmark.py [--draws 1000] [--populations 6] [--traits 8]
                                        [--animals 2000] [--estimator mendelian] [--keep DIR]
                                        [--with-compare]

With ``--with-compare`` it then runs ``ped2g compare`` on the same fits and null and prints the
two stages' combined wall time and the larger of their peaks.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import arviz as az
import numpy as np
import pandas as pd

from ped2g.pedigree.core import Pedigree
from ped2g.pedigree.relationships import inbreeding
from ped2g.contracts.fit_folder import posterior_dataset


def random_pedigree(rng: np.random.Generator, n: int, prefix: str, founders: int = 100,
                    generations: int = 5) -> Pedigree:
    """Founders, then generations whose sires and dams are drawn from the previous generation."""
    sire = np.full(n, -1, dtype=np.int64)
    dam = np.full(n, -1, dtype=np.int64)
    gen = np.zeros(n, dtype=np.int64)
    per = (n - founders) // generations
    prev = np.arange(founders)
    start = founders
    for g in range(1, generations + 1):
        stop = n if g == generations else start + per
        half = len(prev) // 2
        sire[start:stop] = rng.choice(prev[:half], stop - start)
        dam[start:stop] = rng.choice(prev[half:], stop - start)
        gen[start:stop] = g
        prev = np.arange(start, stop)
        start = stop
    ids = np.array([f"{prefix}{i}" for i in range(n)], dtype=object)
    return Pedigree(ids=ids, sire=sire, dam=dam, generation=gen, inbreeding=inbreeding(sire, dam))


def write_stand_in_fit(folder: Path, population: str, traits: list[str], S: int, ped: Pedigree,
                       rng: np.random.Generator) -> None:
    t = len(traits)
    a = rng.standard_normal((1, S, t, t + 4))
    G = a @ np.swapaxes(a, -1, -2) / (t + 4) + 0.05 * np.eye(t)
    R = np.broadcast_to(np.eye(t), G.shape).copy()
    ds = posterior_dataset(population, traits, G, R, G + R, np.zeros((1, S, t)))
    folder.mkdir(parents=True, exist_ok=True)
    az.InferenceData(posterior=ds).to_netcdf(folder / "posterior.nc")
    frame = ped.to_frame()
    frame["phenotyped"] = (rng.random(ped.n) < 0.8).astype(int)
    frame.to_csv(folder / "pedigree_used.csv", index=False)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--draws", type=int, default=1000)
    parser.add_argument("--populations", type=int, default=6)
    parser.add_argument("--traits", type=int, default=8)
    parser.add_argument("--animals", type=int, default=2000)
    parser.add_argument("--estimator", choices=["mendelian", "sample"], default="mendelian")
    parser.add_argument("--memory", type=float, default=None, help="--memory passed to ped2g null (MB)")
    parser.add_argument("--with-compare", action="store_true", help="also time 'ped2g compare'")
    parser.add_argument("--keep", type=Path, default=None, help="build the inputs here and keep them")
    args = parser.parse_args()

    root = args.keep or Path(tempfile.mkdtemp(prefix="ped2g-null-bench-"))
    rng = np.random.default_rng(2024)
    traits = [f"trait_{k}" for k in range(args.traits)]
    fits = []
    t0 = time.perf_counter()
    for j in range(args.populations):
        ped = random_pedigree(rng, args.animals, prefix=f"p{j}_")
        folder = root / "fits" / f"pop{j}"
        write_stand_in_fit(folder, f"pop{j}", traits, args.draws, ped, rng)
        fits.append(str(folder))
    config = root / "config.yaml"
    config.write_text(f"sampling: {{seed: 1}}\ncompare: {{null_model: {{estimator: {args.estimator}}}}}\n")
    print(f"inputs built in {time.perf_counter() - t0:.1f} s under {root}")

    cmd = [sys.executable, "-m", "ped2g", "null", "--config", str(config), "--fits", *fits,
           "--out", str(root / "null")]
    if args.memory is not None:
        cmd += ["--memory", str(args.memory)]
    wall, peak_mb = timed(cmd)
    print(f"ped2g null: {args.draws} draws x {args.populations} populations x {args.traits} traits, "
          f"{args.animals} animals per pedigree, estimator {args.estimator}: "
          f"wall {wall:.1f} s, peak RSS {peak_mb:.0f} MB")
    summary = pd.read_json(root / "null" / "summary.json", typ="series")
    print(f"chunk of {summary['chunk_draws']} draws; stage's own run time {summary['run_seconds']} s")
    if args.with_compare:
        cmd = [sys.executable, "-m", "ped2g", "compare", "--config", str(config), "--fits", *fits,
               "--null", str(root / "null" / "null_G.nc"), "--out", str(root / "compare")]
        wall_c, peak_c = timed(cmd)
        print(f"ped2g compare: wall {wall_c:.1f} s, peak RSS {peak_c:.0f} MB")
        print(f"null + compare: wall {wall + wall_c:.1f} s, peak RSS {max(peak_mb, peak_c):.0f} MB")


def timed(cmd: list[str]) -> tuple[float, float]:
    """Run ``cmd``; its wall time (s) and its own peak resident memory (MB, from wait4)."""
    start = time.perf_counter()
    proc = subprocess.Popen(cmd)
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - start
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        raise SystemExit(f"{' '.join(cmd[2:4])} failed with status {proc.returncode}")
    return wall, usage.ru_maxrss / 1024


if __name__ == "__main__":
    main()
