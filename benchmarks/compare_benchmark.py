"""Time and memory of ``ped2g compare`` at the planned scale (the compare half of the benchmark).

Default scale: 1,000 posterior draws x 6 populations x 8 traits, 1,000 skewers, with a null of
the same 1,000 draws. Builds stand-in fit folders (random positive-definite G draws, P = G + R,
random positive trait means; not real fits) in a temporary folder and either

* a stand-in null file (random positive-definite G draws paired with the observed draws), to
  time the compare stage alone (default), or
* with ``--with-null``, the real null from ``ped2g null`` on random pedigrees of ``--animals``
  animals per population (built with the null benchmark's helpers), to time both stages.

Each stage runs as a child process; the benchmark prints its wall time and peak resident memory
(from ``os.wait4``). Prints figures; does not pass or fail.

    python benchmarks/compare_benchmark.py [--draws 1000] [--populations 6] [--traits 8]
                                           [--skewers 1000] [--scale variance] [--with-null]
                                           [--animals 2000] [--memory MB] [--keep DIR]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import arviz as az
import numpy as np
import pandas as pd
import yaml

sys.path.insert(0, str(Path(__file__).resolve().parent))
from null_benchmark import random_pedigree, timed  # noqa: E402  (the null half's helpers)

from ped2g.contracts.breeding_value_null import write_null  # noqa: E402
from ped2g.contracts.fit_folder import load_fit_set, posterior_dataset  # noqa: E402


def random_spd(rng: np.random.Generator, shape: tuple[int, ...], t: int) -> np.ndarray:
    a = rng.standard_normal(shape + (t, t + 4))
    return a @ np.swapaxes(a, -1, -2) / (t + 4) + 0.05 * np.eye(t)


def write_stand_in_fit(folder: Path, population: str, traits: list[str], S: int,
                       rng: np.random.Generator, pedigree_frame: pd.DataFrame) -> None:
    t = len(traits)
    G = random_spd(rng, (2, S // 2), t)
    R = random_spd(rng, (2, S // 2), t)
    mean = 10.0 + rng.standard_normal(t) + 0.1 * rng.standard_normal((2, S // 2, t))
    ds = posterior_dataset(population, traits, G, R, G + R, mean)
    folder.mkdir(parents=True, exist_ok=True)
    az.InferenceData(posterior=ds).to_netcdf(folder / "posterior.nc")
    pedigree_frame.to_csv(folder / "pedigree_used.csv", index=False)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--draws", type=int, default=1000, help="posterior draws (even)")
    parser.add_argument("--populations", type=int, default=6)
    parser.add_argument("--traits", type=int, default=8)
    parser.add_argument("--skewers", type=int, default=1000)
    parser.add_argument("--scale", choices=["original", "variance", "mean"], default="variance")
    parser.add_argument("--with-null", action="store_true", help="run 'ped2g null' first and time both")
    parser.add_argument("--animals", type=int, default=2000, help="animals per pedigree (with --with-null)")
    parser.add_argument("--memory", type=float, default=None, help="--memory passed to both stages (MB)")
    parser.add_argument("--keep", type=Path, default=None, help="build the inputs here and keep them")
    args = parser.parse_args()

    root = args.keep or Path(tempfile.mkdtemp(prefix="ped2g-compare-bench-"))
    rng = np.random.default_rng(7)
    traits = [f"trait_{k}" for k in range(args.traits)]
    t0 = time.perf_counter()
    fits = []
    for j in range(args.populations):
        if args.with_null:
            frame = random_pedigree(rng, args.animals, prefix=f"p{j}_").to_frame()
        else:   # the compare stage does not read the pedigree; a token one keeps the fit valid
            frame = pd.DataFrame({"id": [f"p{j}_{i}" for i in range(4)], "sire": "", "dam": ""})
        frame["phenotyped"] = (rng.random(len(frame)) < 0.8).astype(int)
        folder = root / "fits" / f"pop{j}"
        write_stand_in_fit(folder, f"pop{j}", traits, args.draws, rng, frame)
        fits.append(str(folder))
    config = root / "config.yaml"
    config.write_text(yaml.safe_dump({"traits": traits, "sampling": {"seed": 1},
                                      "compare": {"skewers": args.skewers, "scale": args.scale}}))
    memory = [] if args.memory is None else ["--memory", str(args.memory)]
    print(f"inputs built in {time.perf_counter() - t0:.1f} s under {root}")

    wall_null = peak_null = 0.0
    null_file = root / "null" / "null_G.nc"
    if args.with_null:
        cmd = [sys.executable, "-m", "ped2g", "null", "--config", str(config), "--fits", *fits,
               "--out", str(root / "null"), *memory]
        wall_null, peak_null = timed(cmd)
        print(f"ped2g null: wall {wall_null:.1f} s, peak RSS {peak_null:.0f} MB")
    else:
        fs = load_fit_set(fits)
        null_file.parent.mkdir(parents=True, exist_ok=True)
        write_null(null_file, random_spd(rng, fs.G.shape[:2], args.traits), fs.populations, fs.traits,
                   fs.draw_index, {"estimator": "stand-in"})

    cmd = [sys.executable, "-m", "ped2g", "compare", "--config", str(config), "--fits", *fits,
           "--null", str(null_file), "--out", str(root / "compare"), *memory]
    wall, peak = timed(cmd)
    print(f"ped2g compare: {args.draws} draws x {args.populations} populations x {args.traits} traits, "
          f"{args.skewers} skewers, scale {args.scale}, null of {args.draws} draws: "
          f"wall {wall:.1f} s, peak RSS {peak:.0f} MB")
    if args.with_null:
        print(f"null + compare: wall {wall_null + wall:.1f} s, peak RSS {max(peak, peak_null):.0f} MB")


if __name__ == "__main__":
    main()
