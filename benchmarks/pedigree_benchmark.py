"""Benchmark of the whole pedigree stage (read CSV -> write every output) at 10^4 .. 10^6 animals.

Simulates an invented pedigree: 10 overlapping generations of equal size in demes of 100
animals per generation; each deme's sires are five males from its previous three generations
and its dams females from the previous two (so inbreeding builds up); dams have families of
full sibs; 20% of parent
cells are unknown ("0"); 1% of the founders have no row of their own; the rows are shuffled so
offspring often come before their parents. The stage then runs in a fresh subprocess
(``python -m ped2g.cli pedigree``), and its wall time and peak resident memory
(``ru_maxrss`` from ``os.wait4``), and its CPU time, are printed. It does not pass or fail: it prints figures.

Usage: python benchmarks/pedigree_benchmark.py [--sizes 10000 100000 1000000] [--keep DIR]
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

GENERATIONS = 10
UNKNOWN = 0.2


def _pick(rng, pool: np.ndarray, group_of_pool: np.ndarray, groups: np.ndarray,
          n_groups: int) -> np.ndarray:
    """For each entry of ``groups``, a random member of ``pool`` in that group (-1 if none)."""
    order = np.argsort(group_of_pool, kind="stable")
    pool = pool[order]
    count = np.bincount(group_of_pool, minlength=n_groups)
    start = np.concatenate([[0], np.cumsum(count)[:-1]])
    k = (rng.random(len(groups)) * count[groups]).astype(np.int64)
    return np.where(count[groups] > 0, pool[np.minimum(start[groups] + k, len(pool) - 1)], -1)


def simulate(n: int, seed: int = 20261202) -> pd.DataFrame:
    """An invented pedigree of about ``n`` animals (see the module docstring).

    Animals live in demes of 100 per generation and mate within their deme; each deme uses five
    sires per generation, so inbreeding builds up at the same rate whatever ``n`` is.
    """
    rng = np.random.default_rng(seed)
    size = max(100, n // GENERATIONS)
    total = size * GENERATIONS
    gen = np.repeat(np.arange(GENERATIONS), size)
    n_demes = max(1, size // 100)
    deme = np.arange(total) % n_demes
    male = (np.arange(total) // n_demes) % 2 == 0
    sire = np.full(total, -1, dtype=np.int64)
    dam = np.full(total, -1, dtype=np.int64)
    for g in range(1, GENERATIONS):
        here = np.flatnonzero(gen == g)
        pool_m = np.flatnonzero(male & (gen < g) & (gen >= g - 3))
        pool_f = np.flatnonzero(~male & (gen < g) & (gen >= g - 2))
        # five sires per deme this generation
        sires = np.stack([_pick(rng, pool_m, deme[pool_m], np.arange(n_demes), n_demes)
                          for _ in range(5)], axis=1)
        # families of full sibs: consecutive offspring of a deme share both parents
        by_deme = here[np.argsort(deme[here], kind="stable")]
        rank = np.arange(len(by_deme)) - np.searchsorted(deme[by_deme], deme[by_deme])
        fam_len = rng.integers(1, 7, size=n_demes)
        fam = deme[by_deme] * size + rank // fam_len[deme[by_deme]]
        fam_ids, fam_of = np.unique(fam, return_inverse=True)
        fam_deme = fam_ids // size
        fam_dam = _pick(rng, pool_f, deme[pool_f], fam_deme, n_demes)
        fam_sire = sires[fam_deme, rng.integers(0, 5, size=len(fam_ids))]
        sire[by_deme] = fam_sire[fam_of]
        dam[by_deme] = fam_dam[fam_of]
    offspring = gen > 0
    sire[offspring & (rng.random(total) < UNKNOWN)] = -1
    dam[offspring & (rng.random(total) < UNKNOWN)] = -1
    names = np.char.add("A", np.char.zfill(np.arange(total).astype(str), 7)).astype(object)
    listed = ~((gen == 0) & (rng.random(total) < 0.01))
    frame = pd.DataFrame({
        "animal": names,
        "sire": np.where(sire >= 0, names[np.maximum(sire, 0)], "0"),
        "dam": np.where(dam >= 0, names[np.maximum(dam, 0)], "0"),
        "cohort": 2000 + gen,
    })[listed]
    return frame.iloc[rng.permutation(len(frame))]


def run_stage(raw: Path, out: Path) -> tuple[float, float, float, str]:
    """Run the stage in a subprocess; return (wall s, CPU s (user + system), peak RSS MB, log)."""
    cmd = [sys.executable, "-m", "ped2g.cli", "pedigree", str(raw), "--out", str(out),
           "--id", "animal"]
    start = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - start
    output = proc.stdout.read()
    proc.stdout.close()
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        raise SystemExit(f"stage failed ({proc.returncode}):\n{output}")
    peak_mb = usage.ru_maxrss / 1024  # kilobytes on Linux
    return wall, usage.ru_utime + usage.ru_stime, peak_mb, output


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000, 1_000_000])
    parser.add_argument("--keep", type=Path, default=None,
                        help="keep the simulated tables and outputs in this folder")
    args = parser.parse_args()
    work = Path(tempfile.mkdtemp(prefix="ped2g-bench-")) if args.keep is None else args.keep
    work.mkdir(parents=True, exist_ok=True)
    # warm the numba cache once so compile time is not charged to the first size
    warm = work / "warm.csv"
    simulate(1000).to_csv(warm, index=False)
    run_stage(warm, work / "warm-out")
    print(f"load average before: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores "
          "(wall time grows with other work on the machine; CPU time much less)")
    print(f"{'animals':>10} {'wall s':>8} {'cpu s':>8} {'peak MB':>8} {'wall s per 1e6':>15}")
    try:
        for n in args.sizes:
            raw = work / f"raw_{n}.csv"
            simulate(n).to_csv(raw, index=False)
            wall, cpu, peak, log = run_stage(raw, work / f"out_{n}")
            print(f"{n:>10} {wall:>8.2f} {cpu:>8.2f} {peak:>8.0f} {wall / n * 1e6:>15.2f}",
                  flush=True)
            for line in log.splitlines():
                print("           " + line)
    finally:
        if args.keep is None:
            shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
